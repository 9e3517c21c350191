r"""The cost model: time and memory of a planned run, predicted before anything is allocated.

The model follows what the engine does (`skyscale.core.engine`, `skyscale.core.driver`), term by
term, with coefficients measured on this machine by ``skyscale bench``
(`skyscale.cost.calibration`).  One real FFT (forward or inverse) of ``S`` points costs
``f(S) = c (S \log_2 S)^\gamma`` (the exponent above 1 as buffers outgrow the caches).
With ``N_s`` scales of which ``N_f`` are finite, the three FFT grids of the engine are:
``P`` (precompute, about ``2N + 8 r_max`` per side), ``M`` (the PSF convolution, about
``2N`` with a twice-size PSF) and ``S`` (the smoothing, about ``N + r_max``).

.. math::

    t_\mathrm{pre} = a_0 + a_1 n_\mathrm{psf} + a_2 [(2 N_f + 1) f(P) + N_f f(S) + f(M)]
                     + a_3 N_s (2N)^2

    t_\mathrm{round} = b_0 + b_1 [2 f(M) + (1 + N_f) f(S)] + b_2 N_s N^2

    t_\mathrm{loop} = \ell_1 \sum_\mathrm{components} A + \sum_\mathrm{rounds} (\ell_2 A + \ell_0)

    t_\mathrm{major} = m_0 + m_1\, 2 f(M) + m_2 N^2, \qquad
    t_\mathrm{stats} = s_0 + s_1 (1 + N_f) f(S) + s_2 N_s N^2

    t_\mathrm{setup} = e_0 + a_1 n_\mathrm{psf} + e_1 [3 f(M) + 2 f(S)]

    t = t_\mathrm{pre} + t_\mathrm{setup} + R\, t_\mathrm{round} + t_\mathrm{loop}
        + C (t_\mathrm{major} + t_\mathrm{stats}) + t_\mathrm{stats}

``A`` is the sub-loop's active set (pixels of the chosen scale above the sub-loop's
level, in the mask), ``R`` the rounds (sub-loops, each ending with the exact update)
and ``C`` the major cycles; ``t_stats`` is the smoothing, noise and peaks after a major
cycle (and of the dirty image) with the next minor cycle's own set-up; ``t_setup`` the
residual operator and the first use of the cycle's FFT plans.  How the counts are
estimated is in `estimate_counts`: they depend on the field, and the planner says
which it assumed.  Times are those of one unshared core (the sweep measures CPU
seconds).  Threads divide the
parallel part (Amdahl's law, fractions measured with 1 and 2 threads).  Memory has
one account, `predict_memory`: the planner's figure and `skyscale.Engine`'s
``memory`` (and its ``max_memory`` check, `fits_memory`) are the same number.
"""

import math
from dataclasses import dataclass

from scipy.fft import next_fast_len

from skyscale.cost.calibration import (CALIBRATION_ENV, DEFAULT_CALIBRATION,
                                       default_calibration_path, fit_nonnegative,
                                       fit_power_law, load_calibration, save_calibration)
from skyscale.core.defaults import DEFAULTS

__all__ = ["DEFAULT_CALIBRATION", "CALIBRATION_ENV", "DEFAULT_DYNAMIC_RANGE",
           "MEMORY_HEADROOM", "LOOP_TERMS", "Geometry", "run_geometry", "fft_work",
           "fft_seconds", "predict_times", "loop_features", "loop_seconds",
           "estimate_counts", "predict_memory", "engine_memory", "fits_memory",
           "available_memory", "load_calibration", "save_calibration",
           "default_calibration_path", "fit_power_law", "fit_nonnegative"]

#: Peak over stop level assumed when neither the dirty image nor a dynamic range is given.
DEFAULT_DYNAMIC_RANGE = 1000.0
#: A run fits when its predicted peak times this is at most the memory available.
MEMORY_HEADROOM = 1.10


def fft_work(shape):
    """``S log2 S`` for an FFT of ``shape``: the unit of FFT work."""
    s = float(shape[0]) * float(shape[1])
    return s * math.log2(max(s, 2.0))


def _amdahl(fraction, threads):
    """Time factor of ``threads`` threads for a parallel fraction (Amdahl's law)."""
    f = min(max(float(fraction), 0.0), 1.0)
    return (1.0 - f) + f / max(int(threads), 1)


def _grid(n, below, above):
    """FFT length of a centred circular convolution without wrap-around on ``n`` pixels
    (as `skyscale.core.fft.Convolver` chooses it)."""
    return next_fast_len(int(n + max(min(below, n - 1), min(above, n - 1))), real=True)


@dataclass(frozen=True)
class Geometry:
    """Sizes a run's cost depends on, from shapes alone."""

    image_shape: tuple
    psf_shape: tuple
    radii: tuple                 #: support half-width of each scale kernel
    itemsize: int
    precompute_grid: tuple       #: FFT grid of the scale beams (None: delta scales only)
    smooth_grid: tuple           #: FFT grid of the smoothing (None: delta scales only)
    major_grid: tuple            #: FFT grid of the PSF convolution

    @property
    def n_scales(self):
        return len(self.radii)

    @property
    def n_finite(self):
        return sum(1 for r in self.radii if r > 0)

    @property
    def pixels(self):
        return self.image_shape[0] * self.image_shape[1]

    def transforms(self):
        """FFTs per step, as ``{step: [(grid, count), ...]}``."""
        nf = self.n_finite
        pre = [(self.major_grid, 1)]
        step_s = []
        if nf:
            pre += [(self.precompute_grid, 2 * nf + 1), (self.smooth_grid, nf)]
            step_s = [(self.smooth_grid, 1 + nf)]
        setup = [(self.major_grid, 3)] + ([(self.smooth_grid, 2)] if nf else [])
        return {"precompute": pre, "setup": setup,
                "round": [(self.major_grid, 2)] + step_s, "major": [(self.major_grid, 2)],
                "stats": step_s}


def run_geometry(image_shape, psf_shape, radii, *, itemsize=4):
    """The `Geometry` of a run (no large array is made)."""
    ny, nx = (int(v) for v in image_shape)
    py, px = (int(v) for v in psf_shape)
    r = tuple(int(v) for v in radii)
    rmax = max(r) if r else 0
    major = (_grid(ny, py // 2, py - 1 - py // 2), _grid(nx, px // 2, px - 1 - px // 2))
    pre = smooth = None
    if rmax > 0:
        region = (2 * (ny - 1 + 2 * rmax) + 1, 2 * (nx - 1 + 2 * rmax) + 1)
        pre = tuple(next_fast_len(int(v + 4 * rmax), real=True) for v in region)
        smooth = (_grid(ny, rmax, rmax), _grid(nx, rmax, rmax))
    return Geometry((ny, nx), (py, px), r, int(itemsize), pre, smooth, major)


def fft_seconds(pieces, calibration, threads=1):
    """Seconds of the FFTs ``[(grid, count), ...]`` under the calibration's FFT law."""
    c = calibration["fft"]
    t = sum(n * c["coefficient"] * fft_work(g) ** c["exponent"] for g, n in pieces)
    return t * _amdahl(calibration["threads"]["fft_parallel"], threads)


def predict_times(geom, calibration=None, *, threads=1):
    """Seconds of each step: ``precompute``, ``setup`` (the residual operator), ``round``
    (one sub-loop's exact update, without the loop), ``major`` (one residual),
    ``stats`` (smoothing and noise after a major cycle), and the loop's
    ``per_component_pixel``, ``per_active_pixel`` and ``per_sub_loop``.  The set-up
    also counts the first use of the cycle's FFT plans (their buffers made: about the
    work of three transforms on the PSF convolution's grid and two on the smoothing's)."""
    cal = calibration or load_calibration()
    ffts = {k: fft_seconds(v, cal, threads) for k, v in geom.transforms().items()}
    n_psf = geom.psf_shape[0] * geom.psf_shape[1]
    ny, nx = geom.image_shape
    pre, rnd, maj, sts = (cal[k] for k in ("precompute", "round", "major", "stats"))
    loop = _amdahl(cal["threads"]["loop_parallel"], threads)
    return {
        "precompute": pre["fixed"] + pre["per_psf_pixel"] * n_psf
        + pre["per_fft_second"] * ffts["precompute"]
        + pre["per_beam_pixel"] * geom.n_scales * (2 * ny - 1) * (2 * nx - 1),
        "setup": cal["setup"]["fixed"] + pre["per_psf_pixel"] * n_psf
        + cal["setup"]["per_fft_second"] * ffts["setup"],
        "round": rnd["fixed"] + rnd["per_fft_second"] * ffts["round"]
        + rnd["per_plane_pixel"] * geom.n_scales * geom.pixels,
        "major": maj["fixed"] + maj["per_fft_second"] * ffts["major"]
        + maj["per_plane_pixel"] * geom.pixels,
        "stats": sts["fixed"] + sts["per_fft_second"] * ffts["stats"]
        + sts["per_plane_pixel"] * geom.n_scales * geom.pixels,
        "per_component_pixel": cal["loop"]["per_component_pixel"] * loop,
        "per_active_pixel": cal["loop"]["per_active_pixel"] * loop,
        "per_sub_loop": cal["loop"]["per_sub_loop"],
    }


#: The sub-loop's cost terms, in the order of `loop_features` (seconds per component
#: and active pixel, per active pixel of a sub-loop, per sub-loop).
LOOP_TERMS = ("per_component_pixel", "per_active_pixel", "per_sub_loop")


def loop_features(active_pixels, components):
    """The sub-loop's cost features, one per `LOOP_TERMS`: what the calibration fits.

    A sub-loop over ``A`` active pixels that takes ``m`` components costs
    ``l_1 m A + l_2 A + l_0`` (see `loop_seconds`), so its features are ``[m A, A, 1]``.
    """
    return [float(components) * float(active_pixels), float(active_pixels), 1.0]


def loop_seconds(times, components, active_pixels, sub_loops=1):
    r"""Seconds of ``sub_loops`` sub-loops taking ``components`` in all over
    ``active_pixels`` (per sub-loop): the one home of the loop's cost formula.

    .. math:: t_\mathrm{loop} = \ell_1 m A + R (\ell_2 A + \ell_0)

    Parameters
    ----------
    times : dict
        `predict_times` (or a calibration's ``loop`` section): the `LOOP_TERMS`.
    components : float
        Components ``m`` taken (in all the sub-loops).
    active_pixels : float
        Active set ``A`` of a sub-loop (the mean, for many).
    sub_loops : int
        Sub-loops ``R``; default 1.
    """
    a = float(active_pixels)
    return (times["per_component_pixel"] * components * a
            + sub_loops * (times["per_active_pixel"] * a + times["per_sub_loop"]))


def estimate_counts(geom, calibration=None, *, dynamic_range=None,
                    max_components=DEFAULTS.max_components,
                    max_major_cycles=DEFAULTS.max_major_cycles,
                    cycle_depth=DEFAULTS.cycle_depth,
                    scale_loop_depth=DEFAULTS.scale_loop_depth,
                    mask_fraction=1.0, components=None, rounds=None, major_cycles=None,
                    active_pixels=None):
    """Major cycles, rounds, components and active pixels a run is expected to need.

    Parameters
    ----------
    geom : Geometry
    calibration : dict, optional
    dynamic_range : float, optional
        Peak of the dirty image over the stop level; default `DEFAULT_DYNAMIC_RANGE`.
    max_components, max_major_cycles, cycle_depth, scale_loop_depth
        As given to `skyscale.deconvolve`.
    mask_fraction : float
        Fraction of the image where components may go; default 1.
    components, rounds, major_cycles, active_pixels : optional
        Known counts (from an earlier run of the same field) replace the estimates.

    Returns
    -------
    dict
        ``major_cycles``, ``rounds``, ``components``, ``active_pixels`` (mean per
        sub-loop) and ``how`` (words per count: 'given' or how it was estimated).

    Notes
    -----
    Each minor cycle cleans every scale from its peak to ``cycle_depth`` of it, so the
    peak falls by about ``1 / cycle_depth`` per major cycle and a dynamic range ``D``
    needs ``C = ceil(ln D / ln(1 / cycle_depth)) + c_0`` major cycles (``c_0`` from the
    calibration: the last cycles that only settle the noise).  Each sub-loop takes its
    scale to ``scale_loop_depth`` of its peak, so one scale needs
    ``ln(cycle_depth) / ln(scale_loop_depth)`` rounds per minor cycle; the scales share
    emission (cleaning one lowers the others), so the rounds are
    ``R = rho C N_s`` with ``rho`` calibrated on the sweep's fields.  The components
    are the budget: how many a field needs before it reaches its stop levels depends
    on how its flux spreads over pixels and scales, which no shape tells, so the
    planner counts the most the run may take and its time is an upper bound in that
    term.  The active set is ``alpha`` of the pixels where components may go
    (``alpha`` measured on the sweep's fields: emission above half of a scale's peak).
    """
    cal = calibration or load_calibration()
    cnt = cal["counts"]
    how = {}
    if major_cycles is None:
        d = max(float(dynamic_range or DEFAULT_DYNAMIC_RANGE), 1.0)
        step = math.log(1.0 / min(max(cycle_depth, 1e-3), 0.999))
        major_cycles = min(int(max_major_cycles),
                           int(math.ceil(math.log(d) / step + cnt["cycles_offset"])))
        how["major_cycles"] = (f"dynamic range {d:.3g}"
                               + ("" if dynamic_range else " (assumed)")
                               + f", peak falling {1 / cycle_depth:.2g}x per major cycle")
    else:
        how["major_cycles"] = "given"
    if rounds is None:
        rounds = int(math.ceil(cnt["rounds_per_scale_cycle"] * geom.n_scales * major_cycles))
        how["rounds"] = (f"{cnt['rounds_per_scale_cycle']:.2g} per scale and major cycle "
                         "(calibrated)")
    else:
        how["rounds"] = "given"
    if components is None:
        components = int(max_components)
        how["components"] = "the component budget (an upper bound: runs stop earlier)"
    else:
        how["components"] = "given"
    if active_pixels is None:
        active_pixels = cnt["active_fraction"] * float(mask_fraction) * geom.pixels
        how["active_pixels"] = (f"{cnt['active_fraction']:.2g} of the pixels components may "
                                "use (calibrated; extended emission has more)")
    else:
        how["active_pixels"] = "given"
    return {"major_cycles": int(major_cycles), "rounds": int(rounds),
            "components": int(components), "active_pixels": float(active_pixels),
            "how": how}


def _complex(grid):
    return 16 * int(grid[0]) * (int(grid[1]) // 2 + 1)


def _real(grid):
    return 8 * int(grid[0]) * int(grid[1])


def predict_memory(geom, calibration=None):
    """Peak bytes a run adds to the process, and where it happens: the one memory account.

    Counted from the code with the pyfftw backend: the engine's arrays (one scale beam
    per scale, the smoothed residuals twice: the working set and the copy a rejected
    sub-loop returns to, and the cycle's images: residual in float64, model, its
    increment, mask), the FFT plans the backend keeps for the engine's lifetime (each
    an input and an output buffer: the precompute's per kernel shape, the smoothing's
    and the PSF convolution's, three each), the transforms kept by the convolvers and
    the residual operator, the PSF copies, and the largest transient (the beams'
    transforms while they are made, or a round's update).

    Returns
    -------
    dict
        ``peak`` (bytes, times the calibrated ``memory.scale``), ``peak_phase``
        ('precompute' or 'cycles'), ``phases``, ``terms`` and ``engine`` (what
        `skyscale.Engine` keeps as ``memory``: the terms with ``total`` = ``peak`` and
        ``peak_phase``).
    """
    cal = calibration or load_calibration()
    b = geom.itemsize
    ny, nx = geom.image_shape
    n = geom.n_scales
    n_psf = geom.psf_shape[0] * geom.psf_shape[1]
    nf = geom.n_finite
    plan_p = plan_s = 0
    work_p = work_s = 0
    if nf:
        p, s = geom.precompute_grid, geom.smooth_grid
        plan_p = (len({r for r in geom.radii if r > 0}) + 2) * (_real(p) + _complex(p))
        ry, rx = (2 * (v - 1 + 2 * max(geom.radii)) + 1 for v in geom.image_shape)
        work_p = 8 * ry * rx + 4 * _complex(p) + _real(p)
        plan_s = 3 * (_real(s) + _complex(s))
        work_s = 2 * _complex(s) + _real(s)
    m = geom.major_grid
    t = {
        "beams": n * (2 * ny - 1) * (2 * nx - 1) * b,
        "planes": 2 * n * ny * nx * b,
        "images": 2 * ny * nx * 8 + 2 * ny * nx * b + ny * nx,
        "psf_copies": 2 * b * n_psf,
        "precompute_plans": plan_p,
        "cycle_plans": plan_s + 3 * (_real(m) + _complex(m)),
        "kept_transforms": 2 * _complex(m) + nf * (_complex(geom.smooth_grid) if nf else 0),
        "precompute_work": work_p,
        "cycle_work": max(2 * _complex(m) + _real(m), work_s) + 2 * 8 * geom.pixels
        + geom.n_scales * geom.pixels * (1 + b),
    }
    phases = {
        "precompute": t["beams"] + t["psf_copies"] // 2 + t["precompute_plans"]
        + t["precompute_work"],
        "cycles": sum(v for k, v in t.items() if k != "precompute_work"),
    }
    scale = float(cal["memory"]["scale"])
    peak_phase = max(phases, key=phases.get)
    peak = int(scale * phases[peak_phase])
    return {"peak": peak, "peak_phase": peak_phase,
            "phases": {k: int(scale * v) for k, v in phases.items()},
            "engine": dict(t, total=peak, peak_phase=peak_phase), "terms": t}


def engine_memory(image_shape, psf_shape, radii, itemsize=4, calibration=None):
    """`predict_memory` of an engine's shapes: what `skyscale.Engine` keeps as ``memory``.

    Parameters
    ----------
    image_shape, psf_shape : (int, int)
    radii : sequence of int
        Support half-width of each scale kernel.
    itemsize : int
        4 for float32, 8 for float64.
    calibration : dict, optional
        Default `load_calibration` (its ``memory.scale``), as the planner reads it.

    Returns
    -------
    dict
        The terms of `predict_memory` (bytes), ``total`` (its ``peak``) and ``peak_phase``.
    """
    geom = run_geometry(image_shape, psf_shape, radii, itemsize=itemsize)
    return predict_memory(geom, calibration)["engine"]


def fits_memory(peak, available):
    """True when a predicted ``peak`` (bytes) fits in ``available`` bytes.

    The rule of the planner and of ``Engine(max_memory=)``: the peak times
    `MEMORY_HEADROOM` (the model's margin) must be at most what is available; an
    unknown ``available`` (None) fits.
    """
    return available is None or peak * MEMORY_HEADROOM <= available


def available_memory():
    """Bytes of memory available now (psutil, else /proc/meminfo), or None if unknown."""
    try:
        import psutil
        return int(psutil.virtual_memory().available)
    except ImportError:
        pass
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    return None




_PLANNER = ("Plan", "plan_run", "check_fits_memory", "max_affordable_scales",
            "AffordableScales", "InsufficientMemoryError")


def __getattr__(name):   # the planner lives in skyscale.cost.planner; old import paths keep working
    if name in _PLANNER:
        from skyscale.cost import planner
        return getattr(planner, name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
