"""The planner: what a run will cost, before anything large is allocated.

`plan_run` puts the cost model (`skyscale.cost`) together for one run: its geometry,
the counts it is expected to need, the time of each step and the peak memory, with
the assumptions in words.  ``skyscale plan`` prints it; ``skyscale run`` refuses a run
that will not fit (`check_fits_memory`).
"""

from dataclasses import asdict, dataclass, field

import numpy as np

from skyscale.core.defaults import DEFAULTS, RUN_NOISE_THRESHOLD
from skyscale.core.noise import robust_noise
from skyscale.core.scales import ScaleSet
from skyscale.core.threads import openmp_wait, resolve_threads
from skyscale.core.validate import NUMBER_RULES, check_number, resolve_dtype
from skyscale.cost import model as cost
from skyscale.cost.remedies import bench_advice, memory_remedies

__all__ = ["Plan", "plan_run", "check_fits_memory", "max_affordable_scales",
           "AffordableScales", "InsufficientMemoryError", "seconds_text", "bytes_text"]


class InsufficientMemoryError(ValueError, MemoryError):
    """A planned run would need more memory than is available."""


def _gib(nbytes):
    return f"{nbytes / 2**30:.2f} GiB"


def seconds_text(seconds):
    """A planned time in words as ``skyscale plan`` and ``skyscale suggest`` quote it."""
    if seconds < 1e-3:
        return f"{seconds * 1e6:.3g} us"
    if seconds < 1:
        return f"{seconds * 1e3:.3g} ms"
    if seconds < 600:
        return f"{seconds:.3g} s"
    return f"{seconds / 60:.3g} min"


def bytes_text(nbytes):
    """A planned memory figure as ``skyscale plan`` and ``skyscale suggest`` quote it."""
    return "unknown" if nbytes is None else f"{nbytes / 2**20:,.0f} MiB"


@dataclass
class Plan:
    """Predicted cost of a run (seconds, bytes); ``plan['key']`` works too."""

    image_shape: tuple
    psf_shape: tuple
    scales: tuple
    threads: int
    dtype: str
    max_components: int
    counts: dict                   #: major_cycles, rounds, fft_updates, components, ...
    precompute_seconds: float      #: the engine: its smoothing kernels' transforms
    setup_seconds: float           #: the residual operator and the cycle's convolvers
    startup_seconds: float         #: imports and compiled-code loading of a fresh process
    round_seconds: float           #: one FFT update of the cycle's box (FFTs, gathers)
    loop_seconds: float            #: all sub-loops' Hogbom iterations and scans
    minor_seconds: float           #: all minor cycles: beams, updates, loops
    major_seconds: float           #: one major cycle: the residual and its statistics
    major_total_seconds: float
    total_seconds: float
    memory_bytes: int              #: predicted peak the run adds to the process
    memory_phase: str              #: where the peak happens
    memory_available: int | None
    fits: bool
    messages: list = field(default_factory=list)
    calibration: str = ""
    memory_terms: dict = field(default_factory=dict)
    #: when it will not fit: what would, each with its peak (`skyscale.cost.remedies`)
    remedies: list = field(default_factory=list)
    beams_seconds: float = 0.0     #: the beams, made by the first minor cycle
    fft_update_seconds: float = 0.0    #: all FFT updates
    direct_seconds: float = 0.0    #: all direct updates of the tracked pixels

    def __getitem__(self, key):
        return getattr(self, key)

    def as_dict(self):
        """Plain JSON-ready dict."""
        return {k: (list(v) if isinstance(v, tuple) else v) for k, v in asdict(self).items()}


def _shape2(value, name):
    try:
        shape = tuple(int(v) for v in value)
    except (TypeError, ValueError):
        shape = ()
    if len(shape) != 2 or min(shape) < 1:
        raise ValueError(f"{name} is {value!r}, expected (ny, nx) with two positive integers")
    return shape


def _spinning_threads():
    """True when Numba's kernels run on OpenMP threads that busy-wait when idle."""
    import numba
    if openmp_wait()["short"]:        # passive, or a short spin (skyscale's default)
        return False
    try:
        layer = numba.threading_layer()
    except ValueError:                 # no parallel kernel has run yet: what it will pick
        layer = numba.config.THREADING_LAYER
        if layer in ("default", "safe", "threadsafe"):
            try:
                from numba.np.ufunc import tbbpool  # noqa: F401
                layer = "tbb"
            except ImportError:
                layer = "omp"
    return layer == "omp"


def _dynamic_range(dirty, threshold, noise_threshold, messages):
    """Peak of ``dirty`` over the stop level (robust noise times the multiple).

    The dirty image's robust noise includes the sidelobes of its bright sources, so for
    a field whose sidelobes stand above the noise this underestimates the dynamic range
    (and the major cycles); ``dynamic_range=`` gives it directly.
    """
    data = np.asarray(dirty, dtype=np.float32)
    peak = float(np.nanmax(np.abs(data)))
    nu = RUN_NOISE_THRESHOLD if noise_threshold is None and not threshold \
        else (noise_threshold or 0.0)
    if noise_threshold is None and not threshold:
        messages.append(f"no stop level given: the dynamic range is counted to "
                        f"{RUN_NOISE_THRESHOLD:g} x the dirty image's robust noise")
    level = max(float(threshold), nu * robust_noise(data))
    messages.append("dynamic range measured on the dirty image, whose robust noise includes "
                    "the sidelobes of bright sources (an underestimate where they stand "
                    "above the noise; give dynamic_range for a closer figure)")
    return peak / level if level > 0 else cost.DEFAULT_DYNAMIC_RANGE


def plan_run(image_shape, psf, scales, *, max_components=DEFAULTS.max_components,
             max_major_cycles=DEFAULTS.max_major_cycles,
             threads=None, dtype=None, memory_available=None, scale_shape=DEFAULTS.scale_shape,
             calibration=None, fresh_process=True, dirty=None, dynamic_range=None,
             threshold=DEFAULTS.threshold, noise_threshold=None,
             cycle_depth=DEFAULTS.cycle_depth, mask_fraction=1.0,
             components=None, rounds=None, major_cycles=None, active_pixels=None,
             fft_updates=None, box_shape=None):
    """Predict the time and memory of a run before anything large is allocated.

    Parameters
    ----------
    image_shape : (int, int)
        Shape of the dirty image.
    psf : (int, int) or (py, px) ndarray
        The PSF's shape, or the PSF itself (only its shape is used).
    scales : sequence of float
        Scale diameters in pixels (0 = delta).
    max_components, max_major_cycles : int
        The run's budgets; defaults 20000 and 20, as `skyscale.deconvolve`.
    threads : int, optional
        Default all cores; more than this machine has are counted as its cores.
    dtype : {float32, float64}
        Default float32.
    memory_available : int, optional
        Bytes; default `cost.available_memory`.
    scale_shape : {'paraboloid', 'gaussian'}
    calibration : dict or str, optional
        Coefficients, or a calibration file; default `cost.load_calibration`.
    fresh_process : bool
        Count the one-off start-up of a new Python process (as with the command line).
    dirty : (ny, nx) ndarray, optional
        The dirty image: its peak over the stop level gives the dynamic range.
    dynamic_range : float, optional
        Peak over stop level, when ``dirty`` is not given; default
        `cost.DEFAULT_DYNAMIC_RANGE`.
    threshold, noise_threshold : float
        The run's stop levels (Jy/beam; multiple of the noise), for the dynamic range.
    cycle_depth : float
        As `skyscale.deconvolve`; default 0.2.
    mask_fraction : float
        Fraction of the image where components may go (the tracked pixels); default 1.
    box_shape : (int, int), optional
        The box the minor cycles work in: the mask's bounding box grown by the largest
        scale's radius; default the whole image.  The beams, the FFT updates and the
        direct updates follow it (the peak memory stays counted for the whole image,
        the most a later cycle's mask may take).
    components, rounds, major_cycles, active_pixels, fft_updates : optional
        Known counts (an earlier run of the field: ``result.components``,
        ``sub_loops``, major cycles, ``fft_updates``) instead of the estimates
        (`cost.estimate_counts`).

    Returns
    -------
    Plan
    """
    messages = []
    image_shape = _shape2(image_shape, "image_shape")
    psf_shape = np.shape(psf)[-2:] if np.ndim(psf) >= 2 else _shape2(psf, "psf")
    if psf_shape[0] < image_shape[0] or psf_shape[1] < image_shape[1]:
        raise ValueError(f"psf has shape {tuple(psf_shape)}, smaller than the image "
                         f"{image_shape}; make the PSF at least the image's size")
    dt = resolve_dtype(dtype)
    sset = ScaleSet(scales, shape=scale_shape, image_shape=image_shape)
    for name, value in (("max_components", max_components),
                        ("max_major_cycles", max_major_cycles), ("cycle_depth", cycle_depth),
                        ("threshold", threshold), ("noise_threshold", noise_threshold)):
        check_number(value, name, **NUMBER_RULES[name])      # as deconvolve checks them
    if not 0.0 < float(mask_fraction) <= 1.0:
        raise ValueError(f"mask_fraction is {mask_fraction}, expected a fraction in (0, 1]")
    cores = resolve_threads(None)
    if threads is None:
        threads = cores
    elif int(threads) < 1:
        raise ValueError(f"threads is {threads}, expected an integer >= 1 or None for all cores")
    elif int(threads) > cores:
        messages.append(f"threads {threads} is more than the {cores} this machine gives the "
                        f"engine; predicted for {cores}")
    threads = min(int(threads), cores)
    if threads > 1 and _spinning_threads():
        messages.append("with Numba's OpenMP threading layer and unlimited spinning, runs on "
                        "more than one thread were measured several times slower than on "
                        "one; set GOMP_SPINCOUNT=20000 (skyscale's default), "
                        "OMP_WAIT_POLICY=passive or NUMBA_THREADING_LAYER=workqueue; the "
                        "times here assume no such contention")
    cal = calibration if isinstance(calibration, dict) else cost.load_calibration(calibration)
    if dynamic_range is None and dirty is not None:
        dynamic_range = _dynamic_range(dirty, threshold, noise_threshold, messages)
    geom = cost.run_geometry(image_shape, psf_shape, sset.support_radii, itemsize=dt.itemsize)
    counts = cost.estimate_counts(
        geom, cal, dynamic_range=dynamic_range, max_components=max_components,
        max_major_cycles=max_major_cycles, cycle_depth=cycle_depth,
        scale_loop_depth=DEFAULTS.scale_loop_depth, mask_fraction=mask_fraction,
        components=components, rounds=rounds, major_cycles=major_cycles,
        active_pixels=active_pixels, fft_updates=fft_updates)
    for key, words in counts["how"].items():
        if words != "given":
            messages.append(f"{key.replace('_', ' ')}: {words}")
    if box_shape is not None:
        box_shape = _shape2(box_shape, "box_shape")
        if box_shape[0] > image_shape[0] or box_shape[1] > image_shape[1]:
            raise ValueError(f"box_shape is {box_shape}, larger than the image "
                             f"{image_shape}; give the mask's bounding box (grown by the "
                             "largest scale's radius), at most the image")
        counts["tracked_pixels"] = min(counts["tracked_pixels"],
                                       float(box_shape[0] * box_shape[1]))
        messages.append(f"minor cycles in a box of {box_shape[0]} x {box_shape[1]} pixels "
                        "(given); peak memory counted for the whole image")
    t = cost.predict_times(geom, cal, threads=threads,
                           tracked_pixels=counts["tracked_pixels"], box_shape=box_shape)
    rounds, fft_updates = counts["rounds"], counts["fft_updates"]
    loop = cost.loop_seconds(t, counts["components"], counts["active_pixels"], rounds)
    updates = fft_updates * t["round"]
    direct = (rounds - fft_updates) * t["direct"]
    cycles = counts["major_cycles"] * t["cycle"]
    minor = t["beams"] + updates + direct + loop + cycles
    major_each = t["major"] + t["stats"]
    major = counts["major_cycles"] * major_each + t["stats"]    # the dirty image's stats too
    big = cal.get("range", {}).get("max_image_pixels")
    mem = cost.predict_memory(geom, cal)
    avail = memory_available if memory_available is not None else cost.available_memory()
    if big and image_shape[0] * image_shape[1] > 1.5 * big:
        side = int(big ** 0.5)
        messages.append(f"the image is larger than the calibrated sizes (up to {side} x "
                        f"{side}); times are extrapolated: "
                        + bench_advice(image_shape, side, avail, cal))
    fits = cost.fits_memory(mem["peak"], avail)
    remedies = []
    if avail is None:
        messages.append("the memory available is unknown; not checked")
    elif not fits:
        messages.append(f"will not fit: needs about {_gib(mem['peak'])} (peak at "
                        f"{mem['peak_phase']}), {_gib(avail)} available")
        remedies = memory_remedies(image_shape, psf_shape, sset.pixels,
                                   itemsize=dt.itemsize, available=avail, calibration=cal,
                                   scale_shape=scale_shape)
    startup = cal.get("startup", {"fixed": 0.0})["fixed"] if fresh_process else 0.0
    total = t["precompute"] + t["setup"] + minor + major + startup
    return Plan(image_shape, tuple(psf_shape), sset.pixels, threads, dt.name,
                int(max_components), counts, t["precompute"], t["setup"], startup,
                t["round"], loop, minor, major_each, major, total, mem["peak"],
                mem["peak_phase"], avail, bool(fits), messages,
                cal.get("source", ""), mem["terms"], remedies, t["beams"], updates, direct)


def check_fits_memory(plan):
    """Raise `InsufficientMemoryError` (a ValueError and a MemoryError) if ``plan`` won't fit."""
    if not plan.fits:
        fit = [r["text"] for r in plan.remedies if r["fits"]]
        what = ("; what would fit: " + "; or ".join(fit) if fit else
                "; nothing of the scales, precision, PSF or size alone would fit: "
                + "; ".join(r["text"] for r in plan.remedies)) if plan.remedies else ""
        raise InsufficientMemoryError(
            f"the run needs about {_gib(plan.memory_bytes)} (predicted peak, at "
            f"{plan.memory_phase}) but {_gib(plan.memory_available)} is available{what}; "
            "or free memory")
    return plan


@dataclass
class AffordableScales:
    """The longest run of the smallest candidate scales that fits the budgets."""

    scales: tuple
    plan: Plan | None             #: the plan of ``scales`` (None when none fits)
    limited_by: str | None        #: 'memory', 'time' or None (every candidate fits)


def max_affordable_scales(image_shape, psf, candidate_scales, *, seconds_budget=None,
                          memory_budget=None, **plan_options):
    """Most scales (smallest first) whose predicted run fits the time and memory budgets.

    Parameters
    ----------
    image_shape, psf
        As in `plan_run`.
    candidate_scales : sequence of float
        Diameters in pixels; tried smallest first, since larger scales cost more.
    seconds_budget : float, optional
        Largest predicted total time; default no limit.
    memory_budget : int, optional
        Bytes; default the memory available now.
    **plan_options
        Passed to `plan_run`.

    Returns
    -------
    AffordableScales
    """
    cands = sorted(float(s) for s in candidate_scales)
    if not cands:
        raise ValueError("candidate_scales is empty; give at least one diameter")
    psf = np.shape(psf)[-2:] if np.ndim(psf) >= 2 else psf
    best, limited = None, None
    for i in range(1, len(cands) + 1):
        p = plan_run(image_shape, psf, cands[:i], memory_available=memory_budget, **plan_options)
        if not p.fits:
            limited = "memory"
        elif seconds_budget is not None and p.total_seconds > seconds_budget:
            limited = "time"
        if limited:
            break
        best = p
    return AffordableScales(best.scales if best else (), best, limited)
