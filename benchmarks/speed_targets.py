"""The speed targets of the accelerated minor cycle, each measured side by side.

    PYTHONPATH=engine python benchmarks/speed_targets.py --threads 1,2 --out speed.json
    PYTHONPATH=engine python benchmarks/speed_targets.py --rows field1024 --threads 1,2,4,8,16
    SKYSCALE_ENGINE=/path/to/other/engine python benchmarks/speed_targets.py ...

Rows (``--rows``, comma separated; default all but ``field2048``):

* ``field1024``: an invented 1024 x 1024 field (`fields.invented_field`, largest scale
  10, so sources up to 40 px), scales 0, 5, 10, 20, 40, the automatic mask, a stop at
  3 times the noise; wall and CPU seconds at each thread count, the time by step, the
  sub-loops and how many were applied by FFT updates, and the fidelity figures against
  the true sky (flux, mean and peak residual in the emission, off-source rms in units
  of the noise, the share of flux on finite scales);
* ``field2048``: the same at 2048 x 2048 with scales 0, 8, 16, 32, 64 (largest scale 16);
* ``plane256``: one 256 x 256 cube plane to the noise in a warm process (kernels
  compiled, an earlier plane done), as a cube worker runs it;
* ``update``: one exact FFT update of a minor cycle (the PSF convolution of the step and
  the smoothing by every scale) against the bare FFTs of its grids;
* ``compact``: one compact source cleaned in a 256 x 256 image and the same source and
  noise in a 2048 x 2048 image: cost follows the emission, not the image.

``SKYSCALE_ENGINE`` points the script at another checkout's ``engine/`` folder, to
run an older engine on the same fields.  The machine's load is printed before and
after: on a shared machine compare rows of one run only.
"""

import argparse
import json
import os
import sys
import time

HERE = os.path.dirname(os.path.abspath(__file__))
ENGINE = os.environ.get("SKYSCALE_ENGINE", os.path.join(HERE, "..", "engine"))
sys.path[:0] = [HERE, ENGINE]

import numpy as np  # noqa: E402
from scipy import ndimage  # noqa: E402

import skyscale  # noqa: E402
from fields import invented_field  # noqa: E402

ROWS = ("field1024", "plane256", "update", "compact", "field2048")


def _fidelity(res, f):
    """Flux, residual in and off the emission (noise units), finite-scale share."""
    sky, sigma = f["sky"], f["sigma"]
    emission = ndimage.binary_dilation(sky > sigma / 100, iterations=3)
    far = ~ndimage.binary_dilation(emission, iterations=10)
    r = res.residual.astype(np.float64)
    c = res.components
    total = float(c["flux"].sum()) or 1e-30
    return {"flux": float(res.model.sum() / sky.sum()),
            "mean_em": float(r[emission].mean() / sigma),
            "peak_em": float(np.abs(r[emission]).max() / sigma),
            "off_rms": float(r[far].std() / sigma),
            "finite": float(c["flux"][c["scale"] > 0].sum() / total)}


def _run(f, scales, threads, **kw):
    t0, c0 = time.perf_counter(), time.process_time()
    res = skyscale.deconvolve(f["dirty"], f["psf"], scales=scales, mask="auto",
                              noise_threshold=3.0, restore=False, threads=threads, **kw)
    wall, cpu = time.perf_counter() - t0, time.process_time() - c0
    return res, {"threads": threads, "seconds": wall, "cpu_seconds": cpu,
                 "components": int(res.components.size), "stop": res.stop_reason,
                 "major_cycles": len(res.history) - 1, "sub_loops": int(res.sub_loops),
                 "fft_updates": int(getattr(res, "fft_updates", -1)),
                 "rollbacks": int(res.rollbacks),
                 "mask_pixels": int(0 if res.mask is None else res.mask.sum()),
                 "timings": {k: round(float(v), 3) for k, v in res.timings.items()}}


def _warm(threads):
    small = invented_field(64, largest_scale=4)
    skyscale.deconvolve(small["dirty"], small["psf"], scales=[0, 4], mask="auto",
                        noise_threshold=3.0, restore=False, threads=threads)


def row_field(n, largest, scales, threads_list, log):
    f = invented_field(n, largest_scale=largest)
    out = []
    for t in threads_list:
        _warm(t)
        res, row = _run(f, scales, t)
        row.update(_fidelity(res, f), size=n, scales=scales)
        log(f"field{n} threads {t}: {row['seconds']:.2f} s (CPU {row['cpu_seconds']:.2f}), "
            f"{row['components']} components, {row['sub_loops']} sub-loops "
            f"({row['fft_updates']} FFT updates), {row['major_cycles']} major cycles, stop "
            f"{row['stop']}, timings {row['timings']}; flux {row['flux']:.4f}, mean_em "
            f"{row['mean_em']:+.3f}, peak_em {row['peak_em']:.2f}, off_rms "
            f"{row['off_rms']:.3f}, finite {row['finite']:.3f}")
        out.append(row)
    if len(out) > 1:
        log("  speed-up over 1 thread: " + ", ".join(
            f"{r['threads']}: x{out[0]['seconds'] / r['seconds']:.2f}" for r in out[1:]))
    return out


def row_plane(threads, log):
    planes = [invented_field(256, largest_scale=8, seed=s) for s in (1, 2, 3)]
    _warm(threads)
    _run(planes[0], [0, 4, 8, 16], threads)             # the worker's first plane
    rows = []
    for f in planes[1:]:
        res, row = _run(f, [0, 4, 8, 16], threads)
        row.update(_fidelity(res, f))
        rows.append(row)
    best = min(r["seconds"] for r in rows)
    log(f"plane256 threads {threads}: warm planes {[round(r['seconds'], 3) for r in rows]} s, "
        f"components {[r['components'] for r in rows]}, stop {[r['stop'] for r in rows]}; "
        f"{60.0 / best:.0f} planes per minute per worker")
    return rows


def row_update(threads, log, n=1024, repeats=5):
    f = invented_field(n, largest_scale=10)
    e = skyscale.Engine(f["psf"], [0, 5, 10, 20, 40], image_shape=f["dirty"].shape,
                        threads=threads)
    try:
        from skyscale.core.cycle_work import CycleWork
    except ImportError:
        log("update: this engine has no separate FFT update; row skipped")
        return {}
    from skyscale.core.threads import thread_limit
    with thread_limit(threads):
        residual = f["dirty"].astype(np.float64)
        state = e.measure(residual)
        allowed = e.allowed(None)
        work = CycleWork(e, residual, state.planes, allowed, np.ones(residual.shape, bool),
                         e._box(allowed))
        ys = np.array([n // 2, n // 3]); xs = np.array([n // 2, n // 4])
        flux = np.array([1e-3, 2e-3])
        times = []
        for _ in range(repeats):
            t0 = time.perf_counter()
            work.apply_fft(3, ys, xs, flux, np.inf)
            times.append(time.perf_counter() - t0)
        conv, smooth = e._tools(work.shape)
        a = np.zeros(conv.fshape, np.float32)
        b = np.zeros(smooth.fshape, np.float32)
        n_fin = sum(1 for k in e.kernels if k.size > 1)
        bare = []
        for _ in range(repeats):
            t0 = time.perf_counter()
            e.fft.irfft2(e.fft.rfft2(a, conv.fshape), conv.fshape)
            spec = e.fft.rfft2(b, smooth.fshape)
            for _ in range(n_fin):
                e.fft.irfft2(spec, smooth.fshape)
            bare.append(time.perf_counter() - t0)
    row = {"threads": threads, "update_seconds": min(times), "fft_seconds": min(bare),
           "ratio": min(times) / min(bare), "psf_grid": list(conv.fshape),
           "smooth_grid": list(smooth.fshape)}
    log(f"update threads {threads}: one exact update {row['update_seconds'] * 1e3:.1f} ms, "
        f"the bare FFTs of its grids {row['fft_seconds'] * 1e3:.1f} ms: "
        f"x{row['ratio']:.2f} (PSF grid {conv.fshape}, smoothing grid {smooth.fshape})")
    return row


def _compact_field(n, sigma=1e-4, seed=5):
    """An invented compact field (a point, a Gaussian and a disk within 40 px) in an
    ``n x n`` image: the same array, beam in pixels, sky and noise level at every ``n``
    (`fields.natural_psf` keeps the pixel a fixed fraction of the beam)."""
    from scipy.signal import fftconvolve
    from fields import correlated_noise, invented_array, natural_psf, uv_tracks
    u, v = uv_tracks(invented_array(27, seed=seed))
    psf, w = natural_psf(u, v, n)
    yy, xx = np.mgrid[:n, :n].astype(np.float64) - n // 2
    sky = np.zeros((n, n))
    sky[n // 2, n // 2] += 100 * sigma
    sky += 3 * sigma * np.exp(-((yy - 15) ** 2 + (xx + 10) ** 2) / (2 * 4.0 ** 2))
    sky += 0.5 * sigma * (((yy + 12) ** 2 + (xx - 14) ** 2) <= 9.0 ** 2)
    dirty = fftconvolve(sky, psf, mode="full")[n:2 * n, n:2 * n]
    dirty += correlated_noise(w, n, sigma, np.random.default_rng(seed))
    return {"dirty": dirty.astype(np.float32), "psf": psf.astype(np.float32), "sky": sky,
            "sigma": sigma}


def row_compact(threads, log, big=2048):
    rows = []
    for n in (256, big):
        f = _compact_field(n)
        _warm(threads)
        res, row = _run(f, [0, 4, 8, 16], threads)
        row.update(_fidelity(res, f), size=n)
        rows.append(row)
    log(f"compact threads {threads}: 256^2 {rows[0]['seconds']:.2f} s, {big}^2 "
        f"{rows[1]['seconds']:.2f} s (x{rows[1]['seconds'] / rows[0]['seconds']:.1f}); "
        f"components {rows[0]['components']} and {rows[1]['components']}, stop "
        f"{rows[0]['stop']} and {rows[1]['stop']}, timings {rows[1]['timings']}")
    return rows


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", default="field1024,plane256,update,compact")
    ap.add_argument("--threads", default="1,2", help="thread counts [1,2]")
    ap.add_argument("--out", help="write the figures here as JSON")
    args = ap.parse_args(argv)
    rows = args.rows.split(",")
    unknown = sorted(set(rows) - set(ROWS))
    if unknown:
        ap.error(f"unknown rows {unknown}; choose from {', '.join(ROWS)}")
    threads = [int(t) for t in args.threads.split(",")]
    out = {"command": "PYTHONPATH=engine python benchmarks/speed_targets.py " + " ".join(
        argv if argv is not None else sys.argv[1:]), "engine": os.path.abspath(ENGINE),
        "cores": os.cpu_count(), "load_before": list(os.getloadavg())}

    def log(msg):
        print(msg, flush=True)
    if "field1024" in rows:
        out["field1024"] = row_field(1024, 10, [0, 5, 10, 20, 40], threads, log)
    if "field2048" in rows:
        out["field2048"] = row_field(2048, 16, [0, 8, 16, 32, 64], threads, log)
    if "plane256" in rows:
        out["plane256"] = [row_plane(t, log) for t in threads]
    if "update" in rows:
        out["update"] = [row_update(t, log) for t in threads]
    if "compact" in rows:
        out["compact"] = [row_compact(t, log) for t in threads]
    out["load_after"] = list(os.getloadavg())
    print(f"load average before {out['load_before']}, after {out['load_after']}")
    if args.out:
        with open(args.out, "w") as fh:
            json.dump(out, fh, indent=1, default=float)
    return 0


if __name__ == "__main__":
    sys.exit(main())
