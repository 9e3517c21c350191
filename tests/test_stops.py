"""The one list of stop reasons: every level's reasons are named once and translate.

These guard the vocabulary (common practice: one name per reason), not a published
value.
"""

import importlib
import inspect

import pytest

from skyscale import STOP_REASONS, deconvolve
from skyscale.core import stops

# the module, not the function of the same name that the kernels package exports
kernel_module = importlib.import_module("skyscale.core.kernels.scale_loop")


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


def test_level_stops_are_run_reasons():
    assert set(stops.LEVEL_STOPS) <= set(STOP_REASONS)


@pytest.mark.parametrize("reason", sorted(STOP_REASONS))
def test_each_run_reason_has_a_sentence(reason):
    assert len(STOP_REASONS[reason].split()) >= 4


def test_a_run_reports_a_listed_reason():
    import numpy as np
    from skyscale import Beam
    y, x = np.mgrid[-16:17, -16:17]
    psf = np.exp(-(x ** 2 + y ** 2) / (2 * 1.5 ** 2)).astype(np.float32)   # Gaussian PSF
    dirty = psf[8:25, 8:25].copy()          # a point of 1 Jy at the centre of a 17 x 17 image
    r = deconvolve(dirty, psf, scales=[0], threshold=0.01, beam=Beam(3.5, 3.5, 0.0))
    assert r.stop_reason in STOP_REASONS and r.stop_reason in stops.LEVEL_STOPS
