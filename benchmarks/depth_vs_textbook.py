"""Depth: `skyscale.deconvolve` against the textbook loop, to 3 sigma, side by side.

    PYTHONPATH=engine python benchmarks/depth_vs_textbook.py --sizes 512,1024,2048 \
        --out depth.json

On invented fields (`fields.invented_field`: an invented array's naturally weighted
PSF twice the image's size, noise with the PSF as covariance, points, Gaussians and
disks up to 4 x the largest scale), each size runs, one after the other in one process:

* skyscale: ``deconvolve(dirty, psf, scales, mask=truth mask, noise_threshold=3)``;
* the textbook loop (`numpy_baseline.textbook_clean`): same scales, kernels, weights,
  allowed centres and mask, full-image cross terms, stopped when the delta scale's
  peak residual in the mask is at most 3 x the delta scale's noise skyscale measured
  (``--textbook-sigma``: another multiple, such as 1.5, at which the textbook loop
  also cleans the plateau a 3-sigma stop leaves inside the mask).

Skyscale's time and components "to 3 sigma" are read at the first major cycle whose
peak residual in the mask is at most 3 sigma (its progress callback); its own stop
(every scale at its level, broad scales deeper inside the mask) comes at or after it.

Both report components, wall time and CPU time of the process (the textbook's with its
cross terms; on a shared machine the wall clock follows the load, which can change
between the two runs, so the CPU-time ratio is the steadier one), the peak and mean
residual in the mask in units of that noise, and the model flux against the sky's.
When the textbook loop would run past ``--max-seconds`` it stops there and its time to
the level is extrapolated: its time per iteration times the components it needed at
the next smaller size, scaled by skyscale's component ratio between the two sizes;
the output says so (``extrapolated``).
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
from fields import invented_field  # noqa: E402
from numpy_baseline import TextbookBeams, textbook_clean  # noqa: E402
from skyscale.core.engine import Engine  # noqa: E402

#: Scales of both loops (pixels).
SCALES = [0, 4, 8, 16]


def _stats(residual, mask, sigma):
    r = residual[mask].astype(np.float64)
    return {"peak_sigma": float(np.abs(r).max() / sigma), "mean_sigma": float(r.mean() / sigma)}


def run_size(n, *, dynamic_range, seed, threads, max_seconds, previous=None, log=print,
             textbook_multiple=3.0):
    f = invented_field(n, largest_scale=max(SCALES), dynamic_range=dynamic_range, seed=seed)
    dirty, psf, mask, sky = f["dirty"], f["psf"], f["mask"], f["sky"]
    out = {"size": n, "scales": SCALES, "dynamic_range": dynamic_range, "seed": seed,
           "mask_fraction": float(mask.mean()), "sky_flux": float(sky.sum())}
    marks = []
    t0, c0 = time.perf_counter(), time.process_time()

    def mark(event):
        if event.get("stage") == "major":
            marks.append((time.perf_counter() - t0, event["components"], event["peak"],
                          time.process_time() - c0))
    res = skyscale.deconvolve(dirty, psf, scales=SCALES, mask=mask, noise_threshold=3.0,
                              max_components=500000, max_major_cycles=60, restore=False,
                              threads=threads, callback=mark)
    wall, cpu = time.perf_counter() - t0, time.process_time() - c0
    sigma = float(res.scale_noise[0])
    first = next(((t, c, u) for t, c, p, u in marks if p <= 3.0 * sigma),
                 (wall, len(res.components), cpu))
    comps = res.components
    finite = float(comps["flux"][comps["scale"] > 0].sum() / max(comps["flux"].sum(), 1e-30))
    out["skyscale"] = dict(_stats(res.residual, mask, sigma), seconds=wall,
                           components=int(comps.size), stop=res.stop_reason,
                           major_cycles=len(res.history) - 1, sub_loops=int(res.sub_loops),
                           rollbacks=int(res.rollbacks), threads=threads,
                           flux_fraction=float(res.model.sum() / sky.sum()),
                           finite_scale_flux_fraction=finite, timings=res.timings)
    out["skyscale"].update(seconds_to_3sigma=first[0], components_to_3sigma=int(first[1]),
                           cpu_seconds=cpu, cpu_seconds_to_3sigma=first[2])
    out["noise_sigma"] = sigma
    log(f"{n}: skyscale {wall:.1f} s, {comps.size} components, stop {res.stop_reason}, "
        f"peak {out['skyscale']['peak_sigma']:.2f} sigma", flush=True)
    e = Engine(psf, SCALES, image_shape=dirty.shape, threads=1)
    kernels = [k.astype(np.float64) for k in e.kernels]
    c1 = time.process_time()
    beams = TextbookBeams(psf, kernels, dirty.shape, e.weights)
    tb = textbook_clean(dirty, beams, kernels, e.allowed(mask), gain=e.loop_gain,
                        level=textbook_multiple * sigma, max_iter=2_000_000,
                        max_seconds=max_seconds)
    tb_cpu = time.process_time() - c1
    from skyscale.core.fft import convolve_centred
    exact = dirty - convolve_centred(tb["model"], psf.astype(np.float64))
    total = tb["seconds"] + tb["precompute_seconds"]
    out["textbook"] = dict(_stats(tb["residual"], mask, sigma), seconds=total,
                           level_sigma=textbook_multiple, cpu_seconds=tb_cpu,
                           loop_seconds=tb["seconds"], precompute_seconds=tb["precompute_seconds"],
                           components=tb["components"], per_scale=tb["per_scale"],
                           stop=tb["stop"], per_iteration_seconds=tb["per_iteration_seconds"],
                           flux_fraction=float(tb["model"].sum() / sky.sum()),
                           residual_vs_exact=float(np.abs(exact - tb["residual"]).max() / sigma),
                           extrapolated=False)
    if tb["stop"] == "time":
        if previous is None:
            raise RuntimeError(f"the textbook loop at {n} did not reach the level in "
                               f"{max_seconds} s and there is no smaller size to scale from")
        need = previous["textbook"]["components"] * (
            out["skyscale"]["components_to_3sigma"]
            / previous["skyscale"]["components_to_3sigma"])
        out["textbook"].update(
            extrapolated=True, components_done=tb["components"], components=int(round(need)),
            seconds=tb["precompute_seconds"] + tb["per_iteration_seconds"] * need,
            cpu_seconds=tb_cpu * (tb["precompute_seconds"] + tb["per_iteration_seconds"] * need)
            / max(tb["seconds"] + tb["precompute_seconds"], 1e-9),
            how=(f"stopped after {max_seconds} s ({tb['components']} components); time = "
                 "cross terms + its time per iteration x the components it needed at "
                 f"{previous['size']} x skyscale's component ratio {n}/{previous['size']}"))
    out["ratios"] = {
        "components_textbook_over_skyscale": out["textbook"]["components"]
        / max(out["skyscale"]["components"], 1),
        "seconds_textbook_over_skyscale": out["textbook"]["seconds"] / wall,
        "components_to_3sigma": out["textbook"]["components"]
        / max(out["skyscale"]["components_to_3sigma"], 1),
        "seconds_to_3sigma": out["textbook"]["seconds"] / out["skyscale"]["seconds_to_3sigma"],
        "cpu_seconds_to_3sigma": out["textbook"]["cpu_seconds"]
        / out["skyscale"]["cpu_seconds_to_3sigma"]}
    log(f"{n}: textbook {out['textbook']['seconds']:.1f} s"
        f"{' (extrapolated)' if out['textbook']['extrapolated'] else ''}, "
        f"{out['textbook']['components']} components, peak "
        f"{out['textbook']['peak_sigma']:.2f} sigma; ratios {out['ratios']}", flush=True)
    return out


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="512,1024,2048")
    ap.add_argument("--dynamic-range", type=float, default=1e3)
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--threads", type=int, default=1, help="skyscale's threads [1]")
    ap.add_argument("--max-seconds", type=float, default=300.0,
                    help="longest textbook loop per size before extrapolating [300]")
    ap.add_argument("--textbook-sigma", type=float, default=3.0,
                    help="the textbook loop's stop, multiple of the noise [3]; 1.5 cleans "
                    "its plateau inside the mask away")
    ap.add_argument("--out", help="write the figures here as JSON")
    args = ap.parse_args(argv)
    res = {"command": "PYTHONPATH=engine python benchmarks/depth_vs_textbook.py " + " ".join(
        argv if argv is not None else sys.argv[1:]), "load": list(os.getloadavg()),
        "cores": os.cpu_count(), "sizes": []}
    skyscale.deconvolve(*[invented_field(64, largest_scale=4)[k] for k in ("dirty", "psf")],
                        scales=[0, 4], max_components=20, restore=False)   # compile first
    prev = None
    for n in [int(s) for s in args.sizes.split(",")]:
        prev = run_size(n, dynamic_range=args.dynamic_range, seed=args.seed,
                        threads=args.threads, max_seconds=args.max_seconds, previous=prev,
                        textbook_multiple=args.textbook_sigma)
        res["sizes"].append(prev)
        if args.out:
            with open(args.out, "w") as fh:
                json.dump(res, fh, indent=1, default=float)
    res["load_after"] = list(os.getloadavg())
    print("components and seconds: skyscale first at <= 3 sigma (at its own stop) | textbook "
          "to 3 sigma | textbook / skyscale to 3 sigma (* extrapolated)")
    for r in res["sizes"]:
        t, s, q = r["textbook"], r["skyscale"], r["ratios"]
        print(f"{r['size']:>5}: {s['components_to_3sigma']} ({s['components']}) comps, "
              f"{s['seconds_to_3sigma']:.1f} ({s['seconds']:.1f}) s | {t['components']} comps, "
              f"{t['seconds']:.1f} s{'*' if t['extrapolated'] else ''} | "
              f"x{q['components_to_3sigma']:.2f} comps, x{q['seconds_to_3sigma']:.1f} s "
              f"(CPU seconds {s['cpu_seconds_to_3sigma']:.1f} vs {t['cpu_seconds']:.1f}: "
              f"x{q['cpu_seconds_to_3sigma']:.1f})")
    if args.out:
        with open(args.out, "w") as fh:
            json.dump(res, fh, indent=1, default=float)
    return 0


if __name__ == "__main__":
    sys.exit(main())
