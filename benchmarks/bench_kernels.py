"""The single-scale sub-loop: serial against parallel, and against its numpy twin.

The active set is the ``active`` pixels of largest ``|value|`` of a 1024 x 1024 field
smoothed by the 8 px scale; each timed round starts from an identical copy of it and
takes the same components.  Serial and parallel paths and the numpy twin
(``tests/naive.py::scale_loop``; a local numpy reference when the twin is absent) run on
the same arrays in the same process; ``extra_info`` holds the time per component and
per component and active pixel.  `skyscale.core.kernels.scale_loop.PARALLEL_MIN_ACTIVE` is
where the parallel path starts to pay.

    python -m pytest benchmarks/bench_kernels.py
    python -m pytest benchmarks/bench_kernels.py -k "parallel and 40000"
"""

import numpy as np
import pytest

from conftest import DTYPES, THREADS
from skyscale.core.threads import thread_limit
from skyscale.core.kernels import scale_loop
from skyscale.core.engine import Engine

try:
    from tests.naive import scale_loop as numpy_scale_loop
except ImportError:            # the twin is being written: a plain numpy reference here
    numpy_scale_loop = None

#: Image size of the kernel suite.
SIZE = 1024
#: Active-set sizes: below, near and above the parallel threshold.
ACTIVE = (4000, 40000, 400000)
#: Components per timed round: compiled loop, numpy twin.
ITERATIONS = 100
NUMPY_ITERATIONS = 10


def reference_scale_loop(values, ys, xs, beam, *, beam_peak, gain, level, max_iter):
    """Plain numpy Hogbom iterations over an active set (the loop written out)."""
    cy, cx = (beam.shape[0] - 1) // 2, (beam.shape[1] - 1) // 2
    idx, flux = [], []
    for _ in range(max_iter):
        j = int(np.argmax(np.abs(values)))
        if abs(values[j]) <= level:
            break
        f = gain * float(values[j]) / beam_peak
        values -= (f * beam[cy + ys - ys[j], cx + xs - xs[j]]).astype(values.dtype)
        idx.append(j)
        flux.append(f)
    return np.array(idx, np.int64), np.array(flux)


_cache = {}


def _active(field, n_active, dtype):
    key = (n_active, dtype)
    if key not in _cache:
        dirty, psf = field(SIZE)
        e = Engine(psf, [0, 8], image_shape=dirty.shape, dtype=dtype, threads=1)
        plane = e.smooth(dirty)[1]
        order = np.argsort(np.abs(plane), axis=None)[::-1][:n_active]
        ys, xs = np.unravel_index(np.sort(order), plane.shape)
        _cache[key] = (plane[ys, xs].copy(), ys.astype(np.int64), xs.astype(np.int64),
                       e.beams[1], float(e.beam_peaks[1]))
    return _cache[key]


@pytest.mark.parametrize("threads", THREADS)
@pytest.mark.parametrize("path", ["serial", "parallel"])
@pytest.mark.parametrize("dtype", DTYPES)
@pytest.mark.parametrize("n_active", ACTIVE)
def test_scale_loop_compiled(benchmark, field, n_active, dtype, path, threads):
    values, ys, xs, beam, peak = _active(field, n_active, dtype)

    def run(v):
        with thread_limit(threads):
            return scale_loop(v, ys, xs, beam, beam_peak=peak, gain=0.1, level=0.0,
                              max_iter=ITERATIONS, parallel=path == "parallel")
    run(values.copy())                                      # load the compiled code
    out = benchmark.pedantic(run, setup=lambda: ((values.copy(),), {}), rounds=5)
    t = benchmark.stats.stats.min / max(out[0].size, 1)
    benchmark.extra_info.update({"per_component_us": t * 1e6,
                                 "per_component_pixel_ns": t / n_active * 1e9,
                                 "components": int(out[0].size)})


@pytest.mark.parametrize("dtype", DTYPES)
@pytest.mark.parametrize("n_active", ACTIVE)
def test_scale_loop_numpy_twin(benchmark, field, n_active, dtype):
    values, ys, xs, beam, peak = _active(field, n_active, dtype)
    twin = numpy_scale_loop or reference_scale_loop
    out = benchmark.pedantic(lambda v: twin(v, ys, xs, beam, beam_peak=peak, gain=0.1,
                                            level=0.0, max_iter=NUMPY_ITERATIONS),
                             setup=lambda: ((values.copy(),), {}), rounds=3)
    t = benchmark.stats.stats.min / NUMPY_ITERATIONS
    compiled = scale_loop(values.copy(), ys, xs, beam, beam_peak=peak, gain=0.1, level=0.0,
                          max_iter=NUMPY_ITERATIONS)
    np.testing.assert_array_equal(np.asarray(out[0]), compiled[0])   # the same components
    benchmark.extra_info.update({"per_component_us": t * 1e6,
                                 "per_component_pixel_ns": t / n_active * 1e9,
                                 "twin": "tests/naive.py" if numpy_scale_loop else "local"})
