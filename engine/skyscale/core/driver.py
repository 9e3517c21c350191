"""The major-cycle driver, stop rules and history: `deconvolve`.

References
----------
.. [1] Clark, B. G. 1980, A&A 89, 377 (minor cycles corrected by major cycles).
.. [2] Schwab, F. R. 1984, AJ 89, 1076.
.. [3] Cornwell, T. J. 2008, IEEE J. Sel. Topics Signal Process. 2(5), 793.
.. [4] Rousseeuw, P. J. & Croux, C. 1993, JASA 88, 1273.
.. [5] Offringa, A. R. & Smirnov, O. 2017, MNRAS 471, 301.
"""

import logging
import time
import warnings

import numpy as np

from skyscale.core.threads import thread_limit, threads_in_effect
from skyscale.core.validate import InputError, as_image, resolve_dtype
from skyscale.core.levels import allowed_peak, scale_levels
from skyscale.core.engine import Engine
from skyscale.core.operators import (ImagePlaneOperator, as_operator, describe_operator,
                                     exact_box, exact_region)
from skyscale.core.result import COMPONENT_DTYPE, CycleRecord, DeconvolutionResult
from skyscale.core.noise import keep_outside_noise
from skyscale.core.outcome import outcome_warnings
from skyscale.core.stops import MINOR_STOP_REASONS, run_stop_after_empty_cycle
from skyscale.core.defaults import DEFAULTS

__all__ = ["deconvolve", "run_cycles", "masked_stats"]

logger = logging.getLogger(__name__)

#: A major cycle may raise the peak residual in the mask by at most this fraction (the
#: float32 rounding of the model) before it is rolled back.
PEAK_TOLERANCE = 1e-4

#: After a minor cycle that reached every scale's stop level, the run stops when every
#: scale is within this factor of its level (the noise re-measured, the mask renewed).
LEVEL_SLACK = 1.05

#: Rollbacks allowed in a row before the run stops as 'no_progress' or 'diverging'.
MAX_RETRIES = 2


def masked_stats(residual, mask):
    """Peak |residual| and rms inside ``mask`` (everywhere when ``mask`` is None)."""
    data = residual if mask is None else residual[mask]
    if data.size == 0:
        return 0.0, 0.0
    data = data.astype(np.float64, copy=False)
    return float(np.abs(data).max()), float(np.sqrt(np.mean(data ** 2)))


def _notify(callback, **event):
    if callback is not None:
        callback(event)


def _level_stop(noise_threshold, levels, threshold):
    """'noise' when a noise multiple set some scale's level, else 'threshold'."""
    return "noise" if noise_threshold is not None and np.any(levels > threshold) else "threshold"


def _progress(peaks, levels):
    """The largest penalised response relative to its level: what cleaning still has to do."""
    return float(np.max(peaks / np.maximum(levels, 1e-30)))


def run_cycles(engine, operator, *, dirty=None, model=None, mask=None, threshold=0.0,
               noise_threshold=None, extended_depth=DEFAULTS.extended_depth,
               max_components=DEFAULTS.max_components, max_major_cycles=DEFAULTS.max_major_cycles,
               cycle_depth=DEFAULTS.cycle_depth, mask_updater=None,
               callback=None, blank=None):
    """Alternate minor cycles of ``engine`` with major cycles of ``operator``.

    Parameters
    ----------
    engine : Engine
    operator : callable
        ``operator(model) -> residual`` (Jy/beam).
    dirty : (ny, nx) ndarray, optional
        The residual of an empty model; computed with ``operator`` when not given.
    model : (ny, nx) ndarray, optional
        Model to start from (Jy/pixel); its residual is computed with ``operator``.
    mask, threshold, noise_threshold, extended_depth, max_components, max_major_cycles,
    cycle_depth
        See `deconvolve`.
    mask_updater : callable, optional
        ``mask_updater(residual, centres, previous_mask, noise=sigma) -> mask``, called
        after every major cycle (the automatic mask); ``centres`` is non-zero where
        components are centred (the model's footprint would grow the mask by each
        kernel's radius every cycle) and ``sigma`` is the smallest scale's noise.
    callback : callable, optional
        Receives progress dicts (``stage`` 'major' or 'minor').
    blank : (ny, nx) bool ndarray, optional
        Pixels without data (see `deconvolve`): left out of the noise and of the stop.

    Returns
    -------
    DeconvolutionResult
        Without restored image or beam (see `deconvolve`).

    Notes
    -----
    Each scale has its own stop level (`skyscale.core.levels.scale_levels`) from its own
    noise, measured where there is no emission and where the residual is exact; the run
    stops when every scale is below its level inside the mask.  Minor cycles subtract
    whole scale beams and update every scale exactly after each sub-loop, and reject a
    sub-loop that would raise the peak residual in the mask above the larger of the
    cycle's starting peak and 1.1 times the delta scale's stop level
    (`skyscale.core.levels.allowed_peak`), so with an exact operator no major cycle raises
    it above that within the cycle's mask (an emission mask that grows may take in
    pixels whose residual is higher).  A major cycle that does all the same (an
    inexact operator) is rolled back and retried with a shallower minor cycle, at most
    twice in a row; then the run stops, 'no_progress' when the rise is within 1 %,
    'diverging' otherwise.  Rollbacks are counted in ``result.rollbacks``.  A residual
    with non-finite values stops the run as 'diverging' with the last good model.
    """
    with thread_limit(engine.threads):      # the noise and the mask's FFTs too
        return _run_cycles(engine, operator, dirty, model, mask, threshold, noise_threshold,
                           extended_depth, max_components, max_major_cycles, cycle_depth,
                           mask_updater, callback, blank)


def _run_cycles(engine, operator, dirty, model, mask, threshold, noise_threshold,
                extended_depth, max_components, max_major_cycles, cycle_depth, mask_updater,
                callback, blank):
    t_major = 0.0
    t_minor = 0.0
    t0 = time.perf_counter()
    shape = engine.image_shape
    user_operator = operator

    def operator(model):          # the operator's own threads follow the run's
        with thread_limit(engine.threads):
            residual = user_operator(model)
        if blank is not None:         # no data there: zero, like the world beyond the edge
            residual = np.array(residual, copy=True)
            residual[blank] = 0
        return residual

    if blank is not None:
        blank = np.asarray(blank, dtype=bool)
    if model is None:
        model = np.zeros(shape, dtype=engine.dtype)
        if dirty is None:
            dirty = operator(model)
        residual = as_image(dirty, "dirty", dtype=np.float64)
        if blank is not None:
            residual = np.where(blank, 0.0, residual)
    else:
        model = as_image(model, "model", dtype=engine.dtype)
        if model.shape != shape:
            raise InputError(f"model has shape {model.shape}, expected the image's {shape}; "
                             "start from a model on the dirty image's grid")
        residual = as_image(operator(model), "residual returned by the operator",
                            dtype=np.float64)
    t_major += time.perf_counter() - t0
    if mask is not None:
        mask = np.asarray(mask, dtype=bool)
        if mask.shape != shape:
            raise InputError(f"mask has shape {mask.shape}, expected the image's {shape}; "
                             "regrid or rebuild the mask")
    offsets = getattr(user_operator, "exact_offsets", None)
    exact = getattr(user_operator, "exact", True)
    centres = (model != 0).astype(np.uint8)

    valid = None if blank is None else ~np.asarray(blank, dtype=bool)
    kept = [None]      # the lowest noise measured outside the mask (`keep_outside_noise`)

    def stats(residual, model, mask, previous=None, planes=None, smallest_only=False):
        region = None if exact else exact_region(shape, model, offsets)
        if valid is not None:
            region = valid if region is None else (region & valid)
        state = engine.measure(residual, mask, noise_region=region, previous=previous,
                               planes=planes, smallest_only=smallest_only)
        kept[0] = keep_outside_noise(state.noise, state.noise_how, kept[0],
                                     np.sqrt(engine.beam_peaks))
        inside = mask if region is None else (region if mask is None else mask & region)
        peak, rms = masked_stats(residual, inside)
        levels = scale_levels(state.noise, threshold=threshold, noise_threshold=noise_threshold,
                              extended_depth=extended_depth, masked=mask is not None,
                              scales=engine.scales.pixels)
        return state, region, peak, rms, levels

    state, region, peak, rms, levels = stats(residual, model, mask)
    if mask_updater is not None:
        mask = mask_updater(residual, centres, mask, noise=float(state.noise[0]))
        state, region, peak, rms, levels = stats(residual, model, mask, planes=state.planes)
    flux0 = float(model.sum(dtype=np.float64))
    scale_index = {np.float32(s): i for i, s in enumerate(engine.scales.pixels)}
    scale_flux = np.zeros(len(scale_index))    # components found by this run, per scale
    history = [CycleRecord(0, 0, peak, rms, flux0, scale_peaks=state.peaks.tolist(),
                           scale_flux=scale_flux.tolist())]
    _notify(callback, stage="major", cycle=0, components=0, peak=peak, rms=rms)
    tables = []
    warnings_seen = []
    n_comp = 0
    stop = "max_major_cycles"
    stagnant = 0
    detail = None          # the stop in a sentence, from what happened (result.stop_detail)
    depth = cycle_depth
    retries = rollbacks = rounds = rejected = fft_updates = direct_updates = 0
    progress = _progress(state.peaks, levels)
    try:
        for cycle in range(1, max_major_cycles + 1):
            if mask is not None and not mask.any():
                stop = "empty_mask"
                break
            if np.all(state.peaks <= levels):
                stop = _level_stop(noise_threshold, levels, threshold)
                break
            if n_comp >= max_components:
                stop = "max_components"
                break
            t1 = time.perf_counter()
            mc = engine.minor_cycle(residual, model, mask=mask, threshold=threshold,
                                    noise_threshold=noise_threshold,
                                    extended_depth=extended_depth, cycle_depth=depth,
                                    max_components=max_components - n_comp, callback=callback,
                                    noise_region=region, state=state, exact_residual=False)
            t2 = time.perf_counter()
            t_minor += t2 - t1
            rounds += mc.rounds
            fft_updates += mc.fft_updates
            direct_updates += mc.direct_updates
            rejected += mc.rejected
            if mc.components.size == 0:
                stop = run_stop_after_empty_cycle(
                    mc.stop_reason, _level_stop(noise_threshold, levels, threshold))
                if stop == "no_progress":
                    detail = (f"minor cycle {cycle} added nothing: "
                              + MINOR_STOP_REASONS[mc.stop_reason]
                              + f" ({mc.rejected} sub-loops rejected in it)")
                break
            new_residual = as_image(operator(mc.model), "residual returned by the operator",
                                    dtype=np.float64, allow_nan=True)
            t_major += time.perf_counter() - t2
            if not np.all(np.isfinite(new_residual)):
                msg = (f"major cycle {cycle} gave a residual with non-finite values; "
                       "stopped with the model of the cycle before")
                logger.warning(msg)
                warnings_seen.append(msg)
                stop = "diverging"
                break
            # With an automatic mask only the smallest scale's noise (the mask's level)
            # is needed before the mask is renewed and every scale measured again.
            new_state, new_region, new_peak, new_rms, new_levels = stats(
                new_residual, mc.model, mask, state, smallest_only=mask_updater is not None)
            highest = allowed_peak(peak, levels, engine.scales.has_delta)
            if new_peak > highest * (1.0 + PEAK_TOLERANCE):
                rollbacks += 1
                msg = (f"major cycle {cycle} raised the peak residual {peak:.4g} -> "
                       f"{new_peak:.4g} Jy/beam; rolled back")
                logger.warning(msg)
                warnings_seen.append(msg)
                if retries < MAX_RETRIES:
                    retries += 1
                    depth = 0.5 * (1.0 + depth)
                    continue
                stop = "no_progress" if new_peak <= highest * 1.01 else "diverging"
                detail = (f"major cycle {cycle} raised the peak residual in the mask "
                          f"{peak:.4g} -> {new_peak:.4g} Jy/beam after {MAX_RETRIES} "
                          "shallower retries; the model of the cycle before is kept")
                break
            model, residual = mc.model, new_residual
            depth, retries = cycle_depth, 0
            tables.append(mc.components)
            n_comp += mc.components.size
            flux = float(model.sum(dtype=np.float64))
            centres[mc.components["y"], mc.components["x"]] = 1
            np.add.at(scale_flux, [scale_index[s] for s in mc.components["scale"]],
                      mc.components["flux"])
            if mask_updater is not None:
                mask = mask_updater(residual, centres, mask, noise=float(new_state.noise[0]))
                new_state, new_region, new_peak, new_rms, new_levels = stats(
                    residual, model, mask, state, planes=new_state.planes)
            state, region, peak, rms, levels = (new_state, new_region, new_peak, new_rms,
                                                new_levels)
            history.append(CycleRecord(cycle, n_comp, peak, rms, flux,
                                       int(mc.components.size), mc.stop_reason,
                                       scale_peaks=state.peaks.tolist(),
                                       scale_flux=scale_flux.tolist()))
            _notify(callback, stage="major", cycle=cycle, components=n_comp, peak=peak,
                    rms=rms, flux=flux, minor_stop=mc.stop_reason)
            if mc.stop_reason == "threshold" and np.all(state.peaks <= levels * LEVEL_SLACK):
                stop = _level_stop(noise_threshold, levels, threshold)
                break
            new_progress = _progress(state.peaks, levels)
            fell = history[-1].peak < 0.99 * history[-2].peak
            stagnant = stagnant + 1 if new_progress > 0.99 * progress and not fell else 0
            progress = new_progress
            if stagnant >= 3:
                stop = "no_progress"
                detail = (f"for 3 major cycles neither the peak residual in the mask "
                          f"(now {peak:.4g} Jy/beam) nor any scale's residual relative to "
                          f"its stop level (now {progress:.3g} x) fell by 1 %")
                break
        else:
            stop = "max_major_cycles"
        if stop in ("max_major_cycles", "max_components") and np.all(state.peaks <= levels):
            stop = _level_stop(noise_threshold, levels, threshold)
        elif stop == "max_major_cycles" and n_comp >= max_components:
            stop = "max_components"
    except KeyboardInterrupt:
        stop = "interrupted"
        logger.warning("interrupted: returning the model of the last complete major cycle")
    components = np.concatenate(tables) if tables else np.zeros(0, COMPONENT_DTYPE)
    active = [s for s, p, lv in zip(engine.scales.pixels, state.peaks, levels)
              if p > lv * LEVEL_SLACK]
    return DeconvolutionResult(
        model=model, residual=residual.astype(engine.dtype), components=components,
        stop_reason=stop, history=history, scales=engine.scales.pixels, mask=mask,
        timings={"precompute": engine.precompute_seconds, "minor": t_minor, "major": t_major},
        warnings=warnings_seen, rollbacks=rollbacks, scale_noise=state.noise.tolist(),
        scale_levels=levels.tolist(), scale_peaks=state.peaks.tolist(), active_scales=active,
        noise_region=_describe_region(region, state, mask, blank),
        sub_loops=rounds, rejected_sub_loops=rejected, fft_updates=fft_updates,
        direct_updates=direct_updates,
        stop_detail=detail)


def _describe_region(region, state, mask, blank=None):
    """Words for where the noise was measured (the report records them)."""
    if region is None:
        where = "the whole image"
    elif blank is not None and region.sum() == (~blank).sum():
        where = f"the {int(region.sum())} pixels with data (blank pixels left out)"
    else:
        where = f"the {int(region.sum())} pixels where the residual is exact" + (
            " and the image has data" if blank is not None else "")
    if mask is not None:
        where += (", outside the mask grown by each scale's radius where enough of the "
                  "image lies outside it")
    return {"where": where + ", emission beyond 4 robust sigmas clipped; a scale with too "
                     "few independent samples there is scaled from the smallest scale by "
                     "sqrt(B_kk(0))",
            "how": list(state.noise_how), "pixels_used": [int(u) for u in state.noise_pixels]}


def deconvolve(dirty, psf, *, scales=DEFAULTS.scales, loop_gain=DEFAULTS.loop_gain,
               threshold=DEFAULTS.threshold,
               noise_threshold=None, extended_depth=DEFAULTS.extended_depth,
               max_components=DEFAULTS.max_components,
               max_major_cycles=DEFAULTS.max_major_cycles, cycle_depth=DEFAULTS.cycle_depth,
               mask=None,
               model=None, size_penalty=DEFAULTS.size_penalty,
               scale_loop_depth=DEFAULTS.scale_loop_depth, scale_shape=DEFAULTS.scale_shape,
               psf_patch=None, threads=None, fft="auto", dtype=None, cell_arcsec=None,
               operator=None, restore=True, beam=None, emission_mask=None, callback=None,
               blank=None):
    """Multi-scale CLEAN of a dirty image with its PSF, with image-plane major cycles.

    Parameters
    ----------
    dirty : (ny, nx) ndarray
        Dirty image, Jy/beam.
    psf : (py, px) ndarray
        PSF, peak 1 at ``(py // 2, px // 2)``; the image's size or larger (twice the
        size makes the residual exact).
    scales : sequence of float, Quantity ['angle'] or 'auto'
        Scale diameters in pixels (0 = delta), or angles with ``cell_arcsec``; ``'auto'``
        asks the scale advisor (`skyscale.suggest_scales`; its reasons go to
        ``result.parameters['scale_reasons']``); default ``[0, 4, 8, 16]``.
    loop_gain : float
        Default 0.1.
    threshold : float
        Stop when every scale's smoothed residual in the mask is at or below this,
        Jy/beam; default 0.
    noise_threshold : float, optional
        Stop each scale at this multiple of its own noise, measured where there is no
        emission and the residual is exact ([4]_); default off.
    extended_depth : float
        Inside a mask (given or automatic), finite scales stop at this fraction of
        ``noise_threshold``; default 0.25 (see `skyscale.core.levels`).
    max_components : int
        Component budget; default 20000.
    max_major_cycles : int
        Major-cycle budget; default 20.
    cycle_depth : float
        Each minor cycle cleans every scale to this fraction of its starting peak
        (never below its stop level); default 0.2.
    mask : (ny, nx) bool ndarray, 'auto', EmissionMask or None
        Where components may go; default everywhere.  ``'auto'`` selects the automatic
        mask renewed after every major cycle (an `EmissionMask` instance gives its options).
    model : (ny, nx) ndarray, optional
        Start from this model (Jy/pixel), for example one written by an earlier run.
    size_penalty : float
        Bias toward small scales, ``1 - p s / s_max``; default 0.3 (derivation in
        `Engine`).
    scale_loop_depth : float
        Each single-scale sub-loop cleans its scale to this fraction of its peak before
        every scale is updated by FFT; default 0.5.
    scale_shape : {'paraboloid', 'gaussian'}
    psf_patch : optional
        No longer used; a DeprecationWarning when given.
    threads : int, optional
        Default all cores.  The result does not depend on it.
    fft : {'auto', 'scipy', 'numpy', 'pyfftw'}
        FFT backend; default scipy.fft, whose results do not depend on the thread count.
    dtype : {float32, float64}
        Default float32.
    cell_arcsec : float, optional
        Cell size; needed for scales given as angles.
    operator : callable, optional
        ``operator(model) -> residual``: your own major cycle.  Default the
        image-plane ``dirty - PSF (*) model``.
    restore : bool
        Fit the restoring beam (or use ``beam``) and make ``result.restored``.
    beam : Beam, optional
        Restoring beam to use instead of the fit.
    emission_mask : EmissionMask, optional
        Same as ``mask=EmissionMask(...)``, combined with an array ``mask`` (intersection).
    callback : callable, optional
        Progress: called with dicts, ``stage`` 'major' or 'minor'.
    blank : (ny, nx) bool ndarray, optional
        Pixels without data (NaN in the input, set to 0 in ``dirty``; see
        `skyscale.core.validate.mask_nonfinite`): no component goes there, and the
        noise and the stop leave them out.  Default none.

    Returns
    -------
    DeconvolutionResult

    Notes
    -----
    With a PSF smaller than twice the image the image-plane residual is exact only
    within the PSF's half-size of every component.  Components are then confined to
    the central box in which every pair of pixels is that close (intersected with the
    mask when one is given, which may reach beyond it at the user's choice), and the
    noise, the automatic mask and the stop are measured only where the residual is
    exact for the model's extent.

    References
    ----------
    .. [1] Clark 1980, A&A 89, 377.
    .. [2] Schwab 1984, AJ 89, 1076.
    .. [3] Cornwell 2008, IEEE J. Sel. Topics Signal Process. 2(5), 793.
    .. [4] Rousseeuw & Croux 1993, JASA 88, 1273.
    .. [5] Offringa & Smirnov 2017, MNRAS 471, 301.

    Examples
    --------
    >>> import numpy as np
    >>> y, x = np.mgrid[-32:32, -32:32]
    >>> psf = np.exp(-(x**2 + y**2) / (2 * 1.5**2)).astype(np.float32)
    >>> dirty = np.roll(np.roll(psf[16:48, 16:48] * 2.0, 3, 0), -2, 1)
    >>> r = deconvolve(dirty, psf, scales=[0], threshold=1e-3, restore=False)
    >>> (int(r.components["y"][0]), int(r.components["x"][0])), round(float(r.model.sum()), 2)
    ((19, 14), 2.0)
    """
    from skyscale.masks import EmissionMask
    if isinstance(scales, str):       # 'auto': the advisor's set; its reasons in parameters
        from skyscale.core.psf import check_psf
        with warnings.catch_warnings():   # the one real error first, before any advice
            warnings.simplefilter("ignore")
            check_psf(psf, np.shape(dirty))
        from skyscale.advisor.suggest import resolve_scales
        scales, scale_reasons = resolve_scales(scales, dirty, psf, cell_arcsec=cell_arcsec)
        del resolve_scales
    params = {k: v for k, v in locals().items()
              if k not in ("dirty", "psf", "mask", "model", "operator", "callback", "beam",
                           "emission_mask", "EmissionMask", "blank")}
    # --- input checks (issue 12): every option is checked in _validate.check_run_options ---
    from skyscale.core.run_checks import check_run_options
    early, psf = check_run_options(
        dirty, psf, scales=scales, loop_gain=loop_gain, threshold=threshold,
        noise_threshold=noise_threshold, extended_depth=extended_depth,
        max_components=max_components, max_major_cycles=max_major_cycles,
        cycle_depth=cycle_depth, mask=mask, model=model, size_penalty=size_penalty,
        scale_loop_depth=scale_loop_depth, scale_shape=scale_shape, psf_patch=psf_patch,
        threads=threads, fft=fft, dtype=dtype, cell_arcsec=cell_arcsec, restore=restore,
        beam=beam)
    if early is not None:
        return early
    # --- end of input checks ---
    params["scales"] = [float(s) for s in np.atleast_1d(getattr(scales, "value", scales))]
    dt = resolve_dtype(dtype)
    dirty_arr = as_image(dirty, "dirty", dtype=dt)
    if isinstance(mask, str):
        if mask != "auto":
            raise InputError(f"mask is {mask!r}; give 'auto', a boolean array or None")
        mask = None
        emission_mask = emission_mask or "auto"
    elif isinstance(mask, EmissionMask):
        emission_mask, mask = mask, None
    engine = Engine(psf, scales, image_shape=dirty_arr.shape, scale_shape=scale_shape,
                    size_penalty=size_penalty, loop_gain=loop_gain,
                    scale_loop_depth=scale_loop_depth, dtype=dt, threads=threads, fft=fft,
                    cell_arcsec=cell_arcsec, psf_patch=psf_patch)
    if operator is None:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")   # said once below, in words, with the region
            operator = ImagePlaneOperator(dirty_arr, engine.psf, fft=engine.fft, dtype=dt)
    params["operator"] = describe_operator(operator)
    operator = as_operator(operator, dirty_arr.shape, dt)
    if blank is not None:
        blank = np.asarray(blank, dtype=bool)
        if blank.shape != dirty_arr.shape:
            raise InputError(f"blank has shape {blank.shape}, expected the image's "
                             f"{dirty_arr.shape}; give one flag per dirty pixel")
        if not blank.any():
            blank = None
        else:
            if mask is None and emission_mask is None:
                extended_depth = 1.0   # a mask of blank pixels says nothing about emission
            mask = ~blank if mask is None else (np.asarray(mask, dtype=bool) & ~blank)
    user_mask = None if mask is None else np.asarray(mask, dtype=bool)
    notes = []
    box = None
    if not getattr(operator, "exact", True):
        box = exact_box(dirty_arr.shape, operator.exact_offsets)
        (y0, y1), (x0, x1) = box
        (py, px), (ny, nx) = engine.psf.shape, dirty_arr.shape
        dy, dx = operator.exact_offsets
        notes.append(
            f"the PSF ({py} x {px} pixels) is smaller than twice the image ({ny} x {nx}): "
            f"the residual is exact only within {dy} pixels in y and {dx} in x of each "
            f"component, so components are kept to rows {y0} to {y1 - 1} and columns {x0} to "
            f"{x1 - 1} (0-based)" + (" and the mask" if user_mask is not None else "") +
            ", and the noise and the stop are measured where the residual is exact; a PSF "
            f"of {2 * ny} x {2 * nx} pixels makes it exact everywhere")
        inner = np.zeros(dirty_arr.shape, dtype=bool)
        inner[y0:y1, x0:x1] = True
        if user_mask is None:
            mask = inner
        elif (user_mask & ~inner).any():
            notes[-1] += ("; the mask reaches beyond that box, where residuals far from "
                          "components are approximate")
        for note in notes:
            logger.warning(note)
            warnings.warn(note, stacklevel=2)
    updater = None
    if emission_mask is not None:
        if isinstance(emission_mask, str):
            from skyscale.core.beam import fit_beam
            b = beam if beam is not None else fit_beam(engine.psf)
            emission_mask = EmissionMask.for_beam(engine.scales.pixels, b, psf=engine.psf)
        updater = _emission_mask_updater(emission_mask, user_mask, box)
    result = run_cycles(engine, operator, dirty=dirty_arr, model=model, mask=mask,
                        threshold=threshold, noise_threshold=noise_threshold,
                        extended_depth=extended_depth, max_components=max_components,
                        max_major_cycles=max_major_cycles, cycle_depth=cycle_depth,
                        mask_updater=updater, callback=callback, blank=blank)
    result.parameters = params
    result.emission_mask = emission_mask
    region = None if getattr(operator, "exact", True) else \
        exact_region(dirty_arr.shape, result.model, operator.exact_offsets)
    if blank is not None:
        region = ~blank if region is None else (region & ~blank)
    told = outcome_warnings(result, threshold=float(threshold),
                            noise_threshold=noise_threshold, region=region,
                            user_mask=None if user_mask is None or (
                                blank is not None and np.array_equal(user_mask, ~blank))
                            else user_mask)
    for text in told:
        logger.warning(text)
    result.warnings = notes + result.warnings + told
    if restore:
        from skyscale.core.beam import fit_beam, restore as restore_image
        result.beam = beam if beam is not None else fit_beam(engine.psf)
        result.restored = restore_image(result.model, result.residual, result.beam)
    result.emission_mask = emission_mask
    result.threads = threads_in_effect(engine.threads, engine.fft)
    return result


def _emission_mask_updater(emission_mask, user_mask, box):
    """The automatic mask after each major cycle: inside ``box`` (where the residual is
    exact) when given, intersected with the user's mask."""
    if hasattr(emission_mask, "reset"):
        emission_mask.reset()

    def update(residual, model, previous, noise=None):   # the mask keeps its own pixels
        if box is None:
            m = emission_mask.update(residual, model=model, noise=noise)
        else:
            (y0, y1), (x0, x1) = box
            m = np.zeros(residual.shape, dtype=bool)
            m[y0:y1, x0:x1] = emission_mask.update(residual[y0:y1, x0:x1],
                                               model=model[y0:y1, x0:x1], noise=noise)
        return m if user_mask is None else (m & user_mask)
    return update
