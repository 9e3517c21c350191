"""Every compiled kernel against its numpy twin in tests/naive.py; thread independence."""

import numba
import numpy as np
import pytest

from skyscale import Engine
from skyscale.kernels import clean_loop, stamp_components, tile_maxima
from tests import naive
from tests.conftest import gaussian_psf


@pytest.fixture(scope="module")
def engine():
    return Engine(gaussian_psf(48, sigma=1.8, ring=0.08), [0, 3, 6, 12], image_shape=(48, 48),
                  psf_patch=10)


def _state(engine, planes, mask=None):
    planes = np.array(planes, dtype=np.float32, order="C")  # always a copy
    n, h, w = planes.shape
    mask = np.ones((h, w), np.uint8) if mask is None else mask.astype(np.uint8)
    lim = engine._limits((h, w), (0, h, 0, w))
    return planes, mask, lim


def _run_both(engine, planes, mask=None, floor=0.0, max_iter=60, peak_limit=np.inf, delta=0):
    p1, m, lim = _state(engine, planes, mask)
    p2 = p1.copy()
    args = (engine.response_scale, engine.amp_scale, engine.patches, engine.patch_offset,
            engine.patch_half)
    kw = dict(gain=0.1, floor=floor, peak_limit=peak_limit, ref=0, delta=delta, max_iter=max_iter)
    maxima = tile_maxima(p1, m, lim, engine.response_scale, engine.tile)
    fast = clean_loop(p1, m, lim, *args, engine.tile, maxima, **kw)
    slow = naive.clean_loop(p2, m, lim, *args, **kw)
    return fast, slow, p1, p2


def _assert_same(fast, slow, p1, p2):
    for a, b in zip(fast[0], slow[0]):
        np.testing.assert_array_equal(a, b)
    assert fast[1] == slow[1]
    assert fast[2] == pytest.approx(slow[2], rel=1e-6)
    assert fast[3] == slow[3]
    np.testing.assert_array_equal(p1, p2)


def test_clean_loop_matches_twin_on_random_planes(engine):
    rng = np.random.default_rng(11)
    planes = engine.smooth(rng.normal(size=(48, 48)).astype(np.float32))
    fast, slow, p1, p2 = _run_both(engine, planes, max_iter=80)
    assert fast[0][0].size == 80
    _assert_same(fast, slow, p1, p2)


def test_clean_loop_matches_twin_with_mask_floor_and_border(engine):
    rng = np.random.default_rng(12)
    res = rng.normal(size=(48, 48)).astype(np.float32)
    res[0, 0] = 9.0       # a strong pixel in the corner: only the delta may take it
    planes = engine.smooth(res)
    mask = np.zeros((48, 48), bool)
    mask[:30, :25] = True
    fast, slow, p1, p2 = _run_both(engine, planes, mask=mask, floor=2.5, max_iter=3000)
    assert fast[1] == "depth"
    assert (fast[0][0][0], fast[0][1][0], fast[0][2][0]) == (0, 0, 0)
    assert np.all(mask[fast[0][0], fast[0][1]])
    _assert_same(fast, slow, p1, p2)


def test_clean_loop_edge_cases(engine):
    zeros = np.zeros((4, 48, 48), np.float32)
    fast, slow, p1, p2 = _run_both(engine, zeros, floor=0.0)
    assert fast[1] == "depth" and fast[0][0].size == 0
    _assert_same(fast, slow, p1, p2)
    # a single unmasked pixel
    one = np.zeros((48, 48), bool)
    one[20, 21] = True
    planes = engine.smooth(np.random.default_rng(2).normal(size=(48, 48)).astype(np.float32))
    fast, slow, p1, p2 = _run_both(engine, planes, mask=one, max_iter=5)
    assert set(zip(fast[0][0], fast[0][1])) == {(20, 21)}
    _assert_same(fast, slow, p1, p2)
    # an empty mask
    fast, slow, p1, p2 = _run_both(engine, planes, mask=np.zeros((48, 48), bool))
    assert fast[1] == slow[1] == "empty"
    # a rising peak stops at once
    fast, slow, p1, p2 = _run_both(engine, planes, peak_limit=0.1)
    assert fast[1] == slow[1] == "peak_rose"


def test_clean_loop_is_the_same_with_one_and_two_threads(engine):
    rng = np.random.default_rng(13)
    planes = engine.smooth(rng.normal(size=(48, 48)).astype(np.float32))
    out = []
    previous = numba.get_num_threads()
    try:
        for threads in (1, min(2, numba.config.NUMBA_NUM_THREADS)):
            numba.set_num_threads(threads)
            p, m, lim = _state(engine, planes)
            maxima = tile_maxima(p, m, lim, engine.response_scale, engine.tile)
            comps = clean_loop(p, m, lim, engine.response_scale, engine.amp_scale, engine.patches,
                               engine.patch_offset, engine.patch_half, engine.tile, maxima,
                               gain=0.1, floor=0.0, peak_limit=np.inf, ref=0, delta=0,
                               max_iter=100)
            out.append((comps, p))
    finally:
        numba.set_num_threads(previous)
    for a, b in zip(out[0][0][0], out[1][0][0]):
        np.testing.assert_array_equal(a, b)
    np.testing.assert_array_equal(out[0][1], out[1][1])


def test_tile_maxima_match_whole_array_peaks(engine):
    rng = np.random.default_rng(14)
    planes, mask, lim = _state(engine, engine.smooth(rng.normal(size=(48, 48)).astype(np.float32)))
    tmax, targ, rmax, rarg = tile_maxima(planes, mask, lim, engine.response_scale, engine.tile)
    valid = naive.valid_pixels(planes.shape[1:], mask, lim)
    for k in range(planes.shape[0]):
        resp = np.where(valid[k], np.abs(planes[k]) * engine.response_scale[k].astype(np.float32), -1)
        assert rmax[k].max() == resp.max()
        best_row = int(np.argmax(rmax[k]))
        assert rarg[k, best_row] == int(np.argmax(resp))


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
