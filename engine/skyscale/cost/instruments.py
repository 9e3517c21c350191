"""Measuring tools of the sweep: peak memory, CPU clocks, what the engine's minor cycle did.

`PeakMemory` measures the peak traced allocations (tracemalloc) and resident set of a
block; `cpu_clock` makes the engine's own timings CPU seconds; `record_sub_loops` records
each sub-loop, how it was applied (an FFT update or a direct one), and the beams and
box convolvers made; `fft_probe` times single FFTs.  Measurement only: nothing here
changes a result.  `skyscale.cost.sweep` uses them; nothing here prints.
"""

import contextlib
import logging
import os
import threading
import time
import tracemalloc
import warnings

import numpy as np

from skyscale.core.fft import get_backend

__all__ = ["PeakMemory", "RSS_INTERVAL", "cpu_clock", "SubLoopRecord", "record_sub_loops",
           "fft_probe", "kept_warnings"]


# --------------------------------------------------------------------------- memory
def _rss():
    try:
        import psutil
        return psutil.Process().memory_info().rss
    except ImportError:
        with open("/proc/self/statm") as fh:
            return int(fh.read().split()[1]) * os.sysconf("SC_PAGE_SIZE")


class PeakMemory:
    """Context manager: peak traced allocations (tracemalloc) and peak resident set.

    Attributes after the block: ``traced_peak`` (bytes allocated above the start),
    ``rss_start``, ``rss_peak`` (sampled every ``interval`` seconds) and
    ``rss_increase``.
    """

    def __init__(self, interval=0.002):
        self.interval = interval
        self._stop = threading.Event()

    def _sample(self):
        while not self._stop.wait(self.interval):
            self.rss_peak = max(self.rss_peak, _rss())

    def __enter__(self):
        self._owner = not tracemalloc.is_tracing()
        if self._owner:
            tracemalloc.start()
        tracemalloc.reset_peak()
        self._base = tracemalloc.get_traced_memory()[0]
        self.rss_start = self.rss_peak = _rss()
        self._thread = threading.Thread(target=self._sample, daemon=True)
        self._thread.start()
        return self

    def __exit__(self, *exc):
        self._stop.set()
        self._thread.join()
        self.rss_peak = max(self.rss_peak, _rss())
        self.traced_peak = tracemalloc.get_traced_memory()[1] - self._base
        if self._owner:
            tracemalloc.stop()
        self.rss_increase = self.rss_peak - self.rss_start
        return False


# ------------------------------------------------------------------ instrumentation
#: Resident-set sampling interval of the sweep's memory measurements, seconds (the
#: sampling thread's own CPU time is then negligible against the steps timed).
RSS_INTERVAL = 0.05


@contextlib.contextmanager
def cpu_clock():
    """Within the block the engine's and the driver's timings are CPU seconds of this
    process (``time.process_time``) instead of wall seconds (measurement only)."""
    import types
    from skyscale.core import driver as cycles
    from skyscale.core import engine as minor
    shim = types.SimpleNamespace(perf_counter=time.process_time)
    saved = minor.time, cycles.time
    minor.time = cycles.time = shim
    try:
        yield
    finally:
        minor.time, cycles.time = saved


class SubLoopRecord(list):
    """What `record_sub_loops` saw: the sub-loops ``(active pixels, components, CPU
    seconds)`` as the list itself, and beside them ``updates`` (each application of a
    sub-loop: ``(kind, components, tracked pixels, CPU seconds, accepted)``, ``kind``
    'fft' or 'direct'), ``beams`` (each making of beams: ``(beams made, pixels each,
    CPU seconds)``) and ``tools`` (CPU seconds of each box's convolvers made)."""

    def __init__(self):
        super().__init__()
        self.updates = []
        self.beams = []
        self.tools = []


@contextlib.contextmanager
def record_sub_loops():
    """Record every sub-loop the engine runs, how it was applied, and the beams and box
    convolvers it made (a `SubLoopRecord`).

    Wraps, for the block, the engine's reference to the compiled sub-loop, its two ways
    of applying a sub-loop (an FFT update of the box, a direct update of the tracked
    pixels), the making of beams and of the box's convolvers (measurement only: the
    arguments and results pass through unchanged).
    """
    from skyscale.core import engine as minor
    from skyscale.core import precompute
    from skyscale.core.cycle_work import CycleWork as work
    inner = minor.scale_loop
    apply_fft, apply_direct = work.apply_fft, work.apply_direct
    make_pairs, tools = precompute.pair_beams, minor.Engine._tools
    rows = SubLoopRecord()

    def timed(values, ys, xs, beam, **kw):
        t0 = time.process_time()
        out = inner(values, ys, xs, beam, **kw)
        rows.append((int(np.size(values)), int(out[0].size), time.process_time() - t0))
        return out

    def applied(kind, fn):
        def wrapper(self, k, ys, xs, flux, guard):
            made = len(rows.beams)
            t0 = time.process_time()
            out = fn(self, k, ys, xs, flux, guard)
            # a scale's first direct update makes its pair beams: counted as beams
            inner = sum(b[2] for b in rows.beams[made:])
            rows.updates.append((kind, int(np.size(flux)), int(self.tys.size),
                                 time.process_time() - t0 - inner, out is not None))
            return out
        return wrapper

    def beams(psf, kernels, image_shape, backend, pairs, **kw):
        t0 = time.process_time()
        pairs = list(pairs)
        out = make_pairs(psf, kernels, image_shape, backend, pairs, **kw)
        rows.beams.append((len(pairs), (2 * image_shape[0] - 1) * (2 * image_shape[1] - 1),
                           time.process_time() - t0))
        return out

    def box_tools(self, shape):
        new = tuple(shape) not in self._box_tools
        t0 = time.process_time()
        out = tools(self, shape)
        if new:
            rows.tools.append(time.process_time() - t0)
        return out

    minor.scale_loop = timed
    work.apply_fft, work.apply_direct = applied("fft", apply_fft), applied(
        "direct", apply_direct)
    precompute.pair_beams, minor.Engine._tools = beams, box_tools
    try:
        yield rows
    finally:
        minor.scale_loop = inner
        work.apply_fft, work.apply_direct = apply_fft, apply_direct
        precompute.pair_beams, minor.Engine._tools = make_pairs, tools


def fft_probe(grids, *, threads=1, repeats=3, backend="auto"):
    """Seconds of one real FFT (mean of a forward and an inverse, best of ``repeats``)
    on each grid, with the engine's backend: ``[{'grid', 'seconds', 'threads'}]``.
    CPU seconds at one thread, wall seconds at more."""
    clock = time.process_time if threads == 1 else time.perf_counter
    out = []
    fft = get_backend(backend, threads=threads)
    for grid in sorted({tuple(int(v) for v in g) for g in grids}):
        a = np.random.default_rng(0).standard_normal(grid)
        spec = fft.rfft2(a, grid)
        fft.irfft2(spec, grid)                          # plan once
        best = np.inf
        for _ in range(repeats):
            t0 = clock()
            fft.irfft2(fft.rfft2(a, grid), grid)
            best = min(best, (clock() - t0) / 2)
        out.append({"grid": list(grid), "seconds": best, "threads": int(threads)})
        del a, spec
    return out


@contextlib.contextmanager
def kept_warnings():
    """Within the block the engine's warnings (logged by ``skyscale.core`` and raised
    with `warnings.warn`) are kept in the list it yields instead of reaching the user:
    the sweep's own runs are measurements, and what they warn about belongs in the
    record, not on the terminal of whoever runs ``skyscale bench``."""
    kept = []

    class _Keep(logging.Handler):
        def emit(self, record):
            kept.append(record.getMessage())

    log = logging.getLogger("skyscale.core")
    handler, saved = _Keep(level=logging.WARNING), log.propagate
    log.addHandler(handler)
    log.propagate = False
    try:
        with warnings.catch_warnings(record=True) as said:
            warnings.simplefilter("always")
            yield kept
        kept.extend(str(w.message) for w in said if str(w.message) not in kept)
    finally:
        log.removeHandler(handler)
        log.propagate = saved
