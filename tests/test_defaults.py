"""One home for the defaults: the API, the command line, TOML files, the checks and the
planner agree (all are read from `skyscale.core.option_table`).

These guard that the defaults are written once (common practice), not a published
value; the values themselves are documented in `skyscale.core.defaults`.
"""

import inspect

import pytest

from skyscale import Engine, deconvolve, plan_run
from skyscale.cost.model import estimate_counts
from skyscale.core.defaults import DEFAULTS, RUN_NOISE_THRESHOLD, CleanOptions
from skyscale.cli.commands import build_parser
from skyscale.core.validate import NUMBER_RULES, InputError
from skyscale.job.files import RUN_DEFAULTS
from skyscale.job.options import RUN_OPTION_KINDS, coerce_params, load_config
from skyscale.core.scales import ScaleSet, size_penalty_weights


def _default(func, name):
    return inspect.signature(func).parameters[name].default


@pytest.mark.parametrize("name", [f for f in CleanOptions.__dataclass_fields__])
def test_deconvolve_takes_every_default_from_the_options(name):
    assert _default(deconvolve, name) == getattr(DEFAULTS, name)


@pytest.mark.parametrize("func, names", [
    (Engine.__init__, ["scales", "scale_shape", "size_penalty", "loop_gain",
                       "scale_loop_depth"]),
    (Engine.minor_cycle, ["cycle_depth", "max_components", "extended_depth"]),
    (plan_run, ["max_components", "max_major_cycles", "cycle_depth", "scale_shape"]),
    (estimate_counts, ["max_components", "max_major_cycles", "cycle_depth",
                       "scale_loop_depth"]),
    (size_penalty_weights, ["size_penalty"]),
    (ScaleSet.weights, ["size_penalty"]),
])
def test_the_engine_and_planner_agree_with_the_options(func, names):
    for name in names:
        assert _default(func, name) == getattr(DEFAULTS, name), name


def test_every_option_of_the_algorithm_is_a_run_option():
    # scale_loop_depth was once settable only from Python
    assert set(DEFAULTS.as_dict()) <= set(RUN_DEFAULTS) == set(RUN_OPTION_KINDS)


def test_the_command_line_differs_only_in_its_stated_noise_stop_and_scales():
    from skyscale.core.defaults import RUN_SCALES
    differ = {name for name, value in DEFAULTS.as_dict().items()
              if RUN_DEFAULTS[name] != (tuple(value) if name == "scales" else value)}
    assert differ == {"noise_threshold", "scales"}
    assert RUN_DEFAULTS["noise_threshold"] == RUN_NOISE_THRESHOLD == 3.0
    assert RUN_DEFAULTS["scales"] == RUN_SCALES == "auto"


def _run_help():
    parser = build_parser()
    run = next(a for a in parser._subparsers._group_actions[0].choices.items()
               if a[0] == "run")[1]
    return {a.option_strings[0]: a for a in run._actions if a.option_strings}


@pytest.mark.parametrize("name", sorted(RUN_OPTION_KINDS))
def test_every_run_option_is_on_the_command_line_and_in_toml_files(name, tmp_path):
    flags = _run_help()
    flag = "--" + name.replace("_", "-")
    if RUN_OPTION_KINDS[name] == "bool":   # switches: --name, or --no-name for default on
        assert flag in flags or "--no-" + name.replace("_", "-") in flags, name
    else:
        assert flag in flags, name
    config = tmp_path / "run.toml"
    config.write_text(f"[run]\n{name} = \"x\"\n")
    assert set(load_config(config)) == {name}          # a known key, read as given


@pytest.mark.parametrize("name", sorted(n for n, rule in NUMBER_RULES.items()
                                        if n in DEFAULTS.as_dict()))
def test_a_value_deconvolve_refuses_the_command_line_and_planner_refuse(name):
    rule = NUMBER_RULES[name]
    bad = rule.get("low", 0) - 1 if "low" in rule else rule["high"] + 1
    with pytest.raises(InputError, match=name):
        coerce_params({name: str(bad)})
    if name in inspect.signature(plan_run).parameters:
        with pytest.raises(InputError, match=name):
            plan_run((64, 64), (128, 128), [0, 4], **{name: bad})


def test_the_help_shows_the_defaults_a_run_takes():
    flags = _run_help()
    for name in DEFAULTS.as_dict():
        if name != "scales":
            shown = f"{RUN_DEFAULTS[name]:g}" if isinstance(RUN_DEFAULTS[name], float) \
                else str(RUN_DEFAULTS[name])
            assert flags["--" + name.replace("_", "-")].help.endswith(f"[{shown}]"), name


def test_options_pass_on_as_keywords():
    opts = DEFAULTS.replace(loop_gain=0.05, scales=(0.0, 3.0))
    assert opts.as_dict()["loop_gain"] == 0.05 and opts.as_dict()["scales"] == [0.0, 3.0]
    assert set(opts.as_dict()) <= set(inspect.signature(deconvolve).parameters)
