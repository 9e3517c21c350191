"""Tests of skyscale.report: the JSON run report and atomic writing."""

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

from skyscale.report import (REPORT_SCHEMA_VERSION, build_report, file_sha256,
                             write_report)
from skyscale.result import CycleRecord, DeconvolutionResult, empty_components

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
            "import numpy as np; from skyscale.report import build_report; "
            "from skyscale.result import DeconvolutionResult, empty_components; "
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
    assert {r["scale"]: r["components"] for r in rows} == dict(zip(scales.tolist(),
                                                                   counts.tolist()))
    for row in rows:
        sel = comps["scale"] == np.float32(row["scale"])
        assert math.isclose(row["flux"], float(comps["flux"][sel].sum()))
        assert row["scale_arcsec"] == pytest.approx(row["scale"] * 2.0)
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
    assert report["per_scale"] == [{"scale": 0.0, "components": 0, "flux": 0.0,
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
