"""Every bad input we could think of: one InputError (API) or exit 2 with one line (CLI).

The messages are checked for the argument's name as the user wrote it; the command line
for exit code 2, a single stderr line and no traceback.  Check values: the rules of the
issue and of RULES.md (common practice for error messages); FITS structure from the
FITS Standard 4.0 (BITPIX values, 2880-byte blocks).
"""

import os
import subprocess
import sys
import warnings

import numpy as np
import pytest
from astropy import units as u
from astropy.io import fits

import skyscale
from skyscale import InputError, deconvolve
from skyscale.cli.commands import main
from skyscale.io.fits import read_image
from skyscale.job.options import coerce_params, load_config
from smallfits import CELL, N, sky_header, small_field, write_fits, write_small_pair
import skyscale.core.validate  # noqa: E402

DIRTY, PSF = small_field()


def _with(arr, idx, value):
    out = np.array(arr, copy=True)
    out[idx] = value
    return out


def _mask(fill, box=None):
    m = np.full(DIRTY.shape, fill, bool)
    if box is not None:
        m[box] = not fill
    return m


# (case id, keyword changes to deconvolve(DIRTY, PSF, ...), text the message must hold)
API_CASES = [
    ("nan-dirty", dict(dirty=_with(DIRTY, (3, 5), np.nan)), "dirty has 1 non-finite"),
    ("inf-psf", dict(psf=_with(PSF, (0, 0), np.inf)), "psf has 1 non-finite"),
    ("psf-off-centre", dict(psf=np.roll(PSF, 3, axis=1)), "psf peak is at"),
    ("psf-peak-far-from-1", dict(psf=PSF * 0.5), "psf peak is 0.5"),
    ("psf-negative", dict(psf=-PSF), "psf has a negative peak"),
    ("psf-zeros", dict(psf=np.zeros_like(PSF)), "psf is all zeros"),
    ("psf-smaller", dict(psf=PSF[40:80, 40:80]), "psf has shape (40, 40), smaller"),
    ("dirty-cube", dict(dirty=np.stack([DIRTY, DIRTY])), "dirty has shape (2, 64, 64)"),
    ("dirty-text", dict(dirty=np.full((4, 4), "a")), "dirty has dtype"),
    ("scales-negative", dict(scales=[0, -4]), "scales [0, -4] contain negative"),
    ("scales-duplicate", dict(scales=[0, 4, 4.0, 8]), "scales [0, 4, 4, 8] contain duplicates"),
    ("scales-text", dict(scales="0 4 8"), "scales is '0 4 8'"),
    ("scales-non-numeric", dict(scales=[0, "four"]), "scales [0, 'four'] are not all numbers"),
    ("scale-larger-than-image", dict(scales=[0, 80]), "scale 80 px is larger than the image"),
    ("angle-scales-no-cell", dict(scales=[0, 8] * u.arcsec), "cell_arcsec"),
    ("loop-gain-zero", dict(loop_gain=0.0), "loop_gain is 0.0"),
    ("loop-gain-big", dict(loop_gain=1.5), "loop_gain is 1.5"),
    ("loop-gain-text", dict(loop_gain="0.1"), "loop_gain is '0.1'"),
    ("loop-gain-bool", dict(loop_gain=True), "loop_gain is True"),
    ("threshold-negative", dict(threshold=-1.0), "threshold is -1.0"),
    ("threshold-nan", dict(threshold=float("nan")), "threshold is nan"),
    ("noise-threshold-negative", dict(noise_threshold=-3), "noise_threshold is -3"),
    ("max-components-zero", dict(max_components=0), "max_components is 0"),
    ("max-components-negative", dict(max_components=-5), "max_components is -5"),
    ("max-components-fraction", dict(max_components=2.5), "max_components is 2.5"),
    ("max-major-cycles-zero", dict(max_major_cycles=0), "max_major_cycles is 0"),
    ("size-penalty-one", dict(size_penalty=1.0), "size_penalty is 1.0"),
    ("size-penalty-negative", dict(size_penalty=-0.1), "size_penalty is -0.1"),
    ("cycle-depth-one", dict(cycle_depth=1.0), "cycle_depth is 1.0"),
    ("psf-patch-negative", dict(psf_patch=-2), "psf_patch is -2"),
    ("threads-zero", dict(threads=0), "threads is 0"),
    ("fft-unknown", dict(fft="fastest"), "fft is 'fastest'"),
    ("shape-unknown", dict(scale_shape="square"), "scale_shape is 'square'"),
    ("dtype-int", dict(dtype=np.int32), "dtype is int32"),
    ("mask-empty", dict(mask=_mask(False)), "mask allows no pixel"),
    ("mask-other-grid", dict(mask=np.ones((32, 32), bool)), "mask has shape (32, 32)"),
    ("mask-without-emission", dict(mask=_mask(False, (slice(0, 6), slice(58, 64)))),
     "mask excludes all emission"),
    ("scale-wider-than-mask", dict(scales=[0, 16], mask=_mask(False, (slice(10, 20),
                                                                       slice(10, 20)))),
     "scale 16 px is wider than the mask"),
]


@pytest.mark.parametrize("case, change, text", API_CASES, ids=[c[0] for c in API_CASES])
def test_api_refuses_bad_input_with_one_input_error(case, change, text):
    kw = dict(dirty=DIRTY, psf=PSF, scales=[0, 4], max_major_cycles=1, restore=False)
    kw.update(change)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        with pytest.raises(InputError) as info:
            deconvolve(kw.pop("dirty"), kw.pop("psf"), **kw)
    msg = str(info.value)
    assert text in msg
    assert "\n" not in msg
    assert isinstance(info.value, ValueError)      # code catching ValueError keeps working


def test_psf_peak_near_1_is_normalised_with_a_warning():
    with pytest.warns(UserWarning, match="psf peak is 1.05, not 1; it has been normalised"):
        r = deconvolve(DIRTY, PSF * 1.05, scales=[0], max_components=20, restore=False)
    assert r.components.size > 0


@pytest.mark.parametrize("dirty", [np.zeros((N, N), np.float32),
                                   np.full((N, N), 0.25, np.float32)], ids=["zero", "constant"])
def test_constant_dirty_image_returns_at_once_with_its_stop_reason(dirty):
    r = deconvolve(dirty, PSF, scales=[0, 4])
    assert r.stop_reason == "nothing_to_clean"
    assert r.stop_reason in skyscale.STOP_REASONS
    assert r.components.size == 0 and not r.model.any()
    np.testing.assert_array_equal(r.residual, dirty)
    assert r.beam is not None and r.restored is not None


def test_nonfinite_pixels_can_be_treated_as_masked():
    bad = _with(DIRTY, (slice(0, 4), slice(None)), np.nan)     # a blanked edge, 4 rows
    filled, mask, blank = skyscale.core.validate.mask_nonfinite(bad)
    assert int(blank.sum()) == 4 * N and not mask[:4].any() and mask[4:].all()
    r = deconvolve(filled, PSF, scales=[0, 4], mask=mask, max_components=50, restore=False)
    assert r.components.size > 0 and not r.model[:4].any()


# --------------------------------------------------------------------------- FITS files

def _fits_bytes(data, header=None):
    import io
    buf = io.BytesIO()
    fits.PrimaryHDU(np.asarray(data, np.float32), header=header).writeto(buf)
    return buf.getvalue()


def _header_with(data, **cards):
    raw = bytearray(_fits_bytes(data))
    for key, value in cards.items():
        i = raw.find(key.ljust(8).encode() + b"=")
        raw[i:i + 80] = f"{key.ljust(8)}= {value:>20}".ljust(80).encode()
    return bytes(raw)


FILE_CASES = [
    ("not-fits", b"hello, this is a text file\n" * 200, "is not a FITS file"),
    ("truncated", _fits_bytes(np.ones((64, 64)))[:2880 + 5000], "is truncated"),
    ("bad-bitpix", _header_with(np.ones((8, 8)), BITPIX=7), "BITPIX = 7"),
    ("bad-naxis", _header_with(np.ones((8, 8)), NAXIS1=-8), "NAXIS1"),
    ("huge-axes", _header_with(np.ones((8, 8)), NAXIS1=10 ** 9, NAXIS2=10 ** 9),
     "is truncated"),
    ("one-axis", _fits_bytes(np.ones(16)), "holds no 2-D image"),
    ("cube", _fits_bytes(np.ones((3, 8, 8))), "has 3 planes"),
    ("empty", b"", "is not a FITS file"),
]


@pytest.mark.parametrize("case, raw, text", FILE_CASES, ids=[c[0] for c in FILE_CASES])
def test_broken_fits_files_get_one_clear_error(case, raw, text, tmp_path):
    path = tmp_path / "in.fits"
    path.write_bytes(raw)
    with pytest.raises(InputError, match="dirty file") as info:
        read_image(path, name="dirty")
    assert text in str(info.value)


def test_missing_file_is_both_input_error_and_file_not_found(tmp_path):
    with pytest.raises(FileNotFoundError, match="does not exist") as info:
        read_image(tmp_path / "nope.fits")
    assert isinstance(info.value, InputError)


def test_file_too_large_for_memory_is_refused_before_reading(tmp_path, monkeypatch):
    import skyscale.io.fits
    path = write_fits(tmp_path / "big.fits", np.ones((64, 64)))
    monkeypatch.setattr(skyscale.io.fits, "available_memory", lambda: 1000)
    with pytest.raises(InputError, match=r"needs about .* GiB but .* is available"):
        read_image(path)


def test_unusable_wcs_is_named(tmp_path):
    hdr = sky_header(8)
    hdr["CTYPE1"] = "RA---XYZ"
    path = write_fits(tmp_path / "w.fits", np.ones((8, 8)), hdr)
    with pytest.raises(InputError, match="world-coordinate keywords"):
        read_image(path)


# ------------------------------------------------------------------------ command line

@pytest.fixture(scope="module")
def files(tmp_path_factory):
    d = tmp_path_factory.mktemp("bad")
    dirty, psf = write_small_pair(str(d))
    other = {}
    other["jy_pixel"] = write_fits(d / "model_like.fits", DIRTY, sky_header(N), "Jy/pixel")
    other["nan"] = write_fits(d / "nan.fits", _with(DIRTY, (0, 0), np.nan), sky_header(N))
    other["no_wcs"] = write_fits(d / "nowcs.fits", DIRTY)
    other["no_wcs_psf"] = write_fits(d / "nowcs_psf.fits", PSF)
    coarse = sky_header(2 * N, cell=2 * CELL)
    other["psf_other_grid"] = write_fits(d / "psf_coarse.fits", PSF, coarse)
    other["psf_small"] = write_fits(d / "psf_small.fits", PSF[32:96, 40:90], sky_header(50))
    other["cube"] = write_fits(d / "cube.fits", np.stack([DIRTY, DIRTY]))
    other["corner_mask"] = write_fits(d / "corner.fits",
                                      _mask(False, (slice(0, 10), slice(0, 10))), sky_header(N))
    other["empty_mask"] = write_fits(d / "empty.fits", _mask(False), sky_header(N))
    shifted = sky_header(N)
    shifted["CRPIX1"] += 7
    other["shifted_mask"] = write_fits(d / "shifted.fits", _mask(True), shifted)
    other["notfits"] = str(d / "notfits.fits")
    open(other["notfits"], "w").write("not a FITS file\n")
    other["a_file"] = str(d / "a_file.txt")
    open(other["a_file"], "w").write("x")
    for name, text in (("bad_toml", "[run]\nloop_gain = 0.1\nscales = [0, 4\n"),
                       ("text_gain", "[run]\nloop_gain = \"fast\"\n"),
                       ("bad_bool", "[run]\nemission_mask = \"maybe\"\n"),
                       ("unknown", "[run]\nloop_gian = 0.1\n")):
        other[name] = str(d / f"{name}.toml")
        open(other[name], "w").write(text)
    return dict(dirty=dirty, psf=psf, out=str(d / "out"), **other)


# (case id, arguments after "run" ({name} = a file of the fixture), text the line must hold)
CLI_CASES = [
    ("not-fits", ["{notfits}", "{psf}"], "dirty file"),
    ("threshold-negative", ["--threshold", "-1"], "--threshold is '-1'"),
    ("threshold-sigma", ["--threshold", "3sigma"], "use --noise-threshold 3"),
    ("noise-threshold-flux", ["--noise-threshold", "0.1mJy"], "use --threshold 0.1mJy"),
    ("max-components-zero", ["--max-components", "0"], "--max-components is '0'"),
    ("max-components-text", ["--max-components", "many"], "--max-components is 'many'"),
    ("loop-gain-text", ["--loop-gain", "abc"], "--loop-gain is 'abc'"),
    ("loop-gain-big", ["--loop-gain", "3"], "--loop-gain is '3'"),
    ("size-penalty-one", ["--size-penalty", "1"], "--size-penalty is '1'"),
    ("threads-zero", ["--threads", "0"], "--threads is '0'"),
    ("scale-unit", ["--scale-unit", "parsec"], "--scale-unit is 'parsec'"),
    ("scale-shape", ["--scale-shape", "square"], "--scale-shape is 'square'"),
    ("nonfinite-option", ["--nonfinite", "zero"], "--nonfinite is 'zero'"),
    ("scales-duplicate", ["--scales", "0,4,4"], "scales [0, 4, 4] contain duplicates"),
    ("scales-negative-spaces", ["--scales", "0 4 -8"], "--scales: scales [0, 4, -8]"),
    ("scales-word", ["--scales", "0,4,x"], "--scales is '0,4,x'"),
    ("scales-mixed-units", ["--scales", "0,4px,8arcsec"], "mixes pixels and angles"),
    ("scales-too-large", ["--scales", "0,100"], "scale 100 px is larger than the image"),
    ("scales-arcsec-no-wcs", ["{no_wcs}", "{no_wcs_psf}", "--scales", "0,8arcsec"],
     "--scales are in arcsec but the dirty image has no celestial WCS"),
    ("beam-in-degrees", ["--beam", "0.0012,0.0009,30"], "--beam major axis 0.0012 arcsec"),
    ("beam-two-values", ["--beam", "4,3"], "--beam is '4,3'"),
    ("beam-no-wcs", ["{no_wcs}", "{no_wcs_psf}", "--beam", "4,3,0"], "--beam is given"),
    ("out-is-file", ["--out", "{a_file}"], "--out"),
    ("out-not-writable", ["--out", "/proc/skyscale-out"], "--out /proc/skyscale-out cannot"),
    ("out-under-a-file", ["--out", "{a_file}/sub"], "a_file.txt is a file"),
    ("regions-off-image", ["--mask-regions", "circle 500 500 10"], "--mask-regions: regions"),
    ("mask-and-regions-apart", ["--mask", "{corner_mask}", "--mask-regions",
                                "circle 50 50 5"], "--mask and --mask-regions do not overlap"),
    ("mask-empty", ["--mask", "{empty_mask}"], "allows no pixel"),
    ("mask-shifted-grid", ["--mask", "{shifted_mask}"], "is on another grid: its pixels lie "
                                                       "up to 7 pixels"),
    ("dirty-jy-per-pixel", ["{jy_pixel}", "{psf}"], "BUNIT 'Jy/pixel'"),
    ("dirty-nan", ["{nan}", "{psf}"], "--nonfinite mask"),
    ("psf-other-grid", ["{dirty}", "{psf_other_grid}"], "psf cell size is"),
    ("psf-smaller", ["{dirty}", "{psf_small}"], "psf has shape (64, 50), smaller"),
    ("dirty-cube", ["{cube}", "{psf}"], "dirty file"),
    ("missing-file", ["nowhere.fits", "{psf}"], "nowhere.fits does not exist"),
    ("config-syntax", ["--config", "{bad_toml}"], "bad_toml.toml is not valid TOML"),
    ("config-text-number", ["--config", "{text_gain}"], "loop_gain in "),
    ("config-bad-bool", ["--config", "{bad_bool}"], "emission_mask in "),
    ("config-unknown", ["--config", "{unknown}"], "unknown options ['loop_gian']"),
    ("config-missing", ["--config", "nowhere.toml"], "--config nowhere.toml does not exist"),
    ("resume-without-model", ["--resume", "{a_file}"], "--resume"),
    ("unknown-option", ["--colour", "red"], "unrecognized arguments: --colour"),
]


def _argv(case_args, files):
    args = [a.format(**files) for a in case_args]
    if not args or args[0].startswith("-"):
        args = [files["dirty"], files["psf"]] + args
    if "--out" not in args:
        args += ["--out", files["out"]]
    return ["--quiet", "run"] + args + ["--no-plots"]


@pytest.mark.parametrize("case, args, text", CLI_CASES, ids=[c[0] for c in CLI_CASES])
def test_command_line_bad_input_is_one_line_and_exit_2(case, args, text, files, capsys):
    code = main(_argv(args, files))
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2, err
    assert len(err) == 1, err
    assert text in err[0]
    assert "Traceback" not in err[0]
    assert not os.path.exists(files["out"])             # nothing written, no folder made


def test_a_process_prints_no_traceback_without_debug_and_one_with_it(files):
    # The whole process, as a shell sees it (the in-process table cannot see a traceback
    # printed by the interpreter itself).
    cmd = [sys.executable, "-m", "skyscale.cli", "run", files["notfits"], files["psf"],
           "--out", files["out"]]
    env = dict(os.environ, PYTHONPATH=os.path.join(os.path.dirname(__file__), "..", "engine"))
    quiet = subprocess.run(cmd, capture_output=True, text=True, env=env, timeout=120)
    loud = subprocess.run(cmd + ["--debug"], capture_output=True, text=True, env=env,
                          timeout=120)
    assert quiet.returncode == 2 and quiet.stderr.count("\n") == 1
    assert "Traceback" not in quiet.stderr and "ignore_missing_simple" not in quiet.stderr
    assert "Traceback" in loud.stderr and "InputError" in loud.stderr


# -------------------------------------------------- values read as meant (config and CLI)

@pytest.mark.parametrize("given, expected", [
    (dict(emission_mask="false"), dict(emission_mask=False)),
    (dict(emission_mask="Yes"), dict(emission_mask=True)),
    (dict(plots=0), dict(plots=False)),
    (dict(loop_gain="0.1"), dict(loop_gain=0.1)),
    (dict(max_components="200"), dict(max_components=200)),
    (dict(max_components=300.0), dict(max_components=300)),
    (dict(threshold="0.1mJy"), dict(threshold=1e-4)),
    (dict(threshold="250 uJy/beam"), dict(threshold=2.5e-4)),
    (dict(threshold="2e-4"), dict(threshold=2e-4)),
    (dict(noise_threshold="3sigma"), dict(noise_threshold=3.0)),
    (dict(scales="0 4 8"), dict(scales=[0.0, 4.0, 8.0])),
    (dict(scales="0, 4;16"), dict(scales=[0.0, 4.0, 16.0])),
    (dict(scales=["0", 4, "8"]), dict(scales=[0.0, 4.0, 8.0])),
    (dict(scales="0,8arcsec,0.5arcmin"), dict(scales=[0.0, 8.0, 30.0], scale_unit="arcsec")),
    (dict(scales="0px,4px"), dict(scales=[0.0, 4.0], scale_unit="pixel")),
    (dict(beam="4.5,3.2,30"), dict(beam=[4.5, 3.2, 30.0])),
    (dict(beam="0.00125deg,0.0009deg,30"), dict(beam=[4.5, 3.24, 30.0])),
    (dict(beam=[4.5, 3.2, -10]), dict(beam=[4.5, 3.2, -10.0])),
    (dict(scale_unit="ARCSEC"), dict(scale_unit="arcsec")),
    (dict(mask_regions=["circle 1 2 3", "box 0 0 4 4"]),
     dict(mask_regions="circle 1 2 3; box 0 0 4 4")),
])
def test_values_are_read_as_meant(given, expected):
    got = coerce_params(given, {k: "cli" for k in given})
    for key, value in expected.items():
        assert got[key] == pytest.approx(value) if not isinstance(value, str) else \
            got[key] == value, key


def test_scales_with_a_unit_and_a_contrary_scale_unit_are_refused():
    with pytest.raises(InputError, match="drop one of the two"):
        coerce_params({"scales": "0,8arcsec", "scale_unit": "pixel"})


def test_config_values_as_text_reach_the_run(files, tmp_path):
    import json
    cfg = tmp_path / "run.toml"
    cfg.write_text('[run]\nemission_mask = "false"\nloop_gain = "0.2"\nmax_components = "40"\n'
                   'scales = "0 4"\nthreshold = "0.5mJy"\nplots = "no"\n')
    assert load_config(str(cfg))["emission_mask"] == "false"
    out = tmp_path / "o"
    assert main(["--quiet", "run", files["dirty"], files["psf"], "--out", str(out),
                 "--config", str(cfg)]) == 0
    p = json.load(open(out / "report.json"))["parameters"]
    assert (p["emission_mask"], p["loop_gain"], p["max_components"]) == (False, 0.2, 40)
    assert p["scales"] == [0.0, 4.0] and p["threshold"] == pytest.approx(5e-4)
    assert not (out / "mask.fits").exists() and not (out / "panels.png").exists()


def test_nonfinite_mask_option_runs_and_blanks_those_pixels(files, tmp_path):
    out = tmp_path / "o"
    assert main(["--quiet", "run", files["nan"], files["psf"], "--out", str(out),
                 "--nonfinite", "mask", "--max-components", "30", "--no-plots"]) == 0
    res = fits.getdata(out / "residual.fits")
    assert np.isnan(res[0, 0]) and np.isfinite(res[1:, 1:]).all()
    assert fits.getdata(out / "model.fits")[0, 0] == 0


def test_existing_outputs_are_refused_before_reading_inputs(files, tmp_path, capsys):
    out = tmp_path / "o"
    out.mkdir()
    (out / "model.fits").write_bytes(b"earlier")
    # the inputs are not even read: a missing dirty image is not what is reported
    code = main(["--quiet", "run", "nowhere.fits", files["psf"], "--out", str(out)])
    assert code == 2 and "--overwrite" in capsys.readouterr().err
    assert (out / "model.fits").read_bytes() == b"earlier"



def test_run_that_cannot_fit_is_refused_from_the_headers_before_reading(files, tmp_path,
                                                                      monkeypatch, capsys):
    import skyscale.cost.model
    import skyscale.job.files
    # enough memory to read the 64 x 64 image, far too little for the run's precompute
    monkeypatch.setattr(skyscale.cost.model, "available_memory", lambda: 200_000)

    def no_read(*args, **kwargs):
        raise AssertionError("the data were read before the memory check")

    monkeypatch.setattr(skyscale.job.files, "read_image", no_read)
    code = main(["--quiet", "run", files["dirty"], files["psf"], "--out", str(tmp_path / "o"),
                 "--scales", "0,4,8"])
    err = capsys.readouterr().err
    assert code == 2 and "the run needs about" in err and "available" in err


@pytest.mark.parametrize("extra, text", [
    (["--check", "0,8arcsec"], "give the scales to check in pixels"),
    (["--check", "0,4,4x"], "--check is '0,4,4x'"),
    (["--max-count", "many"], "--max-count"),
], ids=["check-in-arcsec", "check-word", "max-count-word"])
def test_suggest_bad_input_is_one_line_and_exit_2(extra, text, files, capsys):
    assert main(["suggest", files["dirty"], files["psf"]] + extra) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and text in err[0]


def test_suggest_refuses_a_file_that_is_not_fits(files, capsys):
    assert main(["suggest", files["notfits"], files["psf"]]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "is not a FITS file" in err[0]
