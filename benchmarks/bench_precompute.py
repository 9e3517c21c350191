"""The precompute (PSF checks and measures, cross-term patches by FFT) against the number
of scales and the image size, beside its peak memory and the model's prediction; and the
same patches with plain numpy.fft (the baseline).

    python -m pytest benchmarks/bench_precompute.py
"""

import numpy as np
import pytest

from conftest import DTYPES, SCALE_SETS, SIZES
from numpy_baseline import NumpyBeams
from skyscale import cost
from skyscale.minor import Engine
from skyscale.sweep import PeakMemory


@pytest.mark.parametrize("dtype", DTYPES)
@pytest.mark.parametrize("n_scales", sorted(SCALE_SETS))
@pytest.mark.parametrize("size", SIZES)
def test_precompute_engine(benchmark, field, size, n_scales, dtype):
    dirty, psf = field(size)
    scales = SCALE_SETS[n_scales]
    Engine(field(32)[1], [0])                               # imports and FFT library warm
    with PeakMemory() as mem:
        e = Engine(psf, scales, image_shape=dirty.shape, dtype=dtype, threads=1)
    plan = cost.plan_run(dirty.shape, psf.shape, scales, threads=1, dtype=dtype,
                         psf_patch=e.psf_info.patch_half)
    benchmark.pedantic(Engine, args=(psf, scales), kwargs={
        "image_shape": dirty.shape, "dtype": dtype, "threads": 1}, rounds=3)
    benchmark.extra_info.update({
        "traced_peak_mib": mem.traced_peak / 2**20, "rss_increase_mib": mem.rss_increase / 2**20,
        "predicted_seconds": plan.precompute_seconds,
        "patch_mib": e.patches.nbytes / 2**20})


@pytest.mark.parametrize("n_scales", sorted(SCALE_SETS))
@pytest.mark.parametrize("size", SIZES)
def test_precompute_numpy_baseline(benchmark, field, size, n_scales):
    dirty, psf = field(size)
    beams = benchmark.pedantic(NumpyBeams, args=(psf, SCALE_SETS[n_scales], dirty.shape),
                               rounds=2)
    e = Engine(psf, SCALE_SETS[n_scales], image_shape=dirty.shape, threads=1)
    benchmark.extra_info["max_patch_difference"] = float(np.abs(beams.patches - e.patches).max())
