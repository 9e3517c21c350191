"""Tests of skyscale.io.report: the JSON run report and atomic writing."""

import hashlib
import json
import math
import os
import pathlib
import platform
import subprocess
import sys
import types

import numpy as np
import pytest

from skyscale.io.report import (REPORT_SCHEMA_VERSION, REPORT_UNITS, build_report, file_sha256,
                                write_report)
from skyscale.core.result import CycleRecord, DeconvolutionResult, empty_components

ENGINE = pathlib.Path(__file__).resolve().parents[1] / "engine"

REQUIRED_KEYS = {"schema_version", "created_utc", "software", "machine", "inputs",
                 "image", "parameters", "timings_s", "history", "per_scale", "final",
                 "stop", "beam", "warnings", "extra"}


def make_result(*, n=16, with_mask=True, with_beam=True, seed=7):
    """A small invented run: 9 components on two scales, three major cycles."""
    rng = np.random.default_rng(seed)
    comps = empty_components(9)
    comps["y"] = rng.integers(0, n, 9)
    comps["x"] = rng.integers(0, n, 9)
    comps["scale"] = [0, 0, 0, 0, 0, 4, 4, 4, 0]
    comps["flux"] = rng.uniform(0.01, 0.5, 9)
    model = np.zeros((n, n), np.float32)
    np.add.at(model, (comps["y"], comps["x"]), comps["flux"].astype(np.float32))
    residual = rng.normal(0.0, 0.01, (n, n)).astype(np.float32)
    residual[3, 4] = -0.2                                  # outside the mask
    residual[8, 8] = 0.07                                  # inside the mask
    mask = np.zeros((n, n), bool)
    mask[4:12, 4:12] = True
    history = [CycleRecord(0, 0, 1.0, 0.1, 0.0),
               CycleRecord(1, 5, np.float32(0.3), np.float64(0.03), 1.2, 5, "cycle_depth"),
               CycleRecord(2, 9, 0.07, 0.01, 1.9, 4, "threshold")]
    return DeconvolutionResult(
        model=model, residual=residual, components=comps, stop_reason="threshold",
        history=history, scales=(0.0, 4.0), restored=model + residual,
        beam=types.SimpleNamespace(major=np.float32(5.0), minor=3.0, pa=25.0)
        if with_beam else None,
        mask=mask if with_mask else None,
        parameters={"loop_gain": np.float32(0.1), "max_components": np.int64(1000),
                    "scales": np.array([0.0, 4.0]), "cycle_depth": 0.2,
                    "output": pathlib.Path("/tmp/run"), "budget_s": float("inf")},
        timings={"precompute": np.float64(0.01), "minor": 0.2, "major": 0.05},
        warnings=["an invented warning"])


def walk(value):
    """Yield every leaf of a nested dict/list."""
    if isinstance(value, dict):
        for v in value.values():
            yield from walk(v)
    elif isinstance(value, list):
        for v in value:
            yield from walk(v)
    else:
        yield value


def test_round_trips_through_json_and_has_every_key():
    report = build_report(make_result(), cell_arcsec=1.5, threads=2,
                          extra={"note": np.int16(3)})
    # Reference: the standard json library, strict (no NaN/inf), reads back the same.
    text = json.dumps(report, allow_nan=False)
    assert json.loads(text) == report
    assert REQUIRED_KEYS <= set(report)
    assert report["schema_version"] == REPORT_SCHEMA_VERSION
    assert all(type(leaf) in (str, int, float, bool, type(None)) for leaf in walk(report))
    assert report["extra"] == {"note": 3}
    assert report["machine"]["threads"] == 2
    # Reference: os.cpu_count and platform are the source of the machine fields.
    assert report["machine"]["cpu_count"] == os.cpu_count()


def test_parameters_converted_to_plain_python():
    params = build_report(make_result())["parameters"]
    assert params["max_components"] == 1000 and type(params["max_components"]) is int
    assert type(params["loop_gain"]) is float
    assert math.isclose(params["loop_gain"], 0.1, rel_tol=1e-6)
    assert params["scales"] == [0.0, 4.0]
    assert params["output"] == "/tmp/run"
    assert params["budget_s"] is None                      # inf is not strict JSON


def test_explicit_parameters_replace_the_results():
    report = build_report(make_result(), parameters={"loop_gain": 0.3})
    assert report["parameters"] == {"loop_gain": 0.3}


def test_versions_match_the_libraries():
    import numpy

    software = build_report(make_result())["software"]
    # Reference: numpy's own version attribute and the platform module.
    assert software["numpy"] == numpy.__version__
    assert software["python"] == platform.python_version()
    for name in ("numba", "scipy", "astropy", "pyfftw", "rich", "matplotlib", "dask"):
        assert isinstance(software[name], str) and software[name]
    assert software["skyscale"]                            # a version or "unknown"


def test_building_a_report_imports_no_heavy_library():
    # A fresh interpreter: the versions are read from package metadata, so building
    # a report must not load any optional library that was not loaded already.
    code = ("import sys; sys.path.insert(0, sys.argv[1]); "
            "import numpy as np; from skyscale.io.report import build_report; "
            "from skyscale.core.result import DeconvolutionResult, empty_components; "
            "heavy = ('dask', 'matplotlib', 'pyfftw', 'rich', 'astropy.wcs'); "
            "before = {m for m in heavy if m in sys.modules}; "
            "r = DeconvolutionResult(np.zeros((4, 4)), np.zeros((4, 4)), "
            "empty_components(), 'threshold'); build_report(r); "
            "print(sorted(m for m in heavy if m in sys.modules and m not in before))")
    out = subprocess.run([sys.executable, "-c", code, str(ENGINE)], check=True,
                         capture_output=True, text=True).stdout
    assert out.strip() == "[]"


def test_per_scale_counts_match_the_component_table():
    result = make_result()
    rows = build_report(result, cell_arcsec=2.0)["per_scale"]
    comps = result.components
    # Reference: numpy.unique on the component table itself.
    scales, counts = np.unique(comps["scale"], return_counts=True)
    assert {r["scale_px"]: r["components"] for r in rows} == dict(zip(scales.tolist(),
                                                                   counts.tolist()))
    for row in rows:
        sel = comps["scale"] == np.float32(row["scale_px"])
        assert math.isclose(row["flux_jy"], float(comps["flux"][sel].sum()))
        assert row["scale_arcsec"] == pytest.approx(row["scale_px"] * 2.0)
        assert row["listed"] is True
    assert sum(r["flux_fraction"] for r in rows) == pytest.approx(1.0)


def test_components_on_an_unlisted_scale_are_reported():
    result = make_result()
    result.scales = (0.0,)                                 # 4-pixel rows not listed
    rows = build_report(result)["per_scale"]
    assert sum(r["components"] for r in rows) == len(result.components)
    assert [r["listed"] for r in rows] == [True, False]


def test_history_final_stop_and_beam():
    result = make_result()
    report = build_report(result, cell_arcsec=0.5)
    assert [h["components"] for h in report["history"]] == [0, 5, 9]
    assert report["history"][1]["minor_stop"] == "cycle_depth"
    final = report["final"]
    inside = result.residual[result.mask].astype(np.float64)
    assert final["region"] == "mask"
    assert final["peak_residual"] == pytest.approx(0.07, rel=1e-6)   # not the -0.2 outside
    assert final["rms_residual"] == pytest.approx(float(np.sqrt(np.mean(inside ** 2))))
    assert final["model_flux"] == pytest.approx(float(result.components["flux"].sum()),
                                                rel=1e-6)
    assert final["components"] == 9 and final["major_cycles"] == 2
    assert report["stop"]["reason"] == "threshold"
    assert report["stop"]["description"] == result.stop_description
    beam = report["beam"]
    assert (beam["major_px"], beam["minor_px"], beam["pa_deg"]) == (5.0, 3.0, 25.0)
    # Reference: astropy.units converts pixels to arcsec with a pixel scale.
    import astropy.units as u
    scale = u.pixel_scale(0.5 * u.arcsec / u.pixel)
    assert beam["major_arcsec"] == pytest.approx((5.0 * u.pixel).to_value(u.arcsec, scale))
    # Reference: the area of a 2-D Gaussian, pi * major * minor / (4 ln 2).
    assert beam["area_px"] == pytest.approx(math.pi * 15.0 / (4 * math.log(2)))
    assert report["warnings"] == ["an invented warning"]


def test_without_mask_beam_or_cell():
    report = build_report(make_result(with_mask=False, with_beam=False))
    assert report["beam"] is None
    assert report["final"]["region"] == "image"
    assert report["final"]["peak_residual"] == pytest.approx(0.2, rel=1e-6)
    assert "scale_arcsec" not in report["per_scale"][0]


def test_empty_run():
    result = DeconvolutionResult(np.zeros((4, 4)), np.zeros((4, 4)), empty_components(),
                                 "empty_mask", scales=(0.0,))
    report = build_report(result)
    assert report["per_scale"] == [{"scale_px": 0.0, "components": 0, "flux_jy": 0.0,
                                    "listed": True, "flux_fraction": None}]
    assert report["final"]["components"] == 0 and report["history"] == []
    json.dumps(report, allow_nan=False)


@pytest.mark.parametrize("kwargs, name", [
    ({"cell_arcsec": -1.0}, "cell_arcsec"), ({"cell_arcsec": "big"}, "cell_arcsec"),
    ({"threads": 0}, "threads"), ({"threads": 2.5}, "threads"),
])
def test_bad_numbers_name_the_argument(kwargs, name):
    with pytest.raises(ValueError, match=name):
        build_report(make_result(), **kwargs)


def test_bad_kinds_name_the_argument():
    with pytest.raises(TypeError, match="result"):
        build_report({"model": 1})
    with pytest.raises(TypeError, match="inputs"):
        build_report(make_result(), inputs=["dirty.fits"])
    with pytest.raises(TypeError, match="extra"):
        build_report(make_result(), extra=3)


def test_inputs_recorded_with_hash(tmp_path):
    f = tmp_path / "dirty.fits"
    f.write_bytes(b"invented bytes")
    report = build_report(make_result(), inputs={
        "dirty": {"path": f, "shape": (np.int64(16), 16), "sha256": file_sha256(f)}})
    assert report["inputs"]["dirty"] == {"path": str(f), "shape": [16, 16],
                                         "sha256": hashlib.sha256(b"invented bytes")
                                         .hexdigest()}


def test_sha256_matches_hashlib_across_chunks(tmp_path):
    data = np.random.default_rng(0).bytes((1 << 20) + 7)   # more than one read
    f = tmp_path / "psf.bin"
    f.write_bytes(data)
    # Reference: hashlib over the whole bytes at once.
    assert file_sha256(f) == hashlib.sha256(data).hexdigest()
    with pytest.raises(FileNotFoundError, match="missing.bin"):
        file_sha256(tmp_path / "missing.bin")


def test_write_report_round_trip_and_refuses_overwrite(tmp_path):
    report = build_report(make_result())
    path = tmp_path / "report.json"
    assert write_report(path, report) == path
    with open(path, encoding="utf-8") as fh:
        assert json.load(fh) == report                    # reference: json
    with pytest.raises(FileExistsError, match=r"report\.json.*overwrite=True"):
        write_report(path, {"other": 1})
    assert json.loads(path.read_text())["schema_version"] == REPORT_SCHEMA_VERSION
    write_report(path, {"other": np.float32(2.0)}, overwrite=True)
    assert json.loads(path.read_text()) == {"other": 2.0}
    assert sorted(p.name for p in tmp_path.iterdir()) == ["report.json"]  # no temp left


def test_write_report_missing_folder(tmp_path):
    with pytest.raises(FileNotFoundError, match="folder"):
        write_report(tmp_path / "nope" / "report.json", {})


# --- what a user reads in a run's report: values used, with units ---------------------

def test_timings_add_up_to_the_run():
    import datetime as dt
    t0 = dt.datetime(2026, 1, 1, tzinfo=dt.timezone.utc)
    result = make_result()                          # precompute 0.01, minor 0.2, major 0.05
    report = build_report(result, started=t0, deconvolved=t0 + dt.timedelta(seconds=2),
                          finished=t0 + dt.timedelta(seconds=3.5))
    tm = report["timings_s"]
    # Reference: datetime arithmetic (standard library) on the clock times given.
    assert tm["total"] == pytest.approx(3.5)
    assert tm["outputs"] == pytest.approx(1.5)
    assert tm["other"] == pytest.approx(2.0 - 0.26)
    parts = ("precompute", "minor", "major", "other", "outputs")
    assert math.fsum(tm[k] for k in parts) == pytest.approx(tm["total"])
    assert set(report["timings_about"]) == set(tm)
    assert report["clock_utc"]["start"] == t0.isoformat()
    # Without clock times the report says the total is not recorded (no silent gap).
    bare = build_report(result)
    assert "total" not in bare["timings_s"] and "not recorded" in bare["timings_about"]["total"]


def test_threads_and_units_are_recorded_for_a_bare_result():
    report = build_report(make_result(), threads=3, parameters={"threads": None})
    assert report["threads"]["numba"] == 3 and report["machine"]["threads"] == 3
    assert report["parameters"]["threads"] == 3          # the count in effect, not null
    assert report["threads"]["requested"].startswith("all cores")
    for key in REPORT_UNITS:                             # every unit names a real field
        section, field = key.split(".")
        assert section in report


def test_summary_labels_where_the_peak_is_measured_and_gives_arcsec(monkeypatch):
    import io

    import astropy.units as u
    from rich.console import Console

    from skyscale.cli import console
    buf = io.StringIO()
    monkeypatch.setattr(console, "_out", Console(file=buf, width=200, highlight=False))
    result = make_result()
    result.beam.major = 5.0
    report = build_report(result, cell_arcsec=0.5)
    console.summary(result, {"components": "c.csv"}, report, 1.0)
    text = buf.getvalue()
    # Reference: astropy.units with a 0.5 arcsec/pixel scale: 5 px = 2.5 arcsec, 3 px = 1.5.
    scale = u.pixel_scale(0.5 * u.arcsec / u.pixel)
    major = (5.0 * u.pixel).to_value(u.arcsec, scale)
    minor = (3.0 * u.pixel).to_value(u.arcsec, scale)
    assert f"5 x 3 px = {major:.3g} x {minor:.3g} arcsec" in text
    assert f"4, {(4.0 * u.pixel).to_value(u.arcsec, scale):.3g}" in text   # scale 4 px
    assert "peak residual (in the mask)" in text and "0.07 Jy/beam" in text
    assert "peak residual (whole image)" in text and "0.2 Jy/beam" in text
    assert "rows: the 9 components merged by pixel and scale" in text
    buf = io.StringIO()
    monkeypatch.setattr(console, "_out", Console(file=buf, width=200, highlight=False))
    bare = make_result(with_mask=False)
    console.summary(bare, {}, build_report(bare), 1.0)
    text = buf.getvalue()
    assert "peak residual (whole image)" in text and "0.2 Jy/beam" in text
    assert "peak residual (in the mask)" not in text and "arcsec" not in text


@pytest.fixture(scope="module")
def small_runs(tmp_path_factory):
    from smallfits import write_small_pair

    from skyscale.job.files import run_files
    folder = tmp_path_factory.mktemp("report_runs")
    dirty, psf = write_small_pair(str(folder))
    runs = {}
    for name, params in (("arcsec", {"scales": "0,8arcsec", "emission_mask": True}),
                         ("one_thread", {"scales": [0, 4], "emission_mask": True,
                                         "emission_mask_sigma": 7.0, "threads": 1})):
        params = dict(params, max_components=200, noise_threshold=3.0, plots=False)
        runs[name] = run_files(dirty, psf, str(folder / name), params) + (str(folder / name),)
    return dirty, runs


def test_report_of_a_run_gives_scales_and_beam_in_pixels_and_arcsec(small_runs):
    import astropy.units as u
    from astropy.io import fits
    from astropy.wcs import WCS
    from astropy.wcs.utils import proj_plane_pixel_scales

    dirty, runs = small_runs
    result, _, report, out = runs["arcsec"]
    # Reference: the cell size from astropy's WCS of the dirty image, and astropy.units.
    cell = (proj_plane_pixel_scales(WCS(fits.getheader(dirty))) * u.deg).to_value(u.arcsec)
    assert cell[0] == pytest.approx(cell[1])
    scale = u.pixel_scale(cell[0] * u.arcsec / u.pixel)
    rep = json.load(open(os.path.join(out, "report.json")))
    assert rep == json.loads(json.dumps(report))
    assert rep["image"]["cell_arcsec"] == pytest.approx(cell[0])
    assert rep["scales"]["pixels"] == pytest.approx([0.0, (8 * u.arcsec).to_value(u.pixel,
                                                                                 scale)])
    assert rep["scales"]["arcsec"] == pytest.approx([0.0, 8.0])
    assert rep["scales"]["requested_unit"] == "arcsec"
    # The parameters list pixels and now say so (they said 'arcsec' beside pixels).
    assert rep["parameters"]["scale_unit"] == "pixel"
    assert rep["parameters"]["scales"] == pytest.approx(rep["scales"]["pixels"])
    beam = rep["beam"]
    assert beam["major_arcsec"] == pytest.approx(
        (beam["major_px"] * u.pixel).to_value(u.arcsec, scale))
    assert beam["area_arcsec2"] == pytest.approx(
        beam["area_px"] * (1 * u.pixel).to_value(u.arcsec, scale) ** 2)
    assert beam["source"] == "fitted to the PSF"
    assert [r["scale_arcsec"] for r in rep["per_scale"]] == pytest.approx([0.0, 8.0])
    # The peak residual says where it was measured, and the whole image's is beside it.
    residual = fits.getdata(os.path.join(out, "residual.fits")).astype(np.float64)
    mask = fits.getdata(os.path.join(out, "mask.fits")) > 0
    final = rep["final"]
    assert final["region"] == "mask" and str(int(mask.sum())) in final["measured_in"]
    assert final["peak_residual"] == pytest.approx(float(np.abs(residual[mask]).max()))
    assert final["peak_residual_image"] == pytest.approx(float(np.abs(residual).max()))


def test_report_of_a_run_gives_the_threads_and_mask_level_in_effect(small_runs):
    import numba

    _, runs = small_runs
    for name, requested, sigma in (("arcsec", None, 5.0), ("one_thread", 1, 7.0)):
        result, _, rep, out = runs[name]
        threads = rep["threads"]
        # Reference: numba's own thread count (NUMBA_NUM_THREADS is what "all cores"
        # means to numba), and scipy.fft's workers, one per CPU by default (os.cpu_count).
        expect = numba.config.NUMBA_NUM_THREADS if requested is None else requested
        assert threads["numba"] == expect == rep["parameters"]["threads"]
        assert rep["machine"]["threads"] == expect
        # The default backend, scipy.fft, takes one worker per CPU when none is given.
        assert threads["fft_backend"] == "scipy"
        assert threads["fft_threads"] == (os.cpu_count() if requested is None
                                          else requested)
        # The emission mask's level: the sigma used (EmissionMask's documented default
        # 5, or the option) and, per scale, the level in Jy/beam = sigma x noise.
        em = rep["emission_mask"]
        assert em["used"] is True and em["sigma"] == sigma
        assert rep["parameters"]["emission_mask_sigma"] == sigma
        assert [r["scale_px"] for r in em["per_scale"]] == pytest.approx(result.scales)
        for row in em["per_scale"]:
            assert row["level_jy_per_beam"] == pytest.approx(sigma * row["noise_jy_per_beam"])
        # The unsmoothed scale's noise against astropy's MAD-based standard deviation of
        # the final residual outside the mask (Rousseeuw & Croux 1993: 1.4826 MAD).
        from astropy.stats import mad_std
        outside = result.residual[~result.mask].astype(np.float64)
        assert em["per_scale"][0]["noise_jy_per_beam"] == pytest.approx(mad_std(outside),
                                                                        rel=0.15)
        assert em["mask_pixels"] == int(result.mask.sum())
        tm = rep["timings_s"]
        assert math.fsum(tm[k] for k in ("precompute", "minor", "major", "other",
                                         "outputs")) == pytest.approx(tm["total"])
