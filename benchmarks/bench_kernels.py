"""Minor-cycle kernels: one iteration of the compiled loop against the plain numpy twin.

Each timed round starts from an identical copy of the loop state, so rounds do the
same work; the compiled loop and ``tests/naive.py::clean_loop`` (the numpy baseline)
run on the same arrays in the same process.  ``extra_info`` holds the time per
iteration, the bytes it touches and the peak memory of the set-up.

    python -m pytest benchmarks/bench_kernels.py
    python -m pytest benchmarks/bench_kernels.py -k "iteration and 1024"
"""

import numpy as np
import pytest

from conftest import DTYPES, SCALE_SETS, THREADS, clone_state
from skyscale.kernels import tile_maxima
from skyscale.minor import Engine
from skyscale.sweep import PeakMemory
from tests import naive

#: Image size of the kernel suite (the loop's cost does not depend on it much).
SIZE = 1024
#: Iterations per timed round: compiled loop, numpy twin.
ENGINE_ITERATIONS = 200
NUMPY_ITERATIONS = 5


def _state(field, n_scales, dtype, threads):
    dirty, psf = field(SIZE)
    with PeakMemory() as mem:
        e = Engine(psf, SCALE_SETS[n_scales], image_shape=dirty.shape, dtype=dtype,
                   threads=threads)
        state = e.loop_state(dirty)
    return e, state, mem


@pytest.mark.parametrize("threads", THREADS)
@pytest.mark.parametrize("dtype", DTYPES)
@pytest.mark.parametrize("n_scales", [1, 3, 5, 6])
def test_iteration_compiled(benchmark, field, n_scales, dtype, threads):
    e, state, mem = _state(field, n_scales, dtype, threads)
    clone_state(state).iterate(5)                        # load the compiled code
    result = benchmark.pedantic(lambda s: s.iterate(ENGINE_ITERATIONS),
                                setup=lambda: ((clone_state(state),), {}), rounds=7)
    benchmark.extra_info.update({
        "per_iteration_us": benchmark.stats.stats.min / ENGINE_ITERATIONS * 1e6,
        "bytes_per_iteration": state.bytes_per_iteration, "components": int(result[0].size),
        "setup_traced_peak_mib": mem.traced_peak / 2**20})


@pytest.mark.parametrize("dtype", DTYPES)
@pytest.mark.parametrize("n_scales", [1, 3, 5, 6])
def test_iteration_numpy_baseline(benchmark, field, n_scales, dtype):
    e, state, mem = _state(field, n_scales, dtype, 1)

    def run(s):
        return naive.clean_loop(s.planes, s.mask, s.lim, e.response_scale, e.amp_scale,
                                e.patches, e.patch_offset, e.patch_half, gain=e.loop_gain,
                                floor=-1.0, peak_limit=np.inf, ref=0, delta=e.delta_index,
                                max_iter=NUMPY_ITERATIONS)
    benchmark.pedantic(run, setup=lambda: ((clone_state(state),), {}), rounds=3)
    benchmark.extra_info.update({
        "per_iteration_us": benchmark.stats.stats.min / NUMPY_ITERATIONS * 1e6,
        "setup_traced_peak_mib": mem.traced_peak / 2**20})


@pytest.mark.parametrize("threads", THREADS)
@pytest.mark.parametrize("dtype", DTYPES)
@pytest.mark.parametrize("n_scales", [3, 6])
def test_tile_maxima(benchmark, field, n_scales, dtype, threads):
    e, state, _ = _state(field, n_scales, dtype, threads)
    from skyscale._threads import thread_limit

    def run():
        with thread_limit(threads):
            return tile_maxima(state.planes, state.mask, state.lim, e.response_scale, e.tile)
    run()
    benchmark.pedantic(run, rounds=10)
    benchmark.extra_info["plane_pixels"] = int(state.planes.size)
