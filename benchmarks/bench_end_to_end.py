"""End to end: `skyscale.deconvolve` against the textbook numpy loop, to 3 sigma.

The two run side by side in one process on the same field, with the same scales and
mask, and stop at the same level (3 x the delta scale's noise skyscale measures; the
textbook loop stops when its peak residual in the mask reaches it).  ``extra_info``
holds components and final peaks.  For the figures at 512 to 2048 see
``depth_vs_textbook.py``.

    python -m pytest benchmarks/bench_end_to_end.py
    python -m pytest benchmarks/bench_end_to_end.py -k demo
"""

import os

import numpy as np
import pytest

from conftest import ROOT
from fields import invented_field
from numpy_baseline import TextbookBeams, textbook_clean
import skyscale
from skyscale.core.engine import Engine

#: Scales of the end-to-end runs.
SCALES = [0, 4, 8, 16]


def _inputs(which):
    if which == "demo":
        from astropy.io import fits
        d = fits.getdata(os.path.join(ROOT, "demo_data", "dirty.fits")).astype(np.float32)
        p = fits.getdata(os.path.join(ROOT, "demo_data", "psf.fits")).astype(np.float32)
        sky = fits.getdata(os.path.join(ROOT, "demo_data", "true_sky.fits"))
        from scipy import ndimage
        return d, p, ndimage.binary_dilation(sky > 0.01 * sky.max(), iterations=3)
    f = invented_field(int(which), largest_scale=max(SCALES))
    return f["dirty"], f["psf"], f["mask"]


_levels = {}


@pytest.mark.parametrize("threads", [1, 2])
@pytest.mark.parametrize("which", ["demo", "512"])
def test_end_to_end_engine(benchmark, which, threads):
    dirty, psf, mask = _inputs(which)
    res = benchmark.pedantic(skyscale.deconvolve, args=(dirty, psf), kwargs={
        "scales": SCALES, "mask": mask, "noise_threshold": 3.0, "threads": threads,
        "restore": False}, rounds=2)
    _levels[which] = 3.0 * res.scale_noise[0]
    benchmark.extra_info.update({"final_peak": res.history[-1].peak,
                                 "level": _levels[which], "stop": res.stop_reason,
                                 "components": int(res.components.size)})


@pytest.mark.parametrize("which", ["demo", "512"])
def test_end_to_end_textbook(benchmark, which):
    dirty, psf, mask = _inputs(which)
    if which not in _levels:
        _levels[which] = 3.0 * skyscale.deconvolve(dirty, psf, scales=SCALES, mask=mask,
                                                   noise_threshold=3.0,
                                                   restore=False).scale_noise[0]
    e = Engine(psf, SCALES, image_shape=dirty.shape, threads=1)
    kernels = [k.astype(np.float64) for k in e.kernels]

    def run():
        beams = TextbookBeams(psf, kernels, dirty.shape, e.weights)
        return textbook_clean(dirty, beams, kernels, e.allowed(mask), gain=e.loop_gain,
                              level=_levels[which], max_iter=10 ** 6)
    res = benchmark.pedantic(run, rounds=1)
    benchmark.extra_info.update({"level": _levels[which], "components": res["components"],
                                 "final_peak": float(np.abs(res["residual"][mask]).max())})
