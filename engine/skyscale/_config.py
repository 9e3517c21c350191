"""Compile-time settings shared by every Numba kernel.

The fastmath flags live here and nowhere else.  ``nnan`` and ``ninf`` are left out
on purpose: NaN handling matters for user data.
"""

__all__ = ["FASTMATH", "JIT_OPTIONS", "PARALLEL_JIT_OPTIONS"]

FASTMATH = frozenset({"nsz", "arcp", "contract", "afn", "reassoc"})

JIT_OPTIONS = dict(cache=True, nogil=True, fastmath=set(FASTMATH))
PARALLEL_JIT_OPTIONS = dict(JIT_OPTIONS, parallel=True)
