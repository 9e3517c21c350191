"""Measuring what scales cost: the scaling sweep, the bandwidth probe, the calibration.

`run_sweep` measures, on an invented field (`synthetic_field`), for each image size
and number of scales: the precompute, one minor-cycle iteration, the minor-cycle
overhead, one major cycle, the peak memory (tracemalloc and the resident set), and
the bytes each iteration touches, which it sets against a streaming copy
(`bandwidth_probe`).  Further sweeps vary the PSF patch (the area an iteration
touches), the minor cycle's sub-region and the thread count.  `calibrate` fits the
coefficients of `skyscale.cost` to the measurements.  Nothing here prints: progress
goes to ``callback(dict)`` and the log.
"""

import logging
import os
import platform
import threading
import time
import tracemalloc
from concurrent.futures import ThreadPoolExecutor

import numpy as np

from . import cost
from ._threads import resolve_threads
from ._validate import as_image
from .cycles import masked_stats
from .minor import Engine
from .operators import ImagePlaneOperator

__all__ = ["SCALE_LADDER", "FILL_LADDER", "DEFAULT_SIZES", "DEFAULT_MAX_SCALES", "QUICK_SETTINGS",
           "synthetic_field", "bandwidth_probe", "bandwidth_for", "PeakMemory",
           "measure_iterations", "measure_point", "measure_cold_start", "run_sweep", "calibrate", "summarize", "TARGETS"]

logger = logging.getLogger(__name__)

#: Scale diameters (pixels) taken in order as scales are added: the delta, then doubling.
SCALE_LADDER = (0, 4, 8, 16, 32, 64, 128, 256)
#: Scales added, in this order, to the delta and a fixed largest scale (64 px): the
#: series that varies the number of scales at a fixed cross-term FFT size.
FILL_LADDER = (0, 64, 32, 16, 8, 4, 48, 24)
#: Image sizes swept by default (square images, PSF twice the size).
DEFAULT_SIZES = (512, 1024)
#: Most scales swept by default.
DEFAULT_MAX_SCALES = 8
#: PSF patch half-widths of the touched-area sweep.
PATCH_SWEEP = (8, 16, 32, 48)
#: Streaming-copy buffer sizes of the bandwidth probe, bytes.
PROBE_BYTES = (8 << 20, 64 << 20, 512 << 20)
#: Settings of ``quick=True`` (a smoke run for tests: seconds, not minutes).
QUICK_SETTINGS = {"sizes": (96, 128), "max_scales": 3, "iterations": 40, "repeats": 2,
                  "patches": (6, 12), "probe_bytes": (1 << 20, 8 << 20),
                  "validate_components": 200}


# --------------------------------------------------------------------------- inputs
def synthetic_field(n, *, seed=0, noise=1e-3):
    """An invented field and its PSF: ``(dirty (n, n), psf (2n, 2n))``, float32.

    The PSF is a round Gaussian core (sigma 2 px) with a rippled ring sidelobe at
    10 px and a shallow negative bowl; the sky is a dozen point sources plus Gaussian
    blobs with widths spread over the scale ladder.  ``dirty`` is the exact linear
    convolution of sky and PSF plus white noise (Jy/beam).
    """
    from scipy.signal import fftconvolve
    rng = np.random.default_rng(seed)
    y, x = np.mgrid[-n:n, -n:n].astype(np.float64)
    r = np.hypot(x, y)
    psf = (np.exp(-r ** 2 / 8.0) - 0.01 * np.exp(-r ** 2 / (2 * 12.0 ** 2))
           - 0.06 * np.exp(-(r - 10.0) ** 2 / 4.5) * np.cos(0.35 * x))
    psf /= psf[n, n]
    yy, xx = np.mgrid[:n, :n].astype(np.float64)
    sky = np.zeros((n, n))
    for width in (1.5, 3.0, 6.0, 12.0, 24.0):
        for _ in range(3):
            cy, cx = rng.uniform(0.15 * n, 0.85 * n, 2)
            w = min(width, n / 16)
            sky += rng.uniform(0.3, 1.0) * np.exp(-((yy - cy) ** 2 + (xx - cx) ** 2) /
                                                  (2 * w * w)) / (2 * np.pi * w * w)
    pts = rng.integers(int(0.1 * n), int(0.9 * n), (12, 2))
    sky[pts[:, 0], pts[:, 1]] += rng.uniform(0.05, 0.5, 12)
    dirty = fftconvolve(sky, psf, mode="full")[n:2 * n, n:2 * n]
    dirty += rng.normal(0.0, noise, dirty.shape)
    return dirty.astype(np.float32), psf.astype(np.float32)


# ------------------------------------------------------------------------ bandwidth
def bandwidth_probe(sizes=PROBE_BYTES, threads=None, repeats=5):
    """Streaming-copy bandwidth: bytes read plus written per second, best of ``repeats``.

    Parameters
    ----------
    sizes : sequence of int
        Buffer sizes in bytes (each is copied into another buffer of the same size).
    threads : sequence of int, optional
        Thread counts; default 1 and all cores.  Threads copy separate slices.
    repeats : int

    Returns
    -------
    list of dict
        ``bytes``, ``threads``, ``seconds`` (best copy) and ``bandwidth`` (B/s).
    """
    cores = os.cpu_count() or 1
    threads = sorted(set(threads or (1, cores)))
    out = []
    for nbytes in sizes:
        src = np.ones(max(int(nbytes) // 8, 1024))
        dst = np.empty_like(src)
        np.copyto(dst, src)                             # touch every page first
        for t in threads:
            parts = np.array_split(np.arange(src.size), t)
            bounds = [(int(p[0]), int(p[-1]) + 1) for p in parts if p.size]
            pool = ThreadPoolExecutor(t) if t > 1 else None

            def copy_part(b):
                np.copyto(dst[b[0]:b[1]], src[b[0]:b[1]])
            best = np.inf
            for _ in range(repeats):
                t0 = time.perf_counter()
                if pool is None:
                    np.copyto(dst, src)
                else:
                    list(pool.map(copy_part, bounds))
                best = min(best, time.perf_counter() - t0)
            if pool is not None:
                pool.shutdown()
            out.append({"bytes": int(src.nbytes), "threads": t, "seconds": best,
                        "bandwidth": 2.0 * src.nbytes / best})
        del src, dst
    return out


def bandwidth_for(probe, working_set, threads=1):
    """Bandwidth (B/s) open to ``threads`` threads on a working set of ``working_set``
    bytes: at each probe size the best of the thread counts up to ``threads``,
    interpolated linearly in log size between sizes (clamped at the ends)."""
    usable = [p for p in probe if p["threads"] <= max(threads, 1)] or probe
    best = {}
    for p in usable:
        best[p["bytes"]] = max(best.get(p["bytes"], 0.0), p["bandwidth"])
    sizes = sorted(best)
    return float(np.interp(np.log(max(working_set, 1)), np.log(sizes),
                           [best[s] for s in sizes]))


# --------------------------------------------------------------------------- memory
def _rss():
    try:
        import psutil
        return psutil.Process().memory_info().rss
    except ImportError:
        with open("/proc/self/statm") as fh:
            return int(fh.read().split()[1]) * os.sysconf("SC_PAGE_SIZE")


class PeakMemory:
    """Context manager: peak traced allocations (tracemalloc) and peak resident set.

    Attributes after the block: ``traced_peak`` (bytes allocated above the start),
    ``rss_start``, ``rss_peak`` (sampled every ``interval`` seconds) and
    ``rss_increase``.
    """

    def __init__(self, interval=0.002):
        self.interval = interval
        self._stop = threading.Event()

    def _sample(self):
        while not self._stop.wait(self.interval):
            self.rss_peak = max(self.rss_peak, _rss())

    def __enter__(self):
        self._owner = not tracemalloc.is_tracing()
        if self._owner:
            tracemalloc.start()
        tracemalloc.reset_peak()
        self._base = tracemalloc.get_traced_memory()[0]
        self.rss_start = self.rss_peak = _rss()
        self._thread = threading.Thread(target=self._sample, daemon=True)
        self._thread.start()
        return self

    def __exit__(self, *exc):
        self._stop.set()
        self._thread.join()
        self.rss_peak = max(self.rss_peak, _rss())
        self.traced_peak = tracemalloc.get_traced_memory()[1] - self._base
        if self._owner:
            tracemalloc.stop()
        self.rss_increase = self.rss_peak - self.rss_start
        return False


# ----------------------------------------------------------------------- iterations
def measure_iterations(engine, residual, *, iterations=200, repeats=3, region=None,
                       thread_counts=None):
    """Time ``iterations`` minor-cycle iterations, best of ``repeats`` identical runs.

    Every run starts from the same state, so each does the same work; thread counts
    are interleaved run by run.  Returns one dict per thread count with
    ``iteration_s``, the mean pixels updated and rescanned per iteration (clipped as
    the loop clips them), the bytes touched and the components per scale.
    """
    state = engine.loop_state(residual, region=region)
    counts = list(thread_counts or [engine.threads])
    best = {t: np.inf for t in counts}
    comps = None
    saved = engine.threads
    try:
        for _ in range(repeats):
            for t in counts:
                twin = state.copy()
                engine.threads = t
                t0 = time.perf_counter()
                comps = twin.iterate(iterations)
                best[t] = min(best[t], time.perf_counter() - t0)
    finally:
        engine.threads = saved
    n = comps[0].size
    write, scan = cost.touched_pixels(comps[0], comps[1], comps[2], engine.patch_half,
                                      state.planes.shape[1:], engine.tile)
    b = engine.dtype.itemsize
    common = {"iterations": int(n), "region_shape": list(state.planes.shape[1:]),
              "write_pixels": float(write.mean()), "scan_pixels": float(scan.mean()),
              "bytes_per_iteration": float((scan * (b + 1) + write * 2 * b).mean()),
              "working_set": int(state.planes.nbytes),
              "scale_counts": np.bincount(comps[2], minlength=engine.n_scales).tolist()}
    return [dict(common, threads=int(resolve_threads(t)), iteration_s=best[t] / max(n, 1))
            for t in counts]


def _major_step(op, model):
    """One major cycle as `run_cycles` does it: the residual, checked, and its statistics."""
    residual = as_image(op(model), "residual", dtype=op.dtype)
    masked_stats(residual, None)
    return residual


def _record(engine, dirty, psf):
    return {"size": int(dirty.shape[0]), "image_shape": list(dirty.shape),
            "psf_shape": list(psf.shape), "scales": list(engine.scales.pixels),
            "n_scales": engine.n_scales, "radii": list(engine.scales.support_radii),
            "psf_patch": int(engine.psf_info.patch_half), "itemsize": engine.dtype.itemsize,
            "tile": engine.tile}


def measure_point(dirty, psf, scales, *, psf_patch=None, iterations=200, repeats=3,
                  minor_components=100, dtype=None):
    """Measure one sweep point at one thread: precompute, minor and major cycles
    (first and warm), memory, and the iteration (see `measure_iterations`)."""
    with PeakMemory() as mem:
        engine = Engine(psf, scales, image_shape=dirty.shape, threads=1, psf_patch=psf_patch,
                        dtype=dtype)
        t0 = time.perf_counter()
        op = ImagePlaneOperator(dirty, engine.psf, fft=engine.fft, dtype=engine.dtype)
        t1 = time.perf_counter()
        minor = [engine.minor_cycle(dirty, max_components=minor_components) for _ in range(2)]
        t2 = time.perf_counter()
        _major_step(op, minor[0].model)
        t3 = time.perf_counter()
        _major_step(op, minor[0].model)
        t4 = time.perf_counter()
    rec = _record(engine, dirty, psf)
    rec.update({"precompute_s": engine.precompute_seconds, "setup_s": t1 - t0,
                "minor_first_s": minor[0].seconds, "minor_s": minor[1].seconds,
                "minor_components": int(minor[1].components.size),
                "major_first_s": t3 - t2, "major_s": t4 - t3,
                "traced_peak": int(mem.traced_peak), "rss_peak": int(mem.rss_peak),
                "rss_increase": int(mem.rss_increase)})
    del op, minor
    rec.update(measure_iterations(engine, dirty, iterations=iterations, repeats=repeats)[0])
    return rec


# ---------------------------------------------------------------------------- sweep
def _notify(callback, **event):
    logger.info("sweep: %s", event)
    if callback is not None:
        callback(dict(stage="sweep", **event))


def _ladder(n_scales, size, ladder=SCALE_LADDER):
    """The first ``n_scales`` diameters of the ladder, or None when one is over size / 2."""
    scales = list(ladder[:n_scales])
    return scales if len(scales) == n_scales and scales[-1] <= size // 2 else None


_COLD_RUN = """
import json, sys, time
from skyscale.cycles import deconvolve
from skyscale.sweep import synthetic_field
n, scales, comps, seed = json.loads(sys.argv[1])
dirty, psf = synthetic_field(n, seed=seed)
out = []
for _ in range(2):
    t0 = time.perf_counter()
    r = deconvolve(dirty, psf, scales=scales, max_components=comps, threads=1, restore=False)
    out.append({"seconds": time.perf_counter() - t0, "cycles": len(r.history) - 1,
                "components": int(r.components.size), "timings": r.timings,
                "psf_patch": r.parameters["psf_patch"]})
print(json.dumps(out))
"""


def measure_cold_start(n, scales, components=500, seed=13):
    """A run in a fresh Python process, twice: what the first run of a process pays more
    (imports made on first use, FFT plans, fresh memory pages).  Returns a dict with
    both runs' seconds and the predicted peak memory of the run."""
    import json
    import subprocess
    import sys
    pkg = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    env = dict(os.environ, PYTHONPATH=os.pathsep.join(
        [pkg] + [p for p in os.environ.get("PYTHONPATH", "").split(os.pathsep) if p]))
    done = subprocess.run([sys.executable, "-c", _COLD_RUN,
                           json.dumps([int(n), list(scales), int(components), int(seed)])],
                          env=env, capture_output=True, text=True, timeout=1800, check=True)
    first, second = json.loads(done.stdout.strip().splitlines()[-1])
    g = cost.run_geometry((n, n), (2 * n, 2 * n), cost._radii(scales), first["psf_patch"])
    return {"size": int(n), "scales": list(scales), "first": first, "second": second,
            "extra_s": first["seconds"] - second["seconds"],
            "memory": cost.predict_memory(g, {"memory": {"scale": 1.0}})["peak"]}


def _validate_run(cal, dirty, psf, scales, components, seed_note, threads=1):
    """One real run against its plan: ratios predicted / measured."""
    from .cycles import deconvolve
    with PeakMemory() as mem:
        t0 = time.perf_counter()
        res = deconvolve(dirty, psf, scales=scales, max_components=components,
                         threads=threads, restore=False)
        wall = time.perf_counter() - t0
    cycles = len(res.history) - 1
    n_comp = int(res.components.size)
    counts = [row["components"] for row in res.per_scale()]
    measured = {"precompute": res.timings["precompute"], "minor": res.timings["minor"],
                "major": res.timings["major"], "total": wall, "memory": mem.traced_peak}
    out = {"image_shape": list(dirty.shape), "scales": list(scales), "components": n_comp,
           "threads": resolve_threads(threads),
           "major_cycles": cycles, "scale_counts": counts, "field": seed_note,
           "measured": measured, "ratios": {}}
    for label, mix in (("uniform mix", None), ("run's mix", counts if sum(counts) else None)):
        p = cost.plan_run(dirty.shape, psf.shape, scales, max_components=n_comp,
                          threads=resolve_threads(threads),
                          psf_patch=res.parameters["psf_patch"], major_cycles=cycles,
                          calibration=cal, scale_mix=mix, memory_available=1 << 62,
                          fresh_process=False)
        pred = {"precompute": p.precompute_seconds, "minor": p.minor_seconds,
                "major": p.major_total_seconds, "total": p.total_seconds,
                "memory": p.memory_bytes}
        out["ratios"][label] = {k: pred[k] / measured[k] if measured[k] > 0 else None
                                for k in pred}
        out.setdefault("predicted", {})[label] = pred
    return out


def run_sweep(sizes=DEFAULT_SIZES, max_scales=DEFAULT_MAX_SCALES, *, iterations=200,
              repeats=3, thread_counts=None, quick=False, validate=True, callback=None):
    """Measure the cost of scales, image size, sub-region and threads, and fit the model.

    Parameters
    ----------
    sizes : sequence of int
        Square image sizes (the PSF is twice the size); default `DEFAULT_SIZES`.
    max_scales : int
        Scales 1 .. max_scales from `SCALE_LADDER`; default 8.
    iterations, repeats : int
        Iterations timed per run, and identical runs (the best is kept).
    thread_counts : sequence of int, optional
        Threads of the thread sweep; default 1 .. all cores.
    quick : bool
        Small settings (`QUICK_SETTINGS`) for a smoke test; the fit is rough.
    validate : bool
        Run deconvolutions on a field and size not swept and compare them with their plans.
    callback : callable, optional
        Receives progress dicts.

    Returns
    -------
    dict
        ``machine``, ``settings``, ``bandwidth``, ``points``, ``patch_points``,
        ``region_points``, ``thread_points``, ``fft_threads``, ``calibration``,
        ``validation`` and ``seconds``.
    """
    t_start = time.perf_counter()
    sizes = sorted({int(s) for s in sizes})
    if not sizes or sizes[0] < 32:
        raise ValueError(f"sizes is {sizes}, expected image sizes of at least 32 pixels")
    if not 1 <= int(max_scales) <= len(SCALE_LADDER):
        raise ValueError(f"max_scales is {max_scales}, expected 1 .. {len(SCALE_LADDER)}")
    q = QUICK_SETTINGS if quick else {}
    if quick:
        sizes, max_scales = list(q["sizes"]), min(int(max_scales), q["max_scales"])
        iterations, repeats = q["iterations"], q["repeats"]
    cores = os.cpu_count() or 1
    thread_counts = sorted(set(thread_counts or range(1, cores + 1)))
    out = {"machine": {"cores": cores, "numba_threads": resolve_threads(None),
                       "platform": platform.platform(), "python": platform.python_version(),
                       "numpy": np.__version__},
           "settings": {"sizes": sizes, "max_scales": int(max_scales), "iterations": iterations,
                        "repeats": repeats, "quick": bool(quick), "ladder": list(SCALE_LADDER)}}
    warm_d, warm_p = synthetic_field(64, seed=1)          # load the compiled kernels
    measure_iterations(Engine(warm_p, [0, 4], image_shape=warm_d.shape, threads=1), warm_d,
                       iterations=5, repeats=1)
    _notify(callback, what="bandwidth")
    out["bandwidth"] = bandwidth_probe(q.get("probe_bytes", PROBE_BYTES))
    fields = {n: synthetic_field(n, seed=0) for n in sizes}
    plan = [(n, k) for n in sizes for k in range(1, int(max_scales) + 1) if _ladder(k, n)]
    out["points"] = []
    for i, (n, k) in enumerate(plan):
        _notify(callback, what="scales", size=n, n_scales=k, done=i, total=len(plan))
        dirty, psf = fields[n]
        rec = measure_point(dirty, psf, _ladder(k, n), iterations=iterations, repeats=repeats)
        rec["bandwidth"] = bandwidth_for(out["bandwidth"], rec["working_set"], 1)
        rec["series"] = "ladder"
        out["points"].append(rec)
    small, large = sizes[0], sizes[-1]
    fill = [sorted(FILL_LADDER[:k]) for k in range(2, int(max_scales) + 1)
            if max(FILL_LADDER[:k]) <= small // 2]
    for i, scales in enumerate(fill):
        _notify(callback, what="fixed largest scale", size=small, scales=scales, done=i,
                total=len(fill))
        dirty, psf = fields[small]
        rec = measure_point(dirty, psf, scales, iterations=iterations, repeats=repeats)
        rec["bandwidth"] = bandwidth_for(out["bandwidth"], rec["working_set"], 1)
        rec["series"] = "fixed largest"
        out["points"].append(rec)
    n_mid = max(k for k in range(1, min(int(max_scales), 4) + 1) if _ladder(k, small))
    out["patch_points"] = []
    for h in q.get("patches", PATCH_SWEEP):
        _notify(callback, what="patch", psf_patch=h)
        dirty, psf = fields[small]
        e = Engine(psf, _ladder(n_mid, small), image_shape=dirty.shape, threads=1, psf_patch=h)
        rec = _record(e, dirty, psf)
        rec.update(measure_iterations(e, dirty, iterations=iterations, repeats=repeats)[0])
        out["patch_points"].append(rec)
    dirty, psf = fields[large]
    k_ref = max(k for k in range(1, min(int(max_scales), 6) + 1) if _ladder(k, large))
    e = Engine(psf, _ladder(k_ref, large), image_shape=dirty.shape, threads=1)
    out["region_points"] = []
    side = large
    while side >= max(64, large // 16):
        _notify(callback, what="region", side=side)
        y0 = (large - side) // 2
        rec = _record(e, dirty, psf)
        rec.update(measure_iterations(e, dirty, iterations=iterations, repeats=repeats,
                                      region=(y0, y0 + side, y0, y0 + side))[0])
        rec["region_area"] = side * side
        out["region_points"].append(rec)
        side //= 2
    _notify(callback, what="threads", threads=thread_counts)
    ref = _record(e, dirty, psf)
    out["thread_points"] = [dict(ref, **r) for r in measure_iterations(
        e, dirty, iterations=iterations, repeats=repeats + 2, thread_counts=thread_counts)]
    for r in out["thread_points"]:
        r["bandwidth"] = bandwidth_for(out["bandwidth"], r["working_set"], r["threads"])
    out["fft_threads"] = []
    model = e.minor_cycle(dirty, max_components=50).model
    for t in thread_counts:
        op = ImagePlaneOperator(dirty, e.psf, threads=t, dtype=e.dtype)
        _major_step(op, model)
        best = min(_timed(op, model) for _ in range(2))
        out["fft_threads"].append({"threads": t, "size": large, "major_s": best})
        del op
    del e
    out["cold_start"] = []
    for n in sorted({small} if quick else {max(small // 2, 64), min(large, 1024)}):
        _notify(callback, what="fresh process", size=n)
        out["cold_start"].append(measure_cold_start(n, [0, 4, 8],
                                                    q.get("validate_components", 500)))
    out["calibration"] = calibrate(out)
    out["validation"] = []
    if validate:   # a size that was not swept, and another field at the smallest size
        held = int(round(np.sqrt(small * large) / 32.0)) * 32
        while held in sizes:
            held += 96
        k_val = max(k for k in range(1, min(int(max_scales), 5) + 1) if _ladder(k, held))
        runs = [(held, _ladder(k_val, held), 11, 1)]
        if not quick:
            runs += [(held, _ladder(k_val, held), 11, None), (small, [0, 4, 8, 16], 12, 1)]
        for n, scales, seed, threads in runs:
            _notify(callback, what="validation", size=n, scales=scales, threads=threads)
            dirty, psf = synthetic_field(n, seed=seed)
            out["validation"].append(_validate_run(
                out["calibration"], dirty, psf, scales, q.get("validate_components", 3000),
                f"synthetic_field({n}, seed={seed})", threads))
    out["summary"] = summarize(out)
    out["seconds"] = time.perf_counter() - t_start
    return out


def _timed(op, model):
    t0 = time.perf_counter()
    _major_step(op, model)
    return time.perf_counter() - t0


# ------------------------------------------------------------------------ calibrate
def _geometry(rec):
    return cost.run_geometry(rec["image_shape"], rec["psf_shape"], rec["radii"],
                             rec["psf_patch"], itemsize=rec["itemsize"], tile=rec["tile"],
                             region_shape=rec.get("region_shape"))


def _work(g):
    """FFT work of the precompute, the major cycle and the smoothing, and plane pixels."""
    w = cost._fft_work
    return (w(g.precompute_fft), w(g.major_fft), sum(w(s) for s in g.smooth_ffts),
            g.n_scales * g.image_shape[0] * g.image_shape[1])


def _parallel_fraction(t1, tn, n):
    if n <= 1 or not t1 > 0 or not tn > 0:
        return 0.0
    return float(np.clip((1.0 - tn / t1) / (1.0 - 1.0 / n), 0.0, 1.0))


def calibrate(sweep):
    """Fit the coefficients of `skyscale.cost` to a sweep's measurements.

    Every family is a non-negative least-squares fit weighted to relative errors
    (`cost.fit_nonnegative`); ``fit`` holds each family's largest relative error.
    """
    pts = sweep["points"]
    iters = pts + sweep.get("patch_points", []) + sweep.get("region_points", [])
    cal = {"source": ("skyscale bench, sizes {sizes}, max scales {max_scales}, "
                      .format(**sweep["settings"]) + time.strftime("%Y-%m-%d")), "fit": {}}

    def misfit(model, y):
        rel = np.asarray(model) / np.asarray(y) - 1.0
        return {"rms": float(np.sqrt(np.mean(rel ** 2))), "max": float(np.max(np.abs(rel)))}

    def fit(name, keys, rows, y):
        coef, _ = cost.fit_nonnegative(rows, y)
        cal[name] = {k: float(c) for k, c in zip(keys, coef)}
        cal["fit"][name] = misfit(np.asarray(rows) @ coef, y)
    fit("iteration", ("fixed", "per_pixel", "per_row"),
        [[1.0, r["scan_pixels"], r["n_scales"] * -(-r["region_shape"][0] // r["tile"])]
         for r in iters], [r["iteration_s"] for r in iters])
    geo = [_work(_geometry(r)) for r in pts]
    fit("precompute", ("fixed", "per_psf_pixel", "per_forward", "per_pair"),
        [[1.0, r["psf_shape"][0] * r["psf_shape"][1], (r["n_scales"] + 1) * g[0],
          r["n_scales"] * (r["n_scales"] + 1) / 2 * g[0]] for r, g in zip(pts, geo)],
        [r["precompute_s"] for r in pts])
    over = [max(r["minor_s"] - r["minor_components"] * r["iteration_s"], 0.1 * r["minor_s"])
            for r in pts]
    fit("minor_overhead", ("fixed", "per_fft", "per_plane_pixel"),
        [[1.0, g[2], g[3]] for g in geo], over)

    def power(name, work, y):
        keep = [(w, v) for w, v in zip(work, y) if w > 0]
        w, v = np.array(keep).T
        law = cost.fit_power_law(w, np.maximum(v, 1e-5))
        cal[name] = {"coefficient": law["coefficient"], "exponent": law["exponents"][0]}
        cal["fit"][name] = misfit(law["coefficient"] * w ** law["exponents"][0],
                                  np.maximum(v, 1e-5))
    power("major", [g[1] for g in geo], [r["major_s"] for r in pts])
    power("first_major", [g[1] for g in geo], [r["major_first_s"] - r["major_s"] for r in pts])
    power("first_minor", [g[2] for g in geo], [r["minor_first_s"] - r["minor_s"] for r in pts])
    power("setup", [g[1] for g in geo], [r["setup_s"] for r in pts])
    th = sorted(sweep.get("thread_points", []), key=lambda r: r["threads"])
    ft = sorted(sweep.get("fft_threads", []), key=lambda r: r["threads"])
    cal["threads"] = {
        "iteration_parallel": _parallel_fraction(th[0]["iteration_s"], th[-1]["iteration_s"],
                                                 th[-1]["threads"]) if th else 0.0,
        "fft_parallel": _parallel_fraction(ft[0]["major_s"], ft[-1]["major_s"],
                                           ft[-1]["threads"]) if ft else 0.0,
        "measured_with": float(th[-1]["threads"]) if th else 1.0}
    ratios = [r["traced_peak"] / cost.predict_memory(_geometry(dict(r, region_shape=None)),
                                                     {"memory": {"scale": 1.0}})["peak"]
              for r in pts]
    cal["memory"] = {"scale": float(np.median(ratios))}
    cal["range"] = {"max_image_pixels": max(r["image_shape"][0] * r["image_shape"][1]
                                            for r in pts)}
    cold = sweep.get("cold_start", [])
    if cold:   # a process's first run against the warm model: a constant plus fresh pages
        extra = []
        for c in cold:
            run = c["first"]
            warm = cost.plan_run((c["size"],) * 2, (2 * c["size"],) * 2, c["scales"],
                                 max_components=run["components"], threads=1,
                                 psf_patch=run["psf_patch"], major_cycles=run["cycles"],
                                 calibration=cal, fresh_process=False,
                                 memory_available=1 << 62).total_seconds
            extra.append((c["memory"], max(run["seconds"] - warm, 0.0)))
            c["extra_over_model_s"] = extra[-1][1]
        extra.sort()
        per_byte = 0.0
        if len(extra) > 1 and extra[-1][0] > extra[0][0]:
            per_byte = max((extra[-1][1] - extra[0][1]) / (extra[-1][0] - extra[0][0]), 0.0)
        cal["startup"] = {"fixed": max(extra[0][1] - per_byte * extra[0][0], 0.0),
                          "per_byte": per_byte}
    cal["fit"]["memory"] = misfit(np.median(ratios), ratios)
    return cal


# ------------------------------------------------------------------------ summarize
#: The issue's targets: key -> (what is measured, limit, 'max' or 'min').
TARGETS = {
    "scales_exponent": ("per-iteration time ~ N_s^p A^q (A: pixels touched per plane), p",
                        1.1, "max"),
    "region_exponent": ("per-iteration time ~ (sub-region area)^p at fixed scales, p",
                        1.1, "max"),
    "bandwidth_ratio": ("iteration time / bandwidth-bound time, 2048 x 2048, 6 scales",
                        1.5, "max"),
    "thread_speedup": ("iteration: time at 1 thread / time at 2 threads", 1.6, "min"),
}


def _iteration_model(cal, rec):
    c = cal["iteration"]
    return (c["fixed"] + c["per_pixel"] * rec["scan_pixels"]
            + c["per_row"] * rec["n_scales"] * -(-rec["region_shape"][0] // rec["tile"]))


def summarize(sweep, calibration=None):
    """Fitted exponents, model-to-measurement ratios and the targets of a sweep."""
    cal = calibration or sweep["calibration"]
    pts = sweep["points"]
    ladder = [r for r in pts if r.get("series") == "ladder"]
    fill = [r for r in pts if r.get("series") == "fixed largest"]
    ex = {"iteration_vs_scales_ladder": {}, "precompute_vs_scales_ladder": {},
          "precompute_quadratic_ladder": {}, "memory_vs_scales_ladder": {}}
    for n in sorted({r["size"] for r in ladder}):
        rows = [r for r in ladder if r["size"] == n]
        if len(rows) < 2:
            continue
        ns = [r["n_scales"] for r in rows]
        ex["iteration_vs_scales_ladder"][n] = cost.fit_power_law(
            ns, [r["iteration_s"] for r in rows])["exponents"][0]
        ex["precompute_vs_scales_ladder"][n] = cost.fit_power_law(
            ns, [r["precompute_s"] for r in rows])["exponents"][0]
        ex["memory_vs_scales_ladder"][n] = cost.fit_power_law(
            ns, [r["traced_peak"] for r in rows])["exponents"][0]
        if len(rows) >= 3:
            c2, c1, c0 = np.polyfit(ns, [r["precompute_s"] for r in rows], 2)
            ex["precompute_quadratic_ladder"][n] = {"a": c0, "b": c1, "c": c2}
    if len(fill) >= 3:
        ns = [r["n_scales"] for r in fill]
        ex["iteration_vs_scales_fixed_largest"] = cost.fit_power_law(
            ns, [r["iteration_s"] for r in fill])["exponents"][0]
        c2, c1, c0 = np.polyfit(ns, [r["precompute_s"] for r in fill], 2)
        ex["precompute_quadratic_fixed_largest"] = {"a": c0, "b": c1, "c": c2}
    its = pts + sweep.get("patch_points", [])
    joint = cost.fit_power_law(np.column_stack([[r["n_scales"] for r in its],
                                                [r["scan_pixels"] / r["n_scales"] for r in its]]),
                               [r["iteration_s"] for r in its])
    ex["iteration_joint"] = joint
    by_ns = {}
    for r in ladder:
        by_ns.setdefault(r["n_scales"], []).append(r)
    ex["iteration_vs_image_area"] = {
        k: cost.fit_power_law([r["size"] ** 2 for r in v], [r["iteration_s"] for r in v])[
            "exponents"][0] for k, v in by_ns.items() if len({r["size"] for r in v}) > 1}
    reg = sweep.get("region_points", [])
    if len(reg) >= 2:
        ex["iteration_vs_region_area"] = cost.fit_power_law(
            [r["region_area"] for r in reg], [r["iteration_s"] for r in reg])["exponents"][0]
    for r in pts:
        g = _geometry(dict(r, region_shape=None))
        t = cost.predict_times(g, cal)
        r["model"] = {"iteration_s": _iteration_model(cal, r),
                      "planner_iteration_s": cost.predict_iteration(g, cal)[0],
                      "precompute_s": t["precompute"], "major_s": t["major"],
                      "memory": cost.predict_memory(g, cal)["peak"],
                      "bandwidth_bound_s": r["bytes_per_iteration"] / r["bandwidth"]}
    targets = []

    def target(key, value, where):
        what, limit, kind = TARGETS[key]
        met = None if value is None else (value <= limit if kind == "max" else value >= limit)
        targets.append({"key": key, "what": what, "limit": limit, "kind": kind,
                        "measured": value, "met": met, "where": where})
    target("scales_exponent", joint["exponents"][0],
           f"{len(its)} points: scale ladder, fixed largest scale, PSF patch sweep")
    target("region_exponent", ex.get("iteration_vs_region_area"),
           f"region sweep on {reg[0]['size']} x {reg[0]['size']}" if reg else "not measured")
    ref = [r for r in ladder if r["n_scales"] == 6]
    big = max(ref, key=lambda r: r["size"]) if ref else None
    target("bandwidth_ratio", big["iteration_s"] / big["model"]["bandwidth_bound_s"] if big
           else None, (f"{big['size']} x {big['size']}, 6 scales, 1 thread" +
                       ("" if big["size"] == 2048 else " (2048 was not swept)")) if big
           else "no 6-scale point")
    th = sorted(sweep.get("thread_points", []), key=lambda r: r["threads"])
    two = [r for r in th if r["threads"] == 2]
    target("thread_speedup", th[0]["iteration_s"] / two[0]["iteration_s"] if two and th
           else None, (f"{th[0]['size']} x {th[0]['size']}, {th[0]['n_scales']} scales"
                       if th else "not measured"))
    for r in th:
        r["bandwidth_ratio"] = r["iteration_s"] / (r["bytes_per_iteration"] / r["bandwidth"])
    return {"exponents": ex, "targets": targets}
