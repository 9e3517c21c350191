"""End-to-end time at 1 or 2 threads on a 1024 x 1024 invented field, cleaned to 3 sigma.

    PYTHONPATH=engine python benchmarks/threads_end_to_end.py 1
    PYTHONPATH=engine python benchmarks/threads_end_to_end.py 2
    GOMP_SPINCOUNT=infinite PYTHONPATH=engine python benchmarks/threads_end_to_end.py 2

The last shows what unlimited OpenMP spinning (the library default) costs when FFT
threads share the cores; skyscale sets a short spin unless told otherwise.  Each prints
the time by step (precompute, minor, major), the sub-loops and components.
"""
import os
import sys
import time

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path[:0] = [HERE, os.path.join(os.path.dirname(HERE), "engine")]

import skyscale  # noqa: E402
from fields import invented_field  # noqa: E402


def main(threads, n=1024):
    f = invented_field(n, largest_scale=32)
    small = invented_field(64, largest_scale=4)
    skyscale.deconvolve(small["dirty"], small["psf"], scales=[0, 4], max_components=5,
                        restore=False, threads=threads)      # compile and import first
    t0 = time.perf_counter()
    r = skyscale.deconvolve(f["dirty"], f["psf"], scales=[0, 4, 8, 16, 32], mask=f["mask"],
                            noise_threshold=3.0, restore=False, threads=threads)
    timings = {k: round(v, 2) for k, v in r.timings.items()}
    print(f"GOMP_SPINCOUNT={os.environ.get('GOMP_SPINCOUNT')} threads {threads}: "
          f"{time.perf_counter() - t0:.2f} s, {r.components.size} components, "
          f"{r.sub_loops} sub-loops, stop {r.stop_reason}, {timings}")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 1)
