"""What `skyscale run` does by default, and the explicit ways to clean to a fixed level.

Check values: the robust noise sigma = 1.4826 MAD (Rousseeuw & Croux 1993), computed by
astropy.stats.mad_std (reference library) on the final residual away from the sources;
the stop level of a scale is its noise multiple times its own noise (skyscale's
documented rule, `skyscale.core.levels.scale_levels`: max(threshold, nu sigma)).
"""

import json
import os

import numpy as np
import pytest
from astropy.stats import mad_std
from astropy.io import fits

from skyscale.cli.commands import main
from skyscale.core.defaults import RUN_NOISE_THRESHOLD as DEFAULT_NOISE_THRESHOLD
from skyscale.job.files import RUN_DEFAULTS, merge_params, stop_rule
from skyscale.job.options import load_config

from smallfits import N, write_small_pair

#: The noise put into `smallfits.small_field` (standard deviation, Jy/beam).
FIELD_NOISE = 1e-3


@pytest.fixture(scope="module")
def pair(tmp_path_factory):
    return write_small_pair(str(tmp_path_factory.mktemp("inputs")))


def _run(pair, out, *extra):
    code = main(["--quiet", "run", pair[0], pair[1], "--out", str(out), "--scales", "0,4",
                 "--no-plots", *extra])
    assert code == 0
    with open(os.path.join(out, "report.json"), encoding="utf-8") as fh:
        return json.load(fh)


@pytest.fixture(scope="module")
def default_run(pair, tmp_path_factory):
    out = tmp_path_factory.mktemp("default") / "out"
    return out, _run(pair, out)


def test_default_is_a_noise_stop_at_three_sigma():
    assert DEFAULT_NOISE_THRESHOLD == 3.0
    assert RUN_DEFAULTS["noise_threshold"] == DEFAULT_NOISE_THRESHOLD
    assert merge_params({})["noise_threshold"] == 3.0


def test_default_run_stops_at_the_noise_and_says_so(default_run):
    out, rep = default_run
    assert rep["stop"]["reason"] == "noise"
    assert rep["parameters"]["noise_threshold"] == 3.0
    assert rep["parameters"]["threshold"] == 0.0
    assert "3 x its own measured noise" in rep["parameters"]["stop_rule"]
    # the rule itself: the delta scale's level is 3 times its noise (no mask given)
    delta = rep["scale_noise"]["per_scale"][0]
    assert delta["scale_px"] == 0 and delta["level"] == pytest.approx(3 * delta["noise"])
    assert delta["peak"] <= delta["level"] * 1.05


def test_default_run_does_not_clean_into_the_noise(default_run):
    # reference library: astropy's mad_std (1.4826 MAD) of the residual away from the
    # sources is the field's noise; cleaning to 0 would pull it well below.
    out, _ = default_run
    res = fits.getdata(os.path.join(out, "residual.fits")).astype(np.float64)
    yy, xx = np.mgrid[:N, :N]
    far = (np.hypot(yy - N // 4, xx - N // 4) > 8) & (np.hypot(yy - 3 * N // 4, xx - 2 * N // 3) > 8) \
        & (np.hypot(yy - 0.6 * N, xx - 0.4 * N) > 14)
    assert mad_std(res[far]) == pytest.approx(FIELD_NOISE, rel=0.25)


def test_run_help_states_the_default_noise_stop(capsys):
    assert main(["run", "--help"]) == 0
    text = " ".join(capsys.readouterr().out.split())
    assert "'off' for no noise stop [3]" in text
    assert "Given without --noise-threshold it is a fixed level" in text


def test_threshold_alone_is_a_fixed_level(pair, tmp_path):
    rep = _run(pair, tmp_path / "fixed", "--threshold", "0.02")
    assert rep["parameters"]["threshold"] == 0.02
    assert rep["parameters"]["noise_threshold"] is None
    assert rep["stop"]["reason"] == "threshold"
    assert "fixed threshold 0.02 Jy/beam, no noise stop" in rep["parameters"]["stop_rule"]
    levels = [r["level"] for r in rep["scale_noise"]["per_scale"]]
    assert levels == pytest.approx([0.02, 0.02])


def test_threshold_with_noise_threshold_keeps_both(pair, tmp_path):
    rep = _run(pair, tmp_path / "both", "--threshold", "1e-5", "--noise-threshold", "4")
    assert rep["parameters"]["noise_threshold"] == 4.0
    assert rep["parameters"]["threshold"] == 1e-5
    assert "larger of 1e-05 Jy/beam and 4 x" in rep["parameters"]["stop_rule"]


def test_noise_threshold_off_on_the_command_line_and_in_toml(tmp_path):
    assert merge_params({"noise_threshold": "off"})["noise_threshold"] is None
    cfg = tmp_path / "run.toml"
    cfg.write_text('[run]\nnoise_threshold = "off"\nmax_components = 5\n')
    merged = merge_params(load_config(str(cfg)), {"noise_threshold": str(cfg)})
    assert merged["noise_threshold"] is None and merged["threshold"] == 0.0
    assert "no stop level" in stop_rule(merged)
    from skyscale.core.validate import InputError
    with pytest.raises(InputError, match="or off for no noise stop"):
        merge_params({"noise_threshold": "of"}, {"noise_threshold": "cli"})


def test_noise_threshold_off_run(pair, tmp_path):
    rep = _run(pair, tmp_path / "off", "--noise-threshold", "off", "--max-components", "40")
    assert rep["parameters"]["noise_threshold"] is None
    assert rep["stop"]["reason"] == "max_components"


def test_toml_threshold_alone_is_a_fixed_level(pair, tmp_path):
    cfg = tmp_path / "run.toml"
    cfg.write_text("[run]\nthreshold = \"20mJy\"\n")
    rep = _run(pair, tmp_path / "toml", "--config", str(cfg))
    assert rep["parameters"]["noise_threshold"] is None
    assert rep["parameters"]["threshold"] == pytest.approx(0.02)


def test_merging_twice_keeps_the_stop_rule():
    for given in ({}, {"threshold": 1e-3}, {"noise_threshold": "off"},
                  {"threshold": 1e-3, "noise_threshold": 2}):
        once = merge_params(given)
        assert merge_params(once) == once


def test_resume_keeps_the_first_runs_stop(pair, tmp_path, default_run):
    out = tmp_path / "fixed"
    _run(pair, out, "--threshold", "0.02", "--max-components", "3")
    assert main(["--quiet", "run", "--resume", str(out), "--max-components", "5"]) == 0
    rep = json.load(open(out / "report.json"))
    assert rep["parameters"]["noise_threshold"] is None
    assert rep["parameters"]["threshold"] == 0.02
    # a default (noise-stop) run resumed keeps its noise stop; a threshold given on
    # resume alone makes the resumed part a fixed level
    src, _ = default_run
    again = tmp_path / "again"
    assert main(["--quiet", "run", "--resume", str(src), "--out", str(again)]) == 0
    assert json.load(open(again / "report.json"))["parameters"]["noise_threshold"] == 3.0
    third = tmp_path / "third"
    assert main(["--quiet", "run", "--resume", str(src), "--out", str(third),
                 "--threshold", "0.05"]) == 0
    assert json.load(open(third / "report.json"))["parameters"]["noise_threshold"] is None
