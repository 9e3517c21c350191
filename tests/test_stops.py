"""The one list of stop reasons: every level's reasons are named once and translate.

These guard the vocabulary (common practice: one name per reason), not a published
value.
"""

import ast
import importlib
import inspect

import pytest

from skyscale import STOP_REASONS, deconvolve
from skyscale.core import stops

# the module, not the function of the same name that the kernels package exports
kernel_module = importlib.import_module("skyscale.core.kernels.scale_loop")
driver_module = importlib.import_module("skyscale.core.driver")
run_checks_module = importlib.import_module("skyscale.core.run_checks")


def test_every_empty_minor_cycle_maps_to_a_run_stop_reason():
    for reason in stops.MINOR_STOP_REASONS:
        for level in stops.LEVEL_STOPS:
            assert stops.run_stop_after_empty_cycle(reason, level) in STOP_REASONS
    assert stops.run_stop_after_empty_cycle("threshold", "noise") == "noise"
    assert stops.run_stop_after_empty_cycle("empty", "noise") == "empty_mask"


def test_sub_loop_codes_name_the_sub_loop_reasons():
    assert set(stops.SCALE_LOOP_STOP_CODES.values()) == set(stops.SUB_LOOP_STOP_REASONS)
    # the compiled stop rule returns exactly these codes (and 0 to go on)
    func = kernel_module._stop_code
    src = inspect.getsource(getattr(func, "py_func", func))   # also with NUMBA_DISABLE_JIT
    returned = {int(line.split("return")[1]) for line in src.splitlines()
                if line.strip().startswith("return")}
    assert returned == {0} | set(stops.SCALE_LOOP_STOP_CODES)


def _reasons_the_code_gives():
    """String constants the run's code gives as a stop reason: assigned to ``stop``,
    passed as ``reason=``, or returned by a function whose name says stop."""
    found = set()
    for module in (driver_module, run_checks_module):
        for node in ast.walk(ast.parse(inspect.getsource(module))):
            values = []
            if isinstance(node, ast.Assign) and any(
                    isinstance(t, ast.Name) and t.id == "stop" for t in node.targets):
                values = [node.value]
            elif isinstance(node, ast.keyword) and node.arg == "reason":
                values = [node.value]
            elif isinstance(node, ast.FunctionDef) and "stop" in node.name:
                values = [r.value for r in ast.walk(node) if isinstance(r, ast.Return)]
            for value in values:
                found |= {c.value for c in ast.walk(value)
                          if isinstance(c, ast.Constant) and isinstance(c.value, str)}
    return found


def test_every_reason_a_run_gives_is_listed_and_every_listed_one_is_given():
    given = _reasons_the_code_gives()
    assert given == set(STOP_REASONS)


@pytest.mark.parametrize("options, reason", [
    (dict(threshold=0.01), "threshold"),
    (dict(noise_threshold=3.0), "noise"),
])
def test_a_run_at_its_level_says_which_level_stopped_it(options, reason):
    import numpy as np
    from skyscale import Beam
    y, x = np.mgrid[-16:17, -16:17]
    psf = np.exp(-(x ** 2 + y ** 2) / (2 * 1.5 ** 2)).astype(np.float32)   # Gaussian PSF
    noise = np.random.default_rng(5).normal(0.0, 1e-3, (17, 17)).astype(np.float32)
    dirty = psf[8:25, 8:25] + noise       # a point of 1 Jy at the centre, and noise
    r = deconvolve(dirty, psf, scales=[0], beam=Beam(3.5, 3.5, 0.0), **options)
    assert r.stop_reason == reason
    assert reason in stops.LEVEL_STOPS


def test_a_run_reports_a_listed_reason():
    import numpy as np
    from skyscale import Beam
    y, x = np.mgrid[-16:17, -16:17]
    psf = np.exp(-(x ** 2 + y ** 2) / (2 * 1.5 ** 2)).astype(np.float32)   # Gaussian PSF
    dirty = psf[8:25, 8:25].copy()          # a point of 1 Jy at the centre of a 17 x 17 image
    r = deconvolve(dirty, psf, scales=[0], threshold=0.01, beam=Beam(3.5, 3.5, 0.0))
    assert r.stop_reason in STOP_REASONS and r.stop_reason in stops.LEVEL_STOPS
