"""Numba kernels: arrays and scalars in, arrays and scalars out, no Python objects.

Each kernel ``_name`` has a Python wrapper ``name`` beside it that checks its inputs
(shapes, index ranges, finite scalars) and hands the kernel contiguous arrays of the
kernel's dtypes: inputs it only reads are converted, the array it updates in place is
refused unless it already is one (a converted copy would leave the caller's array
unchanged).  Each kernel has a plain numpy twin in ``tests/naive.py`` that it must
match.
"""

from skyscale.core.kernels.scale_loop import PARALLEL_MIN_ACTIVE, scale_loop
from skyscale.core.kernels.stamp import stamp_components

__all__ = ["PARALLEL_MIN_ACTIVE", "scale_loop", "stamp_components"]
