"""The figures of multi-scale cleaning at depth, on invented fields with the automatic mask.

For each field (an invented array and sky from `fields.invented_field`: points,
Gaussians and disks up to four times the largest scale, noise correlated like the PSF)
it runs ``skyscale.deconvolve(..., noise_threshold=3, mask="auto")`` -- no truth mask --
and compares the result with the truth:

* ``flux``: model flux / true sky flux;
* ``mean_em`` and ``peak_em``: mean and peak |residual| inside the emission (where the
  truth convolved with the restoring beam exceeds 3 sigma), in units of the noise;
* ``off_rms``: residual rms farther than 10 px from any emission, in units of the noise;
* ``finite``: fraction of the model flux on finite scales;
* the stop reason, rollbacks, components, sub-loops and wall time.

    PYTHONPATH=engine python benchmarks/depth_figures.py --sizes 512,1024 \\
        --dynamic-ranges 1e3,1e4,1e5 --largest 16,32 --out depth.json
    PYTHONPATH=engine python benchmarks/depth_figures.py --demo

Targets (issue "Multi-scale at depth"): flux >= 0.99, |mean_em| <= 0.3, peak_em <= 3.5,
off_rms <= 1.15, stop 'noise' or 'threshold', at most one rollback, finite >= 0.6.
"""

import argparse
import json
import os
import sys
import time

import numpy as np
from scipy import ndimage

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.join(HERE, "..", "engine"))
sys.path.insert(0, HERE)

import skyscale  # noqa: E402
from fields import invented_field  # noqa: E402
import skyscale.core.beam  # noqa: E402

TARGETS = {"flux": (0.99, None), "mean_em": (-0.3, 0.3), "peak_em": (None, 3.5),
           "off_rms": (None, 1.15), "finite": (0.6, None)}


def ladder(largest):
    """0 and a doubling ladder from 4 px up to ``largest``."""
    out, s = [0], 4
    while s <= largest:
        out.append(s)
        s *= 2
    return out


def demo_field():
    """The bundled demo observation as a field: dirty, PSF, true sky and its noise."""
    from astropy.io import fits
    data = os.path.join(HERE, "..", "demo_data")
    dirty = fits.getdata(os.path.join(data, "dirty.fits")).astype(np.float32)
    psf = fits.getdata(os.path.join(data, "psf.fits")).astype(np.float32)
    sky = fits.getdata(os.path.join(data, "true_sky.fits")).astype(np.float64)
    op = skyscale.ImagePlaneOperator(dirty, psf, dtype=np.float64)
    sigma = float(op(sky).std())      # dirty - PSF (*) truth: the noise alone
    return {"dirty": dirty, "psf": psf, "sky": sky, "sigma": sigma}


def measure(n, dynamic_range, largest, seed=0, threads=None, field=None, scales=None):
    """Run one field and return its figures (see the module docstring)."""
    f = field or invented_field(n, largest_scale=largest, dynamic_range=dynamic_range,
                                seed=seed)
    sky, sigma = f["sky"], f["sigma"]
    scales = scales or ladder(largest)
    t0 = time.perf_counter()
    r = skyscale.deconvolve(f["dirty"], f["psf"], scales=scales, noise_threshold=3,
                            mask="auto", max_components=400000, max_major_cycles=40,
                            threads=threads)
    seconds = time.perf_counter() - t0
    truth = skyscale.core.beam.restore(sky.astype(np.float32), np.zeros_like(r.model), r.beam)
    inside = truth > 3 * sigma
    far = ~ndimage.binary_dilation(truth > 0.1 * sigma, iterations=10)
    finite = r.components["flux"][r.components["scale"] > 0].sum()
    res = r.residual.astype(np.float64) / sigma
    return {
        "size": n, "dynamic_range": dynamic_range, "largest_scale": largest,
        "scales": list(scales), "stop": r.stop_reason, "rollbacks": r.rollbacks,
        "flux": float(r.model.sum() / sky.sum()),
        "mean_em": float(res[inside].mean()), "peak_em": float(np.abs(res[inside]).max()),
        "off_rms": float(res[far].std()), "finite": float(finite / r.model.sum()),
        "components": int(r.components.size), "sub_loops": r.sub_loops,
        "major_cycles": len(r.history) - 1, "noise_measured": r.scale_noise[0] / sigma,
        "seconds": seconds, "timings": r.timings,
    }


def verdict(row):
    """Targets missed by one row, as a list of names."""
    missed = [k for k, (lo, hi) in TARGETS.items()
              if (lo is not None and row[k] < lo) or (hi is not None and row[k] > hi)]
    if row["stop"] not in ("noise", "threshold"):
        missed.append("stop")
    if row["rollbacks"] > 1:
        missed.append("rollbacks")
    return missed


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="512")
    ap.add_argument("--dynamic-ranges", default="1e3,1e4,1e5")
    ap.add_argument("--largest", default="16,32", help="largest scales (pixels) to try")
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--threads", type=int)
    ap.add_argument("--out")
    ap.add_argument("--demo", action="store_true",
                    help="the bundled demo observation (scales 0, 4, 8, 16, 32) instead")
    args = ap.parse_args(argv)
    rows = []
    if args.demo:
        row = measure(256, None, 32, field=demo_field(), scales=[0, 4, 8, 16, 32],
                      threads=args.threads)
        row["missed"] = verdict(row)
        print(json.dumps(row, default=float, indent=1))
        return
    for n in map(int, args.sizes.split(",")):
        for largest in map(int, args.largest.split(",")):
            for dr in map(float, args.dynamic_ranges.split(",")):
                row = measure(n, dr, largest, seed=args.seed, threads=args.threads)
                row["missed"] = verdict(row)
                rows.append(row)
                print(f"{n:5d} DR {dr:7.0e} largest {largest:3d}: {row['stop']:10s} "
                      f"flux {row['flux']:.4f} mean {row['mean_em']:+.2f} peak "
                      f"{row['peak_em']:.2f} off {row['off_rms']:.3f} finite "
                      f"{row['finite']:.2f} rollbacks {row['rollbacks']} comps "
                      f"{row['components']} {row['seconds']:.1f} s  missed: "
                      f"{', '.join(row['missed']) or 'none'}", flush=True)
    if args.out:
        with open(args.out, "w") as fh:
            json.dump(rows, fh, indent=1, default=float)


if __name__ == "__main__":
    main()
