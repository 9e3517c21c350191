"""Side-by-side measurements for the speed targets of issue 5, in one process.

    PYTHONPATH=engine python benchmarks/targets.py --out targets.json

* per iteration: the compiled loop against the plain numpy twin
  (``tests/naive.py::clean_loop``) on identical copies of one loop state;
* end to end: `skyscale.deconvolve` against `numpy_baseline.numpy_deconvolve`, to the
  same threshold on the same field: a shallow one (5 % of the peak: few components,
  the FFTs dominate) and a deep one (3 x the robust noise: many components; the numpy
  driver takes about 6 minutes);
* threads: the iteration at 1 and 2 threads, interleaved run by run;
* bandwidth: the iteration's time against the bytes it touches over a streaming copy.

The exponents of the cost model come from ``skyscale bench`` (see README.md).
Ratios are measured side by side because this machine is shared and noisy.
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

import skyscale  # noqa: E402
from conftest import clone_state  # noqa: E402
from numpy_baseline import numpy_deconvolve  # noqa: E402
from skyscale.minor import Engine  # noqa: E402
from skyscale.sweep import (bandwidth_for, bandwidth_probe, measure_iterations,  # noqa: E402
                            synthetic_field)
from tests import naive  # noqa: E402

#: Scales of the per-iteration and thread comparisons (6 scales of the sweep's ladder).
SCALES_6 = [0, 4, 8, 16, 32, 64]
#: Scales of the end-to-end comparison.
SCALES_E2E = [0, 4, 8, 16, 32]


def per_iteration(dirty, psf, scales, repeats, engine_iters=200, numpy_iters=10):
    """Best time per iteration: compiled (1 and 2 threads) and numpy, same start state."""
    e = Engine(psf, scales, image_shape=dirty.shape, threads=1)
    state = e.loop_state(dirty)
    clone_state(state).iterate(5)
    best = {"compiled_1": np.inf, "compiled_2": np.inf, "numpy": np.inf}
    for _ in range(repeats):
        for t in (1, 2):
            e.threads = t
            s = clone_state(state)
            t0 = time.perf_counter()
            s.iterate(engine_iters)
            best[f"compiled_{t}"] = min(best[f"compiled_{t}"],
                                        (time.perf_counter() - t0) / engine_iters)
        s = clone_state(state)
        t0 = time.perf_counter()
        naive.clean_loop(s.planes, s.mask, s.lim, e.response_scale, e.amp_scale, e.patches,
                         e.patch_offset, e.patch_half, gain=e.loop_gain, floor=-1.0,
                         peak_limit=np.inf, ref=0, delta=e.delta_index, max_iter=numpy_iters)
        best["numpy"] = min(best["numpy"], (time.perf_counter() - t0) / numpy_iters)
    return best


def end_to_end(dirty, psf, scales, threshold):
    """Wall seconds of the engine (all cores, 1 thread) and the numpy driver."""
    out = {}
    for label, threads in (("engine_all_cores", None), ("engine_1_thread", 1)):
        t0 = time.perf_counter()
        r = skyscale.deconvolve(dirty, psf, scales=scales, threshold=threshold,
                                threads=threads, restore=False)
        out[label] = {"seconds": time.perf_counter() - t0, "final_peak": r.history[-1].peak,
                      "components": int(r.components.size), "timings": r.timings}
    t0 = time.perf_counter()
    n = numpy_deconvolve(dirty, psf, scales, threshold=threshold)
    out["numpy"] = {"seconds": time.perf_counter() - t0, "final_peak": n["peaks"][-1],
                    "components": n["components"], "timings": n["timings"]}
    return out


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--size", type=int, default=1024, help="field of the numpy comparisons")
    ap.add_argument("--bw-size", type=int, default=2048,
                    help="field of the bandwidth and thread comparisons")
    ap.add_argument("--repeats", type=int, default=5)
    ap.add_argument("--threshold-fraction", type=float, default=0.05,
                    help="shallow end-to-end threshold, a fraction of the dirty peak")
    ap.add_argument("--noise-multiple", type=float, default=3.0,
                    help="deep end-to-end threshold, a multiple of the robust noise")
    ap.add_argument("--skip-end-to-end", action="store_true")
    ap.add_argument("--out", help="write the numbers here as JSON")
    args = ap.parse_args(argv)
    res = {"command": "PYTHONPATH=engine python benchmarks/targets.py " + " ".join(
        argv if argv is not None else sys.argv[1:]), "cores": os.cpu_count()}
    Engine(synthetic_field(64)[1], [0, 4]).loop_state(synthetic_field(64)[0]).iterate(3)

    dirty, psf = synthetic_field(args.size)
    it = per_iteration(dirty, psf, SCALES_6, args.repeats)
    res["per_iteration"] = dict(it, size=args.size, scales=SCALES_6,
                                numpy_over_compiled_1=it["numpy"] / it["compiled_1"],
                                numpy_over_compiled_2=it["numpy"] / it["compiled_2"])
    print(f"per iteration {args.size}^2, 6 scales: compiled {it['compiled_1'] * 1e6:.1f} us "
          f"(1 thread), {it['compiled_2'] * 1e6:.1f} us (2), numpy {it['numpy'] * 1e3:.2f} ms: "
          f"x{res['per_iteration']['numpy_over_compiled_1']:.0f} (1 thread), "
          f"x{res['per_iteration']['numpy_over_compiled_2']:.0f} (2)", flush=True)
    if not args.skip_end_to_end:
        levels = {"shallow": args.threshold_fraction * float(np.abs(dirty).max()),
                  "deep": args.noise_multiple * skyscale.robust_noise(dirty)}
        res["end_to_end"] = {}
        for name, thr in levels.items():
            e2e = end_to_end(dirty, psf, SCALES_E2E, thr)
            e2e["threshold"] = thr
            for k in ("engine_all_cores", "engine_1_thread"):
                e2e[f"numpy_over_{k}"] = e2e["numpy"]["seconds"] / e2e[k]["seconds"]
            res["end_to_end"][name] = e2e
            print(f"end to end ({name}) {args.size}^2 to {thr:.4g} Jy/beam, scales {SCALES_E2E}: "
                  f"{e2e['engine_all_cores']['components']} components; engine "
                  f"{e2e['engine_all_cores']['seconds']:.2f} s (all cores, peak "
                  f"{e2e['engine_all_cores']['final_peak']:.4g}), "
                  f"{e2e['engine_1_thread']['seconds']:.2f} s (1 thread), numpy "
                  f"{e2e['numpy']['seconds']:.1f} s (peak {e2e['numpy']['final_peak']:.4g}): "
                  f"x{e2e['numpy_over_engine_all_cores']:.1f} (all cores), "
                  f"x{e2e['numpy_over_engine_1_thread']:.1f} (1 thread)", flush=True)
    del dirty, psf
    probe = bandwidth_probe(threads=(1, 2))
    res["bandwidth"] = probe
    for n in sorted({args.size, args.bw_size}):
        d, p = synthetic_field(n)
        e = Engine(p, SCALES_6, image_shape=d.shape, threads=1)
        rows = measure_iterations(e, d, iterations=200, repeats=args.repeats + 2,
                                  thread_counts=(1, 2))
        for r in rows:
            r["bandwidth"] = bandwidth_for(probe, r["working_set"], r["threads"])
            r["bandwidth_bound_s"] = r["bytes_per_iteration"] / r["bandwidth"]
            r["over_bandwidth_bound"] = r["iteration_s"] / r["bandwidth_bound_s"]
        speedup = rows[0]["iteration_s"] / rows[1]["iteration_s"]
        res[f"threads_and_bandwidth_{n}"] = {"rows": rows, "speedup_2_over_1": speedup}
        print(f"{n}^2, 6 scales: iteration {rows[0]['iteration_s'] * 1e6:.1f} us (1 thread), "
              f"{rows[1]['iteration_s'] * 1e6:.1f} us (2): speedup {speedup:.2f}; "
              f"{rows[0]['bytes_per_iteration'] / 1e3:.0f} kB touched per iteration, "
              f"x{rows[0]['over_bandwidth_bound']:.1f} (1 thread) and "
              f"x{rows[1]['over_bandwidth_bound']:.1f} (2) the bandwidth-bound time", flush=True)
        del e, d, p
    if args.out:
        with open(args.out, "w") as fh:
            json.dump(res, fh, indent=1, default=float)
    return 0


if __name__ == "__main__":
    sys.exit(main())
