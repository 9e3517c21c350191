"""A run that ends says truly where it stands: blank pixels, big masks, masks that miss
emission, thresholds above the peak, swapped or FFT-ordered inputs, beams in pixels.

Every field here is invented (`conftest.extended_field`: a Gaussian blob, a disk and a
bright point source seen through a ringed PSF, with noise of known deviation).  The
check values come from outside the project: the noise truth is astropy's ``mad_std``
(1.4826 MAD, Rousseeuw & Croux 1993) of the very noise that was added, and the
off-source rms of a residual that has not been cleaned into the noise equals that
noise (common practice: a residual at the noise is noise-like off the sources).
"""

import json
import os

import numpy as np
import pytest
from astropy.io import fits
from astropy.stats import mad_std
from scipy import ndimage

from conftest import NOISE, extended_field, gaussian_psf, observe
from smallfits import sky_header, write_fits

from skyscale import deconvolve
from skyscale.cli.commands import main
from skyscale.core.validate import InputError

N = 128
SCALES = [0, 4, 8, 16]


@pytest.fixture(scope="module")
def field():
    psf = gaussian_psf(N, sigma=2.0, ring=0.05, bowl=0.02)
    sky = extended_field(N)
    clean = observe(sky, psf)
    dirty = observe(sky, psf, noise=NOISE)
    noise = dirty.astype(np.float64) - clean
    emission = ndimage.binary_dilation(sky > NOISE / 100, iterations=6)
    return {"psf": psf, "sky": sky, "dirty": dirty, "emission": emission,
            # reference library: astropy's mad_std of the noise actually added
            "sigma": float(mad_std(noise))}


def _off_rms(residual, field, blank=None):
    off = ~field["emission"] if blank is None else (~field["emission"] & ~blank)
    return float(np.sqrt(np.mean(residual[off].astype(np.float64) ** 2))) / field["sigma"]


def _mean_in(residual, field, blank=None):
    inside = field["emission"] if blank is None else (field["emission"] & ~blank)
    return float(np.mean(residual[inside].astype(np.float64))) / field["sigma"]


def _blanked(field, blank):
    dirty = field["dirty"].copy()
    dirty[blank] = 0.0
    return dirty


def _blank_cases():
    one = np.zeros((N, N), bool)
    one[0, 0] = True
    rows = np.zeros((N, N), bool)
    rows[:12] = True
    yy, xx = np.mgrid[:N, :N]
    corners = np.hypot(yy - N / 2 + 0.5, xx - N / 2 + 0.5) > 0.55 * N
    return {"one-NaN": one, "NaN-rows": rows, "blank-corners": corners}


@pytest.mark.parametrize("case", ["one-NaN", "NaN-rows", "blank-corners"])
def test_blank_pixels_leave_the_noise_and_the_stop_intact(field, case):
    # Before: one blank pixel made the mask cover every other pixel, the noise was
    # "kept from the previous cycle" at 31x its value and the run stopped as 'noise'
    # far above it.  The noise must be within 10 % of the truth, measured over the
    # pixels with data, and the run must end at the noise off the sources.
    blank = _blank_cases()[case]
    r = deconvolve(_blanked(field, blank), field["psf"], scales=SCALES, noise_threshold=3,
                   blank=blank, restore=False)
    assert r.stop_reason == "noise"
    assert r.scale_noise[0] == pytest.approx(field["sigma"], rel=0.10)
    assert "previous" not in r.noise_region["how"][0]
    assert "pixels with data" in r.noise_region["where"]
    assert 0.9 <= _off_rms(r.residual, field, blank) <= 1.1
    # no component is centred where there is no data
    assert not blank[r.components["y"], r.components["x"]].any()


@pytest.mark.parametrize("case", ["one-NaN", "NaN-rows"])
def test_command_line_with_nan_pixels_ends_at_the_noise(field, case, tmp_path):
    blank = _blank_cases()[case]
    dirty = field["dirty"].copy()
    dirty[blank] = np.nan
    d = write_fits(tmp_path / "dirty.fits", dirty, sky_header(N))
    p = write_fits(tmp_path / "psf.fits", field["psf"], sky_header(2 * N))
    out = tmp_path / "out"
    assert main(["--quiet", "run", d, p, "--out", str(out), "--nonfinite", "mask",
                 "--scales", "0,4,8,16", "--no-plots"]) == 0
    rep = json.loads((out / "report.json").read_text())
    res = fits.getdata(out / "residual.fits")
    assert np.isnan(res[blank]).all()
    assert rep["stop"]["reason"] == "noise"
    assert rep["scale_noise"]["per_scale"][0]["noise"] == pytest.approx(field["sigma"],
                                                                        rel=0.10)
    assert 0.9 <= _off_rms(np.nan_to_num(res), field, blank) <= 1.1
    assert abs(_mean_in(np.nan_to_num(res), field, blank)) <= 0.3


def _big_mask(field, fraction):
    m = np.zeros((N, N), bool)
    side = int(round(N * np.sqrt(fraction)))
    o = (N - side) // 2
    m[o:o + side, o:o + side] = True
    return m | field["emission"]


def test_a_mask_over_nine_tenths_of_the_image_does_not_clean_noise(field, tmp_path):
    # The command line keeps its automatic mask inside the user's mask (the default):
    # the off-source rms stays at the noise and no plateau is left in the emission.
    mask = _big_mask(field, 0.9)
    assert mask.mean() > 0.9
    d = write_fits(tmp_path / "dirty.fits", field["dirty"], sky_header(N))
    p = write_fits(tmp_path / "psf.fits", field["psf"], sky_header(2 * N))
    m = write_fits(tmp_path / "mask.fits", mask.astype(np.float32), sky_header(N), bunit=None)
    out = tmp_path / "out"
    assert main(["--quiet", "run", d, p, "--out", str(out), "--mask", m,
                 "--scales", "0,4,8,16", "--no-plots"]) == 0
    rep = json.loads((out / "report.json").read_text())
    res = fits.getdata(out / "residual.fits")
    assert rep["stop"]["reason"] == "noise"
    assert rep["scale_noise"]["per_scale"][0]["noise"] == pytest.approx(field["sigma"],
                                                                        rel=0.10)
    assert 0.9 <= _off_rms(res, field) <= 1.1
    assert abs(_mean_in(res, field)) <= 0.3


def test_a_big_mask_alone_says_the_noise_could_not_be_measured_outside_it(field):
    mask = _big_mask(field, 0.9)
    r = deconvolve(field["dirty"], field["psf"], scales=SCALES, noise_threshold=3,
                   mask=mask, restore=False)
    text = " ".join(r.warnings)
    assert "leaves too few pixels outside it to measure the noise" in text
    assert "add the automatic mask" in text
    assert "whole image" in r.noise_region["how"][0]


def test_a_mask_that_misses_the_brightest_source_says_so(field):
    # The point source of 0.5 Jy at (19, 108) is left out of the mask.
    mask = field["emission"].copy()
    yy, xx = np.mgrid[:N, :N]
    mask[np.hypot(yy - 19, xx - 108) < 10] = False
    r = deconvolve(field["dirty"], field["psf"], scales=SCALES, noise_threshold=3,
                   mask=mask, restore=False)
    text = " ".join(r.warnings)
    assert "the mask leaves significant emission outside it" in text
    assert "(y, x) = (19, 108)" in text
    assert "widen the mask" in text
    # the figure in the warning is the residual outside the mask, in units of the noise
    outside = np.abs(r.residual[~mask]).max()
    assert outside / r.scale_noise[0] > 1000


def test_a_threshold_above_the_dirty_peak_says_so(field, tmp_path):
    peak = float(np.abs(field["dirty"]).max())
    r = deconvolve(field["dirty"], field["psf"], scales=SCALES, threshold=2 * peak,
                   restore=False)
    assert r.components.size == 0
    (text,) = [w for w in r.warnings if "above the dirty image's peak" in w]
    assert f"{2 * peak:.4g} Jy/beam" in text and f"{peak:.4g} Jy/beam" in text
    assert "0.6mJy" in text


def test_an_early_stop_above_the_level_says_so(field):
    r = deconvolve(field["dirty"], field["psf"], scales=SCALES, noise_threshold=3,
                   max_components=50, restore=False)
    assert r.stop_reason == "max_components"
    (text,) = [w for w in r.warnings if "still above the stop level" in w]
    assert "raise the component budget" in text
    ratio = np.max(np.array(r.scale_peaks) / np.array(r.scale_levels))
    assert f"{ratio:.2g} x its level" in text


# --- inputs: the one real error, with its likely cause, before any advice ---------------

@pytest.fixture()
def files(field, tmp_path):
    d = write_fits(tmp_path / "dirty.fits", field["dirty"], sky_header(N))
    p = write_fits(tmp_path / "psf.fits", field["psf"], sky_header(2 * N))
    return d, p, tmp_path


def _one_error(capsys):
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("skyscale: error:"), err
    return err[0]


def test_swapped_files_give_one_error_naming_the_likely_cause(files, capsys):
    d, p, tmp = files
    assert main(["run", p, d, "--out", str(tmp / "o"), "--scales", "auto"]) == 2
    line = _one_error(capsys)
    assert "other way round" in line and "dirty image comes first" in line


def test_swapped_files_of_one_size_give_one_error_naming_the_likely_cause(field, tmp_path,
                                                                         capsys):
    small = field["psf"][N // 2:N // 2 + N, N // 2:N // 2 + N]
    d = write_fits(tmp_path / "dirty.fits", field["dirty"], sky_header(N))
    p = write_fits(tmp_path / "psf.fits", small, sky_header(N))
    assert main(["run", p, d, "--out", str(tmp_path / "o"), "--scales", "auto"]) == 2
    line = _one_error(capsys)
    assert "is this the dirty image?" in line


def test_a_psf_in_fft_order_gives_one_error_naming_fftshift(field, tmp_path, capsys):
    d = write_fits(tmp_path / "dirty.fits", field["dirty"], sky_header(N))
    p = write_fits(tmp_path / "psf.fits", np.fft.ifftshift(field["psf"]), sky_header(2 * N))
    assert main(["run", d, p, "--out", str(tmp_path / "o"), "--scales", "auto"]) == 2
    line = _one_error(capsys)
    assert "numpy.fft.fftshift" in line
    with pytest.raises(InputError, match="numpy.fft.fftshift"):
        deconvolve(field["dirty"], np.fft.ifftshift(field["psf"]), scales="auto")


def test_a_beam_given_in_pixels_where_arcsec_are_expected_is_named(field, tmp_path, capsys):
    # cell 0.25 arcsec: the fitted beam (FWHM 2.3548 x 2 = 4.71 px, analytic) is 1.18
    # arcsec; '4.71,4.71,0' meant as pixels is 18.8 pixels, four times too wide.
    cell = 0.25
    d = write_fits(tmp_path / "dirty.fits", field["dirty"], sky_header(N, cell))
    p = write_fits(tmp_path / "psf.fits", field["psf"], sky_header(2 * N, cell))
    assert main(["run", d, p, "--out", str(tmp_path / "o"), "--scales", "0,4",
                 "--beam", "4.71,4.71,0", "--max-components", "20", "--no-plots"]) == 0
    err = capsys.readouterr().err
    assert "was the beam given in pixels?" in err
    import re
    ratio = float(re.search(r"is ([0-9.]+) times the beam fitted to the PSF", err).group(1))
    assert ratio == pytest.approx(4.0, rel=0.05)


# --- words that agree with the figures ----------------------------------------------

def test_a_beam_sized_scale_keeps_the_delta_scales_level_in_a_mask():
    # A scale whose smoothing leaves the noise as it is (sigma_k = sigma_0) has as many
    # noise peaks as the delta scale: it keeps the full multiple.  One whose smoothing
    # halves the noise goes the full extended depth deeper: 3 x 0.25 x 0.5 (arithmetic).
    from skyscale.core.levels import scale_levels
    same = scale_levels([1.0, 1.0], noise_threshold=3, masked=True, scales=[0, 4])
    assert same.tolist() == [3.0, 3.0]
    halved = scale_levels([1.0, 0.5], noise_threshold=3, masked=True, scales=[0, 16])
    assert halved.tolist() == [3.0, 0.375]


def test_the_stop_row_says_within_5_percent_when_a_peak_is_left_above_its_level():
    from types import SimpleNamespace
    from skyscale.cli.console import stop_words
    result = SimpleNamespace(stop_reason="noise", stop_description="", scales=(0.0, 8.0),
                             scale_peaks=[1.03, 0.5], scale_levels=[1.0, 0.6])
    report = {"parameters": {"stop_rule": "each scale stops at 3 x its own measured noise"}}
    text = stop_words(result, report)
    assert "came within 5 % of it" in text and "up to 3 % above it, on the 0 px scale" in text
    result.scale_peaks = [0.9, 0.5]
    assert stop_words(result, report).startswith("every scale reached its stop level:")


def test_a_stall_is_described_by_what_happened():
    from skyscale.core.result import DeconvolutionResult
    r = DeconvolutionResult(model=np.zeros((2, 2)), residual=np.zeros((2, 2)),
                            components=np.zeros(0), stop_reason="no_progress",
                            stop_detail="minor cycle 4 added nothing")
    assert r.stop_description.startswith("cleaning stalled")
    assert r.stop_description.endswith(": minor cycle 4 added nothing")
    assert "stopped lowering the peak residual" not in r.stop_description


def test_mask_regions_may_name_a_file(files, capsys):
    d, p, tmp = files
    regions = tmp / "regions.txt"
    regions.write_text("circle 40 40 30\ncircle 90 80 30\n")
    out = tmp / "o"
    assert main(["--quiet", "run", d, p, "--out", str(out), "--scales", "0,4",
                 "--mask-regions", str(regions), "--max-components", "20",
                 "--no-plots"]) == 0
    mask = fits.getdata(out / "mask.fits").astype(bool)
    yy, xx = np.mgrid[:N, :N]
    allowed = (np.hypot(xx - 40, yy - 40) <= 30) | (np.hypot(xx - 90, yy - 80) <= 30)
    assert not (mask & ~allowed).any()


def test_command_line_words_are_options_not_python(files, capsys):
    d, p, tmp = files
    out = tmp / "o"
    assert main(["--quiet", "run", d, p, "--out", str(out), "--scales", "0",
                 "--max-components", "5", "--no-plots"]) == 0
    capsys.readouterr()
    assert main(["run", d, p, "--out", str(out), "--scales", "0"]) == 2
    line = _one_error(capsys)
    assert "--overwrite" in line and "overwrite=True" not in line
    nan = tmp / "nan.fits"
    data = fits.getdata(d).copy()
    data[0, 0] = np.nan
    write_fits(nan, data, sky_header(N))
    assert main(["run", str(nan), p, "--out", str(tmp / "o2")]) == 2
    line = _one_error(capsys)
    assert "--nonfinite mask" in line and "skyscale." not in line


def test_plan_reads_scales_and_thresholds_as_run_does(files, capsys):
    # 4 and 8 arcsec on the test grid's 2 arcsec cell (smallfits.CELL) are 2 and 4
    # pixels (arithmetic); 0.6mJy is accepted as run accepts it (it used to be refused).
    d, p, tmp = files
    assert main(["plan", d, p, "--scales", "0,4arcsec,8arcsec", "--threshold", "0.6mJy",
                 "--json"]) == 0
    plan = json.loads(capsys.readouterr().out)
    assert plan["scales"] == pytest.approx([0.0, 2.0, 4.0])
    assert main(["plan", "--size", "256", "--scales", "0,2arcsec"]) == 2
    assert "no cell size" in _one_error(capsys)


def test_fits_history_records_the_values_in_effect_and_the_inputs(files):
    # FITS Standard 4.0: HISTORY cards; the report and the files must say the same.
    from skyscale.io.fits_cards import join_history
    d, p, tmp = files
    out = tmp / "o"
    assert main(["--quiet", "run", d, p, "--out", str(out), "--scales", "0,4",
                 "--max-components", "20", "--no-plots"]) == 0
    rep = json.loads((out / "report.json").read_text())
    history = join_history(fits.getheader(out / "model.fits")["HISTORY"])
    text = "\n".join(history)
    sigma = rep["emission_mask"]["sigma"]
    assert f"skyscale parameter emission_mask_sigma = {sigma}" in text
    assert f"skyscale parameter threads = {rep['threads']['numba']}" in text
    assert "skyscale parameter input_dirty = dirty.fits" in text
    assert "= None" not in text.replace("beam = None", "") \
        .replace("mask = None", "").replace("mask_regions = None", "")
    assert rep["image"]["cell_arcsec"] == 2.0      # the grid's 2 arcsec (smallfits.CELL)


def test_a_noise_kept_from_an_earlier_cycle_is_said():
    # outcome_warnings reads the result only: a run whose mask grew over most of the
    # image and whose noise was therefore kept says so, with the mask's coverage.
    from skyscale.core.outcome import outcome_warnings
    from skyscale.core.result import DeconvolutionResult
    mask = np.ones((10, 10), bool)
    mask[0, :5] = False                                   # 95 % of the image
    r = DeconvolutionResult(model=np.zeros((10, 10)), residual=np.zeros((10, 10)),
                            components=np.zeros(0), stop_reason="noise", mask=mask,
                            scale_noise=[1.0], scale_levels=[3.0], scale_peaks=[2.0],
                            noise_region={"how": ["kept: the lowest measured outside the "
                                                  "mask in an earlier cycle"]})
    (text,) = outcome_warnings(r, threshold=0.0, noise_threshold=3.0)
    assert "the mask covers 95 % of the image" in text and "kept: the lowest" in text


def test_the_api_recipe_with_a_big_user_mask_does_not_clean_noise(field):
    # The documented recipe for a user's mask from Python is the command line's
    # default: the automatic mask inside it (emission_mask='auto').  With a mask over
    # nine tenths of the image the off-source rms stays at the noise (0.9-1.1 sigma)
    # and no plateau is left in the emission (within +-0.3 sigma).
    mask = _big_mask(field, 0.9)
    r = deconvolve(field["dirty"], field["psf"], scales=SCALES, noise_threshold=3,
                   mask=mask, emission_mask="auto", restore=False)
    assert r.stop_reason == "noise"
    assert not (r.mask & ~mask).any()
    assert 0.9 <= _off_rms(r.residual, field) <= 1.1
    assert abs(_mean_in(r.residual, field)) <= 0.3
