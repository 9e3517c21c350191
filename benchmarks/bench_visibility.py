"""One major cycle against the demo's visibilities beside the minor cycles between two.

    python -m pytest benchmarks/bench_visibility.py

The sweep over rows, threads and accuracy is `visibility_sweep.py`; this suite keeps
the side-by-side figure on the demo under pytest-benchmark: the visibility major cycle
(degrid + grid) at 1 and 2 threads and both image dtypes, the image-plane major cycle,
one minor cycle from the dirty image (depth 0.2, scales 0-32), and building the
operator (checks and weights).
"""

import os

import numpy as np
import pytest

pytest.importorskip("ducc0")

import skyscale  # noqa: E402
from skyscale.visibility.file import read_visibilities  # noqa: E402
from skyscale.visibility.operator import VisibilityOperator  # noqa: E402

DEMO = os.path.join(os.path.dirname(os.path.dirname(os.path.abspath(__file__))), "demo_data")
SCALES = [0, 4, 8, 16, 32]
_cache = {}


def demo(dtype="float32", threads=1):
    key = (dtype, threads)
    if key not in _cache:
        op = VisibilityOperator.from_file(os.path.join(DEMO, "visibilities.npz"), npix=256,
                                          cell_arcsec=2.0, dtype=dtype, threads=threads)
        _cache[key] = op
    return _cache[key]


def first_model(threads=1):
    op = demo("float32", threads)
    engine = skyscale.Engine(op.psf_image(), SCALES, image_shape=(256, 256), threads=threads)
    return engine, engine.minor_cycle(op.dirty_image()).model


@pytest.mark.parametrize("dtype", ["float32", "float64"])
@pytest.mark.parametrize("threads", [1, 2])
def test_visibility_major_cycle(benchmark, dtype, threads):
    op = demo(dtype, threads)
    _, model = first_model(threads)
    benchmark.group = "demo major vs minor"
    residual = benchmark(op, model)
    assert residual.dtype == np.dtype(dtype)


@pytest.mark.parametrize("threads", [1, 2])
def test_minor_cycles_between_two_major_cycles(benchmark, threads):
    engine, _ = first_model(threads)
    dirty = demo("float32", threads).dirty_image()
    benchmark.group = "demo major vs minor"
    mc = benchmark(engine.minor_cycle, dirty)
    assert mc.components.size > 0


def test_image_plane_major_cycle(benchmark):
    op = demo()
    _, model = first_model()
    image_plane = skyscale.ImagePlaneOperator(op.dirty_image(), op.psf_image(), threads=1)
    benchmark.group = "demo major vs minor"
    benchmark(image_plane, model)


def test_build_operator(benchmark):
    data = read_visibilities(os.path.join(DEMO, "visibilities.npz"))
    benchmark.group = "demo build"
    op = benchmark(VisibilityOperator, data.uvw, data.freqs, data.vis, data.weights,
                   npix=256, cell_arcsec=2.0, weighting="briggs", robust=0.0, threads=1)
    assert op.weight_sum > 0
