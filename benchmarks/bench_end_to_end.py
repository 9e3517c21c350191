"""End to end: `skyscale.deconvolve` against the plain numpy driver, to the same threshold.

The two run side by side in one process on the same field and stop at the same
residual level; ``extra_info`` holds the final peak residuals and components.  The
numpy driver on 1024 x 1024 takes about a minute a round.

    python -m pytest benchmarks/bench_end_to_end.py
    python -m pytest benchmarks/bench_end_to_end.py -k demo
"""

import os

import numpy as np
import pytest

from conftest import ROOT
from numpy_baseline import numpy_deconvolve
import skyscale

#: Scales of the end-to-end runs.
SCALES = [0, 4, 8, 16, 32]
#: The threshold, a fraction of the dirty image's peak.
THRESHOLD_FRACTION = 0.05


def _demo():
    from astropy.io import fits
    d = fits.getdata(os.path.join(ROOT, "demo_data", "dirty.fits")).astype(np.float32)
    p = fits.getdata(os.path.join(ROOT, "demo_data", "psf.fits")).astype(np.float32)
    return d, p


def _inputs(which, field):
    return _demo() if which == "demo" else field(int(which))


@pytest.mark.parametrize("threads", [1, 2])
@pytest.mark.parametrize("which", ["demo", "1024"])
def test_end_to_end_engine(benchmark, field, which, threads):
    dirty, psf = _inputs(which, field)
    thr = THRESHOLD_FRACTION * float(np.abs(dirty).max())
    res = benchmark.pedantic(skyscale.deconvolve, args=(dirty, psf), kwargs={
        "scales": SCALES, "threshold": thr, "threads": threads, "restore": False}, rounds=3)
    benchmark.extra_info.update({"final_peak": res.history[-1].peak, "threshold": thr,
                                 "components": int(res.components.size)})


@pytest.mark.parametrize("which", ["demo", "1024"])
def test_end_to_end_numpy_baseline(benchmark, field, which):
    dirty, psf = _inputs(which, field)
    thr = THRESHOLD_FRACTION * float(np.abs(dirty).max())
    res = benchmark.pedantic(numpy_deconvolve, args=(dirty, psf, SCALES),
                             kwargs={"threshold": thr}, rounds=1)
    benchmark.extra_info.update({"final_peak": res["peaks"][-1], "threshold": thr,
                                 "components": res["components"]})
