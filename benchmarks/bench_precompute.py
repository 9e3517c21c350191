"""The precompute (the engine's convolvers, then the beams a minor cycle makes for a box
of the image's extent: PSF (*) s_j (*) s_k for every scale and pair of scales, by FFT)
against the number of scales and the image size, beside its peak memory, the engine's
own memory account and the planner's prediction; and the same diagonal beams with plain
numpy.fft (`numpy_baseline.cross_terms`) as the baseline.

    python -m pytest benchmarks/bench_precompute.py
"""

import numpy as np
import pytest

from conftest import DTYPES, SCALE_SETS, SIZES
from numpy_baseline import cross_terms
from skyscale.cost import model as cost
from skyscale.cost import planner
from skyscale.core.engine import Engine
from skyscale.cost.sweep import PeakMemory


@pytest.mark.parametrize("dtype", DTYPES)
@pytest.mark.parametrize("n_scales", sorted(SCALE_SETS))
@pytest.mark.parametrize("size", SIZES)
def test_precompute_engine(benchmark, field, size, n_scales, dtype):
    dirty, psf = field(size)
    scales = SCALE_SETS[n_scales]
    def engine_and_beams():
        e = Engine(psf, scales, image_shape=dirty.shape, dtype=dtype, threads=1)
        e.bank.make([(k, k) for k in range(e.n_scales)] + e._pair_keys(), dirty.shape)
        return e

    Engine(field(32)[1], [0, 4])                            # imports and FFT library warm
    with PeakMemory() as mem:
        e = engine_and_beams()
    plan = planner.plan_run(dirty.shape, psf.shape, scales, threads=1, dtype=dtype)
    benchmark.pedantic(engine_and_beams, rounds=3)
    benchmark.extra_info.update({
        "traced_peak_mib": mem.traced_peak / 2**20, "rss_increase_mib": mem.rss_increase / 2**20,
        "engine_memory_mib": e.memory["total"] / 2**20,
        "predicted_seconds": plan.precompute_seconds + plan.beams_seconds,
        "beams_mib": e.bank.nbytes / 2**20,
        "beams_predicted_mib": (e.memory["beams"] + e.memory["pair_beams"]) / 2**20})


@pytest.mark.parametrize("n_scales", [1, 3])
@pytest.mark.parametrize("size", SIZES)
def test_precompute_numpy_baseline(benchmark, field, size, n_scales):
    dirty, psf = field(size)
    e = Engine(psf, SCALE_SETS[n_scales], image_shape=dirty.shape, threads=1)
    kernels = [k.astype(np.float64) for k in e.kernels]

    def diagonal():
        return [cross_terms(psf, [k], dirty.shape)[0, 0] for k in kernels]
    beams = benchmark.pedantic(diagonal, rounds=1)
    benchmark.extra_info["max_beam_difference"] = float(max(
        np.abs(b - eb).max() for b, eb in zip(beams, e.beams)))
