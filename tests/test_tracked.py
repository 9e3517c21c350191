"""The minor cycle's tracked pixels: direct updates, peaks, pair beams and exactness.

Each compiled kernel is checked against its twin in tests/naive.py, the pair beams
against scipy.signal.fftconvolve, and the minor cycle's tracked values against the
residual recomputed from its model (the exactness DESIGN.md asks of it).
"""

import numba
import numpy as np
import pytest
from scipy.signal import fftconvolve

from skyscale import Engine, deconvolve
from skyscale.core import engine as engine_module
from skyscale.core.fft import convolve_centred
from skyscale.core.kernels.tracked import (direct_subtract, direct_subtract_rows, masked_peak,
                                           pixel_runs, tracked_peaks)
from skyscale.core.precompute import beam_peaks, pair_beams
from skyscale.core.fft import get_backend
from tests import naive
from tests.conftest import gaussian_psf

N = 40


def _tracked(rng, n=N, fraction=0.3):
    mask = rng.random((n, n)) < fraction
    mask[5:15, 3:30] = True                     # long runs along x too
    return np.nonzero(mask)


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
@pytest.mark.parametrize("parallel", [False, True])
def test_direct_subtract_matches_its_twin(dtype, parallel):
    rng = np.random.default_rng(1)
    tys, txs = _tracked(rng)
    beam = rng.normal(size=(2 * N - 1, 2 * N - 1)).astype(dtype)
    m = 7
    pick = rng.integers(0, tys.size, m)
    flux = rng.normal(size=m)
    values = rng.normal(size=tys.size).astype(dtype)
    fast, slow = values.copy(), values.copy()
    direct_subtract(fast, tys, txs, tys[pick], txs[pick], flux, beam, parallel=parallel)
    naive.direct_subtract(slow, tys, txs, tys[pick], txs[pick], flux, beam)
    np.testing.assert_array_equal(fast, slow)


@pytest.mark.parametrize("parallel", [False, True])
def test_direct_subtract_rows_matches_its_twin_row_by_row(parallel):
    # Reference: the numpy twin (tests/naive.py) applied to each row with its own beam;
    # rows not named are left as they were.
    rng = np.random.default_rng(7)
    tys, txs = _tracked(rng)
    beams = [rng.normal(size=(2 * N - 1, 2 * N - 1)).astype(np.float32) for _ in range(3)]
    pick = rng.integers(0, tys.size, 5)
    flux = rng.normal(size=5)
    values = rng.normal(size=(4, tys.size)).astype(np.float32)
    fast, slow = values.copy(), values.copy()
    rows = [3, 0, 2]
    direct_subtract_rows(fast, rows, tys, txs, tys[pick], txs[pick], flux, beams,
                         parallel=parallel)
    for row, beam in zip(rows, beams):
        naive.direct_subtract(slow[row], tys, txs, tys[pick], txs[pick], flux, beam)
    np.testing.assert_array_equal(fast, slow)


def test_direct_subtract_rows_refuses_beams_of_two_shapes():
    tys, txs = np.nonzero(np.ones((3, 3), bool))
    values = np.zeros((2, 9), np.float32)
    beams = [np.zeros((5, 5), np.float32), np.zeros((7, 7), np.float32)]
    with pytest.raises(ValueError, match="one shape and dtype"):
        direct_subtract_rows(values, [0, 1], tys, txs, [1], [1], [1.0], beams)


def test_direct_subtract_is_the_same_at_any_thread_count():
    rng = np.random.default_rng(2)
    tys, txs = _tracked(rng, fraction=0.9)
    beam = rng.normal(size=(2 * N - 1, 2 * N - 1)).astype(np.float32)
    out = []
    for threads in (1, 2):
        v = np.zeros(tys.size, np.float32)
        previous = numba.get_num_threads()
        numba.set_num_threads(min(threads, numba.config.NUMBA_NUM_THREADS))
        try:
            direct_subtract(v, tys, txs, tys[:50], txs[:50], rng.normal(size=50) * 0 + 1.0,
                            beam, parallel=True)
        finally:
            numba.set_num_threads(previous)
        out.append(v)
    np.testing.assert_array_equal(out[0], out[1])


def test_direct_subtract_refuses_offsets_outside_the_beam():
    v = np.zeros(3, np.float32)
    with pytest.raises(ValueError, match="outside the beam"):
        direct_subtract(v, [0, 0, 0], [0, 1, 2], [0], [30], [1.0], np.ones((21, 21)))
    with pytest.raises(ValueError, match="row-major"):
        direct_subtract(v, [0, 0, 0], [2, 1, 0], [0], [0], [1.0], np.ones((21, 21)))


def test_pixel_runs_cover_every_pixel_once():
    rng = np.random.default_rng(3)
    tys, txs = _tracked(rng)
    ry, rx, start, length = pixel_runs(tys, txs)
    assert length.sum() == tys.size and (length >= 1).all()
    for y, x, s, ln in zip(ry, rx, start, length):
        assert (tys[s:s + ln] == y).all()
        np.testing.assert_array_equal(txs[s:s + ln], x + np.arange(ln))


@pytest.mark.parametrize("parallel", [False, True])
def test_peaks_match_their_twins(parallel):
    rng = np.random.default_rng(4)
    planes = rng.normal(size=(4, 5000)).astype(np.float32)
    allowed = rng.random((4, 5000)) < 0.5
    allowed[2] = False                          # a scale with nowhere to go reads 0
    np.testing.assert_array_equal(tracked_peaks(planes, allowed, parallel=parallel),
                                  naive.tracked_peaks(planes, allowed))
    image = rng.normal(size=(70, 90))
    mask = rng.random((70, 90)) < 0.2
    assert masked_peak(image, mask, parallel=parallel) == naive.masked_peak(image, mask)
    assert masked_peak(image, np.zeros_like(mask), parallel=parallel) == 0.0


def test_pair_beams_match_scipy_fftconvolve():
    # Reference library: scipy.signal.fftconvolve, PSF (*) s_j (*) s_k at the offsets
    # |d| <= n - 1 around the PSF's centre.
    n = 24
    psf = gaussian_psf(2 * n, sigma=1.6, ring=0.1, bowl=0.03).astype(np.float64)
    e = Engine(psf, [0, 3, 7], image_shape=(n, n))
    kernels = [k.astype(np.float64) for k in e.kernels] + [np.ones((1, 1))]
    got = pair_beams(psf, kernels, (n, n), get_backend("scipy"), [(1, 2), (0, 2), (3, 1)],
                     dtype=np.float64)
    c = psf.shape[0] // 2
    for (j, k), beam in got.items():
        ref = fftconvolve(fftconvolve(psf, kernels[j], mode="same"), kernels[k], mode="same")
        np.testing.assert_allclose(beam, ref[c - n + 1:c + n, c - n + 1:c + n], atol=1e-10)
    peaks = beam_peaks(psf, kernels[:3])
    for k in range(3):
        ref = fftconvolve(fftconvolve(psf, kernels[k], mode="same"), kernels[k], mode="same")
        assert peaks[k] == pytest.approx(ref[c, c], rel=1e-9)


def _field():
    n = 64
    psf = gaussian_psf(2 * n, sigma=2.0, ring=0.08, bowl=0.03)
    yy, xx = np.mgrid[:n, :n]
    sky = np.where(np.hypot(yy - 30, xx - 26) < 7, 2e-3, 0.0)
    sky[40, 44] += 0.05
    rng = np.random.default_rng(5)
    dirty = convolve_centred(sky, psf.astype(np.float64)) + rng.normal(0, 1e-4, (n, n))
    mask = np.hypot(yy - 32, xx - 32) < 20
    return psf, dirty.astype(np.float32), mask


def test_tracked_values_stay_exact_through_direct_and_fft_updates():
    # The minor cycle keeps the residual exact where it looks (DESIGN.md, "exact
    # updates"): its last peak in the mask equals that of the residual recomputed from
    # its model, and it used both kinds of update.
    psf, dirty, mask = _field()
    e = Engine(psf, [0, 4, 8], image_shape=dirty.shape, threads=1)
    mc = e.minor_cycle(dirty, mask=mask, cycle_depth=0.05, exact_residual=False)
    assert mc.direct_updates > 0 and mc.fft_updates > 0
    exact = dirty - convolve_centred(mc.model.astype(np.float64), psf.astype(np.float64))
    assert mc.peak_end == pytest.approx(float(np.abs(exact[mask]).max()), rel=1e-4)
    whole = e.minor_cycle(dirty, mask=mask, cycle_depth=0.05)
    np.testing.assert_allclose(whole.residual, exact, atol=2e-6)


def test_only_fft_updates_give_the_same_model(monkeypatch):
    # Direct and FFT updates are two exact ways to the same residual: forbidding the
    # direct one changes the model by rounding only.
    psf, dirty, mask = _field()
    e = Engine(psf, [0, 4, 8], image_shape=dirty.shape, threads=1)
    both = e.minor_cycle(dirty, mask=mask, cycle_depth=0.3)
    monkeypatch.setattr(engine_module, "DIRECT_COST_RATIO", 0.0)
    fft_only = Engine(psf, [0, 4, 8], image_shape=dirty.shape, threads=1).minor_cycle(
        dirty, mask=mask, cycle_depth=0.3)
    assert both.direct_updates > 0 and fft_only.direct_updates == 0
    assert fft_only.components.size == both.components.size
    np.testing.assert_allclose(fft_only.model, both.model, atol=1e-6 * np.abs(both.model).max())


def test_a_compact_mask_makes_beams_of_its_own_size():
    # Cost follows the emission: beams cover the box around the mask, not the image.
    n = 256
    psf = gaussian_psf(n, sigma=2.0, ring=0.05, bowl=0.02)
    sky = np.zeros((n, n))
    sky[128, 128] = 1.0
    sky[124:130, 131:137] = 0.01
    dirty = convolve_centred(sky, psf.astype(np.float64)).astype(np.float32)
    mask = np.zeros((n, n), bool)
    mask[110:146, 110:146] = True
    e = Engine(psf, [0, 4], image_shape=(n, n), threads=1)
    e.minor_cycle(dirty, mask=mask, cycle_depth=0.1)
    assert max(e.bank.extent) < n // 2


def test_whole_runs_do_not_depend_on_the_thread_count():
    psf, dirty, mask = _field()
    runs = [deconvolve(dirty, psf, scales=[0, 4, 8], mask=mask, noise_threshold=3.0,
                       restore=False, threads=t) for t in (1, 2)]
    assert runs[0].fft_updates > 0 and runs[0].sub_loops > runs[0].fft_updates
    np.testing.assert_array_equal(runs[0].components, runs[1].components)
    np.testing.assert_array_equal(runs[0].model, runs[1].model)


@pytest.mark.parametrize("radius", [0, 1, 4, 15])
def test_grow_mask_matches_scipy_binary_dilation(radius):
    # Reference library: scipy.ndimage.binary_dilation with a (2r + 1) square, the
    # outside empty; a compact mask in a large image and an empty one.
    from scipy import ndimage

    from skyscale.core.noise import grow_mask
    rng = np.random.default_rng(radius)
    mask = np.zeros((90, 120), bool)
    mask[40:50, 60:75] = rng.random((10, 15)) < 0.3
    mask[0, 3] = mask[89, 119] = True
    ref = ndimage.binary_dilation(mask, np.ones((2 * radius + 1, 2 * radius + 1)),
                                  border_value=0) if radius else mask
    np.testing.assert_array_equal(grow_mask(mask, radius), ref)
    assert not grow_mask(np.zeros((8, 9), bool), 3).any()


@pytest.mark.parametrize("radius,step", [(0, 1), (1, 2), (4, 3), (15, 4)])
def test_sampled_dilations_match_scipy_binary_dilation(radius, step):
    # Reference library: scipy.ndimage.binary_dilation with a (2r + 1) square, read at
    # the noise's subsample [::step, ::step].
    from scipy import ndimage

    from skyscale.core.noise import SampledDilations
    rng = np.random.default_rng(10 + radius)
    mask = rng.random((77, 101)) < 0.01
    mask[0, 0] = mask[76, 100] = True
    ref = ndimage.binary_dilation(mask, np.ones((2 * radius + 1, 2 * radius + 1)),
                                  border_value=0) if radius else mask
    np.testing.assert_array_equal(SampledDilations(mask, step).at(radius),
                                  ref[::step, ::step])
