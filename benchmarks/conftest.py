"""Shared set-up of the benchmark suites: import paths and cached invented fields."""

import os
import sys

import pytest

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.dirname(HERE)
for path in (HERE, os.path.join(ROOT, "engine"), ROOT):
    if path not in sys.path:
        sys.path.insert(0, path)

from skyscale.cost.sweep import synthetic_field  # noqa: E402

#: Image sizes of the kernel and precompute suites.
SIZES = (512, 1024)
#: Scale sets by number of scales (the doubling ladder of skyscale.cost.sweep).
SCALE_SETS = {1: [0], 3: [0, 4, 8], 5: [0, 4, 8, 16, 32], 6: [0, 4, 8, 16, 32, 64]}
#: Working precisions, paired in every suite.
DTYPES = ("float32", "float64")
#: Thread counts of the kernel suite.
THREADS = (1, 2)

_fields = {}


@pytest.fixture(scope="session")
def field():
    """``field(n, seed=0) -> (dirty, psf)``: `synthetic_field`, made once per size."""
    def get(n, seed=0):
        key = (n, seed)
        if key not in _fields:
            _fields[key] = synthetic_field(n, seed=seed)
        return _fields[key]
    return get
