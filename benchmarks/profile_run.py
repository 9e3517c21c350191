"""Where one run's time goes: a profile of the 1024^2 field of `speed_targets.py`.

    PYTHONPATH=engine python benchmarks/profile_run.py --size 1024 --threads 16

Runs the invented field once to compile and warm, then once under `cProfile`, and
prints the wall time, the engine's own timings and the functions with the most
cumulative and own time.  Wall time under the profiler is a little longer than without.
"""

import argparse
import cProfile
import os
import pstats
import sys
import time

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path[:0] = [HERE, os.path.join(HERE, "..", "engine")]

import skyscale  # noqa: E402
from fields import invented_field  # noqa: E402

SCALES = {1024: ([0, 5, 10, 20, 40], 10), 2048: ([0, 8, 16, 32, 64], 16)}


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--size", type=int, default=1024, choices=sorted(SCALES))
    ap.add_argument("--threads", type=int, default=1)
    ap.add_argument("--top", type=int, default=35)
    args = ap.parse_args(argv)
    scales, largest = SCALES[args.size]
    f = invented_field(args.size, largest_scale=largest)
    kw = dict(scales=scales, mask="auto", noise_threshold=3.0, restore=False,
              threads=args.threads)
    skyscale.deconvolve(f["dirty"], f["psf"], **kw)                    # compile and warm
    prof = cProfile.Profile()
    t0 = time.perf_counter()
    prof.enable()
    res = skyscale.deconvolve(f["dirty"], f["psf"], **kw)
    prof.disable()
    wall = time.perf_counter() - t0
    print(f"size {args.size}, threads {args.threads}: {wall:.2f} s under the profiler, "
          f"{res.components.size} components, timings "
          f"{ {k: round(float(v), 3) for k, v in res.timings.items()} }")
    stats = pstats.Stats(prof)
    stats.sort_stats("cumulative").print_stats(args.top)
    stats.sort_stats("tottime").print_stats(args.top)


if __name__ == "__main__":
    main()
