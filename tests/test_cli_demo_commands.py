"""`skyscale suggest`, `run --scales auto` and `run --mask-regions` on the demo files.

Check values: the beam FWHM from astropy.modeling's Gaussian2D fit to the PSF's main lobe
(reference library); the rules of thumb of REFERENCES.md (common practice: include the
delta scale, start near the beam, roughly double, stay below the largest structure);
the emission's extent from scipy.ndimage labelling above 5 sigma, sigma = 1.4826 MAD
(Rousseeuw & Croux 1993); the circle's pixels from its definition (pixel centres within R).
"""

import csv
import json
import os
import re

import numpy as np
from astropy.io import fits
from astropy.modeling import fitting, models
from scipy import ndimage

from skyscale.cli.commands import demo_data_dir, main

DEMO = demo_data_dir()
DIRTY = os.path.join(DEMO, "dirty.fits")
PSF = os.path.join(DEMO, "psf.fits")


def _psf_fwhm_px():
    psf = fits.getdata(PSF).astype(np.float64)
    c = psf.shape[0] // 2
    cut = psf[c - 6:c + 7, c - 6:c + 7]
    y, x = np.mgrid[-6:7, -6:7]
    fit = fitting.LevMarLSQFitter()(models.Gaussian2D(1, 0, 0, 2, 2), x, y, cut)
    sig = np.sqrt(abs(fit.x_stddev.value * fit.y_stddev.value))
    return 2 * np.sqrt(2 * np.log(2)) * sig


def _largest_island_px():
    d = fits.getdata(DIRTY).astype(np.float64)
    sigma = 1.4826 * np.median(np.abs(d - np.median(d)))
    lab, n = ndimage.label(d > 5 * sigma)
    sizes = [max(s[0].stop - s[0].start, s[1].stop - s[1].start)
             for s in ndimage.find_objects(lab)]
    return max(sizes)


def _suggested(text):
    return [float(v) for v in re.search(r"use: --scales ([\d.,]+)", text).group(1).split(",")]


def test_suggest_proposes_a_set_that_follows_the_rules_of_thumb(capsys):
    assert main(["suggest", DIRTY, PSF]) == 0
    out = " ".join(capsys.readouterr().out.split())
    scales = _suggested(out)
    fwhm = _psf_fwhm_px()
    assert scales[0] == 0                                  # the delta scale is included
    assert 0.5 * fwhm <= scales[1] <= 1.5 * fwhm           # starts near the beam
    ratios = np.array(scales[2:]) / np.array(scales[1:-1])
    fuller = re.search(r"takes \d+ scales \(([\d, ]+) px\)", out)
    if fuller:      # three or four to start: evenly spaced, the doubling set offered
        doubling = [float(v) for v in fuller.group(1).split(",")]
        assert doubling[1] == scales[1] and doubling[-1] == scales[-1]
        steps = np.array(doubling[2:]) / np.array(doubling[1:-1])
        assert np.all((steps >= 1.5) & (steps <= 2.5))     # roughly doubling
        assert np.all(ratios >= 1.5) and np.ptp(np.log(ratios)) < 0.15
    else:
        assert np.all((ratios >= 1.5) & (ratios <= 2.5))   # roughly doubling
    assert scales[-1] <= _largest_island_px()              # below the largest structure


def test_suggest_check_flags_a_scale_above_the_emission(capsys):
    assert 64 > _largest_island_px()
    # spaces read as commas; 64 px breaks a rule, so the check exits 1
    assert main(["suggest", DIRTY, PSF, "--check", "0 4 64"]) == 1
    out = capsys.readouterr().out
    assert "scales 0,4,64" in out
    flagged = [line for line in out.splitlines() if "64 px" in line]
    assert flagged and not any("scale 4 px" in line for line in out.splitlines())


def test_run_with_auto_scales_uses_the_suggested_set(tmp_path, capsys):
    assert main(["suggest", DIRTY, PSF]) == 0
    proposed = _suggested(capsys.readouterr().out)
    out = tmp_path / "auto"
    assert main(["--quiet", "run", DIRTY, PSF, "--out", str(out), "--scales", "auto",
                 "--max-components", "150", "--no-plots"]) == 0
    rep = json.load(open(out / "report.json"))
    assert rep["parameters"]["scales"] == proposed
    assert rep["extra"]["scale_reasons"]
    used = {float(r["scale_px"]) for r in csv.DictReader(open(out / "components.csv"))}
    assert used <= set(proposed) and rep["final"]["components"] > 0


def test_run_with_mask_regions_cleans_only_inside_them(tmp_path):
    x0, y0, r = 150, 118, 30                  # a circle over the disk, pixels
    out = tmp_path / "regions"
    assert main(["--quiet", "run", DIRTY, PSF, "--out", str(out), "--mask-regions",
                 f"circle {x0} {y0} {r}", "--scales", "0,4,8", "--max-components", "300",
                 "--no-plots"]) == 0
    mask = fits.getdata(out / "mask.fits") > 0
    yy, xx = np.mgrid[:mask.shape[0], :mask.shape[1]]
    circle = np.hypot(xx - x0, yy - y0) <= r
    # the automatic mask (on by default) is kept inside the regions: never beyond them
    assert mask.any() and not (mask & ~circle).any()
    rows = list(csv.DictReader(open(out / "components.csv")))
    assert rows
    assert all(np.hypot(int(c["x"]) - x0, int(c["y"]) - y0) <= r for c in rows)
    model = fits.getdata(out / "model.fits")
    assert not model[~mask].any()
