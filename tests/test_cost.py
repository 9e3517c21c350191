"""Tests of the cost model, the planner, the sweep's measuring tools and the cost commands.

No timing is asserted here: speed is measured only by ``skyscale bench`` and
``benchmarks/``.  The checks are against values from outside the model: exponents
and coefficients of data built with known laws (analytic), the FFT grids the engine's
convolvers choose, tracemalloc and the resident set (reference tools), and the
component table of a run.
"""

import json
import math
import tracemalloc
import warnings

import numpy as np
import pytest

import skyscale
from skyscale.cost import model as cost
from skyscale.cost import planner
from skyscale.cli.commands import main
from skyscale.core.fft import Convolver, MultiConvolver, NumpyFFT
from skyscale.core.engine import Engine
from skyscale.core.scales import ScaleSet
from skyscale.cost.sweep import PeakMemory, fft_probe, record_sub_loops, synthetic_field
from skyscale.cost.sweepfit import calibrate, step_ffts


@pytest.fixture(autouse=True)
def _no_user_calibration(tmp_path, monkeypatch):
    """Never read or write the user's calibration file."""
    monkeypatch.setenv(cost.CALIBRATION_ENV, str(tmp_path / "absent_calibration.json"))


# ----------------------------------------------------------------------------- fits
def test_fit_power_law_recovers_known_exponents():
    # Analytic: y = 3e-6 * N^1 * A^0.5 with 1% multiplicative noise.
    rng = np.random.default_rng(3)
    n = rng.integers(1, 9, 60).astype(float)
    a = rng.uniform(1e3, 1e5, 60)
    y = 3e-6 * n * np.sqrt(a) * np.exp(rng.normal(0, 0.01, 60))
    fit = cost.fit_power_law(np.column_stack([n, a]), y)
    assert fit["exponents"] == pytest.approx([1.0, 0.5], abs=0.01)
    assert fit["coefficient"] == pytest.approx(3e-6, rel=0.05)
    assert fit["rms_log_residual"] == pytest.approx(0.01, rel=0.3)


def test_fit_power_law_refuses_non_positive():
    with pytest.raises(ValueError, match="positive"):
        cost.fit_power_law([1, 2, 3], [1.0, 0.0, 2.0])


def test_fit_nonnegative_recovers_coefficients_and_clips():
    # Analytic: y = 0.5 + 2 x exactly; then a law whose least-squares slope is negative.
    x = np.linspace(1, 10, 12)
    coef, err = cost.fit_nonnegative(np.column_stack([np.ones_like(x), x]), 0.5 + 2 * x)
    assert coef == pytest.approx([0.5, 2.0], rel=1e-9)
    assert err < 1e-9
    coef, _ = cost.fit_nonnegative(np.column_stack([np.ones_like(x), x]), 10.0 - 0.1 * x)
    assert coef[1] == 0.0 and coef[0] > 0


# ------------------------------------------------------------------------- geometry
class _GridsSeen(NumpyFFT):
    """numpy's FFTs, recording the grid of every transform."""

    def __init__(self):
        super().__init__()
        self.grids = set()

    def rfft2(self, a, s):
        self.grids.add(tuple(s))
        return super().rfft2(a, s)

    def irfft2(self, a, s):
        self.grids.add(tuple(s))
        return super().irfft2(a, s)


@pytest.mark.parametrize("n,psf_n,scales", [(128, 256, [0, 4, 8]), (100, 100, [0, 6]),
                                             (96, 192, [0])])
def test_grids_are_the_ones_the_convolvers_choose(n, psf_n, scales):
    # Reference: the FFT shapes skyscale.core.fft's convolvers and the beams' maker
    # (skyscale.core.precompute.pair_beams, as the engine's BeamBank calls it for a box
    # of the image's extent) really transform on.
    from skyscale.core.precompute import pair_beams
    sset = ScaleSet(scales)
    g = cost.run_geometry((n, n), (psf_n, psf_n), sset.support_radii)
    assert g.major_grid == Convolver(np.ones((psf_n, psf_n)), (n, n), backend=NumpyFFT()).fshape
    seen = _GridsSeen()
    kernels = [np.asarray(k, np.float64) for k in sset.kernels(np.float64)] + [np.ones((1, 1))]
    pair_beams(np.ones((psf_n, psf_n)), kernels, (n, n), seen, [(0, 0)], dtype=np.float32)
    assert seen.grids == {g.precompute_grid}
    # no wrap-around: the grid holds every offset of the image, twice the widest reach
    # (analytic)
    assert g.precompute_grid[0] >= 2 * (n - 1 + 2 * max(sset.support_radii)) + 1
    if g.n_finite:
        smooth = MultiConvolver(sset.kernels(np.float64), (n, n), backend=NumpyFFT())
        assert g.smooth_grid == smooth.fshape
        # no wrap-around: the grid holds the image plus the widest kernel's reach (analytic)
        assert g.smooth_grid[0] >= n + max(sset.support_radii)
    else:
        assert g.smooth_grid is None


def test_fft_counts_follow_the_engine_steps():
    # Counted from the code: an FFT update is one PSF convolution (forward + inverse on
    # the major grid) and one smoothing (one forward, one inverse per finite scale); each
    # making of beams is one forward of the PSF and of each finite kernel, and one
    # inverse per beam (4 scales, 6 pairs; a delta scale stands for the residual); the
    # engine's own set-up transforms the smoothing kernels; the work of an FFT update is
    # the engine's own figure (Engine._fft_update_cost).
    sset = ScaleSet([0, 4, 8, 16])
    g = cost.run_geometry((128, 128), (256, 256), sset.support_radii)
    t = g.transforms()
    assert t["round"] == [(g.major_grid, 2), (g.smooth_grid, 4)]
    # (one making of the 4 scales' beams and one of each scale's pairs: 5 x (1 + 3)
    # forward transforms)
    assert t["beams"] == [(g.precompute_grid, 5 * (1 + 3) + 4 + 6)]
    assert t["precompute"] == [(g.smooth_grid, 3)]
    assert cost.run_geometry((128, 128), (256, 256), (0,)).transforms()["stats"] == []
    dirty, psf = synthetic_field(128, seed=1)
    e = Engine(psf, [0, 4, 8, 16], image_shape=(128, 128), threads=1)
    assert g.fft_update_work() == e._fft_update_cost((128, 128))
    assert g.n_pairs == len(e._pair_keys())
    assert cost.run_geometry((128, 128), (256, 256), (2, 4)).n_pairs == \
        len(Engine(psf, [4, 8], image_shape=(128, 128), threads=1)._pair_keys())


# --------------------------------------------------------------------------- memory
@pytest.mark.parametrize("n,psf_factor,dtype,scales", [
    (128, 2, np.float32, [0, 4, 8]),
    (128, 1, np.float32, [0, 4, 8, 16]),
    (96, 2, np.float64, [0, 6]),
])
def test_memory_model_within_20_percent_of_tracemalloc(n, psf_factor, dtype, scales):
    # Reference tool: tracemalloc's peak over a whole run (common practice).  The run is
    # long enough (2000 components) for direct updates, which make the pair beams the
    # account counts (the engine makes them on a scale's first direct update); the
    # compiled kernels are loaded first (skyscale.core.warmup, every kernel path), since
    # loading them allocates far more than the run.
    from skyscale.core.warmup import warm_up
    dirty, psf = synthetic_field(n, seed=2)
    if psf_factor == 1:
        psf = psf[n // 2:n // 2 + n, n // 2:n // 2 + n].copy()
    dirty, psf = dirty.astype(dtype), psf.astype(dtype)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")       # the PSF the image's size is warned about
        warm_up(dtype)
        tracemalloc.start()
        try:
            skyscale.deconvolve(dirty, psf, scales=scales, max_components=2000,
                                max_major_cycles=2, restore=False, dtype=dtype, threads=1)
            peak = tracemalloc.get_traced_memory()[1]
        finally:
            tracemalloc.stop()
    plan = planner.plan_run(dirty.shape, psf, scales, max_components=2000, threads=1,
                         dtype=dtype, calibration=cost.DEFAULT_CALIBRATION)
    assert plan.memory_bytes == pytest.approx(peak, rel=0.20)


def test_plan_and_engine_share_one_memory_account():
    # One home for memory (skyscale.cost.predict_memory): the plan's figure is the
    # Engine's, term by term, and its beams are the bytes the Engine really holds.
    dirty, psf = synthetic_field(96, seed=1)
    e = Engine(psf, [0, 4, 8], image_shape=dirty.shape, threads=1)
    plan = planner.plan_run(dirty.shape, psf, [0, 4, 8], calibration=cost.DEFAULT_CALIBRATION)
    assert e.memory["total"] == plan.memory_bytes
    assert plan.memory_phase == e.memory["peak_phase"]
    assert plan.memory_terms["beams"] == e.memory["beams"] == sum(b.nbytes for b in e.beams)
    assert e.memory["planes"] == 2 * len(e.beams) * dirty.size * 4


def test_engine_max_memory_refuses_what_the_plan_says_will_not_fit():
    # The Engine's max_memory check applies the planner's own rule to the same account:
    # for a budget just under the plan's need both refuse, just over both accept.
    dirty, psf = synthetic_field(96, seed=1)
    plan = planner.plan_run(dirty.shape, psf, [0, 4, 8], calibration=cost.DEFAULT_CALIBRATION,
                         memory_available=10 ** 12)
    need = plan.memory_bytes * cost.MEMORY_HEADROOM
    tight = planner.plan_run(dirty.shape, psf, [0, 4, 8], calibration=cost.DEFAULT_CALIBRATION,
                          memory_available=int(need) - 1)
    assert not tight.fits
    with pytest.raises(ValueError, match="max_memory"):
        Engine(psf, [0, 4, 8], image_shape=dirty.shape, threads=1,
               max_memory=int(need) - 1)
    roomy = planner.plan_run(dirty.shape, psf, [0, 4, 8], calibration=cost.DEFAULT_CALIBRATION,
                          memory_available=int(need) + 1)
    assert roomy.fits
    Engine(psf, [0, 4, 8], image_shape=dirty.shape, threads=1, max_memory=int(need) + 1)


def test_peak_memory_sees_a_known_allocation():
    # Reference tools: tracemalloc and the resident set (psutil or /proc).
    # The resident set is checked on fresh pages (an anonymous mapping, written), since
    # numpy's allocator may reuse pages an earlier test freed.
    import mmap
    nbytes = 40 * 2 ** 20
    with PeakMemory() as mem:
        block = np.ones(nbytes // 8)
    assert nbytes <= mem.traced_peak < 1.1 * nbytes
    del block
    with PeakMemory() as mem:
        pages = mmap.mmap(-1, nbytes)
        pages.write(b"\1" * nbytes)
    assert mem.rss_increase > 0.5 * nbytes
    pages.close()


# ------------------------------------------------------------------ instrumentation
def test_recorded_sub_loops_add_up_to_the_component_table():
    # Reference: the run's own component table and sub-loop count.
    dirty, psf = synthetic_field(96, seed=5)
    with record_sub_loops() as rows:
        res = skyscale.deconvolve(dirty, psf, scales=[0, 4, 8], max_components=400,
                                  restore=False, threads=1)
    assert len(rows) == res.sub_loops
    assert sum(m for _, m, _ in rows) == res.components.size
    assert all(a >= m for a, m, _ in rows if m)
    # the components kept were applied by FFT updates (the run counts them) or directly,
    # each once; the beams of every scale were made
    kept = [u for u in rows.updates if u[4]]
    assert sum(1 for u in kept if u[0] == "fft") == res.fft_updates
    assert sum(u[1] for u in kept) == res.components.size
    assert sum(b[0] for b in rows.beams) >= 3
    from skyscale.core import engine as minor
    from skyscale.core import precompute
    from skyscale.core.kernels import scale_loop
    assert minor.scale_loop is scale_loop          # restored after the block
    assert precompute.pair_beams.__module__ == "skyscale.core.precompute"
    from skyscale.core.cycle_work import CycleWork
    assert CycleWork.apply_fft.__qualname__ == "CycleWork.apply_fft"


def test_fft_probe_times_each_grid_once():
    out = fft_probe([(64, 64), (64, 64), (48, 50)], repeats=1, backend="numpy")
    assert [r["grid"] for r in out] == [[48, 50], [64, 64]]
    assert all(r["seconds"] > 0 for r in out)


# -------------------------------------------------------------------------- planner
def test_plan_flags_what_does_not_fit_and_check_refuses_it():
    base = planner.plan_run((512, 512), (1024, 1024), [0, 4, 8, 16], memory_available=1 << 40)
    assert base.fits
    assert planner.check_fits_memory(base) is base
    small = planner.plan_run((512, 512), (1024, 1024), [0, 4, 8, 16],
                          memory_available=base.memory_bytes // 2)
    assert not small.fits
    assert any("will not fit" in m for m in small.messages)
    with pytest.raises(planner.InsufficientMemoryError, match="GiB.*available"):
        planner.check_fits_memory(small)
    assert issubclass(planner.InsufficientMemoryError, ValueError)
    assert issubclass(planner.InsufficientMemoryError, MemoryError)


def test_plan_totals_add_up():
    cal = cost.DEFAULT_CALIBRATION
    p = planner.plan_run((256, 256), (512, 512), [0, 4, 8], components=1000, rounds=30,
                      major_cycles=4, active_pixels=500.0, fft_updates=12, threads=1,
                      calibration=cal)
    t = cost.predict_times(cost.run_geometry((256, 256), (512, 512), (0, 2, 4)), cal)
    loop = (t["per_component_pixel"] * 1000 * 500
            + 30 * (t["per_active_pixel"] * 500 + t["per_sub_loop"] + t["per_sub_loop_scan"]))
    assert p.loop_seconds == pytest.approx(loop)
    # the beams once, 12 FFT updates, 18 direct ones, the sub-loops, 4 cycles' set-up
    assert p.minor_seconds == pytest.approx(t["beams"] + 12 * t["round"] + 18 * t["direct"]
                                            + loop + 4 * t["cycle"])
    assert p.fft_update_seconds == pytest.approx(12 * t["round"])
    assert p.direct_seconds == pytest.approx(18 * t["direct"])
    assert p.major_total_seconds == pytest.approx(4 * (t["major"] + t["stats"]) + t["stats"])
    assert p.total_seconds == pytest.approx(p.precompute_seconds + p.setup_seconds
                                            + p.minor_seconds + p.major_total_seconds
                                            + p.startup_seconds)
    warm = planner.plan_run((256, 256), (512, 512), [0, 4, 8], components=1000, rounds=30,
                         major_cycles=4, active_pixels=500.0, fft_updates=12, threads=1,
                         calibration=cal, fresh_process=False)
    assert warm.startup_seconds == 0.0
    assert warm.total_seconds == pytest.approx(p.total_seconds - p.startup_seconds)
    # the plan's verdict is the headroom rule applied to its own figures (cost.fits_memory)
    assert p.fits is (p.memory_available is None
                      or p.memory_bytes * cost.MEMORY_HEADROOM <= p.memory_available)
    assert json.loads(json.dumps(p.as_dict()))["scales"] == [0.0, 4.0, 8.0]


def test_a_mask_box_makes_the_updates_and_beams_those_of_the_box():
    # Reference: the engine's own work for an FFT update of a box (Engine._fft_update_cost,
    # with the convolvers it builds for that box) and the extent it makes beams for
    # (BeamBank._extent_for); without a box the plan is the whole image's.
    dirty, psf = synthetic_field(256, seed=1)
    scales = [0, 4, 8]
    e = Engine(psf, scales, image_shape=dirty.shape, threads=1)
    box = (100, 120)
    radii = ScaleSet(scales).support_radii
    g = cost.run_geometry(dirty.shape, psf.shape, radii)
    gb = cost.run_geometry(box, psf.shape, radii)
    assert gb.fft_update_work() == e._fft_update_cost(box)
    assert cost.beam_extent(box, dirty.shape) == e.bank._extent_for(box) == (128, 128)
    cal = cost.DEFAULT_CALIBRATION
    whole = cost.predict_times(g, cal)
    assert cost.predict_times(g, cal, box_shape=dirty.shape) == whole
    t = cost.predict_times(g, cal, box_shape=box)
    assert t["round"] == pytest.approx(cost.predict_times(gb, cal)["round"], rel=1e-12)
    assert t["beams"] == pytest.approx(cost.predict_times(
        cost.run_geometry((128, 128), psf.shape, radii), cal)["beams"], rel=1e-12)
    assert t["round"] < whole["round"] and t["beams"] < whole["beams"]
    assert t["major"] == whole["major"] and t["stats"] == whole["stats"]
    kw = dict(components=500, rounds=20, major_cycles=3, active_pixels=300.0,
              fft_updates=8, threads=1, calibration=cal, memory_available=1 << 40)
    boxed = planner.plan_run(dirty.shape, psf, scales, box_shape=box, mask_fraction=0.1, **kw)
    plain = planner.plan_run(dirty.shape, psf, scales, mask_fraction=0.1, **kw)
    assert boxed.memory_bytes == plain.memory_bytes         # memory: the whole image
    assert boxed.fft_update_seconds == pytest.approx(8 * t["round"], rel=1e-12)
    assert boxed.total_seconds < plain.total_seconds
    with pytest.raises(ValueError, match="box_shape"):
        planner.plan_run(dirty.shape, psf, scales, box_shape=(300, 10))


def test_counts_follow_the_dynamic_range():
    # Analytic: the peak falls 1 / cycle_depth per major cycle; rounds rho per scale and cycle.
    cal = json.loads(json.dumps(cost.DEFAULT_CALIBRATION))
    cal["counts"] = {"rounds_per_scale_cycle": 2.5, "active_fraction": 0.01,
                     "cycles_offset": 1.0, "fft_update_fraction": 0.25}
    g = cost.run_geometry((200, 200), (400, 400), (0, 2, 4))
    c = cost.estimate_counts(g, cal, dynamic_range=5.0 ** 3, max_components=777)
    assert c["major_cycles"] == math.ceil(3 + 1.0) == 4
    assert c["rounds"] == math.ceil(2.5 * 3 * 4)
    assert c["fft_updates"] == math.ceil(0.25 * c["rounds"])
    assert c["components"] == 777 and "budget" in c["how"]["components"]
    assert c["active_pixels"] == pytest.approx(0.01 * 200 * 200)
    capped = cost.estimate_counts(g, cal, dynamic_range=1e12, max_major_cycles=5)
    assert capped["major_cycles"] == 5
    given = cost.estimate_counts(g, cal, components=5, rounds=6, major_cycles=7,
                                 active_pixels=8.0, fft_updates=4)
    assert [given[k] for k in ("components", "rounds", "major_cycles", "active_pixels",
                               "fft_updates")] == [5, 6, 7, 8.0, 4]
    assert set(given["how"].values()) == {"given"}


def test_dynamic_range_is_measured_from_the_dirty_image():
    # Reference: peak over 3 x 1.4826 MAD of the image (Rousseeuw & Croux 1993).
    rng = np.random.default_rng(0)
    dirty = rng.normal(0, 1.0, (256, 256)).astype(np.float32)
    dirty[100, 100] = 3.0 * 5.0 ** 4
    p = planner.plan_run(dirty.shape, (512, 512), [0, 4], dirty=dirty, noise_threshold=3.0,
                      calibration=cost.DEFAULT_CALIBRATION)
    d = float(np.abs(dirty).max() / (3 * 1.4826 * np.median(np.abs(dirty - np.median(dirty)))))
    expect = cost.estimate_counts(cost.run_geometry((256, 256), (512, 512), (0, 2)),
                                  cost.DEFAULT_CALIBRATION, dynamic_range=d)
    assert p.counts["major_cycles"] == expect["major_cycles"]


def test_threads_follow_amdahls_law():
    # Analytic: Amdahl's law with the calibration's parallel fractions.
    from skyscale.core.threads import resolve_threads
    cal = cost.DEFAULT_CALIBRATION
    g = cost.run_geometry((256, 256), (512, 512), (0, 2))
    n = resolve_threads(None)
    one = cost.fft_seconds(g.transforms()["round"], cal, threads=1)
    many = cost.fft_seconds(g.transforms()["round"], cal, threads=n)
    f = cal["threads"]["fft_parallel"]
    assert many == pytest.approx(one * ((1 - f) + f / n))
    p = planner.plan_run((256, 256), (512, 512), [0, 4], threads=10 ** 4, calibration=cal)
    assert p.threads == n
    assert (n == 1) or any("more than" in m for m in p.messages)


def test_max_affordable_scales_stops_at_the_budget():
    shape, psf = (256, 256), (512, 512)
    peaks = [planner.plan_run(shape, psf, [0, 4, 8, 16][:k]).memory_bytes for k in (1, 2, 3, 4)]
    assert peaks == sorted(peaks)
    budget = int(0.5 * (peaks[1] + peaks[2]) * cost.MEMORY_HEADROOM)
    got = planner.max_affordable_scales(shape, psf, [16, 0, 8, 4], memory_budget=budget)
    assert got.scales == (0.0, 4.0) and got.limited_by == "memory"
    times = [planner.plan_run(shape, psf, [0, 4, 8, 16][:k]).total_seconds for k in (1, 2, 3, 4)]
    assert times == sorted(times)
    got = planner.max_affordable_scales(shape, psf, [0, 4, 8, 16], memory_budget=1 << 40,
                                     seconds_budget=0.5 * (times[2] + times[3]))
    assert got.scales == (0.0, 4.0, 8.0) and got.limited_by == "time"
    none = planner.max_affordable_scales(shape, psf, [0, 4], memory_budget=1)
    assert none.scales == () and none.plan is None


def test_a_run_that_does_not_fit_says_what_would_with_figures():
    # Each remedy, applied, is a run the planner (which `run` obeys) says fits, with the
    # peak the remedy quotes; the fewest changes: one more scale or 16 more pixels do not.
    shape, psf, scales = (1024, 1024), (2048, 2048), [0, 4, 8, 16, 32]
    p2 = planner.plan_run(shape, psf, scales[:2], dtype="float64", memory_available=1 << 40)
    p3 = planner.plan_run(shape, psf, scales[:3], dtype="float64", memory_available=1 << 40)
    budget = int(0.5 * (p2.memory_bytes + p3.memory_bytes) * cost.MEMORY_HEADROOM)
    plan = planner.plan_run(shape, psf, scales, dtype="float64", memory_available=budget)
    assert not plan.fits
    got = {r["kind"]: r for r in plan.remedies}
    assert set(got) >= {"scales", "dtype", "psf", "sub-region"}

    def again(sh=shape, ps=psf, sc=scales, dtype="float64"):
        return planner.plan_run(sh, ps, sc, dtype=dtype, memory_available=budget)
    r = got["scales"]
    assert r["fits"] and r["option"] == "--scales 0,4"
    assert again(sc=[0, 4]).fits and not again(sc=[0, 4, 8]).fits
    assert r["peak_bytes"] == again(sc=[0, 4]).memory_bytes
    assert f"{r['peak_bytes'] / 2**30:.1f} GiB" in r["text"]
    for kind, changed in (("dtype", again(dtype="float32")), ("psf", again(ps=shape))):
        assert got[kind]["peak_bytes"] == changed.memory_bytes
        assert got[kind]["fits"] == changed.fits
    n = int(got["sub-region"]["text"].split("at most ")[1].split(" x ")[0])
    assert again(sh=(n, n), ps=(2 * n, 2 * n)).fits
    assert not again(sh=(n + 16, n + 16), ps=(2 * n + 32, 2 * n + 32)).fits
    with pytest.raises(planner.InsufficientMemoryError) as err:
        planner.check_fits_memory(plan)
    assert "what would fit: fewer scales" in str(err.value) and "sub-region of at most" in \
        str(err.value)
    assert planner.plan_run(shape, psf, scales, memory_available=1 << 40).remedies == []


def _refusal(plan):
    with pytest.raises(planner.InsufficientMemoryError) as err:
        planner.check_fits_memory(plan)
    return str(err.value)


def test_a_run_no_single_change_saves_is_offered_the_changes_together():
    # Between the delta scale alone at float32 with a PSF the image's size and at float64
    # with the PSF twice the size, only the changes together fit.
    shape, psf, scales = (1024, 1024), (2048, 2048), [0, 4, 8, 16]

    def peak(ps, sc, dtype):
        return planner.plan_run(shape, ps, sc, dtype=dtype, memory_available=1 << 40).memory_bytes
    both, alone = peak(shape, [0], "float32"), peak(psf, [0], "float64")
    assert both < alone
    budget = int(both * cost.MEMORY_HEADROOM) + 1
    plan = planner.plan_run(shape, psf, scales, dtype="float64", memory_available=budget)
    got = {r["kind"]: r for r in plan.remedies}
    assert not any(got[k]["fits"] for k in ("scales", "dtype", "psf"))
    assert got["together"]["fits"] and got["together"]["peak_bytes"] == both
    assert "float32 and a PSF the image's size together, with scales 0 px" in \
        got["together"]["text"]
    assert "what would fit: float32 and a PSF" in _refusal(plan)


def test_bench_advice_names_sizes_whose_sweep_fits(monkeypatch):
    from skyscale.cost.remedies import BENCH_SIZE_LADDER
    from skyscale.cost.sweep_plan import sweep_memory
    avail = 16 * 2**30
    plan = planner.plan_run((8192, 8192), (16384, 16384), [0, 4], memory_available=avail)
    line = next(m for m in plan.messages if "larger than the calibrated sizes" in m)
    sizes = [int(v) for v in line.split("--sizes ")[1].split()[0].split(",")]
    assert sweep_memory(sizes)[0] * cost.MEMORY_HEADROOM <= avail
    bigger = BENCH_SIZE_LADDER[BENCH_SIZE_LADDER.index(sizes[-1]) + 1]
    assert sweep_memory([bigger // 4, bigger // 2, bigger])[0] * cost.MEMORY_HEADROOM > avail
    for gib, words in ((3, "does not fit in the 3.0 GiB available (it reaches 2048 px)"),
                       (1, "does not fit in the 1.0 GiB available;")):
        small = planner.plan_run((8192, 8192), (16384, 16384), [0, 4],
                              memory_available=gib * 2**30)
        line = next(m for m in small.messages if "larger than the calibrated sizes" in m)
        assert "--sizes" not in line and words in line


def test_bench_refuses_sizes_that_do_not_fit_and_names_those_that_do(tmp_path, monkeypatch,
                                                                    capsys):
    import skyscale.cost.sweep
    from skyscale.cost.sweep_plan import sweep_memory

    def never(*a, **k):
        raise AssertionError("the sweep must not start")
    monkeypatch.setattr(skyscale.cost.sweep, "run_sweep", never)
    monkeypatch.setattr(cost, "available_memory", lambda: 6 * 2**30)
    assert main(["bench", "--sizes", "2048,4096,8192", "--out", str(tmp_path / "b")]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "--sizes 2048,4096,8192: the sweep's largest step" in err[0]
    sizes = [int(v) for v in err[0].split("give --sizes ")[1].split()[0].split(",")]
    assert sweep_memory(sizes)[0] * cost.MEMORY_HEADROOM <= 6 * 2**30
    assert not (tmp_path / "b").exists()


@pytest.mark.parametrize("kwargs,words", [
    (dict(image_shape=(0, 5)), "image_shape"),
    (dict(psf=(100, 100)), "smaller than the image"),
    (dict(threads=0), "threads"),
    (dict(max_components=-1), "max_components"),
    (dict(mask_fraction=0.0), "mask_fraction"),
])
def test_plan_bad_input_names_the_argument(kwargs, words):
    args = dict(image_shape=(128, 128), psf=(256, 256), scales=[0, 4, 8])
    args.update(kwargs)
    with pytest.raises(ValueError, match=words):
        planner.plan_run(args.pop("image_shape"), args.pop("psf"), args.pop("scales"), **args)


# ---------------------------------------------------------------------- calibration
def test_calibration_file_is_preferred_and_linear(tmp_path, monkeypatch):
    # Analytic: the round time is linear in its coefficients.
    cal = json.loads(json.dumps(cost.DEFAULT_CALIBRATION))
    cal["round"] = {"fixed": 0.0, "per_fft_second": 1.0, "per_plane_pixel": 0.0}
    path = tmp_path / "cal.json"
    cost.save_calibration(cal, str(path))
    monkeypatch.setenv(cost.CALIBRATION_ENV, str(path))
    one = planner.plan_run((128, 128), (256, 256), [0, 4], threads=1)
    cal["round"]["per_fft_second"] = 2.0
    cost.save_calibration(cal, str(path))
    two = planner.plan_run((128, 128), (256, 256), [0, 4], threads=1)
    assert two.round_seconds == pytest.approx(2 * one.round_seconds)
    assert str(path) in two.calibration
    # Written through skyscale.io.atomic: replaced in place, no temporary file left.
    assert sorted(p.name for p in tmp_path.iterdir()) == ["cal.json"]


def test_broken_calibrations(tmp_path, monkeypatch, caplog):
    with pytest.raises(ValueError, match="does not exist"):
        cost.load_calibration(str(tmp_path / "nope.json"))
    bad = tmp_path / "bad.json"
    bad.write_text('{"round": {"speed": 1}}')
    with pytest.raises(ValueError, match="not a skyscale bench calibration"):
        cost.load_calibration(str(bad))
    monkeypatch.setenv(cost.CALIBRATION_ENV, str(bad))
    assert cost.load_calibration() == cost.DEFAULT_CALIBRATION
    assert "ignoring the calibration file" in caplog.text


def test_loop_formula_has_one_home():
    # Analytic: l1 m A + R (l2 A + l0), written out; the planner's loop figure is it.
    t = {"per_component_pixel": 2e-9, "per_active_pixel": 5e-9, "per_sub_loop": 1e-4}
    assert cost.loop_seconds(t, 300, 4000, 7) == pytest.approx(
        2e-9 * 300 * 4000 + 7 * (5e-9 * 4000 + 1e-4), rel=1e-12)
    assert cost.loop_features(4000, 300) == [1.2e6, 4000.0, 1.0]
    assert np.dot(cost.loop_features(4000, 300), [t[k] for k in cost.LOOP_TERMS]) == \
        pytest.approx(cost.loop_seconds(t, 300, 4000), rel=1e-12)
    plan = planner.plan_run((256, 256), (512, 512), [0, 4, 8], threads=1,
                         calibration=cost.DEFAULT_CALIBRATION)
    g = cost.run_geometry((256, 256), (512, 512), ScaleSet([0, 4, 8]).support_radii)
    c = plan.counts
    assert plan.loop_seconds == pytest.approx(cost.loop_seconds(
        cost.predict_times(g, cost.DEFAULT_CALIBRATION, threads=1), c["components"],
        c["active_pixels"], c["rounds"]), rel=1e-12)


def test_calibrate_inverts_the_model_on_noiseless_data():
    # Analytic: times made by the model from known coefficients are fitted back to them.
    true = json.loads(json.dumps(cost.DEFAULT_CALIBRATION))
    true["fft"] = {"coefficient": 3e-9, "exponent": 1.1}
    true["round"] = {"fixed": 2e-3, "per_fft_second": 1.5, "per_plane_pixel": 4e-9}
    true["major"] = {"fixed": 1e-3, "per_fft_second": 1.2, "per_plane_pixel": 2e-9}
    true["loop"] = {"per_component_pixel": 1.5e-9, "per_active_pixel": 3e-9,
                    "per_sub_loop": 2e-5}
    true["setup"] = {"fixed": 1e-2, "per_fft_second": 0.9}
    true["beams"] = {"fixed": 3e-3, "per_fft_second": 1.3, "per_beam_pixel": 2e-9}
    delta = cost.DEFAULT_CALIBRATION["direct"]["pixel_exponent"]   # kept without a probe
    true["direct"] = {"fixed": 5e-5, "per_madd": 1.2e-9, "per_pixel_plane": 3e-9,
                      "pixel_exponent": delta,
                      "allowance_used": cost.DEFAULT_CALIBRATION["direct"]["allowance_used"]}
    true["scan"] = {"cycle_fixed": 4e-3, "per_plane_pixel": 6e-9, "per_tracked_pixel": 2e-9}
    grids = set()
    points = []
    for n in (128, 256, 512):
        for scales in ([0], [0, 4], [0, 4, 8], [0, 4, 8, 16]):
            radii = ScaleSet(scales).support_radii
            g = cost.run_geometry((n, n), (2 * n, 2 * n), radii)
            grids |= {g.major_grid} | ({g.precompute_grid, g.smooth_grid} if g.n_finite else set())
            t = cost.predict_times(g, true)
            loops = [[a, m, 1.5e-9 * a * m + 3e-9 * a + 2e-5]
                     for a, m in ((5000, 40), (20000, 7), (900, 300), (100, 2))]
            k = len(scales)
            # the scales' beams, then each scale's pairs, as the engine makes them; the
            # model's beams are all those makings
            made = [k] + [g.n_pairs // k + (1 if i < g.n_pairs % k else 0) for i in range(k)]
            beam_rows = [[b, g.beam_pixels, 3e-3 + 1.3 * cost.fft_seconds(
                [(g.precompute_grid, 1 + g.n_finite + b)], true) + 2e-9 * b * g.beam_pixels]
                for b in made]
            assert t["beams"] == pytest.approx(sum(r[2] for r in beam_rows), rel=1e-9)
            ps = cost.direct_passes(k, 0 in scales)
            direct = [["direct", m, nt, 5e-5 + 1.2e-9 * m * nt * ps
                       + 3e-9 * cost.direct_pixel_planes(ps, nt, delta)]
                      for m, nt in ((1, n * n), (3, n * n // 2), (6, n * n // 5))]
            cycles = [[4e-3 + 6e-9 * k * n * n + 2e-9 * r * k * nt, r, nt]
                      for r, nt in ((3, n * n), (40, n * n // 3))]
            points.append({"size": n, "image_shape": [n, n], "psf_shape": [2 * n, 2 * n],
                           "radii": list(radii), "itemsize": 4, "n_scales": len(scales),
                           "beam_rows": beam_rows, "update_rows": direct,
                           "cycle_rows": cycles,
                           "scales": scales, "precompute_s": t["precompute"],
                           "round_s": t["round"], "updates": 3, "major_s": t["major"],
                           "stats_s": t["stats"], "loops": loops, "setup_s": t["setup"],
                           "traced_peak": cost.predict_memory(g, true)["peak"]})
    fft = [{"grid": list(g), "seconds": 3e-9 * cost.fft_work(g) ** 1.1} for g in grids]
    cal = calibrate({"settings": {"sizes": [128, 256, 512]}, "points": points, "fft": fft})
    for sec in ("fft", "round", "major", "loop", "setup", "beams", "direct", "scan"):
        for k, v in true[sec].items():
            assert cal[sec][k] == pytest.approx(v, rel=1e-5), (sec, k)
    assert cal["memory"]["scale"] == pytest.approx(true["memory"]["scale"])
    assert step_ffts(cost.run_geometry((128, 128), (256, 256), (0,)), cal)["stats"] == 0.0


# ------------------------------------------------------------------------- commands
def test_plan_command(capsys):
    assert main(["plan", "--size", "256", "--scales", "0,4,8", "--threads", "1"]) == 0
    assert "planned run" in capsys.readouterr().out
    assert main(["plan", "--size", "256", "--memory", "0.0001", "--require-fit"]) == 1
    assert "will not fit" in capsys.readouterr().out
    assert main(["plan", "--size", "1024", "--scales", "0,4,8,16,32", "--memory", "0.45"]) == 0
    text = capsys.readouterr().out
    assert "what would fit" in text and "fits  fewer scales: the smallest" in text
    assert "[--scales 0," in text and "sub-region of at most" in text
    assert main(["plan", "--size", "256x512", "--psf-size", "512x1024", "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["image_shape"] == [256, 512]
    assert main(["plan", "--size", "256", "--components", "100", "--sub-loops", "9",
                 "--major-cycles", "3", "--json"]) == 0
    counts = json.loads(capsys.readouterr().out)["counts"]
    assert (counts["components"], counts["rounds"], counts["major_cycles"]) == (100, 9, 3)
    assert main(["plan", "--size", "256", "--mask-box", "100x120", "--mask-fraction", "0.1",
                 "--json"]) == 0
    boxed = json.loads(capsys.readouterr().out)
    assert any("box of 100 x 120 pixels" in m for m in boxed["messages"])


def test_suggest_and_plan_quote_the_same_time_and_memory(tmp_path, capsys):
    # The same files and scales give the same figures from skyscale suggest (its offer
    # of more scales) and skyscale plan: one planner, one dynamic range, one format.
    from astropy.io import fits
    from skyscale.cost.planner import bytes_text, seconds_text
    from tests.advisor_fields import gaussian_psf, make_field
    dirty = make_field("disk", 40, 10, 160, seed=1)[0].astype(np.float32)
    psf = gaussian_psf(160).astype(np.float32)
    fits.writeto(tmp_path / "d.fits", dirty)
    fits.writeto(tmp_path / "p.fits", psf)
    s = skyscale.suggest_scales(dirty, psf)
    assert s.fuller is not None
    for key, scales in (("", s.pixels), ("fuller_", s.fuller)):
        assert main(["plan", str(tmp_path / "d.fits"), str(tmp_path / "p.fits"), "--scales",
                     ",".join(f"{v:g}" for v in scales), "--json"]) == 0
        plan = json.loads(capsys.readouterr().out)
        assert s.costs[key + "seconds"] == pytest.approx(plan["total_seconds"], rel=1e-12)
        assert s.costs[key + "bytes"] == plan["memory_bytes"]
        assert f"{seconds_text(plan['total_seconds'])} and {bytes_text(plan['memory_bytes'])}" \
            in " ".join(s.reasons)


def test_plan_command_bad_input(capsys):
    assert main(["plan"]) == 2
    assert "--size" in capsys.readouterr().err
    assert main(["plan", "--size", "12x"]) == 2          # usage errors: one line, code 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "NYxNX" in err[0]


def test_plan_command_reads_fits(tmp_path, capsys):
    from astropy.io import fits
    dirty, psf = synthetic_field(64, seed=4)
    fits.writeto(tmp_path / "d.fits", dirty)
    fits.writeto(tmp_path / "p.fits", psf)
    assert main(["plan", str(tmp_path / "d.fits"), str(tmp_path / "p.fits"), "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["psf_shape"] == [128, 128]
    assert "dynamic range" in out["counts"]["how"]["major_cycles"]
    assert "assumed" not in out["counts"]["how"]["major_cycles"]


def test_plan_of_a_cube_plans_one_plane_and_the_cube_path(tmp_path, capsys):
    # Arithmetic: with memory for one plane at once (the local cluster's 1.5 x rule) the
    # planes run one after another: start-up once, then each plane's predicted time.
    from astropy.io import fits
    dirty, psf = synthetic_field(64, seed=4)
    fits.writeto(tmp_path / "c.fits", np.stack([dirty] * 3))
    fits.writeto(tmp_path / "p.fits", psf)
    args = ["plan", str(tmp_path / "c.fits"), str(tmp_path / "p.fits"), "--scales", "0,4"]
    assert main(args + ["--json"]) == 0
    one = json.loads(capsys.readouterr().out)
    assert one["image_shape"] == [64, 64] and one["threads"] == 1
    gib = 2.0 * one["memory_bytes"] / 2**30
    assert main(args + ["--json", "--memory", f"{gib!r}"]) == 0
    plan = json.loads(capsys.readouterr().out)
    line = next(m for m in plan["messages"] if m.startswith("a cube of 3 planes"))
    assert "runs 1 worker(s) x 1 thread(s)" in line and "(3 plane(s) per worker)" in line
    each = plan["total_seconds"] - plan["startup_seconds"]
    from skyscale.cli.formats import time_text as _t
    assert f"about {_t(plan['startup_seconds'] + 3 * each)} for the cube" in line


def test_bench_quick_writes_table_json_figure_and_calibration(tmp_path, capsys):
    out = tmp_path / "bench"
    cal = tmp_path / "cal.json"
    assert main(["bench", "--quick", "--out", str(out), "--calibration", str(cal)]) == 0
    said = capsys.readouterr()
    text = " ".join(said.out.split())
    # the sweep's own runs warn into bench.json, not on the terminal
    assert "warning" not in said.err
    # the command line speaks to users: what was measured, what it means, where the
    # calibration went; the developer's tables are in benchmarks/sweep_tables.py
    assert "skyscale bench measured this machine" in text and "--quick: tiny images" in text
    assert "what it means for your runs" in text and "each FFT update" in text
    assert "run(s) the fit did not see" in text
    assert f"Calibration written to {cal}: give it to skyscale plan --calibration" in text
    for developer in ("fitted exponents", "cost model coefficients", "misfit", "MISSED"):
        assert developer not in text
    data = json.loads((out / "bench.json").read_text())
    assert {"points", "fft", "runs", "calibration", "summary", "validation"} <= set(data)
    assert all(isinstance(r["warnings"], list) for r in data["runs"])
    assert len(data["points"]) >= 4
    assert (out / "bench.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert cost.load_calibration(str(cal))["round"] == data["calibration"]["round"]
    assert main(["bench", "--quick", "--out", str(out)]) == 2      # refuses to overwrite
    assert "exists" in capsys.readouterr().err
    assert main(["bench", "--quick", "--out", str(tmp_path / "b2")]) == 0
    text = " ".join(capsys.readouterr().out.split())
    assert ("No calibration written (--quick): skyscale plan and run keep using "
            f"{cost.load_calibration()['source']}") in text
    import importlib.util
    import os
    path = os.path.join(os.path.dirname(__file__), "..", "benchmarks", "sweep_tables.py")
    spec = importlib.util.spec_from_file_location("sweep_tables", path)
    tables = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(tables)
    assert tables.main([str(out / "bench.json")]) == 0
    dev = capsys.readouterr().out
    assert "fitted exponents" in dev and "cost model coefficients" in dev


def test_old_engine_account_is_a_deprecated_wrapper_of_the_one_account():
    from skyscale.core.precompute import plan_memory
    with pytest.warns(DeprecationWarning, match="engine_memory"):
        old = plan_memory((96, 96), (192, 192), (0, 2, 4))
    assert old == cost.engine_memory((96, 96), (192, 192), (0, 2, 4))
