"""The major-cycle driver, stop rules and history: `deconvolve`.

References
----------
.. [1] Clark, B. G. 1980, A&A 89, 377 (minor cycles on a PSF patch, corrected by
   major cycles; depth bounded by the sidelobes left out).
.. [2] Schwab, F. R. 1984, AJ 89, 1076.
.. [3] Cornwell, T. J. 2008, IEEE J. Sel. Topics Signal Process. 2(5), 793.
.. [4] Rousseeuw, P. J. & Croux, C. 1993, JASA 88, 1273.
"""

import logging
import time

import numpy as np

from ._validate import as_image, resolve_dtype
from .minor import Engine
from .noise import robust_noise
from .operators import ImagePlaneOperator, as_operator
from .result import COMPONENT_DTYPE, CycleRecord, DeconvolutionResult

__all__ = ["deconvolve", "run_cycles", "masked_stats"]

logger = logging.getLogger(__name__)

#: A major cycle may raise the peak residual by at most this fraction before it is
#: rolled back.
PEAK_TOLERANCE = 1e-6


def masked_stats(residual, mask):
    """Peak |residual| and rms inside ``mask`` (everywhere when ``mask`` is None)."""
    data = residual if mask is None else residual[mask]
    if data.size == 0:
        return 0.0, 0.0
    data = data.astype(np.float64, copy=False)
    return float(np.abs(data).max()), float(np.sqrt(np.mean(data ** 2)))


def _stop_level(residual, mask, threshold, noise_threshold):
    """The level the run cleans to: the threshold, or the noise multiple if higher."""
    if noise_threshold is None:
        return threshold
    return max(threshold, noise_threshold * robust_noise(residual, mask))


def _notify(callback, **event):
    if callback is not None:
        callback(event)


def run_cycles(engine, operator, *, dirty=None, mask=None, threshold=0.0, noise_threshold=None,
               max_components=20000, max_major_cycles=20, cycle_depth=0.2,
               mask_updater=None, callback=None):
    """Alternate minor cycles of ``engine`` with major cycles of ``operator``.

    Parameters
    ----------
    engine : Engine
    operator : callable
        ``operator(model) -> residual`` (Jy/beam).
    dirty : (ny, nx) ndarray, optional
        The residual of an empty model; computed with ``operator`` when not given.
    mask, threshold, noise_threshold, max_components, max_major_cycles, cycle_depth
        See `deconvolve`.
    mask_updater : callable, optional
        ``mask_updater(residual, model, previous_mask) -> mask``, called after every
        major cycle (the automatic mask).
    callback : callable, optional
        Receives progress dicts (``stage`` 'major' or 'minor').

    Returns
    -------
    DeconvolutionResult
        Without restored image or beam (see `deconvolve`).

    Notes
    -----
    Robustness: after each major cycle the exact peak residual inside the mask is
    compared with the one before.  A cycle that raised it is rolled back and tried
    again with a shallower minor cycle (the depth moved halfway to 1), at most
    twice; a third rise stops the run: 'diverging', or 'no_progress' when the rise
    is within 1 % (cleaning has reached what the data allow).  The
    peak residual in the mask therefore never grows across a run.  Inside a minor
    cycle a finite-scale component whose sign disagrees with the unsmoothed residual
    at its centre is replaced by the best delta component, and a cycle whose tracked
    peak rises hands back at once.  Large scales never centre closer to the image
    edge than their radius.
    """
    t_major = 0.0
    t_minor = 0.0
    t0 = time.perf_counter()
    if dirty is None:
        residual = as_image(operator(np.zeros(engine.image_shape, engine.dtype)), "residual",
                            dtype=engine.dtype)
    else:
        residual = as_image(dirty, "dirty", dtype=engine.dtype)
    t_major += time.perf_counter() - t0
    shape = residual.shape
    model = np.zeros(shape, dtype=engine.dtype)
    if mask is not None:
        mask = np.asarray(mask, dtype=bool)
        if mask.shape != shape:
            raise ValueError(f"mask has shape {mask.shape}, expected the image's {shape}; "
                             "regrid or rebuild the mask")
    if mask_updater is not None:
        mask = mask_updater(residual, model, mask)
    tables = []
    n_comp = 0
    peak, rms = masked_stats(residual, mask)
    history = [CycleRecord(0, 0, peak, rms, 0.0)]
    _notify(callback, stage="major", cycle=0, components=0, peak=peak, rms=rms)
    warnings_seen = []
    stop = "max_major_cycles"
    stagnant = 0
    depth = cycle_depth
    retries = 0
    try:
        for cycle in range(1, max_major_cycles + 1):
            if mask is not None and not mask.any():
                stop = "empty_mask"
                break
            level = _stop_level(residual, mask, threshold, noise_threshold)
            if peak <= level:
                stop = "threshold" if level == threshold else "noise"
                break
            if n_comp >= max_components:
                stop = "max_components"
                break
            t1 = time.perf_counter()
            mc = engine.minor_cycle(residual, model, mask=mask, threshold=level,
                                    cycle_depth=depth, max_components=max_components - n_comp,
                                    callback=callback)
            t2 = time.perf_counter()
            t_minor += t2 - t1
            if mc.components.size == 0:
                stop = {"threshold": "threshold" if level == threshold else "noise",
                        "empty": "empty_mask"}.get(mc.stop_reason, "no_progress")
                break
            new_residual = as_image(operator(mc.model), "residual returned by the operator",
                                    dtype=engine.dtype)
            t_major += time.perf_counter() - t2
            new_peak, new_rms = masked_stats(new_residual, mask)
            if new_peak > peak * (1.0 + PEAK_TOLERANCE):
                msg = (f"major cycle {cycle} raised the peak residual {peak:.4g} -> {new_peak:.4g}"
                       f" Jy/beam; rolled back")
                logger.warning(msg)
                warnings_seen.append(msg)
                if retries < 2:   # retry shallower: less patch error piles up
                    retries += 1
                    depth = 0.5 * (1.0 + depth)
                    continue
                # A rise within 1 % is the noise floor of the method, not a runaway.
                stop = "no_progress" if new_peak <= peak * 1.01 else "diverging"
                break
            model, residual = mc.model, new_residual
            depth, retries = cycle_depth, 0
            tables.append(mc.components)
            n_comp += mc.components.size
            flux = float(model.sum(dtype=np.float64))
            history.append(CycleRecord(cycle, n_comp, new_peak, new_rms, flux,
                                       int(mc.components.size), mc.stop_reason))
            _notify(callback, stage="major", cycle=cycle, components=n_comp, peak=new_peak,
                    rms=new_rms, flux=flux, minor_stop=mc.stop_reason)
            stagnant = stagnant + 1 if new_peak > 0.99 * peak else 0
            peak, rms = new_peak, new_rms
            if mask_updater is not None:
                mask = mask_updater(residual, model, mask)
                peak, rms = masked_stats(residual, mask)
            if stagnant >= 3:
                stop = "no_progress"
                break
        else:
            stop = "max_major_cycles"
        if stop == "max_major_cycles" or stop == "max_components":
            level = _stop_level(residual, mask, threshold, noise_threshold)
            if peak <= level:
                stop = "threshold" if level == threshold else "noise"
            elif n_comp >= max_components:
                stop = "max_components"
    except KeyboardInterrupt:
        stop = "interrupted"
        logger.warning("interrupted: returning the model of the last complete major cycle")
    components = np.concatenate(tables) if tables else np.zeros(0, COMPONENT_DTYPE)
    return DeconvolutionResult(
        model=model, residual=residual, components=components, stop_reason=stop,
        history=history, scales=engine.scales.pixels, mask=mask,
        timings={"precompute": engine.precompute_seconds, "minor": t_minor, "major": t_major},
        warnings=warnings_seen)


def deconvolve(dirty, psf, *, scales=(0, 4, 8, 16), loop_gain=0.1, threshold=0.0,
               noise_threshold=None, max_components=20000, max_major_cycles=20,
               cycle_depth=0.2, mask=None, size_penalty=0.6, scale_shape="paraboloid",
               psf_patch=None, threads=None, fft="auto", dtype=None, cell_arcsec=None,
               operator=None, restore=True, beam=None, auto_mask=None, callback=None):
    """Multi-scale CLEAN of a dirty image with its PSF, with image-plane major cycles.

    Parameters
    ----------
    dirty : (ny, nx) ndarray
        Dirty image, Jy/beam.
    psf : (py, px) ndarray
        PSF, peak 1 at ``(py // 2, px // 2)``; the image's size or larger (twice the
        size makes the residual exact).
    scales : sequence of float or Quantity ['angle']
        Scale diameters in pixels (0 = delta), or angles with ``cell_arcsec``; default
        ``[0, 4, 8, 16]``.
    loop_gain : float
        Default 0.1.
    threshold : float
        Stop when the peak residual in the mask is at or below this, Jy/beam;
        default 0.
    noise_threshold : float, optional
        Stop at this multiple of the robust noise (1.4826 MAD of the residual
        outside the mask, [4]_); default off.
    max_components : int
        Component budget; default 20000.
    max_major_cycles : int
        Major-cycle budget; default 20.
    cycle_depth : float
        Each minor cycle cleans down to this fraction of its starting peak, bounded
        below by the PSF's sidelobe level outside the patch ([1]_); default 0.2.
    mask : (ny, nx) bool ndarray, optional
        Where components may go; default everywhere.
    size_penalty : float
        Bias toward small scales, ``1 - p s / s_max`` ([3]_); default 0.6.
    scale_shape : {'paraboloid', 'gaussian'}
    psf_patch : int, optional
        Half-width of the minor-cycle PSF patch; default automatic.
    threads : int, optional
        Default all cores.  The result does not depend on it.
    fft : {'auto', 'numpy', 'pyfftw'}
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
    auto_mask : AutoMask, optional
        Renewed after every major cycle; combined with ``mask`` (intersection).
    callback : callable, optional
        Progress: called with dicts, ``stage`` 'major' or 'minor'.

    Returns
    -------
    DeconvolutionResult

    References
    ----------
    .. [1] Clark 1980, A&A 89, 377.
    .. [2] Schwab 1984, AJ 89, 1076.
    .. [3] Cornwell 2008, IEEE J. Sel. Topics Signal Process. 2(5), 793.
    .. [4] Rousseeuw & Croux 1993, JASA 88, 1273.

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
    params = {k: v for k, v in locals().items()
              if k not in ("dirty", "psf", "mask", "operator", "callback", "beam", "auto_mask")}
    # --- input checks (issue 12): every option is checked in _validate.check_run_options ---
    from ._validate import check_run_options
    early = check_run_options(
        dirty, psf, scales=scales, loop_gain=loop_gain, threshold=threshold,
        noise_threshold=noise_threshold, max_components=max_components,
        max_major_cycles=max_major_cycles, cycle_depth=cycle_depth, mask=mask,
        size_penalty=size_penalty, scale_shape=scale_shape, psf_patch=psf_patch,
        threads=threads, fft=fft, dtype=dtype, cell_arcsec=cell_arcsec, restore=restore,
        beam=beam)
    if early is not None:
        return early
    # --- end of input checks ---
    params["scales"] = [float(s) for s in np.atleast_1d(getattr(scales, "value", scales))]
    dt = resolve_dtype(dtype)
    dirty_arr = as_image(dirty, "dirty", dtype=dt)
    engine = Engine(psf, scales, image_shape=dirty_arr.shape, scale_shape=scale_shape,
                    size_penalty=size_penalty, loop_gain=loop_gain, psf_patch=psf_patch,
                    dtype=dt, threads=threads, fft=fft, cell_arcsec=cell_arcsec)
    if operator is None:
        operator = ImagePlaneOperator(dirty_arr, engine.psf, fft=engine.fft, dtype=dt)
    else:
        operator = as_operator(operator, dirty_arr.shape, dt)
    updater = None
    if auto_mask is not None:
        def updater(residual, model, previous, _user=mask):
            m = auto_mask.update(residual, model=model, previous=previous)
            return m if _user is None else (m & np.asarray(_user, dtype=bool))
    result = run_cycles(engine, operator, dirty=dirty_arr, mask=mask, threshold=threshold,
                        noise_threshold=noise_threshold, max_components=max_components,
                        max_major_cycles=max_major_cycles, cycle_depth=cycle_depth,
                        mask_updater=updater, callback=callback)
    params["psf_patch"] = engine.psf_info.patch_half
    result.parameters = params
    if getattr(operator, "approximation", None):
        result.warnings.append("residual approximate far from components: "
                               f"{operator.approximation}")
    if restore:
        from .beam import fit_beam, restore as restore_image
        result.beam = beam if beam is not None else fit_beam(engine.psf)
        result.restored = restore_image(result.model, result.residual, result.beam)
    return result
