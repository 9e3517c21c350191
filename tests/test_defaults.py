"""One home for the defaults: the API, the command line and the planner agree.

These guard that the defaults are written once (common practice), not a published
value; the values themselves are documented in `skyscale.core.defaults`.
"""

import inspect

import pytest

from skyscale import Engine, deconvolve, plan_run
from skyscale.cost.model import estimate_counts
from skyscale.core.defaults import DEFAULTS, RUN_NOISE_THRESHOLD, CleanOptions
from skyscale.job.files import RUN_DEFAULTS
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


def test_the_command_line_differs_only_in_its_stated_noise_stop_and_scales():
    from skyscale.core.defaults import RUN_SCALES
    for name, value in DEFAULTS.as_dict().items():
        if name in RUN_DEFAULTS and name not in ("noise_threshold", "scales"):
            assert RUN_DEFAULTS[name] == value, name
    assert RUN_DEFAULTS["noise_threshold"] == RUN_NOISE_THRESHOLD
    assert RUN_DEFAULTS["scales"] == RUN_SCALES == "auto"


def test_options_pass_on_as_keywords():
    opts = DEFAULTS.replace(loop_gain=0.05, scales=(0.0, 3.0))
    assert opts.as_dict()["loop_gain"] == 0.05 and opts.as_dict()["scales"] == [0.0, 3.0]
    assert set(opts.as_dict()) <= set(inspect.signature(deconvolve).parameters)
