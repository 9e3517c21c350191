r"""The cost model: time and memory of a planned run, predicted before anything is allocated.

The model follows what the engine does (`skyscale.core.engine`, `skyscale.core.driver`), term by
term, with coefficients measured on this machine by ``skyscale bench``
(`skyscale.cost.calibration`).  One real FFT (forward or inverse) of ``S`` points costs
``f(S) = c (S \log_2 S)^\gamma`` (the exponent above 1 as buffers outgrow the caches).
With ``N_s`` scales of which ``N_f`` are finite, ``N_b`` beams (one per scale, and one
per pair of scales that direct updates use) and ``N_t`` tracked pixels (the mask in the
cycle's box; the whole image at most), the FFT grids of the engine are ``P`` (the beams,
about ``2N + 8 r_max`` per side), ``M`` (the PSF convolution, about ``2N`` with a
twice-size PSF) and ``S`` (the smoothing, about ``N + r_max``).

.. math::

    t_\mathrm{pre} = a_0 + a_1 n_\mathrm{psf} + a_2 N_f f(S)

    t_\mathrm{beams} = (1 + N_s) [c_0 + c_1 (1 + N_f) f(P)] + c_1 N_b f(P) + c_2 N_b (2N)^2

    t_\mathrm{setup} = e_0 + a_1 n_\mathrm{psf} + e_1 [2 f(M) + N_f f(S)]

    t_\mathrm{fft} = b_0 + b_1 [2 f(M) + (1 + N_f) f(S)] + b_2 N_s N^2, \qquad
    t_\mathrm{direct} = d_0 + d_1 W + d_2 P N_t (N_t / 2^{20})^\delta

    t_\mathrm{sub} = \ell_1 m A + \ell_2 A + \ell_0 + g_1 N_s N_t, \qquad
    t_\mathrm{cycle} = h_0 + h_1 N_s N^2

    t_\mathrm{major} = m_0 + m_1\, 2 f(M) + m_2 N^2, \qquad
    t_\mathrm{stats} = s_0 + s_1 (1 + N_f) f(S) + s_2 N_s N^2

    t = t_\mathrm{pre} + t_\mathrm{setup} + t_\mathrm{beams} + U t_\mathrm{fft}
        + (R - U) t_\mathrm{direct} + \sum_\mathrm{sub-loops} t_\mathrm{sub}
        + C (t_\mathrm{cycle} + t_\mathrm{major} + t_\mathrm{stats}) + t_\mathrm{stats}

A minor cycle makes the beams once (the first one; the beams are kept), and applies each
of its ``R`` sub-loops either by an FFT update of its box (``U`` of them) or directly to
the tracked pixels, whose multiply-adds ``W = m N_t (N_s + 1)`` the engine allows up to
``DIRECT_COST_RATIO`` of an FFT update's work units (`skyscale.core.engine`); a direct
update uses ``kappa`` of that allowance on average (calibrated); each also passes over
every tracked pixel of its ``P`` planes (every scale's, and the residual's unless a
delta scale stands for it; ``W`` counts the multiply-adds on them), at a cost per pixel
that grows (``delta``) once the tracked set outgrows the caches.  Pair beams are made
by a scale's first direct update; the beams are counted as if every scale had one.  ``A`` is the sub-loop's
active set (pixels of the chosen scale above the sub-loop's level, in the mask), ``m``
its components, ``C`` the major cycles; ``t_sub`` holds the sub-loop's Hogbom iterations
and its scans of the tracked pixels (peaks, the active set), ``t_cycle`` a minor cycle's
own set-up (the box's copies of the residual and planes), ``t_stats`` the smoothing,
noise and peaks after a major cycle (and of the dirty image), ``t_setup`` the residual
operator and the cycle's convolvers.  How the counts are estimated is in
`estimate_counts`: they depend on the field, and the planner says which it assumed.
Times are those of one unshared core (the sweep measures CPU seconds).  Threads divide
the parallel part (Amdahl's law, fractions measured with 1 and 2 threads).  Memory has
one account, `skyscale.core.memory.predict_memory`: the planner's figure and `skyscale.Engine`'s ``memory``
(and its ``max_memory`` check, `fits_memory`) are the same number.
"""

import math

from skyscale.core.calibration import (CALIBRATION_ENV, DEFAULT_CALIBRATION,
                                       default_calibration_path, load_calibration)
from skyscale.core.defaults import DEFAULTS
from skyscale.core.grids import Geometry, fft_work, run_geometry
from skyscale.core.memory import (MEMORY_HEADROOM, available_memory, engine_memory,
                                  fits_memory, predict_memory)
from skyscale.cost.calibration import fit_nonnegative, fit_power_law, save_calibration

__all__ = ["DEFAULT_CALIBRATION", "CALIBRATION_ENV", "DEFAULT_DYNAMIC_RANGE",
           "MEMORY_HEADROOM", "LOOP_TERMS", "Geometry", "run_geometry", "fft_work",
           "fft_seconds", "predict_times", "loop_features", "loop_seconds",
           "estimate_counts", "predict_memory", "engine_memory", "fits_memory",
           "available_memory", "load_calibration", "save_calibration",
           "default_calibration_path", "fit_power_law", "fit_nonnegative",
           "direct_cost_ratio", "direct_pixel_planes", "direct_passes", "beam_extent"]

#: Peak over stop level assumed when neither the dirty image nor a dynamic range is given.
DEFAULT_DYNAMIC_RANGE = 1000.0


def _amdahl(fraction, threads):
    """Time factor of ``threads`` threads for a parallel fraction (Amdahl's law)."""
    f = min(max(float(fraction), 0.0), 1.0)
    return (1.0 - f) + f / max(int(threads), 1)


def direct_cost_ratio():
    """The engine's rule for direct updates (`skyscale.core.engine.DIRECT_COST_RATIO`)."""
    from skyscale.core.engine import DIRECT_COST_RATIO
    return float(DIRECT_COST_RATIO)


def fft_seconds(pieces, calibration, threads=1):
    """Seconds of the FFTs ``[(grid, count), ...]`` under the calibration's FFT law."""
    c = calibration["fft"]
    t = sum(n * c["coefficient"] * fft_work(g) ** c["exponent"] for g, n in pieces)
    return t * _amdahl(calibration["threads"]["fft_parallel"], threads)


def beam_extent(box_shape, image_shape):
    """The extent the engine makes beams for, for a cycle's box: each side rounded up to
    `skyscale.core.precompute.EXTENT_STEP`, at most the image's."""
    from skyscale.core.precompute import EXTENT_STEP
    return tuple(min(int(n), -(-int(b) // EXTENT_STEP) * EXTENT_STEP)
                 for b, n in zip(box_shape, image_shape))


def predict_times(geom, calibration=None, *, threads=1, tracked_pixels=None, box_shape=None):
    """Seconds of each step: ``precompute`` (the engine), ``beams`` (made by the first
    minor cycle), ``setup`` (the residual operator and the cycle's convolvers),
    ``round`` (one FFT update), ``direct`` (one direct update of a typical size:
    ``kappa`` of the engine's allowance), ``per_direct_madd``, ``per_sub_loop_scan``
    (a sub-loop's scans of the tracked pixels), ``cycle`` (a minor cycle's own set-up),
    ``major`` (one residual), ``stats`` (smoothing and noise after a major cycle), and
    the loop's ``per_component_pixel``, ``per_active_pixel`` and ``per_sub_loop``.

    ``box_shape`` is the box the minor cycles work in (the mask's bounding box grown by
    the largest scale's radius; default the whole image): the beams, the FFT updates
    and the direct updates follow it.  ``tracked_pixels`` defaults to the box's."""
    cal = calibration or load_calibration()
    box = geom if box_shape is None else run_geometry(
        [min(int(b), n) for b, n in zip(box_shape, geom.image_shape)], geom.psf_shape,
        geom.radii, itemsize=geom.itemsize)
    ext = box if box_shape is None else run_geometry(
        beam_extent(box.image_shape, geom.image_shape), geom.psf_shape, geom.radii,
        itemsize=geom.itemsize)
    ffts = {k: fft_seconds(v, cal, threads) for k, v in geom.transforms().items()}
    bffts = {k: fft_seconds(v, cal, threads) for k, v in box.transforms().items()}
    setup = fft_seconds([(geom.major_grid, 1)] + box.transforms()["setup"][1:]
                        + [(box.major_grid, 1)], cal, threads)
    n_psf = geom.psf_shape[0] * geom.psf_shape[1]
    n_t = float(box.pixels if tracked_pixels is None else min(tracked_pixels, box.pixels))
    pre, bm, rnd, maj, sts = (cal[k] for k in ("precompute", "beams", "round", "major",
                                               "stats"))
    d, sc = cal["direct"], cal["scan"]
    loop = _amdahl(cal["threads"]["loop_parallel"], threads)
    # the engine allows m N_t (N_s + 1) <= ratio x the update's work; kappa of it is used
    passes = direct_passes(geom.n_scales, 0 in geom.radii)
    madds = (d["allowance_used"] * direct_cost_ratio() * box.fft_update_work()
             * passes / (geom.n_scales + 1))
    return {
        "precompute": pre["fixed"] + pre["per_psf_pixel"] * n_psf
        + pre["per_fft_second"] * ffts["precompute"],
        "beams": bm["fixed"] * (1 + ext.n_scales) + bm["per_fft_second"] * fft_seconds(
            ext.transforms()["beams"], cal, threads)
        + bm["per_beam_pixel"] * (ext.n_scales + ext.n_pairs) * ext.beam_pixels,
        "setup": cal["setup"]["fixed"] + pre["per_psf_pixel"] * n_psf
        + cal["setup"]["per_fft_second"] * setup,
        "round": rnd["fixed"] + rnd["per_fft_second"] * bffts["round"]
        + rnd["per_plane_pixel"] * box.n_scales * box.pixels,
        "direct": d["fixed"] + (d["per_madd"] * madds + d["per_pixel_plane"]
                                * direct_pixel_planes(passes, n_t, d["pixel_exponent"]))
        * loop,
        "per_direct_madd": d["per_madd"] * loop,
        "per_sub_loop_scan": sc["per_tracked_pixel"] * geom.n_scales * n_t * loop,
        "cycle": sc["cycle_fixed"] + sc["per_plane_pixel"] * geom.n_scales * geom.pixels,
        "major": maj["fixed"] + maj["per_fft_second"] * ffts["major"]
        + maj["per_plane_pixel"] * geom.pixels,
        "stats": sts["fixed"] + sts["per_fft_second"] * ffts["stats"]
        + sts["per_plane_pixel"] * geom.n_scales * geom.pixels,
        "per_component_pixel": cal["loop"]["per_component_pixel"] * loop,
        "per_active_pixel": cal["loop"]["per_active_pixel"] * loop,
        "per_sub_loop": cal["loop"]["per_sub_loop"],
    }


def direct_passes(n_scales, has_delta):
    """Planes a direct update passes over: every scale's, and the residual's unless a
    delta scale's plane is the residual itself (`skyscale.core.engine`)."""
    return int(n_scales) + (0 if has_delta else 1)


def direct_pixel_planes(passes, tracked, exponent):
    """The direct update's pass over the tracked pixels, in units of the calibration's
    ``direct.per_pixel_plane``: ``P N_t (N_t / 2^20)^delta`` for ``P`` planes
    (`direct_passes`)."""
    t = float(tracked)
    return passes * t * (max(t, 1.0) / 2.0 ** 20) ** float(exponent)


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

    .. math:: t_\mathrm{loop} = \ell_1 m A + R (\ell_2 A + \ell_0 + g_1 N_s N_t)

    The last term, each sub-loop's scans of the tracked pixels, is counted when
    ``times`` has it (``per_sub_loop_scan``, as `predict_times` gives it).

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
            + sub_loops * (times["per_active_pixel"] * a + times["per_sub_loop"]
                           + times.get("per_sub_loop_scan", 0.0)))


def estimate_counts(geom, calibration=None, *, dynamic_range=None,
                    max_components=DEFAULTS.max_components,
                    max_major_cycles=DEFAULTS.max_major_cycles,
                    cycle_depth=DEFAULTS.cycle_depth,
                    scale_loop_depth=DEFAULTS.scale_loop_depth,
                    mask_fraction=1.0, components=None, rounds=None, major_cycles=None,
                    active_pixels=None, fft_updates=None):
    """Major cycles, rounds, FFT updates, components and active pixels a run is expected
    to need.

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
    components, rounds, major_cycles, active_pixels, fft_updates : optional
        Known counts (from an earlier run of the same field) replace the estimates.

    Returns
    -------
    dict
        ``major_cycles``, ``rounds``, ``fft_updates`` (the rounds applied by an FFT
        update; the others are direct), ``components``, ``active_pixels`` (mean per
        sub-loop), ``tracked_pixels`` and ``how`` (words per count: 'given' or how it
        was estimated).

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
    A fraction ``phi`` of the rounds (calibrated) take too many components for a direct
    update and are FFT updates: ``U = ceil(phi R)``, at least one per major cycle.  The
    tracked pixels are the pixels components may use.
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
    if fft_updates is None:
        phi = cnt["fft_update_fraction"]
        fft_updates = min(int(rounds), max(int(math.ceil(phi * rounds)),
                                           min(int(major_cycles), int(rounds))))
        how["fft_updates"] = f"{phi:.2g} of the sub-loops (calibrated), the others direct"
    else:
        fft_updates = min(int(fft_updates), int(rounds))
        how["fft_updates"] = "given"
    return {"major_cycles": int(major_cycles), "rounds": int(rounds),
            "fft_updates": int(fft_updates), "components": int(components),
            "active_pixels": float(active_pixels),
            "tracked_pixels": float(mask_fraction) * geom.pixels, "how": how}
