"""Compile-time settings shared by every Numba kernel.

The fastmath flags live here and nowhere else.  ``nnan`` and ``ninf`` are left out
on purpose: NaN handling matters for user data.
"""

__all__ = ["FASTMATH", "JIT_OPTIONS", "PARALLEL_JIT_OPTIONS"]

# "contract" (fused multiply-add) and "reassoc" are left out too, so that every kernel
# matches its numpy twin in tests/naive.py bit for bit.
FASTMATH = frozenset({"nsz", "arcp", "afn"})

JIT_OPTIONS = dict(cache=True, nogil=True, fastmath=set(FASTMATH))
PARALLEL_JIT_OPTIONS = dict(JIT_OPTIONS, parallel=True)
