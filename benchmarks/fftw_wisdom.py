"""Does the FFT wisdom cache speed up the plans skyscale makes?

skyscale's pyfftw plans use ``FFTW_ESTIMATE``, which picks an algorithm by heuristics
without timing candidates, so the wisdom it keeps (`skyscale.core.fft.FFTWFFT`) can only
save planning work, not give faster transforms.  This script times building a forward
and an inverse plan of an ``n x n`` real grid in a fresh process without wisdom, and in
another fresh process after importing the wisdom the first one exported (separate
processes, so that FFTW's in-process plan cache cannot hide the difference)::

    PYTHONPATH=engine python benchmarks/fftw_wisdom.py 256 512 1024 1536

On this machine (2 shared cores, pyfftw 0.15.1, 2026-12-02; three runs, the middle of
them) it printed, in milliseconds per pair of plans without / with the wisdom: 256:
3.07 / 1.94, 512: 7.60 / 5.75, 1024: 12.9 / 9.75, 1536: 25.8 / 17.4 (one run's 1024
with wisdom was 67 ms, a load spike).  The cache saves a few milliseconds per plan
(about 1.3 to 1.6 times faster planning), so tens of milliseconds of an engine's set-up
of about ten plans; it is kept for that, and that is all it is for.
"""

import json
import os
import subprocess
import sys
import tempfile

CHILD = r"""
import json, pickle, sys, time
import numpy as np
import pyfftw, pyfftw.builders
n, path, mode = int(sys.argv[1]), sys.argv[2], sys.argv[3]
if mode == "with":
    with open(path, "rb") as fh:
        pyfftw.import_wisdom(pickle.load(fh))
a = pyfftw.empty_aligned((n, n), dtype="float64")
t0 = time.perf_counter()
f = pyfftw.builders.rfft2(a, s=(n, n), threads=1, planner_effort="FFTW_ESTIMATE",
                          avoid_copy=False)
b = pyfftw.empty_aligned((n, n // 2 + 1), dtype="complex128")
i = pyfftw.builders.irfft2(b, s=(n, n), threads=1, planner_effort="FFTW_ESTIMATE",
                           avoid_copy=False)
ms = 1e3 * (time.perf_counter() - t0)
if mode == "without":
    with open(path, "wb") as fh:
        pickle.dump(pyfftw.export_wisdom(), fh)
print(json.dumps(ms))
"""


def plan_ms(n, path, mode):
    out = subprocess.run([sys.executable, "-c", CHILD, str(n), path, mode], check=True,
                         capture_output=True, text=True).stdout
    return json.loads(out)


def main(sizes):
    print(f"{'grid':>6} {'no wisdom (ms)':>15} {'with wisdom (ms)':>17}")
    with tempfile.TemporaryDirectory() as tmp:
        for n in sizes:
            path = os.path.join(tmp, f"wisdom_{n}.pkl")
            without = plan_ms(n, path, "without")
            with_ = plan_ms(n, path, "with")
            print(f"{n:>6} {without:>15.2f} {with_:>17.2f}")


if __name__ == "__main__":
    main([int(v) for v in sys.argv[1:]] or [256, 512, 1024])
