"""Every compiled kernel against its numpy twin in tests/naive.py; thread independence."""

import numba
import numpy as np
import pytest

from skyscale import Engine
from skyscale.core.kernels import scale_loop, stamp_components
from tests import naive
from tests.conftest import gaussian_psf

N = 48


@pytest.fixture(scope="module")
def engine():
    return Engine(gaussian_psf(N, sigma=1.8, ring=0.08, bowl=0.02), [0, 3, 6, 12],
                  image_shape=(N, N))


def _active(engine, plane, k, level, mask=None):
    allowed = engine.allowed(mask)[k]
    ys, xs = np.nonzero(allowed & (np.abs(plane) > level))
    return plane[ys, xs].copy(), ys, xs


def _run_both(engine, k, values, ys, xs, level, max_iter=80, parallel=None):
    v1, v2 = values.copy(), values.copy()
    kw = dict(beam_peak=engine.beam_peaks[k], gain=0.1, level=level, max_iter=max_iter)
    fast = scale_loop(v1, ys, xs, engine.beams[k], parallel=parallel, **kw)
    slow = naive.scale_loop(v2, ys, xs, engine.beams[k], **kw)
    return fast, slow, v1, v2


def _assert_same(fast, slow, v1, v2):
    np.testing.assert_array_equal(fast[0], slow[0])
    np.testing.assert_array_equal(fast[1], slow[1])
    assert fast[2] == slow[2]
    assert fast[3] == pytest.approx(slow[3], rel=1e-6)
    np.testing.assert_array_equal(v1, v2)


def _extended_planes(engine):
    """Smoothed residual of a broad disk plus noise: the finite scales are the best."""
    yy, xx = np.mgrid[:N, :N]
    sky = np.where(np.hypot(yy - 24, xx - 22) < 9, 0.01, 0.0)
    dirty = engine.psf_convolver(sky) + np.random.default_rng(3).normal(0, 1e-4, (N, N))
    return dirty, engine.smooth(dirty)


@pytest.mark.parametrize("k", [0, 1, 2, 3])
def test_scale_loop_matches_twin_on_every_scale(engine, k):
    dirty, planes = _extended_planes(engine)
    values, ys, xs = _active(engine, planes[k], k, 0.0)
    fast, slow, v1, v2 = _run_both(engine, k, values, ys, xs, level=0.2 * np.abs(values).max())
    assert fast[0].size > 10
    _assert_same(fast, slow, v1, v2)


def test_finite_scales_are_chosen_on_extended_emission(engine):
    # The minor cycle's own choice on a broad disk: finite scales must win (the twin
    # comparisons above then exercise the loop on the scales that are really used).
    dirty, planes = _extended_planes(engine)
    mc = engine.minor_cycle(dirty, cycle_depth=0.3)
    finite = mc.components["scale"] > 0
    assert finite.sum() > 0.5 * mc.components.size
    assert mc.components["flux"][finite].sum() > 0.6 * mc.components["flux"].sum()


def test_scale_loop_matches_twin_with_mask_border_and_level(engine):
    dirty, planes = _extended_planes(engine)
    mask = np.zeros((N, N), bool)
    mask[10:40, 5:30] = True
    for k in (0, 3):   # scale 12 px: centres kept 6 px from the edge
        level = 0.1 * np.abs(planes[k]).max()
        values, ys, xs = _active(engine, planes[k], k, level, mask)
        assert ys.min() >= engine.scales.support_radii[k]
        fast, slow, v1, v2 = _run_both(engine, k, values, ys, xs, level=level, max_iter=5000)
        assert fast[2] == "level"
        _assert_same(fast, slow, v1, v2)


def test_scale_loop_edge_cases(engine):
    beam = engine.beams[0]
    empty = scale_loop(np.zeros(0, np.float32), np.zeros(0, np.int64), np.zeros(0, np.int64),
                       beam, beam_peak=1.0, gain=0.1, level=0.0, max_iter=10)
    assert empty[0].size == 0 and empty[2] == "empty"
    one = np.array([2.0], np.float32)       # a single pixel: S (1 - g)^n (Hogbom 1974)
    idx, flux, reason, peak = scale_loop(one, np.array([0]), np.array([N - 1]), beam,
                                         beam_peak=1.0, gain=0.5, level=0.0, max_iter=3)
    assert reason == "iterations" and idx.tolist() == [0, 0, 0]
    assert one[0] == pytest.approx(2.0 * 0.5 ** 3)
    zeros = np.zeros(5, np.float32)
    assert scale_loop(zeros, np.arange(5), np.arange(5), beam, beam_peak=1.0, gain=0.1,
                      level=0.0, max_iter=5)[2] == "level"
    budget = scale_loop(np.ones(4, np.float32), np.arange(4), np.zeros(4, np.int64), beam,
                        beam_peak=1.0, gain=0.1, level=0.0, max_iter=0)
    assert budget[2] == "iterations" and budget[0].size == 0


def test_serial_and_parallel_paths_and_thread_counts_agree(engine):
    dirty, planes = _extended_planes(engine)
    values, ys, xs = _active(engine, planes[2], 2, 0.0)
    runs = []
    for threads in (1, 2):
        numba.set_num_threads(min(threads, numba.config.NUMBA_NUM_THREADS))
        for parallel in (False, True):
            v = values.copy()
            runs.append((scale_loop(v, ys, xs, engine.beams[2], beam_peak=engine.beam_peaks[2],
                                    gain=0.1, level=0.0, max_iter=50, parallel=parallel), v))
    numba.set_num_threads(numba.config.NUMBA_NUM_THREADS)
    for (res, v) in runs[1:]:
        np.testing.assert_array_equal(res[0], runs[0][0][0])
        np.testing.assert_array_equal(res[1], runs[0][0][1])
        np.testing.assert_array_equal(v, runs[0][1])


def test_smoothing_matches_direct_sums(engine):
    rng = np.random.default_rng(4)
    image = np.zeros((N, N))
    image[rng.integers(0, N, 30), rng.integers(0, N, 30)] = rng.normal(size=30)
    fast = engine.smooth(image)
    slow = naive.smooth_all(image, [k.astype(np.float64) for k in engine.kernels])
    np.testing.assert_allclose(fast, slow, atol=1e-6)


def test_stamp_matches_twin_including_the_edges(engine):
    rng = np.random.default_rng(15)
    ys = np.array([0, 47, 20, 5, 20])
    xs = np.array([0, 47, 33, 44, 33])
    ks = np.array([3, 2, 1, 0, 3])
    fs = rng.normal(size=5)
    a = stamp_components(np.zeros((48, 48), np.float32), engine.kernels, ys, xs, ks, fs)
    b = naive.stamp_components(np.zeros((48, 48), np.float32), engine.kernels, ys, xs, ks, fs)
    np.testing.assert_array_equal(a, b)
    inside = stamp_components(np.zeros((48, 48), np.float32), engine.kernels, ys[2:3], xs[2:3],
                              ks[2:3], fs[2:3])
    assert inside.sum() == pytest.approx(fs[2], rel=1e-5)  # unit-sum kernel: flux kept


def test_scale_loop_wrapper_converts_what_it_reads(engine):
    # The wrapper's contract (skyscale.core.kernels): inputs only read are converted, so a
    # Fortran-ordered float64 beam and coordinate lists give the twin's result.
    dirty, planes = _extended_planes(engine)
    values, ys, xs = _active(engine, planes[1], 1, 0.0)
    kw = dict(beam_peak=engine.beam_peaks[1], gain=0.1, level=0.0, max_iter=40)
    v1, v2 = values.copy(), values.copy()
    fast = scale_loop(v1, ys.tolist(), xs.astype(np.int32),
                      np.asfortranarray(engine.beams[1].astype(np.float64)), **kw)
    slow = naive.scale_loop(v2, ys, xs, engine.beams[1], **kw)
    _assert_same(fast, slow, v1, v2)


def test_scale_loop_wrapper_refuses_what_it_cannot_honour(engine):
    beam = engine.beams[0]
    ok = dict(beam_peak=1.0, gain=0.1, level=0.0, max_iter=3)
    vals = np.ones(4, np.float32)
    ys, xs = np.arange(4), np.arange(4)
    for bad in (np.ones(8, np.float32)[::2], np.ones(4, np.int64), [1.0, 1.0, 1.0, 1.0],
                np.ones((2, 2), np.float32)):
        with pytest.raises(ValueError, match="values"):   # in place: a copy would be lost
            scale_loop(bad, ys, xs, beam, **ok)
    with pytest.raises(ValueError, match="ys and xs"):
        scale_loop(vals, ys[:3], xs, beam, **ok)
    with pytest.raises(ValueError, match="outside"):
        scale_loop(vals, ys + N - 2, xs, beam, **ok)
    with pytest.raises(ValueError, match="outside"):
        scale_loop(vals, ys, xs - 1, beam, **ok)
    with pytest.raises(ValueError, match="beam has shape"):
        scale_loop(vals, ys, xs, beam[:-1], **ok)
    with pytest.raises(ValueError, match="beam_peak"):
        scale_loop(vals, ys, xs, beam, **dict(ok, beam_peak=0.0))
    with pytest.raises(ValueError, match="level"):
        scale_loop(vals, ys, xs, beam, **dict(ok, level=np.nan))
    np.testing.assert_array_equal(vals, 1.0)          # nothing was touched


def test_stamp_wrapper_converts_and_refuses(engine):
    rng = np.random.default_rng(16)
    ys, xs, ks = [3, 40, 20], [5, 41, 7], [1, 3, 0]
    fs = rng.normal(size=3)
    kernels = [np.asfortranarray(k.astype(np.float64)) for k in engine.kernels]
    a = stamp_components(np.zeros((48, 48), np.float32), kernels, ys, xs, ks, fs.tolist())
    b = naive.stamp_components(np.zeros((48, 48), np.float32), engine.kernels,
                               np.array(ys), np.array(xs), np.array(ks), fs)
    np.testing.assert_allclose(a, b, rtol=1e-6, atol=1e-7)
    model = np.zeros((48, 48), np.float32)
    with pytest.raises(ValueError, match="model"):
        stamp_components(np.zeros((48, 48), np.int32), engine.kernels, ys, xs, ks, fs)
    with pytest.raises(ValueError, match="model"):
        stamp_components(np.zeros((48, 96), np.float32)[:, ::2], engine.kernels, ys, xs, ks, fs)
    with pytest.raises(ValueError, match="ks spans"):
        stamp_components(model, engine.kernels, ys, xs, [0, 1, len(engine.kernels)], fs)
    with pytest.raises(ValueError, match="kernels\\[0\\]"):
        stamp_components(model, [np.ones((3, 5))], ys, xs, [0, 0, 0], fs)
    with pytest.raises(ValueError, match="one of each"):
        stamp_components(model, engine.kernels, ys, xs, ks, fs[:2])
    assert not model.any()


def test_scale_loop_by_runs_matches_its_twin_and_the_pixel_path(engine):
    # Active pixels in long runs along x take the run-by-run path (MIN_RUN_LENGTH); the
    # same pixels in another order take the pixel path: same components, same values.
    import importlib
    module = importlib.import_module("skyscale.core.kernels.scale_loop")
    dirty, planes = _extended_planes(engine)
    yy, xx = np.mgrid[:N, :N]
    disk = np.hypot(yy - 24, xx - 22) < 12
    ys, xs = np.nonzero(disk)
    assert ys.size >= module.MIN_RUN_LENGTH * len(np.unique(ys))
    values = planes[2][ys, xs].astype(np.float32)
    fast, slow, v1, v2 = _run_both(engine, 2, values, ys, xs, level=0.05 * np.abs(values).max())
    _assert_same(fast, slow, v1, v2)
    order = np.random.default_rng(0).permutation(ys.size)
    v3 = values[order].copy()
    kw = dict(beam_peak=engine.beam_peaks[2], gain=0.1, level=0.05 * np.abs(values).max(),
              max_iter=80)
    shuffled = scale_loop(v3, ys[order], xs[order], engine.beams[2], **kw)
    np.testing.assert_array_equal(order[shuffled[0]], fast[0])
    np.testing.assert_array_equal(shuffled[1], fast[1])
    np.testing.assert_array_equal(v3, v1[order])
