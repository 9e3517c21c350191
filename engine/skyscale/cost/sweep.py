"""Measuring what scales cost: the scaling sweep, its calibration runs and the check.

`run_sweep` measures, on an invented field (`synthetic_field`), for each image size
and scale set: the precompute, the residual operator's set-up, the beams the first
minor cycle makes, the sub-loops of a minor cycle (each FFT or direct update, the
sub-loop itself per component and per active pixel, the cycle's own scans), one major
cycle and its statistics, and the peak memory (tracemalloc and the resident set)
against the planner's; it times single FFTs on every grid the points use, direct
updates of the whole image at each size, and the sub-loop and the FFTs at 1 and 2
threads.  Whole runs at the swept sizes calibrate the counts (rounds, FFT updates,
active pixels, major cycles); runs at sizes and on fields it did not see check the
planner.  The measuring tools are in `skyscale.cost.instruments`;
`skyscale.cost.sweepfit` fits and summarises.  Nothing here prints: progress goes to
``callback(dict)`` and the log.

Times at one thread are the process's CPU time (`cpu_clock`), not the wall clock: on a
machine shared with other work the wall clock of a long step depends on the load far
more than on the step, and the planner predicts the time of an unshared core.  The
thread probes, which must see threads run side by side, use the wall clock.
"""

import logging
import os
import platform
import time

import numpy as np

from skyscale.cost import model as cost
from skyscale.cost import planner
from skyscale.cost.instruments import (RSS_INTERVAL, PeakMemory, SubLoopRecord,  # noqa: F401
                                       cpu_clock, fft_probe, kept_warnings,
                                       record_sub_loops)
from skyscale.core.threads import resolve_threads, thread_limit
from skyscale.core.cycle_work import CycleWork
from skyscale.core.driver import deconvolve, masked_stats
from skyscale.core.engine import Engine
from skyscale.core.kernels import scale_loop
from skyscale.core.operators import ImagePlaneOperator
from skyscale.cost.sweepfit import calibrate, summarize
from skyscale.cost.sweep_plan import (DEFAULT_SIZES, SCALE_SETS, VALIDATION_RUNS,
                                      calibration_runs, scale_radii, sets_for)

__all__ = ["QUICK_SETTINGS", "synthetic_field", "PeakMemory",
           "cpu_clock", "record_sub_loops", "SubLoopRecord", "direct_probe", "fft_probe",
           "measure_point", "measure_run", "run_sweep"]

logger = logging.getLogger(__name__)

#: Components of the minor cycle timed per point (after a shorter one that makes the
#: cycle's FFT plans).
POINT_COMPONENTS = 1500
#: Settings of ``quick=True`` (a smoke run for tests: seconds, not minutes).
QUICK_SETTINGS = {"sizes": (96, 128), "scale_sets": ((0,), (0, 4, 8)), "components": 60,
                  "run_components": 300, "validate_size": 112}


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


# --------------------------------------------------------------------------- points
def _record(engine, dirty, psf):
    return {"size": int(dirty.shape[0]), "image_shape": list(dirty.shape),
            "psf_shape": list(psf.shape), "scales": list(engine.scales.pixels),
            "n_scales": engine.n_scales, "radii": list(engine.scales.support_radii),
            "itemsize": engine.dtype.itemsize}


def _timed(fn, *args, **kw):
    t0 = time.process_time()
    out = fn(*args, **kw)
    return out, time.process_time() - t0


def _cycle_rows(mc, rec, n_scales, pixels):
    """One minor cycle's own overhead (CPU seconds outside its sub-loops, updates, beams
    and convolvers) with its features: ``[seconds, sub-loops, tracked pixels]``."""
    inside = (sum(t for _, _, t in rec) + sum(u[3] for u in rec.updates)
              + sum(b[2] for b in rec.beams) + sum(rec.tools))
    tracked = max((u[2] for u in rec.updates), default=pixels)
    return [max(mc.seconds - mc.timings.get("smooth", 0.0) - inside, 0.0), int(mc.rounds),
            int(tracked)]


def _update_rows(rec):
    return [[kind, m, n_t, t] for kind, m, n_t, t, ok in rec.updates if ok]


def measure_point(dirty, psf, scales, *, components=POINT_COMPONENTS, dtype=None):
    """One sweep point at one thread: precompute, set-up, the beams, the sub-loops and
    updates of one minor cycle (FFT and direct), one major cycle and its statistics,
    and the peak memory (CPU seconds)."""
    with PeakMemory(RSS_INTERVAL) as mem, cpu_clock():
        engine = Engine(psf, scales, image_shape=dirty.shape, threads=1, dtype=dtype)
        op, setup = _timed(ImagePlaneOperator, dirty, engine.psf, fft=engine.fft,
                           dtype=engine.dtype)
        state, stats_first = _timed(engine.measure, dirty)
        with record_sub_loops() as first_loops:     # the beams and convolvers made
            first = engine.minor_cycle(dirty, max_components=max(components // 20, 1),
                                       state=state, exact_residual=False)
        with record_sub_loops() as loops:
            mc = engine.minor_cycle(dirty, max_components=components, state=state,
                                    exact_residual=False)
        residual, major = _timed(op, mc.model)
        masked_stats(residual, None)
        _, stats = _timed(engine.measure, residual)
        residual, major2 = _timed(op, mc.model)
    npx = dirty.size
    updates = _update_rows(first_loops) + _update_rows(loops)
    fft = [u[3] for u in updates if u[0] == "fft"]
    rec = _record(engine, dirty, psf)
    rec.update({"precompute_s": engine.precompute_seconds,
                "setup_s": setup + sum(first_loops.tools) + sum(loops.tools),
                "beams_s": sum(b[2] for b in first_loops.beams + loops.beams),
                "beams_made": sum(b[0] for b in first_loops.beams + loops.beams),
                "beam_rows": [list(b) for b in first_loops.beams + loops.beams],
                "rounds": int(mc.rounds), "updates": len(fft),
                "round_s": float(np.mean(fft)) if fft else 0.0,
                "update_rows": updates,
                "cycle_rows": [_cycle_rows(first, first_loops, engine.n_scales, npx),
                               _cycle_rows(mc, loops, engine.n_scales, npx)],
                "loops": [list(r) for r in loops], "components": int(mc.components.size),
                "major_s": min(major, major2), "stats_first_s": stats_first,
                "stats_s": stats,
                "traced_peak": int(mem.traced_peak), "rss_increase": int(mem.rss_increase),
                "engine_memory": int(engine.memory["total"])})
    return rec


def measure_run(dirty, psf, scales, *, max_components, noise_threshold=3.0, threads=1,
                seed_note=""):
    """A whole `skyscale.deconvolve` run at one thread: its time by step (CPU seconds;
    ``wall`` beside), its counts (sub-loops, FFT updates, direct updates and the share of
    their allowance the direct ones used) and peak memory."""
    if resolve_threads(threads) != 1:
        raise ValueError(f"threads is {threads}: measure_run times CPU seconds and needs 1")
    with record_sub_loops() as loops, PeakMemory(RSS_INTERVAL) as mem, cpu_clock(), \
            kept_warnings() as said:
        t0, c0 = time.perf_counter(), time.process_time()
        res = deconvolve(dirty, psf, scales=scales, max_components=max_components,
                         noise_threshold=noise_threshold, threads=threads, restore=False)
        wall, cpu = time.perf_counter() - t0, time.process_time() - c0
    act = [a for a, _, _ in loops]
    took = sum(m for _, m, _ in loops)
    # the active set a component's sub-loop scans, on average (each sub-loop weighted by
    # its components: the loop's cost m A sums over them)
    weighted = sum(a * m for a, m, _ in loops) / took if took else 0.0
    sigma = res.scale_noise[0] if res.scale_noise else 0.0
    level = noise_threshold * sigma
    g = cost.run_geometry(dirty.shape, psf.shape, scale_radii(scales))
    n1 = len(scales) + 1
    allowance = cost.direct_cost_ratio() * g.fft_update_work()
    used = [m * n_t * n1 / allowance for kind, m, n_t, _, ok in loops.updates
            if kind == "direct" and ok]
    return {"image_shape": list(dirty.shape), "psf_shape": list(psf.shape),
            "scales": list(scales), "field": seed_note, "threads": resolve_threads(threads),
            "max_components": int(max_components), "stop_reason": res.stop_reason,
            "warnings": list(said),
            "components": int(res.components.size), "rounds": int(res.sub_loops),
            "fft_updates": int(res.fft_updates),
            "direct_updates": sum(1 for u in loops.updates if u[0] == "direct" and u[4]),
            "allowance_used": float(np.mean(used)) if used else 0.0,
            "major_cycles": len(res.history) - 1,
            "active_pixels": float(weighted),
            "active_pixels_per_sub_loop": float(np.mean(act)) if act else 0.0,
            "dynamic_range": float(np.abs(dirty).max() / level) if level > 0 else None,
            "measured": {"precompute": res.timings["precompute"], "minor": res.timings["minor"],
                         "major": res.timings["major"], "total": cpu,
                         "memory": int(mem.traced_peak)},
            "wall": wall, "load": list(os.getloadavg()), "rss_increase": int(mem.rss_increase),
            "loops": [list(r) for r in loops], "update_rows": _update_rows(loops),
            "beam_rows": [list(b) for b in loops.beams]}


def predicted_for(run, calibration, *, a_priori):
    """The planner's figures for a measured run: with its own counts (``a_priori``
    False: the model per step) or from its dynamic range and budget alone."""
    kw = {} if a_priori else {k: run[k] for k in ("components", "rounds", "major_cycles",
                                                  "active_pixels", "fft_updates")}
    p = planner.plan_run(run["image_shape"], run["psf_shape"], run["scales"],
                      max_components=run["max_components"], threads=run["threads"],
                      calibration=calibration, memory_available=1 << 62, fresh_process=False,
                      dynamic_range=run["dynamic_range"], **kw)
    g = cost.run_geometry(run["image_shape"], run["psf_shape"],
                          [int(r) for r in scale_radii(run["scales"])])
    op = cost.predict_times(g, calibration, threads=run["threads"])["major"]
    return {"precompute": p.precompute_seconds, "minor": p.minor_seconds,
            "major": p.counts["major_cycles"] * op, "total": p.total_seconds,
            "memory": p.memory_bytes, "counts": p.counts}


# ---------------------------------------------------------------------------- sweep
def _notify(callback, **event):
    logger.info("sweep: %s", event)
    if callback is not None:
        callback(dict(stage="sweep", **event))


def loop_threads_probe(n=512, iterations=40, thread_counts=(1, 2), repeats=3):
    """The sub-loop on a whole plane (``n * n`` active pixels, the parallel path) at
    each thread count, interleaved run by run: ``[{'threads', 'seconds'}]``."""
    dirty, psf = synthetic_field(n, seed=3)
    e = Engine(psf, [0, 4], image_shape=dirty.shape, threads=1)
    plane = e.smooth(dirty)[1]
    ys, xs = np.nonzero(np.ones(plane.shape, bool))
    best = {t: np.inf for t in thread_counts}
    for _ in range(repeats):
        for t in thread_counts:
            values = plane.ravel().copy()
            with thread_limit(t):
                t0 = time.perf_counter()
                scale_loop(values, ys, xs, e.beams[1], beam_peak=e.beam_peaks[1], gain=0.1,
                           level=0.0, max_iter=iterations, parallel=True)
                best[t] = min(best[t], time.perf_counter() - t0)
    return [{"threads": int(resolve_threads(t)), "seconds": best[t], "active": int(plane.size),
             "iterations": iterations} for t in thread_counts]


def direct_probe(sizes, scales=(0, 4, 8, 16), components=(1, 8), repeats=3):
    """Direct updates of the whole image's pixels (the largest tracked set) at each size:
    ``[{'size', 'n_scales', 'tracked', 'components', 'seconds'}]`` (CPU seconds, best of
    ``repeats``).  Their cost per pixel and plane grows with the tracked set once it
    outgrows the caches, which the calibration runs at small sizes do not see."""
    out = []
    for n in sorted({int(v) for v in sizes}):
        sc = [s for s in scales if s <= n // 4]
        dirty, psf = synthetic_field(n, seed=0)
        e = Engine(psf, sc, image_shape=dirty.shape, threads=1)
        with thread_limit(1):
            state = e.measure(dirty)
            allowed = e.allowed(None)
            work = CycleWork(e, dirty.astype(np.float64), state.planes, allowed,
                             np.ones(dirty.shape, bool), e._box(allowed))
            for m in components:
                ys = n // 2 + np.arange(m) % 7
                xs = n // 2 + np.arange(m) // 7
                best = np.inf
                for _ in range(repeats):
                    t0 = time.process_time()
                    work.apply_direct(0, ys, xs, np.full(m, 1e-6), np.inf)
                    best = min(best, time.process_time() - t0)
                out.append({"size": n, "n_scales": len(sc), "scales": list(sc),
                            "tracked": int(work.tys.size),
                            "components": int(m), "seconds": float(best)})
        del e, work, state
    return out


_COLD_RUN = """
import json, sys, time
t0 = time.process_time()
from skyscale.core.driver import deconvolve
from skyscale.cost.sweep import synthetic_field
n, scales, comps, seed = json.loads(sys.argv[1])
dirty, psf = synthetic_field(n, seed=seed)
t1 = time.process_time()
r = deconvolve(dirty, psf, scales=scales, max_components=comps, threads=1, restore=False,
               noise_threshold=3.0)
t2 = time.process_time()
print(json.dumps({"imports_s": t1 - t0, "seconds": t2 - t1, "components": int(r.components.size),
                  "rounds": int(r.sub_loops), "cycles": len(r.history) - 1}))
"""


def measure_cold_start(n, scales, components=500, seed=13):
    """A run in a fresh Python process: imports, then the first run (compiled code
    loaded from the cache, FFT plans made, fresh memory pages); CPU seconds."""
    import json
    import subprocess
    import sys
    pkg = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
    env = dict(os.environ, PYTHONPATH=os.pathsep.join(
        [pkg] + [p for p in os.environ.get("PYTHONPATH", "").split(os.pathsep) if p]))
    done = subprocess.run([sys.executable, "-c", _COLD_RUN,
                           json.dumps([int(n), list(scales), int(components), int(seed)])],
                          env=env, capture_output=True, text=True, timeout=900, check=True)
    out = json.loads(done.stdout.strip().splitlines()[-1])
    out.update({"size": int(n), "scales": list(scales)})
    return out


def run_sweep(sizes=DEFAULT_SIZES, *, scale_sets=SCALE_SETS, components=POINT_COMPONENTS,
              thread_counts=None, quick=False, validate=True, callback=None):
    """Measure the cost of scales, image size and threads; fit and check the model.

    Parameters
    ----------
    sizes : sequence of int
        Square image sizes (the PSF is twice the size); default `DEFAULT_SIZES`.
    scale_sets : sequence of sequences
        Scale sets per size (those whose largest scale is over a quarter of the size
        are skipped; above 1024 x 1024 every other one); default `SCALE_SETS`.
    components : int
        Components of the minor cycle timed per point.
    thread_counts : sequence of int, optional
        Threads of the thread probes; default 1 and all cores.
    quick : bool
        Small settings (`QUICK_SETTINGS`) for a smoke test; the fit is rough.
    validate : bool
        Run deconvolutions on sizes and fields not swept and compare them with their plans.
    callback : callable, optional
        Receives progress dicts.

    Returns
    -------
    dict
        ``machine``, ``settings``, ``points``, ``fft``, ``fft_threads``, ``loop_threads``,
        ``runs`` (calibration runs), ``cold_start``, ``calibration``, ``validation``,
        ``summary`` and ``seconds``.
    """
    t_start = time.perf_counter()
    q = QUICK_SETTINGS if quick else {}
    sizes = sorted({int(s) for s in (q.get("sizes") or sizes)})
    if not sizes or sizes[0] < 32:
        raise ValueError(f"sizes is {sizes}, expected image sizes of at least 32 pixels")
    scale_sets = q.get("scale_sets", scale_sets)
    components = q.get("components", components)
    cores = os.cpu_count() or 1
    thread_counts = sorted(set(thread_counts or (1, cores)))
    out = {"machine": {"cores": cores, "numba_threads": resolve_threads(None),
                       "platform": platform.platform(), "python": platform.python_version(),
                       "numpy": np.__version__, "load": list(os.getloadavg())},
           "settings": {"sizes": sizes, "scale_sets": [list(s) for s in scale_sets],
                        "components": components, "quick": bool(quick)}}
    wd, wp = synthetic_field(64, seed=1)                  # load the compiled kernels
    measure_point(wd, wp, [0, 4], components=20)
    out["points"] = []
    todo = [(n, s) for n in sizes for s in sets_for(n, scale_sets)]
    for i, (n, scales) in enumerate(todo):
        _notify(callback, what="point", size=n, scales=list(scales), done=i, total=len(todo))
        dirty, psf = synthetic_field(n, seed=0)
        out["points"].append(measure_point(dirty, psf, list(scales), components=components))
    grids = set()
    for r in out["points"]:
        g = cost.run_geometry(r["image_shape"], r["psf_shape"], r["radii"])
        grids |= {g.major_grid} | ({g.precompute_grid, g.smooth_grid} if g.n_finite else set())
    _notify(callback, what="fft", grids=len(grids))
    out["fft"] = fft_probe(grids)
    big = max(grids, key=lambda g: g[0] * g[1] if g[0] * g[1] < 2.5e7 else 0)
    out["fft_threads"] = [fft_probe([big], threads=t)[0] for t in thread_counts]
    _notify(callback, what="loop threads")
    out["loop_threads"] = loop_threads_probe(n=q.get("sizes", (512,))[0] if quick else 512,
                                             thread_counts=thread_counts)
    _notify(callback, what="direct updates")
    out["direct_probe"] = direct_probe(sizes)
    out["runs"] = []
    budget = q.get("run_components", 20000)
    cal_runs = calibration_runs(sizes)
    for n, scales in cal_runs:
        _notify(callback, what="calibration run", size=n, scales=list(scales))
        dirty, psf = synthetic_field(n, seed=0)
        out["runs"].append(measure_run(dirty, psf, list(scales), max_components=budget,
                                       seed_note=f"synthetic_field({n}, seed=0)"))
    out["cold_start"] = []
    if not quick:
        _notify(callback, what="fresh process", size=256)
        out["cold_start"].append(measure_cold_start(256, [0, 4, 8], budget))
    out["calibration"] = calibrate(out)
    out["validation"] = []
    if validate:
        held = [(q["validate_size"], (0, 4, 8), 11)] if quick else list(VALIDATION_RUNS)
        for n, scales, seed in held:
            _notify(callback, what="validation", size=n, scales=list(scales))
            dirty, psf = synthetic_field(n, seed=seed)
            run = measure_run(dirty, psf, list(scales), max_components=budget,
                              seed_note=f"synthetic_field({n}, seed={seed})")
            for label, prior in (("model, run's counts", False), ("a priori", True)):
                pred = predicted_for(run, out["calibration"], a_priori=prior)
                run.setdefault("predicted", {})[label] = pred
                run.setdefault("ratios", {})[label] = {
                    k: pred[k] / v if v else None for k, v in run["measured"].items()}
            out["validation"].append(run)
    out["summary"] = summarize(out)
    out["machine"]["load_after"] = list(os.getloadavg())
    out["seconds"] = time.perf_counter() - t_start
    return out
