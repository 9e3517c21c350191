"""What the command line says and leaves behind: the demo's ending and help, warnings on
stderr (also with --quiet), the same-size-PSF warning and header, --overwrite.

Check values: the exact residual from scipy.signal.fftconvolve with a PSF twice the
image's size (reference library), against which the residual of a run with a PSF of the
image's size must agree wherever its header says it is exact; the FITS header cards
through astropy.io.fits (reference library).
"""

import json
import os

import numpy as np
import pytest
from astropy.io import fits
from scipy.signal import fftconvolve

from skyscale.cli.commands import DEMO_SETTINGS, _DEMO_SOURCE, _params, build_parser, main

from conftest import gaussian_psf, observe
from smallfits import N, sky_header, write_fits, write_small_pair


@pytest.fixture(scope="module")
def pair(tmp_path_factory):
    return write_small_pair(str(tmp_path_factory.mktemp("inputs")))


@pytest.fixture(scope="module")
def same_size(tmp_path_factory):
    """A small field whose PSF (2N) has sidelobes beyond N / 2, given cut to N x N."""
    folder = tmp_path_factory.mktemp("same")
    psf2 = gaussian_psf(N, sigma=1.8, ring=0.04, bowl=0.05)   # sidelobes beyond N / 2
    yy, xx = np.mgrid[:N, :N].astype(np.float64)
    sky = 0.01 * np.exp(-((yy - 0.6 * N) ** 2 + (xx - 0.4 * N) ** 2) / (2 * 4.0 ** 2))
    sky[N // 3, N // 3] += 1.0
    dirty = observe(sky, psf2, noise=1e-3)
    lo = N - N // 2
    psf = psf2[lo:lo + N, lo:lo + N]
    assert psf[N // 2, N // 2] == psf2.max()
    d = write_fits(os.path.join(folder, "dirty.fits"), dirty, sky_header(N))
    p = write_fits(os.path.join(folder, "psf.fits"), psf, sky_header(N))
    return d, p, dirty, psf2


# --- the demo ------------------------------------------------------------------------

def test_demo_ends_at_its_stop_level_and_says_why(tmp_path, capsys):
    out = tmp_path / "demo"
    assert main(["demo", "--out", str(out)]) == 0
    cap = capsys.readouterr()
    rep = json.load(open(out / "report.json"))
    assert rep["stop"]["reason"] == "noise"
    assert rep["stop"]["rollbacks"] == 0
    text = " ".join(cap.out.split()).replace("│ ", "")
    assert "every scale reached its stop level" in text
    assert "3 x its own measured noise" in text
    for alarming in ("rolled back", "raised the peak", "diverging", "Traceback"):
        assert alarming not in cap.err and alarming not in cap.out


def test_demo_help_shows_the_demos_settings(capsys):
    assert main(["demo", "--help"]) == 0
    demo = " ".join(capsys.readouterr().out.split())
    assert main(["run", "--help"]) == 0
    run = " ".join(capsys.readouterr().out.split())
    assert "asks the scale advisor [0,4,8,16,32]" in demo
    assert "asks the scale advisor [auto]" in run
    assert "without turning noise into model [on]" in demo
    assert "without turning noise into model [on]" in run
    assert "'off' for no noise stop [3]" in demo


def test_demo_settings_yield_to_a_config_and_to_a_mask(tmp_path):
    cfg = tmp_path / "demo.toml"
    cfg.write_text("loop_gain = 0.2\n")
    args = build_parser().parse_args(["demo", "--config", str(cfg)])
    params, _ = _params(args, DEMO_SETTINGS, _DEMO_SOURCE)
    assert params["scales"] == [0, 4, 8, 16, 32] and params["emission_mask"] is True
    assert params["loop_gain"] == 0.2
    # a mask of the user's own bounds the automatic mask, which stays on
    args = build_parser().parse_args(["demo", "--mask-regions", "circle 10 10 5"])
    params, _ = _params(args, DEMO_SETTINGS, _DEMO_SOURCE)
    assert params["emission_mask"] is True and params["mask_regions"] == "circle 10 10 5"
    args = build_parser().parse_args(["demo", "--scales", "0,4"])
    assert _params(args, DEMO_SETTINGS, _DEMO_SOURCE)[0]["scales"] == "0,4"


# --- warnings: on stderr, once, in words, also with --quiet ---------------------------

def _warning_lines(err):
    return [line for line in err.splitlines() if line.startswith("skyscale: warning: ")]


def test_quiet_still_says_every_warning_on_stderr(same_size, tmp_path, capsys):
    d, p, _, _ = same_size
    code = main(["--quiet", "run", d, p, "--out", str(tmp_path / "q"), "--scales", "0",
                 "--no-plots"])
    assert code == 0
    cap = capsys.readouterr()
    assert cap.out == ""                                    # no tables, no bars
    lines = _warning_lines(cap.err)
    rep = json.load(open(tmp_path / "q" / "report.json"))
    assert rep["warnings"] and len(lines) == len(rep["warnings"])
    assert [line[len("skyscale: warning: "):] for line in lines] == \
        [" ".join(w.split()) for w in rep["warnings"]]


def test_same_size_psf_said_once_in_words_with_the_region(same_size, tmp_path, capsys):
    d, p, _, _ = same_size
    assert main(["run", d, p, "--out", str(tmp_path / "s"), "--scales", "0",
                 "--no-plots"]) == 0
    cap = capsys.readouterr()
    said = [line for line in _warning_lines(cap.err) if "smaller than twice" in line]
    assert len(said) == 1
    assert "smaller than twice" not in cap.out              # not again in the tables
    box = N - 1 - N // 2
    lo = (N - box - 1) // 2
    assert f"exact only within {box} pixels in y and {box} in x" in said[0]
    assert f"rows {lo} to {lo + box} and columns {lo} to {lo + box} (0-based)" in said[0]
    assert "(dy, dx)" not in said[0] and "{" not in said[0]
    rep = json.load(open(tmp_path / "s" / "report.json"))
    assert sum("smaller than twice" in w for w in rep["warnings"]) == 1


def test_same_size_psf_warning_comes_before_the_run(same_size, tmp_path):
    import logging
    from skyscale.job.files import run_files
    d, p, _, _ = same_size
    events = []

    class Grab(logging.Handler):
        def emit(self, record):
            events.append(("warning", record.getMessage()))

    log = logging.getLogger("skyscale")
    handler, level = Grab(level=logging.WARNING), log.level
    log.addHandler(handler)
    log.setLevel(logging.WARNING)
    try:
        run_files(d, p, str(tmp_path / "o"), {"scales": [0], "plots": False},
                  callback=lambda e: events.append(("progress", e["stage"])))
    finally:
        log.removeHandler(handler)
        log.setLevel(level)
    first = next(i for i, e in enumerate(events) if e[0] == "progress")
    said = [i for i, e in enumerate(events) if "smaller than twice" in str(e[1])]
    assert len(said) == 1 and said[0] < first


def test_residual_header_says_where_it_is_exact(same_size, tmp_path):
    # reference library: scipy's fftconvolve with the PSF twice the image's size gives the
    # exact residual; the run's residual must match it wherever EXACTREG says.
    d, p, dirty, psf2 = same_size
    out = tmp_path / "h"
    assert main(["--quiet", "run", d, p, "--out", str(out), "--scales", "0,4",
                 "--no-plots"]) == 0
    with fits.open(out / "residual.fits") as h:
        hdr, res = h[0].header, h[0].data.astype(np.float64)
    half = min(N // 2, N - 1 - N // 2)                     # the cut PSF covers these offsets
    assert hdr["EXACTRES"] is False
    restored = fits.getheader(out / "restored.fits")   # it holds the residual: marked too
    assert restored["EXACTRES"] is False and restored["EXACTREG"] == hdr["EXACTREG"]
    assert hdr["EXACTDY"] == half and hdr["EXACTDX"] == half
    assert hdr.comments["EXACTDY"] and hdr.comments["EXACTREG"]
    history = " ".join(str(v) for v in hdr["HISTORY"])
    assert f"residual exact only within {half} pixels in y and {half} in x" in history
    words = hdr["EXACTREG"].replace(",", "").split()        # rows a..b columns c..d
    (y0, y1), (x0, x1) = (tuple(int(v) for v in words[i].split("..")) for i in (1, 3))
    model = fits.getdata(out / "model.fits").astype(np.float64)
    exact = dirty.astype(np.float64) - fftconvolve(model, psf2.astype(np.float64),
                                                   mode="full")[N:2 * N, N:2 * N]
    scale = np.abs(dirty).max()
    inside = np.zeros((N, N), bool)
    inside[y0:y1 + 1, x0:x1 + 1] = True
    assert np.abs(res - exact)[inside].max() < 1e-5 * scale
    assert np.abs(res - exact)[~inside].max() > 1e-4 * scale    # the claim is not vacuous


def test_exact_residual_header_with_a_psf_twice_the_size(pair, tmp_path):
    out = tmp_path / "x"
    assert main(["--quiet", "run", pair[0], pair[1], "--out", str(out), "--scales", "0",
                 "--no-plots", "--max-components", "20"]) == 0
    hdr = fits.getheader(out / "residual.fits")
    assert hdr["EXACTRES"] is True and "EXACTDY" not in hdr
    assert any("exact everywhere" in str(v) for v in hdr["HISTORY"])


# --- --overwrite ----------------------------------------------------------------------

def test_overwrite_removes_the_earlier_runs_files_it_does_not_write(pair, tmp_path):
    out = tmp_path / "o"
    assert main(["--quiet", "run", pair[0], pair[1], "--out", str(out), "--scales", "0,4",
                 "--emission-mask", "--max-components", "30"]) == 0
    for name in ("mask.fits", "convergence.png", "panels.png"):
        assert (out / name).exists()
    # an earlier run's listed output of another kind, and the user's own files
    (out / "extra_old.fits").write_bytes(b"x")
    rep = json.load(open(out / "report.json"))
    rep["extra"]["outputs"]["old_kind"] = str(out / "extra_old.fits")
    (out / "report.json").write_text(json.dumps(rep))
    (out / "notes.txt").write_text("mine")
    (out / "mine.fits").write_bytes(b"y")
    assert main(["--quiet", "run", pair[0], pair[1], "--out", str(out), "--scales", "0",
                 "--no-plots", "--no-emission-mask", "--max-components", "10",
                 "--overwrite"]) == 0
    rep = json.load(open(out / "report.json"))
    outputs = rep["extra"]["outputs"]
    present = sorted(os.listdir(out))
    assert present == sorted([os.path.basename(v) for v in outputs.values()]
                             + ["mine.fits", "notes.txt"])
    assert set(outputs) == {"model", "residual", "restored", "components", "report"}
    assert sorted(rep["extra"]["removed_earlier_outputs"]) == \
        ["convergence.png", "extra_old.fits", "mask.fits", "panels.png"]


def test_overwrite_never_removes_this_runs_inputs(tmp_path):
    out = tmp_path / "o"
    out.mkdir()
    d, p = write_small_pair(str(out))                       # out/dirty.fits, out/psf.fits
    assert main(["--quiet", "run", d, p, "--out", str(out), "--scales", "0", "--no-plots",
                 "--max-components", "5"]) == 0
    rep = json.load(open(out / "report.json"))
    rep["extra"]["outputs"].update(dirty=d, psf=p)          # as a visibility run lists them
    (out / "report.json").write_text(json.dumps(rep))
    assert main(["--quiet", "run", d, p, "--out", str(out), "--scales", "0", "--no-plots",
                 "--max-components", "5", "--overwrite"]) == 0
    assert os.path.exists(d) and os.path.exists(p)
    assert "removed_earlier_outputs" not in json.load(open(out / "report.json"))["extra"]
