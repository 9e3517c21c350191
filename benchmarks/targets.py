"""Side-by-side measurements for the speed paragraph of issue 14, in one process.

    PYTHONPATH=engine python benchmarks/targets.py --out targets.json

* the sub-loop: serial against parallel at 2 threads, on active sets below and above
  `PARALLEL_MIN_ACTIVE` (a serial path where a parallel region costs more than its work);
* the smoothing of every scale: the engine's `MultiConvolver` against one `Convolver`
  per scale, and the transforms each makes (counted by a counting FFT backend);
* the major cycle: the engine's `Convolver` on its ``~2N`` grid against a full linear
  convolution on ``~3N`` (``scipy.signal.fftconvolve``), with a twice-size PSF.

The planner against runs it did not see is ``skyscale bench`` (validation table); the
wall time against the textbook loop is ``depth_vs_textbook.py``.  Ratios are measured
side by side because this machine is shared and noisy.
"""

import argparse
import json
import os
import sys
import time

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.dirname(HERE)
for _p in (HERE, os.path.join(ROOT, "engine"), ROOT):
    if _p not in sys.path:
        sys.path.insert(0, _p)

import numpy as np  # noqa: E402

from skyscale.core.threads import thread_limit  # noqa: E402
from skyscale.core.fft import Convolver, MultiConvolver, get_backend  # noqa: E402
from skyscale.core.kernels import scale_loop  # noqa: E402
from skyscale.core.kernels.scale_loop import PARALLEL_MIN_ACTIVE  # noqa: E402
from skyscale.core.engine import Engine  # noqa: E402
from skyscale.cost.sweep import synthetic_field  # noqa: E402


class CountingFFT:
    """An FFT backend that counts its transforms (numpy.fft underneath)."""

    name = "counting"

    def __init__(self):
        self.inner = get_backend("numpy")
        self.forward = self.inverse = 0

    def rfft2(self, a, s):
        self.forward += 1
        return self.inner.rfft2(a, s)

    def irfft2(self, a, s):
        self.inverse += 1
        return self.inner.irfft2(a, s)


def best(fn, repeats):
    t = np.inf
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        t = min(t, time.perf_counter() - t0)
    return t


def sub_loop(n, repeats):
    dirty, psf = synthetic_field(n)
    e = Engine(psf, [0, 8], image_shape=dirty.shape, threads=1)
    plane = e.smooth(dirty)[1]
    order = np.argsort(np.abs(plane), axis=None)[::-1]
    rows = []
    for active in (4000, PARALLEL_MIN_ACTIVE, min(400000, plane.size)):
        ys, xs = np.unravel_index(np.sort(order[:active]), plane.shape)
        vals = plane[ys, xs].copy()
        times = {}
        for path in ("serial", "parallel"):
            def run():
                with thread_limit(2):
                    scale_loop(vals.copy(), ys, xs, e.beams[1], beam_peak=e.beam_peaks[1],
                               gain=0.1, level=0.0, max_iter=100, parallel=path == "parallel")
            run()
            times[path] = best(run, repeats)
        rows.append({"active": active, "serial_s": times["serial"],
                     "parallel_s": times["parallel"],
                     "serial_over_parallel": times["serial"] / times["parallel"]})
        print(f"sub-loop, {active} active pixels, 100 components, 2 threads: serial "
              f"{times['serial'] * 1e3:.1f} ms, parallel {times['parallel'] * 1e3:.1f} ms: "
              f"serial / parallel {rows[-1]['serial_over_parallel']:.2f}", flush=True)
    return rows


def smoothing(n, scales, repeats):
    dirty, psf = synthetic_field(n)
    kernels = Engine(psf, scales, image_shape=dirty.shape, threads=1).kernels
    counter = CountingFFT()
    multi = MultiConvolver(kernels, dirty.shape, backend=counter)
    counter.forward = counter.inverse = 0
    multi(dirty)
    counts = {"multi": (counter.forward, counter.inverse)}
    singles = [Convolver(k, dirty.shape, backend=counter) for k in kernels if k.size > 1]
    counter.forward = counter.inverse = 0
    for c in singles:
        c(dirty)
    counts["separate"] = (counter.forward, counter.inverse)
    fft = get_backend("auto", threads=1)
    multi = MultiConvolver(kernels, dirty.shape, backend=fft)
    singles = [Convolver(k, dirty.shape, backend=fft) for k in kernels if k.size > 1]
    multi(dirty)
    [c(dirty) for c in singles]
    t_multi = best(lambda: multi(dirty), repeats)
    t_sep = best(lambda: [c(dirty) for c in singles], repeats)
    print(f"smoothing {n}^2 by {scales}: one forward and {counts['multi'][1]} inverse "
          f"transforms ({t_multi * 1e3:.0f} ms) against {counts['separate'][0]} forward and "
          f"{counts['separate'][1]} inverse ({t_sep * 1e3:.0f} ms): x{t_sep / t_multi:.2f}",
          flush=True)
    return {"size": n, "scales": scales, "transforms": counts, "multi_s": t_multi,
            "separate_s": t_sep, "separate_over_multi": t_sep / t_multi}


def major(n, repeats):
    from scipy.signal import fftconvolve
    dirty, psf = synthetic_field(n)
    model = np.zeros(dirty.shape)
    model[::37, ::41] = 1.0
    conv = Convolver(psf, dirty.shape, backend=get_backend("auto", threads=1))
    conv(model)
    psf64 = psf.astype(np.float64)

    def full():
        return fftconvolve(model, psf64, mode="full")[n:2 * n, n:2 * n]
    diff = float(np.abs(conv(model, out_dtype=np.float64) - full()).max())
    t_conv = best(lambda: conv(model), repeats)
    t_full = best(full, repeats)
    print(f"major cycle {n}^2, PSF {psf.shape}: grid {conv.fshape} in {t_conv * 1e3:.0f} ms "
          f"against the full linear convolution (grid ~{3 * n - 1}) in {t_full * 1e3:.0f} ms: "
          f"x{t_full / t_conv:.2f}; largest difference {diff:.2g}", flush=True)
    return {"size": n, "grid": list(conv.fshape), "full_grid": 3 * n - 1, "convolver_s": t_conv,
            "full_s": t_full, "full_over_convolver": t_full / t_conv, "max_difference": diff}


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--size", type=int, default=1024)
    ap.add_argument("--repeats", type=int, default=5)
    ap.add_argument("--out", help="write the numbers here as JSON")
    args = ap.parse_args(argv)
    res = {"command": "PYTHONPATH=engine python benchmarks/targets.py " + " ".join(
        argv if argv is not None else sys.argv[1:]), "cores": os.cpu_count(),
        "load": list(os.getloadavg())}
    res["sub_loop"] = sub_loop(args.size, args.repeats)
    res["smoothing"] = smoothing(args.size, [0, 4, 8, 16, 32], args.repeats)
    res["major"] = major(args.size, args.repeats)
    res["load_after"] = list(os.getloadavg())
    if args.out:
        with open(args.out, "w") as fh:
            json.dump(res, fh, indent=1, default=float)
    return 0


if __name__ == "__main__":
    sys.exit(main())
