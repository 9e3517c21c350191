"""Tests of the cost model, the planner, the sweep's measuring tools and the cost commands.

No timing is asserted here: speed is measured only by ``skyscale bench`` and
``benchmarks/``.  The checks are against values from outside the model: exponents
and coefficients of synthetic data built with known laws (analytic), the numpy twin
of the minor-cycle loop (tests/naive.py), tracemalloc and the resident set (reference
tools), and the engine's own PSF measure.
"""

import json
import tracemalloc
import warnings

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st

from tests.naive import clean_loop as naive_clean_loop

import skyscale
from skyscale import cost
from skyscale.cli import main
from skyscale.minor import Engine
from skyscale.scales import ScaleSet
from skyscale.sweep import (PeakMemory, bandwidth_for, bandwidth_probe, calibrate,
                            synthetic_field)


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


# ------------------------------------------------------------------- touched pixels
def _broad_engine(shape=(64, 64), scales=(0, 4)):
    """float64 engine with a broad Gaussian PSF: every patch value is well above zero."""
    n = shape[0]
    y, x = np.mgrid[-n:n, -n:n]
    psf = np.exp(-(x ** 2 + y ** 2) / (2 * 20.0 ** 2))
    return Engine(psf, list(scales), image_shape=shape, psf_patch=6, dtype=np.float64,
                  threads=1)


@pytest.mark.parametrize("where", [(32, 30), (2, 61), (60, 1)])
def test_touched_pixels_equal_pixels_the_numpy_twin_changes(where):
    # Reference: tests/naive.py, the numpy twin of the loop, run for one iteration.
    e = _broad_engine()
    dirty = np.zeros((64, 64))
    dirty[where] = 1.0
    st_ = e.loop_state(dirty)
    planes = st_.planes.copy()
    comps, *_ = naive_clean_loop(planes, st_.mask, st_.lim, e.response_scale, e.amp_scale,
                                 e.patches, e.patch_offset, e.patch_half, gain=0.5, floor=-1.0,
                                 peak_limit=np.inf, ref=0, delta=e.delta_index, max_iter=1)
    changed = int(np.count_nonzero(planes != st_.planes))
    write, scan = cost.touched_pixels(comps[0], comps[1], comps[2], e.patch_half,
                                      planes.shape[1:], e.tile)
    assert write[0] == changed
    assert scan[0] >= write[0]


@settings(max_examples=60, deadline=None)
@given(y=st.integers(0, 99), x=st.integers(0, 79), h=st.integers(0, 40))
def test_rescanned_area_is_the_whole_tiles_under_the_patch(y, x, h):
    # Brute force: the tiles the clipped patch overlaps, each cut at the region's edge.
    write, scan = cost.touched_pixels([y], [x], [0], np.array([[h]]), (100, 80), tile=16)
    ya, yb, xa, xb = max(y - h, 0), min(y + h, 99), max(x - h, 0), min(x + h, 79)
    assert write[0] == (yb - ya + 1) * (xb - xa + 1)
    rows = sum(min(16, 100 - t * 16) for t in {v // 16 for v in range(ya, yb + 1)})
    cols = sum(min(16, 80 - t * 16) for t in {v // 16 for v in range(xa, xb + 1)})
    assert scan[0] == rows * cols


# --------------------------------------------------------------------------- memory
@pytest.mark.parametrize("n,psf_factor,dtype,scales", [
    (128, 2, np.float32, [0, 4, 8]),
    (128, 1, np.float32, [0, 4, 8, 16]),
    (96, 2, np.float64, [0, 6]),
])
def test_memory_model_within_15_percent_of_tracemalloc(n, psf_factor, dtype, scales):
    # Reference tool: tracemalloc's peak over a whole run (common practice).
    dirty, psf = synthetic_field(n, seed=2)
    if psf_factor == 1:
        psf = psf[n // 2:n // 2 + n, n // 2:n // 2 + n].copy()
    dirty, psf = dirty.astype(dtype), psf.astype(dtype)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")       # the PSF the image's size is warned about
        skyscale.deconvolve(*synthetic_field(32), scales=[0, 4], max_components=5,
                            restore=False, dtype=dtype)  # imports, kernels compiled for dtype
        tracemalloc.start()
        try:
            skyscale.deconvolve(dirty, psf, scales=scales, max_components=60,
                                max_major_cycles=2, restore=False, dtype=dtype, threads=1)
            peak = tracemalloc.get_traced_memory()[1]
        finally:
            tracemalloc.stop()
    plan = cost.plan_run(dirty.shape, psf, scales, max_components=60, threads=1,
                         dtype=dtype, calibration=cost.DEFAULT_CALIBRATION)
    assert plan.memory_bytes == pytest.approx(peak, rel=0.15)


def test_peak_memory_sees_a_known_allocation():
    # Reference tools: tracemalloc and the resident set (psutil or /proc).
    nbytes = 40 * 2 ** 20
    with PeakMemory() as mem:
        block = np.ones(nbytes // 8)
    assert nbytes <= mem.traced_peak < 1.1 * nbytes
    assert mem.rss_increase > 0.5 * nbytes
    del block


# ----------------------------------------------------------------------- bandwidth
def test_bandwidth_probe_counts_read_and_write():
    probe = bandwidth_probe(sizes=(1 << 20,), threads=(1, 2), repeats=2)
    assert [p["threads"] for p in probe] == [1, 2]
    for p in probe:
        assert p["bytes"] == 1 << 20
        assert p["bandwidth"] == pytest.approx(2 * p["bytes"] / p["seconds"])


def test_bandwidth_for_interpolates_in_log_size():
    # Analytic: linear in log(size), clamped, best of the usable thread counts.
    probe = [{"bytes": 1 << 20, "threads": 1, "bandwidth": 40.0},
             {"bytes": 1 << 24, "threads": 1, "bandwidth": 20.0},
             {"bytes": 1 << 20, "threads": 2, "bandwidth": 10.0},
             {"bytes": 1 << 24, "threads": 2, "bandwidth": 36.0}]
    assert bandwidth_for(probe, 1 << 22, 1) == pytest.approx(30.0)
    assert bandwidth_for(probe, 1 << 30, 1) == pytest.approx(20.0)
    assert bandwidth_for(probe, 1 << 22, 2) == pytest.approx(38.0)


# -------------------------------------------------------------------------- planner
def test_plan_measures_the_patch_as_the_engine_does():
    # Reference: the engine's own PSF measure (Engine.psf_info.patch_half).
    dirty, psf = synthetic_field(128, seed=1)
    e = Engine(psf, [0, 4, 8], image_shape=dirty.shape, threads=1)
    plan = cost.plan_run(dirty.shape, psf, [0, 4, 8], calibration=cost.DEFAULT_CALIBRATION)
    assert plan.psf_patch == e.psf_info.patch_half
    assert plan.psf_patch_source == "measured"
    assert plan.memory_terms["patches"] == e.patches.nbytes
    assigned = cost.plan_run((128, 128), (256, 256), [0, 4, 8])
    assert assigned.psf_patch == cost.DEFAULT_PSF_PATCH
    assert any("assumed" in m for m in assigned.messages)


def test_plan_flags_what_does_not_fit_and_check_refuses_it():
    base = cost.plan_run((512, 512), (1024, 1024), [0, 4, 8, 16], memory_available=1 << 40)
    assert base.fits
    assert cost.check_fits_memory(base) is base
    small = cost.plan_run((512, 512), (1024, 1024), [0, 4, 8, 16],
                          memory_available=base.memory_bytes // 2)
    assert not small.fits
    assert any("will not fit" in m for m in small.messages)
    with pytest.raises(cost.InsufficientMemoryError, match="GiB.*available"):
        cost.check_fits_memory(small)
    assert issubclass(cost.InsufficientMemoryError, ValueError)
    assert issubclass(cost.InsufficientMemoryError, MemoryError)


def test_plan_totals_add_up():
    p = cost.plan_run((256, 256), (512, 512), [0, 4, 8], max_components=1000, major_cycles=4,
                      threads=1)
    first = cost.predict_times(cost.run_geometry((256, 256), (512, 512), (0, 2, 4),
                                                 p.psf_patch), threads=1)
    assert p.minor_seconds == pytest.approx(1000 * p.iteration_seconds
                                            + 4 * p.minor_overhead_seconds
                                            + first["first_minor"])
    assert p.major_total_seconds == pytest.approx(4 * p.major_seconds + first["first_major"])
    assert p.total_seconds == pytest.approx(p.precompute_seconds + p.setup_seconds
                                            + p.minor_seconds + p.major_total_seconds
                                            + p.startup_seconds)
    warm = cost.plan_run((256, 256), (512, 512), [0, 4, 8], max_components=1000,
                         major_cycles=4, threads=1, fresh_process=False)
    assert warm.startup_seconds == 0.0
    assert warm.total_seconds == pytest.approx(p.total_seconds - p.startup_seconds)
    lo, hi = p.iteration_seconds_range
    assert lo <= p.iteration_seconds <= hi
    assert p["fits"] == p.fits
    assert json.loads(json.dumps(p.as_dict()))["scales"] == [0.0, 4.0, 8.0]


def test_threads_follow_amdahls_law():
    # Analytic: Amdahl's law with the calibration's parallel fraction.
    from skyscale._threads import resolve_threads
    cal = cost.DEFAULT_CALIBRATION
    one = cost.plan_run((256, 256), (512, 512), [0, 4], threads=1, calibration=cal)
    many = cost.plan_run((256, 256), (512, 512), [0, 4], threads=10 ** 4, calibration=cal)
    n = resolve_threads(None)
    f = cal["threads"]["iteration_parallel"]
    assert many.threads == n
    assert many.iteration_seconds == pytest.approx(one.iteration_seconds * ((1 - f) + f / n))
    assert (n == 1) or any("more than" in m for m in many.messages)


def test_scale_mix_all_on_one_scale_gives_the_range_ends():
    p = cost.plan_run((256, 256), (512, 512), [0, 4, 8], threads=1, psf_patch=10)
    lo = cost.plan_run((256, 256), (512, 512), [0, 4, 8], threads=1, psf_patch=10,
                       scale_mix="smallest")
    hi = cost.plan_run((256, 256), (512, 512), [0, 4, 8], threads=1, psf_patch=10,
                       scale_mix=[0, 0, 5])
    assert lo.iteration_seconds == pytest.approx(p.iteration_seconds_range[0])
    assert hi.iteration_seconds == pytest.approx(p.iteration_seconds_range[1])


def test_max_affordable_scales_stops_at_the_budget():
    shape, psf = (256, 256), (512, 512)
    peaks = [cost.plan_run(shape, psf, [0, 4, 8, 16][:k]).memory_bytes for k in (1, 2, 3, 4)]
    assert peaks == sorted(peaks)
    budget = int(0.5 * (peaks[1] + peaks[2]) * cost.MEMORY_HEADROOM)
    got = cost.max_affordable_scales(shape, psf, [16, 0, 8, 4], memory_budget=budget)
    assert got.scales == (0.0, 4.0) and got.limited_by == "memory"
    times = [cost.plan_run(shape, psf, [0, 4, 8, 16][:k]).total_seconds for k in (1, 2, 3, 4)]
    got = cost.max_affordable_scales(shape, psf, [0, 4, 8, 16], memory_budget=1 << 40,
                                     seconds_budget=0.5 * (times[2] + times[3]))
    assert got.scales == (0.0, 4.0, 8.0) and got.limited_by == "time"
    none = cost.max_affordable_scales(shape, psf, [0, 4], memory_budget=1)
    assert none.scales == () and none.plan is None


@pytest.mark.parametrize("kwargs,words", [
    (dict(image_shape=(0, 5)), "image_shape"),
    (dict(psf=(100, 100)), "smaller than the image"),
    (dict(scale_mix=[1, 2]), "scale_mix"),
    (dict(scale_mix="most"), "scale_mix"),
    (dict(threads=0), "threads"),
    (dict(max_components=-1), "max_components"),
    (dict(psf_patch=-3), "psf_patch"),
])
def test_plan_bad_input_names_the_argument(kwargs, words):
    args = dict(image_shape=(128, 128), psf=(256, 256), scales=[0, 4, 8])
    args.update(kwargs)
    with pytest.raises(ValueError, match=words):
        cost.plan_run(args.pop("image_shape"), args.pop("psf"), args.pop("scales"), **args)


# ---------------------------------------------------------------------- calibration
def test_calibration_file_is_preferred_and_linear(tmp_path, monkeypatch):
    # Analytic: the iteration model is linear in its coefficients.
    cal = json.loads(json.dumps(cost.DEFAULT_CALIBRATION))
    cal["iteration"] = {"fixed": 0.0, "per_pixel": 1e-9, "per_row": 0.0}
    path = tmp_path / "cal.json"
    cost.save_calibration(cal, str(path))
    monkeypatch.setenv(cost.CALIBRATION_ENV, str(path))
    one = cost.plan_run((128, 128), (256, 256), [0, 4], threads=1)
    cal["iteration"]["per_pixel"] = 2e-9
    cost.save_calibration(cal, str(path))
    two = cost.plan_run((128, 128), (256, 256), [0, 4], threads=1)
    assert two.iteration_seconds == pytest.approx(2 * one.iteration_seconds)
    assert str(path) in two.calibration


def test_broken_calibrations(tmp_path, monkeypatch, caplog):
    with pytest.raises(ValueError, match="does not exist"):
        cost.load_calibration(str(tmp_path / "nope.json"))
    bad = tmp_path / "bad.json"
    bad.write_text('{"iteration": {"speed": 1}}')
    with pytest.raises(ValueError, match="not a skyscale bench calibration"):
        cost.load_calibration(str(bad))
    monkeypatch.setenv(cost.CALIBRATION_ENV, str(bad))
    assert cost.load_calibration() == cost.DEFAULT_CALIBRATION
    assert "ignoring the calibration file" in caplog.text


def test_calibrate_inverts_the_model_on_noiseless_data():
    # Analytic: times made by the model from known coefficients are fitted back to them.
    true = json.loads(json.dumps(cost.DEFAULT_CALIBRATION))
    true["iteration"] = {"fixed": 1e-6, "per_pixel": 2e-9, "per_row": 3e-8}
    true["major"] = {"coefficient": 4e-11, "exponent": 1.2}
    points, regions = [], []
    for n in (256, 512):
        for scales in ([0], [0, 4], [0, 4, 8], [0, 4, 8, 16]):
            radii = ScaleSet(scales).support_radii
            g = cost.run_geometry((n, n), (2 * n, 2 * n), radii, 10)
            t = cost.predict_times(g, true)
            it = cost.predict_iteration(g, true)[0]
            rec = {"size": n, "image_shape": [n, n], "psf_shape": [2 * n, 2 * n],
                   "radii": list(radii), "psf_patch": 10, "itemsize": 4, "tile": 16,
                   "n_scales": len(scales), "region_shape": [n, n],
                   "scan_pixels": float(g.scan_pixels.mean()), "iteration_s": it,
                   "minor_components": 100, "precompute_s": t["precompute"],
                   "setup_s": t["setup"], "major_s": t["major"],
                   "major_first_s": t["major"] + t["first_major"],
                   "minor_s": t["minor_overhead"] + 100 * it,
                   "minor_first_s": t["minor_overhead"] + t["first_minor"] + 100 * it,
                   "traced_peak": cost.predict_memory(g, true)["peak"]}
            points.append(rec)
            # the same scales over a 64 x 64 sub-region: only the row-search term changes
            regions.append(dict(rec, region_shape=[64, 64], iteration_s=(
                1e-6 + 2e-9 * rec["scan_pixels"] + 3e-8 * len(scales) * 4)))
    cal = calibrate({"settings": {"sizes": [256, 512], "max_scales": 4}, "points": points,
                     "region_points": regions})
    for k, v in true["iteration"].items():
        assert cal["iteration"][k] == pytest.approx(v, rel=1e-6)
    for k, v in true["major"].items():
        assert cal["major"][k] == pytest.approx(v, rel=1e-6)
    assert cal["memory"]["scale"] == pytest.approx(true["memory"]["scale"])


# ------------------------------------------------------------------------- commands
def test_plan_command(capsys):
    assert main(["plan", "--size", "256", "--scales", "0,4,8", "--threads", "1"]) == 0
    assert "planned run" in capsys.readouterr().out
    assert main(["plan", "--size", "256", "--memory", "0.0001", "--require-fit"]) == 1
    assert "will not fit" in capsys.readouterr().out
    assert main(["plan", "--size", "256x512", "--psf-size", "512x1024", "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["image_shape"] == [256, 512]


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
    assert out["psf_shape"] == [128, 128] and out["psf_patch_source"] == "measured"


def test_bench_quick_writes_table_json_figure_and_calibration(tmp_path, capsys):
    out = tmp_path / "bench"
    cal = tmp_path / "cal.json"
    assert main(["bench", "--quick", "--out", str(out), "--calibration", str(cal)]) == 0
    text = capsys.readouterr().out
    assert "targets" in text and "fitted exponents" in text
    data = json.loads((out / "bench.json").read_text())
    assert {"points", "bandwidth", "calibration", "summary", "validation"} <= set(data)
    assert len(data["points"]) >= 4
    assert (out / "bench.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert cost.load_calibration(str(cal))["iteration"] == data["calibration"]["iteration"]
    assert main(["bench", "--quick", "--out", str(out)]) == 2      # refuses to overwrite
    assert "exists" in capsys.readouterr().err
