"""Major cycles against the visibilities: what one costs, how it grows, what accuracy buys.

    PYTHONPATH=engine python benchmarks/visibility_sweep.py --out vis-sweep.json
    PYTHONPATH=engine python benchmarks/visibility_sweep.py --max-rows 1e6   # quicker

Three parts, each measured side by side in one process:

1. On the demo observation (78 325 rows, 256 x 256, cell 2 arcsec): one major cycle
   (`VisibilityOperator.residual`: degrid + grid) against the minor cycles between
   two major cycles (`Engine.minor_cycle` from the dirty image at the default depth
   0.2, scales 0, 4, 8, 16, 32), and the image-plane major cycle beside them; then
   the time split of a whole demo run against the visibilities.
2. Growth with the number of rows, 1e5 to 1e7 (the demo's invented array sampled more
   densely in time, same 8 h track, random visibilities), at 1 and 2 threads: the
   major cycle, building the operator (checks, weights), and the peak resident memory
   of the process after each size (sizes run in increasing order).
3. The gridder's accuracy epsilon against the time of one major cycle and the error
   of its residual, against a reference at epsilon 1e-12 in double precision, on the
   demo with the true sky as the model; the error is quoted beside the thermal noise.

Timings are the best of ``--repeat`` calls after one warm-up call.
"""

import argparse
import importlib.util
import json
import os
import resource
import sys
import time

import numpy as np

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
sys.path[:0] = [os.path.join(ROOT, "engine")]

import skyscale  # noqa: E402
from skyscale.visibility.operator import VisibilityOperator  # noqa: E402
import skyscale.core.beam  # noqa: E402

DEMO = os.path.join(ROOT, "demo_data")
SCALES = [0, 4, 8, 16, 32]


def best_of(fn, repeat):
    fn()
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def peak_rss_mb():
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def demo_module():
    spec = importlib.util.spec_from_file_location("make_demo", os.path.join(DEMO, "make_demo.py"))
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def major_vs_minor(repeat, threads):
    op = VisibilityOperator.from_file(os.path.join(DEMO, "visibilities.npz"), npix=256,
                                      cell_arcsec=2.0, threads=threads)
    dirty, psf = op.dirty_image(), op.psf_image()
    engine = skyscale.Engine(psf, SCALES, image_shape=dirty.shape, threads=threads)
    mc = engine.minor_cycle(dirty)                       # compile, and the model to use
    model = mc.model
    image_plane = skyscale.ImagePlaneOperator(dirty, psf, threads=threads)
    out = {
        "threads": threads,
        "rows": int(op.vis.shape[0]),
        "major_cycle_s": best_of(lambda: op(model), repeat),
        "minor_cycles_s": best_of(lambda: engine.minor_cycle(dirty), repeat),
        "image_plane_major_cycle_s": best_of(lambda: image_plane(model), repeat),
        "components_per_minor_cycle": int(mc.components.size),
        "minor_stop": mc.stop_reason,
    }
    out["major_over_minor"] = out["major_cycle_s"] / out["minor_cycles_s"]
    # a whole demo run as `skyscale demo --from-visibilities` does it (after the warm-up)
    mask = skyscale.EmissionMask(SCALES, skyscale.core.beam.fit_beam(psf).major)
    run = skyscale.deconvolve(dirty, psf, scales=SCALES, noise_threshold=3.0, emission_mask=mask,
                              operator=op, restore=False, threads=threads)
    out["whole_run"] = {"major_cycles": len(run.history) - 1,
                        "components": int(run.components.size),
                        "timings_s": {k: round(v, 4) for k, v in run.timings.items()}}
    return out


def rows_growth(max_rows, threads_list, repeat):
    demo = demo_module()
    rng = np.random.default_rng(demo.SEED)
    positions = demo.antenna_layout(rng)
    n_bl = len(positions) * (len(positions) - 1) // 2
    wavelength = demo.C_LIGHT / demo.FREQUENCY_HZ
    h0, h1 = demo.HOUR_ANGLE_RANGE_H
    model = np.zeros((256, 256), np.float32)
    model[100:140, 110:150] = 1e-4
    results = []
    for rows in (1e5, 3e5, 1e6, 3e6, 1e7):
        if rows > max_rows:
            break
        n_times = int(round(rows / n_bl))
        ha = np.deg2rad(15.0 * np.linspace(h0, h1, n_times))
        u, v, w = demo.uvw_tracks(positions, demo.ARRAY_LATITUDE_DEG, demo.FIELD_DEC_DEG, ha,
                                  wavelength)
        uvw = np.stack([u, v, w], axis=1) * wavelength
        vis = (rng.standard_normal(u.size) + 1j * rng.standard_normal(u.size))[:, None]
        weights = np.ones((u.size, 1))
        for threads in threads_list:
            t0 = time.perf_counter()
            op = VisibilityOperator(uvw, [demo.FREQUENCY_HZ], vis, weights, npix=256,
                                    cell_arcsec=2.0, threads=threads)
            build = time.perf_counter() - t0
            major = best_of(lambda: op(model), repeat)
            rec = {"rows": int(u.size), "threads": threads, "build_s": build,
                   "major_cycle_s": major, "ns_per_row": 1e9 * major / u.size,
                   "peak_rss_mb": peak_rss_mb()}
            print(f"  rows {u.size:>9d} threads {threads}: major cycle {major:.3f} s "
                  f"({rec['ns_per_row']:.0f} ns/row), build {build:.2f} s, peak RSS "
                  f"{rec['peak_rss_mb']:.0f} MB", flush=True)
            results.append(rec)
            del op
    return results


def accuracy(threads, repeat):
    from astropy.io import fits
    sky = fits.getdata(os.path.join(DEMO, "true_sky.fits")).astype(np.float32)
    noise = json.load(open(os.path.join(DEMO, "truth.json")))["noise_jy_per_beam"]
    path = os.path.join(DEMO, "visibilities.npz")
    ref = VisibilityOperator.from_file(path, npix=256, cell_arcsec=2.0, dtype=np.float64,
                                       epsilon=1e-12, threads=threads)(sky)
    out = []
    for eps in (1e-2, 1e-3, 1e-4, 1e-5, 1e-6, 1e-7, 1e-8, 1e-10):
        op = VisibilityOperator.from_file(path, npix=256, cell_arcsec=2.0, dtype=np.float64,
                                          epsilon=eps, threads=threads)
        t = best_of(lambda: op(sky), repeat)
        err = op(sky) - ref
        rec = {"epsilon": eps, "major_cycle_s": t, "max_abs_error": float(np.abs(err).max()),
               "rms_error": float(np.sqrt(np.mean(err ** 2))),
               "max_error_over_noise": float(np.abs(err).max() / noise)}
        print(f"  epsilon {eps:.0e}: {t:.4f} s, max |error| {rec['max_abs_error']:.2e} Jy/beam "
              f"= {rec['max_error_over_noise']:.1e} sigma", flush=True)
        out.append(rec)
    return out


def main(argv=None):
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--max-rows", type=float, default=1e7)
    p.add_argument("--repeat", type=int, default=3)
    p.add_argument("--out", help="JSON file for the figures")
    args = p.parse_args(argv)
    report = {"machine_cpus": os.cpu_count(), "ducc0": __import__("ducc0").__version__}
    print("1. demo: one major cycle against the minor cycles between two major cycles")
    report["major_vs_minor"] = []
    for threads in (1, 2):
        rec = major_vs_minor(args.repeat, threads)
        report["major_vs_minor"].append(rec)
        print(f"  threads {threads}: major cycle {rec['major_cycle_s']:.4f} s, minor cycles "
              f"{rec['minor_cycles_s']:.4f} s ({rec['components_per_minor_cycle']} components), "
              f"ratio {rec['major_over_minor']:.2f}; image-plane major cycle "
              f"{rec['image_plane_major_cycle_s']:.4f} s; whole run {rec['whole_run']}",
              flush=True)
    print("2. growth with the number of rows (256 x 256 image)")
    report["rows"] = rows_growth(args.max_rows, (1, 2), args.repeat)
    print("3. accuracy epsilon against time and residual error (demo, 2 threads)")
    report["accuracy"] = accuracy(2, args.repeat)
    if args.out:
        with open(args.out, "w") as fh:
            json.dump(report, fh, indent=2)


if __name__ == "__main__":
    main()
