"""Set the thread count for one call and restore the previous one afterwards."""

import contextlib
import os

import numba

__all__ = ["thread_limit", "resolve_threads"]


def resolve_threads(threads):
    """Return the thread count to use: ``None`` means every core Numba may use."""
    if threads is None:
        return numba.config.NUMBA_NUM_THREADS
    threads = int(threads)
    if threads < 1:
        raise ValueError(f"threads is {threads}, expected an integer >= 1 or None for all cores")
    return min(threads, numba.config.NUMBA_NUM_THREADS, max(os.cpu_count() or 1, 1) * 4)


@contextlib.contextmanager
def thread_limit(threads):
    """Context manager: Numba kernels inside use ``threads`` threads."""
    n = resolve_threads(threads)
    previous = numba.get_num_threads()
    numba.set_num_threads(n)
    try:
        yield n
    finally:
        numba.set_num_threads(previous)
