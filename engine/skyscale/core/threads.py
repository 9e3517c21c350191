"""Threads: the count for one call (restored afterwards) and OpenMP's idle waiting.

OpenMP idle waiting.  When Numba's kernels run on OpenMP threads (the ``omp``
threading layer, libgomp), each thread spins after a parallel region, waiting for the
next, before it sleeps: by default up to hundreds of thousands of spins, or without end
with ``OMP_WAIT_POLICY=active``.  On a small machine those spinning threads compete
with the FFT threads, while a short spin keeps the minor cycle's back-to-back regions
fast.  `set_openmp_spin_default` therefore sets ``GOMP_SPINCOUNT`` to
`DEFAULT_GOMP_SPINCOUNT` unless the user has set it; libgomp reads it once, when Numba
first loads it (the first parallel kernel or thread-count call), so `thread_limit`, which
every run enters before its kernels, calls it first.  Importing skyscale changes nothing
in the environment.  A value the user has set wins.  `openmp_wait` says what is in
effect.
"""

import contextlib
import os

import numba

__all__ = ["usable_cores", "thread_limit", "resolve_threads", "DEFAULT_GOMP_SPINCOUNT", "SHORT_SPIN",
           "set_openmp_spin_default", "openmp_wait", "threads_in_effect"]

#: ``GOMP_SPINCOUNT`` skyscale sets when the user has not (spins before an idle OpenMP
#: thread sleeps).
DEFAULT_GOMP_SPINCOUNT = 20000

#: A spin count at most this is short: idle threads soon stop competing for the cores.
SHORT_SPIN = 1_000_000

_SET_BY_SKYSCALE = []      # [True] once set_openmp_spin_default has set the variable


def set_openmp_spin_default():
    """Set ``GOMP_SPINCOUNT`` to `DEFAULT_GOMP_SPINCOUNT` unless it is set already.

    Must run before Numba first loads OpenMP (libgomp reads the variable then);
    `thread_limit` does it.  Returns the value now in the environment.
    """
    if "GOMP_SPINCOUNT" not in os.environ:
        os.environ["GOMP_SPINCOUNT"] = str(DEFAULT_GOMP_SPINCOUNT)
        _SET_BY_SKYSCALE[:] = [True]
    return os.environ["GOMP_SPINCOUNT"]


def openmp_wait():
    """How idle OpenMP threads wait, as the environment says (what libgomp reads).

    Returns
    -------
    dict
        ``wait_policy`` (``OMP_WAIT_POLICY`` lower-cased, or None), ``spin_count``
        (``GOMP_SPINCOUNT`` as set, or None), ``set_by_skyscale`` (True when the spin
        count is skyscale's default, set by `set_openmp_spin_default`) and ``short``
        (True when idle threads sleep soon: a passive wait policy, or a numeric spin
        count of at most `SHORT_SPIN`).  Whether OpenMP is used at all depends on
        Numba's threading layer.
    """
    policy = os.environ.get("OMP_WAIT_POLICY")
    policy = policy.lower() if policy else None
    spin = os.environ.get("GOMP_SPINCOUNT")
    short = policy == "passive" or (spin is not None and spin.isdigit()
                                    and int(spin) <= SHORT_SPIN)
    by_us = bool(_SET_BY_SKYSCALE) and spin == str(DEFAULT_GOMP_SPINCOUNT)
    return {"wait_policy": policy, "spin_count": spin, "set_by_skyscale": by_us,
            "short": short}


def usable_cores():
    """Cores this process may run on (its CPU affinity where the system tells it, else
    every core the machine has): the one count of cores the rest uses."""
    if hasattr(os, "sched_getaffinity"):
        return max(len(os.sched_getaffinity(0)), 1)
    return max(os.cpu_count() or 1, 1)


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
    """Context manager: Numba kernels and ``scipy.fft`` calls inside use ``threads``
    threads (scipy.fft's default workers; its results do not depend on them).

    Sets OpenMP's idle spin first (`set_openmp_spin_default`), before Numba's first
    thread-count call loads OpenMP.
    """
    import scipy.fft
    set_openmp_spin_default()
    n = resolve_threads(threads)
    previous = numba.get_num_threads()
    numba.set_num_threads(n)
    try:
        with scipy.fft.set_workers(n):
            yield n
    finally:
        numba.set_num_threads(previous)


def threads_in_effect(threads, fft):
    """Threads a run used: Numba's count and its FFT backend's.

    Parameters
    ----------
    threads : int or None
        The threads asked for (None: all cores, as `resolve_threads` says).
    fft : FFT backend
        The run's backend (`skyscale.core.fft.get_backend`).

    Returns
    -------
    dict
        ``numba`` (the count `thread_limit` sets for the kernels), ``fft_backend``
        (``'scipy'``, ``'pyfftw'``, ``'numpy'`` or the injected backend's name) and
        ``fft_threads`` (numpy.fft runs on one thread; None when a backend does not say).
    """
    name = str(getattr(fft, "name", type(fft).__name__))
    n = 1 if name == "numpy" else getattr(fft, "threads", None)
    return {"numba": int(resolve_threads(threads)), "fft_backend": name,
            "fft_threads": None if n is None else int(n)}
