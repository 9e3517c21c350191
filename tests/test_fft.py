"""FFT backends and centred linear convolution against scipy."""

import numpy as np
import pytest
from scipy.signal import fftconvolve

from skyscale.core.fft import Convolver, NumpyFFT, convolve_centred, get_backend
from skyscale.core.scales import scale_kernel
from tests import naive

BACKENDS = ["numpy"]
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


def test_backends_agree_with_each_other():
    if len(BACKENDS) < 2:
        pytest.skip("pyfftw not installed")
    rng = np.random.default_rng(6)
    img = rng.normal(size=(64, 64)).astype(np.float32)
    ker = rng.normal(size=(33, 33))
    a = Convolver(ker, img.shape, backend=get_backend("numpy"))(img)
    b = Convolver(ker, img.shape, backend=get_backend("pyfftw"))(img)
    assert a.dtype == np.float32
    assert np.allclose(a, b, atol=1e-5)


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


@pytest.mark.skipif("pyfftw" not in BACKENDS, reason="pyfftw not installed")
def test_wisdom_file_is_written_atomically(tmp_path):
    # The wisdom is written through skyscale.io.atomic (temporary file, then rename):
    # the file pyfftw's wisdom round-trips from, and no temporary file is left.
    import pickle

    from skyscale.core.fft import FFTWFFT
    path = tmp_path / "cache" / "wisdom.pkl"
    fft = FFTWFFT(threads=1, wisdom_path=str(path))
    a = np.random.default_rng(0).normal(size=(41, 23))       # a shape no other test plans
    np.testing.assert_allclose(fft.irfft2(fft.rfft2(a, (41, 23)), (41, 23)), a, atol=1e-12)
    with open(path, "rb") as fh:
        wisdom = pickle.load(fh)
    assert isinstance(wisdom, tuple) and wisdom
    assert sorted(p.name for p in path.parent.iterdir()) == ["wisdom.pkl"]
