"""FFT backends and centred linear convolution against scipy."""

import numpy as np
import pytest
from scipy.signal import fftconvolve

from skyscale.core.fft import Convolver, NumpyFFT, convolve_centred, get_backend
from skyscale.core.scales import scale_kernel
from tests import naive

BACKENDS = ["scipy", "numpy"]
try:
    import pyfftw  # noqa: F401
    BACKENDS.append("pyfftw")
except ImportError:  # pragma: no cover
    pass


@pytest.mark.parametrize("backend", BACKENDS)
def test_odd_kernel_matches_scipy_same(backend):
    # reference library: scipy.signal.fftconvolve(mode='same') for odd kernels.
    rng = np.random.default_rng(3)
    img = rng.normal(size=(37, 50))
    ker = rng.normal(size=(9, 13))
    ours = convolve_centred(img, ker, backend=get_backend(backend))
    assert np.allclose(ours, fftconvolve(img, ker, mode="same"), atol=1e-10)


@pytest.mark.parametrize("backend", BACKENDS)
def test_even_psf_centred_at_half_matches_scipy_full(backend):
    # reference library: scipy.signal.fftconvolve(mode='full') cut at the PSF centre.
    rng = np.random.default_rng(4)
    img = rng.normal(size=(32, 24))
    psf = rng.normal(size=(64, 48))
    full = fftconvolve(img, psf, mode="full")
    ours = convolve_centred(img, psf, backend=get_backend(backend))
    assert np.allclose(ours, full[32:64, 24:48], atol=1e-10)


def test_direct_sum_twin_agrees():
    rng = np.random.default_rng(5)
    img = np.zeros((20, 30))
    img[rng.integers(0, 20, 6), rng.integers(0, 30, 6)] = rng.normal(size=6)
    ker = rng.normal(size=(8, 7))
    assert np.allclose(convolve_centred(img, ker, backend=NumpyFFT()),
                       naive.convolve_centred(img, ker), atol=1e-12)


@pytest.mark.parametrize("other", BACKENDS[1:])
def test_backends_agree_with_each_other(other):
    rng = np.random.default_rng(6)
    img = rng.normal(size=(64, 64)).astype(np.float32)
    ker = rng.normal(size=(33, 33))
    a = Convolver(ker, img.shape, backend=get_backend("scipy"))(img)
    b = Convolver(ker, img.shape, backend=get_backend(other))(img)
    assert a.dtype == np.float32
    assert np.allclose(a, b, atol=1e-5)


def test_the_default_backend_gives_the_same_bits_at_any_thread_count():
    # Determinism (DESIGN.md): scipy.fft shares whole 1-D transforms among its workers.
    rng = np.random.default_rng(7)
    img = rng.normal(size=(300, 257)).astype(np.float32)
    ker = rng.normal(size=(41, 41))
    one = Convolver(ker, img.shape, backend=get_backend("auto", threads=1),
                    precision=np.float32)(img)
    two = Convolver(ker, img.shape, backend=get_backend("auto", threads=2),
                    precision=np.float32)(img)
    assert get_backend("auto").name == "scipy"
    assert np.array_equal(one, two)


def test_no_fft_cache_is_read_or_written(tmp_path, monkeypatch):
    # Results must not depend on what earlier runs left in a user's cache: nothing
    # under the home directory is touched by making and using any backend.
    monkeypatch.setenv("HOME", str(tmp_path))
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    img = np.random.default_rng(8).normal(size=(40, 40))
    for name in BACKENDS:
        convolve_centred(img, np.ones((5, 5)), backend=get_backend(name, threads=1))
    assert list(tmp_path.iterdir()) == []


def test_gaussian_scale_on_gaussian_psf_adds_variances():
    # analytic: convolving round Gaussians adds variances, sigma^2 = s1^2 + s2^2.
    n = 96
    y, x = np.mgrid[-n // 2:n // 2, -n // 2:n // 2]
    s_psf = 2.5
    psf = np.exp(-(x ** 2 + y ** 2) / (2 * s_psf ** 2))
    scale = 16
    ker = scale_kernel(scale, "gaussian", dtype=np.float64)
    s_ker = np.sqrt((ker * (np.arange(ker.shape[0]) - ker.shape[0] // 2) ** 2).sum())
    out = convolve_centred(psf, ker, backend=NumpyFFT())
    var = (out * x ** 2).sum() / out.sum()
    assert var == pytest.approx(s_psf ** 2 + s_ker ** 2, rel=1e-3)


def test_unknown_backend_is_refused():
    with pytest.raises(ValueError, match="numpy"):
        get_backend("cuda")
