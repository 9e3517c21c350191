"""The FFT backends side by side: time of a real 2-D transform pair, and whether the
result is the same bits at every thread count.

    PYTHONPATH=engine python benchmarks/fft_backends.py --sizes 1080,2048,4096 --threads 1,2

For each grid (float32, as the minor cycle transforms) and backend it times a forward
and an inverse transform (best of ``--repeats``) at each thread count, and compares the
inverse transform's output between the thread counts bit for bit.  ``pyfftw-measure``
is pyfftw with timed planning (``FFTW_MEASURE``, what a wisdom cache would hold): its
plan, and so its rounding, depends on the timings of the moment.  The default backend
is the fastest one whose result does not depend on the thread count or on any cache.
"""

import argparse
import os
import sys
import time

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.join(HERE, "..", "engine"))

import numpy as np  # noqa: E402

from skyscale.core.fft import get_backend  # noqa: E402


def _fftw(effort, threads):
    import pyfftw.builders as builders

    class Measured:
        name = "pyfftw-measure"

        def __init__(self):
            self.plans = {}

        def _plan(self, kind, a, s):
            key = (kind, a.shape, a.dtype.str, s)
            if key not in self.plans:
                build = builders.rfft2 if kind == "r" else builders.irfft2
                self.plans[key] = build(a.copy(), s=s, threads=threads, planner_effort=effort)
            return self.plans[key]

        def rfft2(self, a, s):
            return self._plan("r", a, s)(a).copy()

        def irfft2(self, a, s):
            return self._plan("i", a, s)(a).copy()
    return Measured()


def backends(threads):
    out = {name: get_backend(name, threads=threads) for name in ("scipy", "numpy")}
    try:
        out["pyfftw"] = get_backend("pyfftw", threads=threads)
        out["pyfftw-measure"] = _fftw("FFTW_MEASURE", threads)
    except ImportError:
        pass
    return out


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="1080,2048")
    ap.add_argument("--threads", default="1,2")
    ap.add_argument("--repeats", type=int, default=5)
    args = ap.parse_args(argv)
    threads = [int(t) for t in args.threads.split(",")]
    print(f"load average {os.getloadavg()}; ms per forward + inverse pair, float32")
    for n in (int(v) for v in args.sizes.split(",")):
        a = np.random.default_rng(n).normal(size=(n, n)).astype(np.float32)
        results = {}
        for t in threads:
            for name, fft in backends(t).items():
                spec = fft.rfft2(a, (n, n))
                out = fft.irfft2(spec, (n, n))
                best = np.inf
                for _ in range(args.repeats):
                    t0 = time.perf_counter()
                    fft.irfft2(fft.rfft2(a, (n, n)), (n, n))
                    best = min(best, time.perf_counter() - t0)
                results.setdefault(name, []).append((t, best, out))
        for name, rows in results.items():
            same = all(np.array_equal(rows[0][2], r[2]) for r in rows[1:])
            times = ", ".join(f"{t} thread{'s' if t > 1 else ''} {s * 1e3:.1f}"
                              for t, s, _ in rows)
            print(f"{n:>5} {name:>15}: {times}; same bits at every thread count: {same}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
