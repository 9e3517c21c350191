"""``skyscale wideband`` on FITS cubes: outputs, keywords, component table, figure."""

import json

import numpy as np
import pytest
from astropy.io import fits
from astropy.table import Table

from skyscale.cli.commands import main
from wideband_fields import band, observe, power_law, psf_cube


def _cube_file(path, data, freqs, cell_deg=2 / 3600):
    h = fits.Header()
    ny, nx = data.shape[1:]
    for i, (ctype, crpix, crval, cdelt, unit) in enumerate((
            ("RA---SIN", nx // 2 + 1, 150.0, -cell_deg, "deg"),
            ("DEC--SIN", ny // 2 + 1, 30.0, cell_deg, "deg"),
            ("FREQ", 1, freqs[0], freqs[1] - freqs[0], "Hz")), start=1):
        h[f"CTYPE{i}"], h[f"CRPIX{i}"], h[f"CRVAL{i}"] = ctype, crpix, crval
        h[f"CDELT{i}"], h[f"CUNIT{i}"] = cdelt, unit
    h["BUNIT"] = "Jy/beam"
    fits.writeto(path, data.astype(np.float32), h)


def test_wideband_command_writes_every_output(tmp_path):
    freqs = band(8)
    psfs = psf_cube(freqs, n=128)
    sky = np.zeros((8, 64, 64))
    sky[:, 30, 34] = power_law(freqs, 0.5, -0.8)
    dirty = observe(sky, psfs, 2e-4, freqs)
    _cube_file(tmp_path / "cube.fits", dirty, freqs)
    _cube_file(tmp_path / "psf.fits", psfs, freqs)
    out = tmp_path / "out"
    code = main(["--quiet", "wideband", str(tmp_path / "cube.fits"), str(tmp_path / "psf.fits"),
                 "--out", str(out), "--terms", "2", "--scales", "0,4"])
    assert code == 0
    for name in ("model_t0.fits", "model_t1.fits", "restored_t0.fits",
                 "residual_t1.fits", "spectral-index.fits", "spectral-index-error.fits",
                 "components.csv", "wideband-report.json", "spectral-index.png"):
        assert (out / name).is_file(), name
    head = fits.getheader(out / "restored_t1.fits")
    assert head["TAYLTERM"] == 1
    assert head["TAYLNU0"] == pytest.approx(np.mean(freqs), rel=1e-12)   # equal weights
    assert "BMAJ" in head and head["BUNIT"] == "Jy/beam"
    alpha = fits.getdata(out / "spectral-index.fits")
    assert abs(alpha[30, 34] + 0.8) < 0.05
    assert np.isnan(alpha[0, 0])                      # blanked far from the source
    table = Table.read(out / "components.csv", format="ascii.csv")
    assert table.colnames == ["y", "x", "scale_px", "flux_jy", "term1_jy"]
    report = json.loads((out / "wideband-report.json").read_text())
    assert report["terms"] == 2 and report["spectral_maps"]["blanked_below_jy_per_beam"] > 0
    # the automatic mask is on by default: it holds the source and little else
    assert report["mask"]["automatic"] and 0 < report["mask"]["fraction"] < 0.5
    # a second run without --overwrite is refused (exit 2 for bad input, or 1)
    again = main(["--quiet", "wideband", str(tmp_path / "cube.fits"),
                  str(tmp_path / "psf.fits"), "--out", str(out)])
    assert again != 0


def test_wideband_command_needs_frequencies(tmp_path, capsys):
    data = np.zeros((3, 16, 16), np.float32)
    fits.writeto(tmp_path / "c.fits", data)
    fits.writeto(tmp_path / "p.fits", data)
    code = main(["wideband", str(tmp_path / "c.fits"), str(tmp_path / "p.fits"),
                 "--out", str(tmp_path / "o")])
    assert code == 2
    assert "--freqs" in capsys.readouterr().err
