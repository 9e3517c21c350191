"""The command line end to end on the bundled demo observation."""

import json
import os

import numpy as np
import pytest
from astropy.io import fits

from skyscale.cli.commands import demo_data_dir, main

DEMO = demo_data_dir()


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo") / "out"
    code = main(["--quiet", "demo", "--out", str(out)])
    assert code == 0
    return out


def test_demo_writes_every_output(demo_run):
    for name in ("model.fits", "residual.fits", "restored.fits", "mask.fits",
                 "components.csv", "report.json", "convergence.png", "panels.png"):
        assert (demo_run / name).stat().st_size > 0, name


def test_headers_carry_units_and_beam(demo_run):
    # common practice: BUNIT, and BMAJ/BMIN (degrees, FWHM) and BPA on restored images.
    with fits.open(demo_run / "restored.fits", checksum=True) as h:
        hdr = h[0].header
        assert hdr["BUNIT"] == "Jy/beam"
        assert 0 < hdr["BMIN"] <= hdr["BMAJ"] < 1.0
        assert "BPA" in hdr and "CHECKSUM" in hdr
        assert any("skyscale" in str(v) for v in hdr.get("HISTORY", []))
    with fits.open(demo_run / "model.fits") as h:
        assert h[0].header["BUNIT"] == "Jy/pixel"
        assert h[0].header["CTYPE1"].startswith("RA")


def test_isolated_point_source_restored_flux_matches_its_model_flux(demo_run):
    # analytic: sum(restored) / beam area (pixels) over an aperture is the flux there.
    truth = json.load(open(os.path.join(DEMO, "truth.json")))
    src = next(p for p in truth["points"] if p["isolated"])
    restored = fits.getdata(demo_run / "restored.fits").astype(np.float64)
    model = fits.getdata(demo_run / "model.fits").astype(np.float64)
    hdr = fits.getheader(demo_run / "restored.fits")
    cell = abs(hdr["CDELT2"])
    area = np.pi * hdr["BMAJ"] * hdr["BMIN"] / (4 * np.log(2)) / cell ** 2
    yy, xx = np.mgrid[:model.shape[0], :model.shape[1]]
    fwhm = hdr["BMAJ"] / cell
    ap = np.hypot(yy - src["y"], xx - src["x"]) <= 2 * fwhm
    model_flux = model[ap].sum()
    assert model_flux == pytest.approx(src["flux_jy"], rel=0.1)
    assert restored[ap].sum() / area == pytest.approx(model_flux, rel=0.03)


def test_report_says_what_happened(demo_run):
    rep = json.load(open(demo_run / "report.json"))
    assert rep["stop"]["reason"]
    assert len(rep["history"]) >= 2
    assert sum(r["components"] for r in rep["per_scale"]) == rep["final"]["components"]
    assert rep["parameters"]["emission_mask"] is True


def test_figures_are_pngs_of_the_documented_size(demo_run):
    # reference library: matplotlib.image reads PNG.
    from matplotlib import image
    from skyscale.io.figures import CONVERGENCE_SIZE_PX, PANELS_SIZE_PX
    for name, size in (("convergence.png", CONVERGENCE_SIZE_PX), ("panels.png", PANELS_SIZE_PX)):
        img = image.imread(demo_run / name)
        assert (img.shape[1], img.shape[0]) == tuple(size)


def test_run_refuses_to_overwrite_and_exits_2(demo_run, capsys):
    d = os.path.join(DEMO, "dirty.fits")
    p = os.path.join(DEMO, "psf.fits")
    before = (demo_run / "model.fits").stat().st_mtime_ns
    code = main(["--quiet", "run", d, p, "--out", str(demo_run), "--max-components", "5"])
    assert code == 2
    assert "--overwrite" in capsys.readouterr().err
    assert (demo_run / "model.fits").stat().st_mtime_ns == before


def test_run_with_options_and_config(tmp_path):
    d = os.path.join(DEMO, "dirty.fits")
    p = os.path.join(DEMO, "psf.fits")
    cfg = tmp_path / "run.toml"
    cfg.write_text("[run]\nloop_gain = 0.2\nmax_components = 50\nplots = false\n")
    out = tmp_path / "o"
    code = main(["--quiet", "run", d, p, "--out", str(out), "--scales", "0,4,16",
                 "--threshold", "1e-3", "--config", str(cfg), "--max-components", "30"])
    assert code == 0
    rep = json.load(open(out / "report.json"))
    assert rep["parameters"]["loop_gain"] == 0.2          # from the file
    assert rep["parameters"]["max_components"] == 30      # the command line wins
    assert rep["final"]["components"] <= 30
    assert not (out / "panels.png").exists()
    rows = (out / "components.csv").read_text().splitlines()
    assert rows[0].split(",") == ["y", "x", "ra_deg", "dec_deg", "scale_px", "scale_arcsec",
                                  "flux_jy", "merged_iterations"]


@pytest.mark.parametrize("argv, text", [
    (["run", "missing.fits", "missing.fits", "--out", "x"], "missing.fits"),
    (["run", os.path.join(DEMO, "dirty.fits"), os.path.join(DEMO, "psf.fits"), "--out", "{tmp}",
      "--loop-gain", "3"], "--loop-gain"),
])
def test_bad_input_is_one_line_and_exit_2(argv, text, tmp_path, capsys):
    argv = [a.replace("{tmp}", str(tmp_path / "o")) for a in argv]
    assert main(["--quiet"] + argv) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and text in err[0]
