"""Numba kernels: arrays and scalars in, arrays and scalars out, no Python objects.

Each kernel ``_name`` has a Python wrapper ``name`` beside it that checks its inputs
and hands the kernel contiguous arrays; each has a plain numpy twin in
``tests/naive.py`` that it must match.
"""

from .clean_loop import LOOP_STOP_CODES, clean_loop, tile_maxima
from .stamp import stamp_components

__all__ = ["LOOP_STOP_CODES", "clean_loop", "tile_maxima", "stamp_components"]
