"""End-to-end time at 1 or 2 threads on a 1120 x 1120 invented field, cleaned to 3 sigma.

    PYTHONPATH=engine python benchmarks/threads_end_to_end.py 1
    PYTHONPATH=engine python benchmarks/threads_end_to_end.py 2
    GOMP_SPINCOUNT=infinite PYTHONPATH=engine python benchmarks/threads_end_to_end.py 2

The last shows what unlimited OpenMP spinning (the library default) costs when FFT
threads share the cores; skyscale sets a short spin unless told otherwise.
"""
import os
import sys
import time

sys.path[:0] = [os.path.join(os.path.dirname(os.path.dirname(os.path.abspath(__file__))), "engine")]

import skyscale  # noqa: E402
from skyscale.sweep import synthetic_field  # noqa: E402


def main(threads):
    dirty, psf = synthetic_field(1120)
    skyscale.deconvolve(*synthetic_field(64), scales=[0, 4], max_components=5, restore=False,
                        threads=threads)                     # compile and import first
    t0 = time.perf_counter()
    r = skyscale.deconvolve(dirty, psf, scales=[0, 4, 8, 16, 32],
                            threshold=3 * skyscale.robust_noise(dirty), restore=False,
                            threads=threads)
    timings = {k: round(v, 2) for k, v in r.timings.items()}
    print(f"GOMP_SPINCOUNT={os.environ.get('GOMP_SPINCOUNT')} threads {threads}: "
          f"{time.perf_counter() - t0:.2f} s, {r.components.size} components, {timings}")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 1)
