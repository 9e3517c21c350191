"""`deconvolve_wideband`: multi-term multi-scale CLEAN of a multi-channel observation.

References
----------
.. [1] Rau, U. & Cornwell, T. J. 2011, A&A 532, A71.
.. [2] Cornwell, T. J. 2008, IEEE J. Sel. Topics Signal Process. 2(5), 793.
.. [3] Offringa, A. R. & Smirnov, O. 2017, MNRAS 471, 301.
.. [4] Clark, B. G. 1980, A&A 89, 377.
"""

import logging
import time
import warnings

import numpy as np

from skyscale.core.beam import fit_beam, restore
from skyscale.core.defaults import DEFAULTS
from skyscale.core.driver import deconvolve, masked_stats
from skyscale.core.fft import Convolver, get_backend
from skyscale.core.levels import allowed_peak, scale_levels
from skyscale.core.psf import check_psf
from skyscale.core.result import CycleRecord
from skyscale.core.scales import ScaleSet
from skyscale.core.threads import thread_limit
from skyscale.core.validate import InputError, as_image, check_number, resolve_dtype
from skyscale.core.validate import NUMBER_RULES, check_choice
from skyscale.masks import EmissionMask
from skyscale.wideband.band_mask import band_mask_updater, resolve_masks
from skyscale.wideband.hessian import invert_hessian
from skyscale.wideband.joint_cycle import WIDEBAND_COMPONENT_DTYPE, WidebandEngine
from skyscale.wideband.result import WidebandResult
from skyscale.wideband.spectral import (DEFAULT_INDEX_SNR, INDEX_METHODS, spectral_maps,
                                        term_noise)
from skyscale.wideband import taylor
from skyscale.wideband.taylor import MAX_TERMS, channel_model, taylor_offsets, taylor_sums

__all__ = ["deconvolve_wideband", "coefficient_residuals", "equivalent_multiple",
           "RESTORING_BEAMS"]

logger = logging.getLogger(__name__)

#: Restoring beams by name: fitted to the band-averaged PSF, or to the lowest frequency's.
RESTORING_BEAMS = ("band", "lowest")

#: A major cycle may raise the term-0 peak in the mask by this fraction (rounding).
PEAK_TOLERANCE = 1e-4
#: After a minor cycle that reached every level, stop when every scale is within this.
LEVEL_SLACK = 1.05


def _inputs(dirty, psf, freqs, terms):
    """Check the cube, the PSF cube and the frequencies; return them as float arrays."""
    cube = as_image(dirty, "dirty", dtype=np.float32, ndim=3)
    beams = as_image(psf, "psf", dtype=np.float64, ndim=3)
    nchan = cube.shape[0]
    freqs = np.asarray(freqs, dtype=np.float64).ravel()
    if freqs.shape != (nchan,) or not np.all(np.isfinite(freqs)) or np.any(freqs <= 0):
        raise InputError(f"freqs has {freqs.size} values, expected {nchan} positive "
                         "frequencies in Hz, one per plane of dirty")
    if beams.shape[0] != nchan:
        raise InputError(f"psf has {beams.shape[0]} planes and dirty {nchan}; give one PSF "
                         "per channel")
    if isinstance(terms, bool) or terms not in range(1, MAX_TERMS + 1):
        raise InputError(f"terms is {terms!r}, expected 1, 2 or {MAX_TERMS}")
    if len(np.unique(freqs)) < terms:
        raise InputError(f"{terms} Taylor terms need at least {terms} distinct frequencies; "
                         f"freqs has {len(np.unique(freqs))}: use fewer terms")
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        beams = np.stack([check_psf(b, cube.shape[1:], dtype=np.float64,
                                    name=f"psf[{c}]") for c, b in enumerate(beams)])
    notes = [str(w.message) for w in caught]
    return cube, beams, freqs, notes


def deconvolve_wideband(dirty, psf, freqs, *, terms=2, scales=DEFAULTS.scales,
                        mask=None, emission_mask=None, operators=None, threshold=0.0,
                        noise_threshold=None,
                        channel_weights=None, reference_frequency=None,
                        loop_gain=DEFAULTS.loop_gain, size_penalty=DEFAULTS.size_penalty,
                        scale_loop_depth=DEFAULTS.scale_loop_depth,
                        extended_depth=DEFAULTS.extended_depth,
                        cycle_depth=DEFAULTS.cycle_depth,
                        max_components=DEFAULTS.max_components,
                        max_major_cycles=DEFAULTS.max_major_cycles,
                        scale_shape=DEFAULTS.scale_shape, index_snr=DEFAULT_INDEX_SNR,
                        index_method="band", beam=None, restore_images=True,
                        threads=None, fft="auto", dtype=None, callback=None):
    """Multi-term (Taylor) multi-scale CLEAN of per-channel dirty images.

    Parameters
    ----------
    dirty : (nchan, ny, nx) ndarray
        Each channel's dirty image, Jy/beam.
    psf : (nchan, py, px) ndarray
        Each channel's PSF, peak 1 at the centre, at least the image's size (twice it
        makes the residuals exact everywhere).
    freqs : (nchan,) array_like
        The channels' frequencies, Hz.
    terms : {1, 2, 3}
        Taylor terms; default 2 (intensity and spectral index).  One term is
        `skyscale.deconvolve` of the weighted mean image with the weighted mean PSF.
    scales : sequence of float
        Scale diameters in pixels; default ``[0, 4, 8, 16]``.
    mask : (ny, nx) bool ndarray, 'auto', EmissionMask or None
        Where components may go; default everywhere.  ``'auto'`` (the way to run an
        extended field) selects the automatic mask (`skyscale.masks.EmissionMask`, as in
        `skyscale.deconvolve`) on the term-0 residual, renewed after every major cycle;
        an `EmissionMask` instance gives its options.
    emission_mask : 'auto' or EmissionMask, optional
        The automatic mask kept inside an array ``mask`` (their intersection).
    operators : sequence of callable, optional
        One residual operator per channel, ``operators[c](model) -> residual`` (Jy/beam,
        the image's shape), e.g. `skyscale.visibility.channel_operators` (one
        `VisibilityOperator` per channel, `skyscale.visibility.wideband_inputs` makes
        ``dirty``, ``psf``, ``freqs`` and the channel weights from them).  Given, every
        major cycle computes each channel's residual from its data and the Taylor
        residuals from those; default: from the PSFs in the image plane.
    threshold : float
        Stop when every scale's equivalent term-0 peak in the mask is at or below this,
        Jy/beam; default 0.
    noise_threshold : float, optional
        Stop each scale where noise alone is as unlikely as at this multiple of its own
        term-0 noise for one term (`equivalent_multiple`: 3 becomes 3.44 for two terms
        and 3.76 for three); default off.
    channel_weights : (nchan,) array_like or {'noise', 'equal'}, optional
        Channel weights; default ``'equal'``; ``'noise'`` takes the inverse variance
        of each dirty image (`skyscale.wideband.taylor.channel_weights`).
    reference_frequency : float, optional
        ``nu_0``; default the weighted mean frequency.
    loop_gain, size_penalty, scale_loop_depth, extended_depth, cycle_depth,
    max_components, max_major_cycles, scale_shape
        As `skyscale.deconvolve`.
    index_snr : float
        Spectral maps are blanked where the restored term 0 is below this multiple of
        its residual noise; default 10.
    index_method : {'band', 'taylor'}
        The spectral index as the power law fitted across the band to the Taylor
        polynomial (default), or as the ratio of the terms
        (`skyscale.wideband.spectral`).
    beam : Beam or {'band', 'lowest'}
        Restoring beam: ``'band'`` (the default) fits the band-averaged PSF ``B_0``;
        ``'lowest'`` fits the lowest frequency's PSF, the resolution at which every
        channel constrains the spectrum (the spectral maps are then steadier where the
        emission is extended); or a `Beam`.
    restore_images : bool
        Make the restored images and spectral maps; default True.
    threads : int, optional
    fft : {'auto', 'scipy', 'numpy', 'pyfftw'}
    dtype : {float32, float64}
        Precision of the cross-term beams; the Taylor residuals are float64.
    callback : callable, optional
        Progress dicts, ``stage`` 'major' or 'minor'.

    Returns
    -------
    WidebandResult

    Raises
    ------
    InputError
        For inputs of the wrong shape, non-finite values, bad frequencies or weights,
        or a band too narrow for the terms asked for.

    Notes
    -----
    Channel ``c`` of weight ``w_c`` and offset ``x_c = (nu_c - nu_0) / nu_0`` sees the
    sky ``sum_t x_c^t I_t``.  The Taylor-weighted dirty images and spectral PSFs
    (`skyscale.wideband.taylor`) give the residuals ``R_t = I^D_t - sum_q B_{t+q} (*)
    I_q``; each scale's Hessian ``H_k[t, q] = (B_{t+q} (*) s_k (*) s_k)(0)`` turns the
    scale's smoothed residuals into the amplitudes of the best component,
    ``a = H_k^{-1} r``, which lowers the misfit by ``r^T H_k^{-1} r``.  Minor cycles
    (`skyscale.wideband.joint_cycle`) choose scale and pixel by that decrease, take every
    term's amplitude from the inverse Hessian and subtract every term's cross-term beams;
    each major cycle recomputes every term's residual from scratch in the image plane,
    ``I^D_t - sum_q B_{t+q} (*) I_q``, which equals the Taylor sums of the channels'
    residuals ``dirty_c - PSF_c (*) model_c`` (linear sums, [1]_); those are computed
    from each channel's PSF at the end (``result.channel_residuals``).

    The spectral index and curvature come from the restored term images
    (`skyscale.wideband.spectral`).  The Taylor terms are a least-squares polynomial
    across the band, so with two terms a curved spectrum biases term 0: for
    ``S ~ nu^-0.7`` over 1-2 GHz it is 2.7 % above ``S(nu_0)`` (numpy.polyfit of the
    spectrum); ``result.reference_intensity``, the power law fitted across the band,
    is within 0.03 % of it.

    References
    ----------
    .. [1] Rau & Cornwell 2011, A&A 532, A71.
    .. [2] Cornwell 2008, IEEE J. Sel. Topics Signal Process. 2(5), 793.
    .. [3] Offringa & Smirnov 2017, MNRAS 471, 301.
    """
    t_start = time.perf_counter()
    cube, beams, freqs, notes = _inputs(dirty, psf, freqs, terms)
    shape = cube.shape[1:]
    for name in ("threshold", "noise_threshold", "extended_depth", "cycle_depth",
                 "max_components", "max_major_cycles", "loop_gain", "size_penalty",
                 "scale_loop_depth", "threads"):
        check_number(locals()[name], name, **NUMBER_RULES[name])
    index_snr = check_number(index_snr, "index_snr", low=0.0)
    check_choice(index_method, "index_method", INDEX_METHODS)
    if isinstance(beam, str):
        check_choice(beam, "beam", RESTORING_BEAMS)
    elif beam is not None and not hasattr(beam, "major"):
        raise InputError(f"beam is {beam!r}; give a skyscale.Beam, 'band' or 'lowest'")
    dt = resolve_dtype(dtype)
    weights = taylor.channel_weights(cube, channel_weights)
    nu0 = float(reference_frequency) if reference_frequency is not None else \
        taylor.reference_frequency(freqs, weights)
    if not np.isfinite(nu0) or nu0 <= 0:
        raise InputError(f"reference_frequency is {reference_frequency}; give a "
                         "positive frequency in Hz")
    offsets = taylor_offsets(freqs, nu0)
    mask, emission_mask = resolve_masks(mask, emission_mask, shape)
    if operators is not None:
        operators = list(operators)
        if len(operators) != cube.shape[0] or not all(callable(op) for op in operators):
            raise InputError(f"operators holds {len(operators)} items, expected "
                             f"{cube.shape[0]} callables, one residual operator per "
                             "channel of dirty (skyscale.visibility.channel_operators)")
    params = dict(terms=terms, scales=[float(s) for s in np.atleast_1d(scales)],
                  threshold=threshold, noise_threshold=noise_threshold, loop_gain=loop_gain,
                  size_penalty=size_penalty, scale_loop_depth=scale_loop_depth,
                  extended_depth=extended_depth, cycle_depth=cycle_depth,
                  max_components=max_components, max_major_cycles=max_major_cycles,
                  scale_shape=scale_shape, index_snr=index_snr, reference_frequency=nu0,
                  channel_weights=weights.tolist(), frequencies=freqs.tolist())
    moments = taylor_sums(beams, weights, offsets, 2 * terms - 1)
    dirty_terms = taylor_sums(cube, weights, offsets, terms)
    if terms == 1:
        band_operator = None if operators is None else \
            _band_operator(operators, weights, offsets, shape, dt)
        if isinstance(beam, str):
            beam = fit_beam(moments[0] if beam == "band" else beams[int(np.argmin(freqs))])
        single = deconvolve(dirty_terms[0].astype(dt), moments[0].astype(dt), scales=scales,
                            mask=mask, emission_mask=emission_mask, threshold=threshold,
                            noise_threshold=noise_threshold, loop_gain=loop_gain,
                            size_penalty=size_penalty,
                            scale_loop_depth=scale_loop_depth, extended_depth=extended_depth,
                            cycle_depth=cycle_depth, max_components=max_components,
                            max_major_cycles=max_major_cycles, scale_shape=scale_shape,
                            threads=threads, fft=fft, dtype=dt, beam=beam,
                            operator=band_operator, restore=restore_images,
                            callback=callback)
        return _single_result(single, cube, beams, freqs, weights, nu0, params, notes,
                              operators)
    scale_set = ScaleSet(scales, shape=scale_shape, image_shape=shape)
    engine = WidebandEngine(moments, scale_set, shape, size_penalty=size_penalty,
                            loop_gain=loop_gain, scale_loop_depth=scale_loop_depth, dtype=dt,
                            threads=threads, fft=fft)
    updater = None
    if emission_mask is not None:
        if isinstance(emission_mask, str):
            emission_mask = EmissionMask.for_beam(
                engine.scales.pixels, beam if hasattr(beam, "major") else fit_beam(moments[0]))
        updater = band_mask_updater(emission_mask, mask)
    with thread_limit(threads):
        backend = get_backend(fft, threads=threads)
        result = _run(engine, cube, beams, backend, weights, offsets, dirty_terms, mask,
                      float(threshold), noise_threshold, float(extended_depth),
                      float(cycle_depth), int(max_components), int(max_major_cycles),
                      callback, updater, operators)
    result.emission_mask = emission_mask
    result.parameters = params
    result.warnings = notes + result.warnings
    result.reference_frequency = nu0
    result.frequencies, result.channel_weights = freqs, weights
    result.hessians = engine.hessians
    result.index_snr = float(index_snr)
    result.timings["precompute"] = engine.precompute_seconds
    if restore_images:
        _restore(result, moments, beams, beam, index_snr, index_method)
    result.timings["total"] = time.perf_counter() - t_start
    return result


def equivalent_multiple(noise_threshold, n):
    """The multiple of the term-0 noise at which the equivalent peak of ``n`` terms is
    as rarely reached by noise alone as ``|R_0|`` is at ``noise_threshold``.

    With noise correlated like the PSF (natural weighting) the Taylor residuals of one
    scale have the Hessian as their covariance, so ``e^2 / sigma_0^2 = H_00 r^T H^-1 r /
    sigma_0^2`` is chi-square with ``n`` degrees of freedom where ``(R_0 / sigma_0)^2``
    has one; the level keeps the false-alarm probability of each pixel
    (`scipy.stats.chi2`).  None stays None.
    """
    if noise_threshold is None or n == 1:
        return noise_threshold
    from scipy.stats import chi2
    p = chi2.sf(float(noise_threshold) ** 2, 1)
    return float(np.sqrt(chi2.isf(p, n)))


def _run(engine, cube, beams, backend, weights, offsets, dirty_terms, mask, threshold,
         noise_threshold, extended_depth, cycle_depth, max_components, max_major_cycles,
         callback, mask_updater=None, operators=None):
    """Major cycles: joint minor cycles, then every term's residual from scratch.

    Each major cycle recomputes ``R_t = I^D_t - sum_q B_{t+q} (*) I_q`` with the spectral
    PSFs, which is ``sum_c w_c x_c^t (dirty_c - PSF_c (*) model_c)`` exactly (the sums
    are linear) at ``2 n`` transforms instead of two per channel; every channel's own
    residual is computed from its PSF at the end.  ``mask_updater`` (the automatic
    mask, `skyscale.wideband.band_mask.band_mask_updater`) renews the mask from the
    term-0 residual before the first minor cycle and after every major cycle; a major
    cycle is judged in the mask it was cleaned in, before the mask grows."""
    n = engine.n_terms
    terms = np.zeros((n,) + engine.image_shape)
    residuals = dirty_terms.copy()
    t_minor = t_major = 0.0

    multiple = equivalent_multiple(noise_threshold, n)

    def measure(residuals, planes=None):
        planes = engine.smooth(residuals) if planes is None else planes
        noise, _ = engine.noise(planes, mask)
        levels = scale_levels(noise, threshold=threshold, noise_threshold=multiple,
                              extended_depth=extended_depth, masked=mask is not None,
                              scales=engine.scales.pixels)
        peaks = engine.peaks(engine.responses(planes), engine.allowed(mask))
        peak, rms = masked_stats(residuals[0], mask)
        return planes, noise, levels, peaks, peak, rms

    planes, noise, levels, peaks, peak, rms = measure(residuals)
    centres = np.zeros(engine.image_shape, dtype=np.uint8)
    if mask_updater is not None:
        mask = mask_updater(residuals[0], centres, float(noise[0]))
        planes, noise, levels, peaks, peak, rms = measure(residuals, planes)
    history = [CycleRecord(0, 0, peak, rms, 0.0, scale_peaks=peaks.tolist())]
    if callback is not None:
        callback({"stage": "major", "cycle": 0, "components": 0, "peak": peak, "rms": rms})
    tables, notes = [], []
    channel_res = None        # with operators: the channels' residuals of the last cycle
    n_comp = rounds = rejected = stagnant = 0
    stop = "max_major_cycles"
    level_stop = "noise" if noise_threshold is not None and np.any(levels > threshold) \
        else "threshold"
    try:
        for cycle in range(1, max_major_cycles + 1):
            if mask is not None and not mask.any():
                stop = "empty_mask"
                break
            if np.all(peaks <= levels):
                stop = level_stop
                break
            if n_comp >= max_components:
                stop = "max_components"
                break
            t1 = time.perf_counter()
            mc = engine.minor_cycle(residuals, terms, levels=levels, planes=planes, mask=mask,
                                    cycle_depth=cycle_depth,
                                    max_components=max_components - n_comp, callback=callback)
            t2 = time.perf_counter()
            t_minor += t2 - t1
            rounds += mc.rounds
            rejected += mc.rejected
            if mc.components.size == 0:
                stop = {"empty": "empty_mask", "max_components": "max_components",
                        "threshold": level_stop}.get(mc.stop_reason, "no_progress")
                break
            if operators is None:
                new_residuals = engine.subtract(dirty_terms.copy(), mc.terms,
                                                full_precision=True)
            else:
                new_channels = _channel_residuals(operators, mc.terms, offsets)
                new_residuals = taylor_sums(new_channels, weights, offsets, n)
            t_major += time.perf_counter() - t2
            new = measure(new_residuals)
            highest = allowed_peak(peak, levels, engine.scales.has_delta)
            if not np.all(np.isfinite(new_residuals)) or new[4] > highest * (1 + PEAK_TOLERANCE):
                msg = (f"major cycle {cycle} raised the term-0 peak residual {peak:.4g} -> "
                       f"{new[4]:.4g} Jy/beam; the model of the cycle before is kept")
                logger.warning(msg)
                notes.append(msg)
                stop = "diverging"
                break
            terms, residuals = mc.terms, new_residuals
            if operators is not None:
                channel_res = new_channels
            planes, noise, levels, peaks, new_peak, rms = new
            tables.append(mc.components)
            n_comp += mc.components.size
            if mask_updater is not None:
                centres[mc.components["y"], mc.components["x"]] = 1
                mask = mask_updater(residuals[0], centres, float(noise[0]))
                planes, noise, levels, peaks, new_peak, rms = measure(residuals, planes)
            fell = new_peak < 0.99 * peak
            peak = new_peak
            flux = float(terms[0].sum())
            history.append(CycleRecord(cycle, n_comp, peak, rms, flux,
                                       int(mc.components.size), mc.stop_reason,
                                       scale_peaks=peaks.tolist()))
            if callback is not None:
                callback({"stage": "major", "cycle": cycle, "components": n_comp,
                          "peak": peak, "rms": rms, "flux": flux,
                          "minor_stop": mc.stop_reason})
            if mc.stop_reason == "threshold" and np.all(peaks <= levels * LEVEL_SLACK):
                stop = level_stop
                break
            stagnant = 0 if fell else stagnant + 1
            if stagnant >= 3:
                stop = "no_progress"
                break
        else:
            if np.all(peaks <= levels):
                stop = level_stop
    except KeyboardInterrupt:
        stop = "interrupted"
    t2 = time.perf_counter()
    if operators is None:
        channel_res = np.empty(cube.shape, dtype=np.float64)
        for c, psf in enumerate(beams):       # one channel's convolver at a time
            conv = Convolver(psf, engine.image_shape, backend=backend)
            channel_res[c] = cube[c] - conv(channel_model(terms, offsets[c]),
                                            out_dtype=np.float64)
            del conv
    elif channel_res is None:
        channel_res = cube.astype(np.float64)
    t_major += time.perf_counter() - t2
    components = np.concatenate(tables) if tables else np.zeros(0, WIDEBAND_COMPONENT_DTYPE)
    return WidebandResult(
        terms=terms.astype(np.float32), residuals=residuals.astype(np.float32),
        channel_residuals=channel_res.astype(np.float32), components=components,
        stop_reason=stop, reference_frequency=0.0, frequencies=None, channel_weights=None,
        scales=engine.scales.pixels, mask=mask, history=history,
        timings={"minor": t_minor, "major": t_major}, warnings=notes,
        scale_noise=noise.tolist(), scale_levels=levels.tolist(), scale_peaks=peaks.tolist(),
        sub_loops=rounds, rejected_sub_loops=rejected)


def _channel_residuals(operators, terms, offsets):
    """``(nchan, ny, nx)`` float64: each channel's residual of its model from its operator."""
    return np.stack([np.asarray(op(channel_model(terms, x)), dtype=np.float64)
                     for op, x in zip(operators, offsets)])


def _band_operator(operators, weights, offsets, shape, dtype):
    """One term's operator: the weighted mean of the channels' residuals of one model
    (the term-0 Taylor sum, ``sum_c w_c R_c``)."""
    from skyscale.core.operators import FunctionOperator

    def band(model):
        terms = np.asarray(model, dtype=np.float64)[None]
        return taylor_sums(_channel_residuals(operators, terms, offsets), weights, offsets,
                           1)[0].astype(dtype)
    return FunctionOperator(band, shape=shape, dtype=dtype)


def coefficient_residuals(residuals, moments):
    """The Taylor residuals turned into coefficients, ``H^{-1} R`` per pixel with the
    unsmoothed Hessian ``H[t, q] = B_{t+q}(0)`` (what a point source leaves, [1]_)."""
    n = residuals.shape[0]
    py, px = moments.shape[1:]
    h = np.array([[moments[t + q][py // 2, px // 2] for q in range(n)] for t in range(n)])
    hinv = invert_hessian(h)
    return np.einsum("tq,qyx->tyx", hinv, residuals.astype(np.float64))


def _restore(result, moments, beams, beam, index_snr, index_method):
    """Restored term images, the spectral maps and their blanking level."""
    if beam is None or (isinstance(beam, str) and beam == "band"):
        result.beam = fit_beam(moments[0])
    elif isinstance(beam, str) and beam == "lowest":
        result.beam = fit_beam(beams[int(np.argmin(result.frequencies))])
    else:
        result.beam = beam
    coeff = coefficient_residuals(result.residuals, moments)
    result.restored = np.stack([restore(result.terms[t], coeff[t].astype(np.float32),
                                        result.beam)
                                for t in range(result.n_terms)])
    model_region = None
    if result.components.size:
        model_region = np.zeros(result.terms.shape[1:], bool)
        model_region |= result.restored[0] > 0.05 * np.max(result.restored[0])
    noise = term_noise(coeff, model_region)
    result.term_noise = noise.tolist()
    x = (result.frequencies - result.reference_frequency) / result.reference_frequency
    maps = spectral_maps(result.restored, noise, offsets=x, weights=result.channel_weights,
                         snr=index_snr, method=index_method)
    result.reference_intensity = maps["reference_intensity"]
    result.index_method = index_method
    result.spectral_index, result.spectral_index_error = maps["alpha"], maps["alpha_error"]
    result.curvature, result.curvature_error = maps.get("beta"), maps.get("beta_error")
    result.blank_level = maps["blank_level"]


def _single_result(single, cube, beams, freqs, weights, nu0, params, notes, operators=None):
    """A `WidebandResult` holding the single-term run of `skyscale.deconvolve`."""
    table = np.zeros(single.components.size, WIDEBAND_COMPONENT_DTYPE)
    for name in ("y", "x", "scale", "flux"):
        table[name] = single.components[name]
    if operators is not None:
        channel_res = _channel_residuals(operators, single.model[None], np.zeros(len(cube))
                                         ).astype(np.float32)
    else:
        channel_res = np.stack([c - Convolver(b, cube.shape[1:])(
            single.model.astype(np.float64), out_dtype=np.float64)
            for c, b in zip(cube, beams)]).astype(np.float32)
    return WidebandResult(
        terms=single.model[None], residuals=single.residual[None],
        channel_residuals=channel_res, components=table, stop_reason=single.stop_reason,
        reference_frequency=nu0, frequencies=freqs, channel_weights=weights,
        restored=None if single.restored is None else single.restored[None],
        beam=single.beam, scales=single.scales, mask=single.mask,
        emission_mask=getattr(single, "emission_mask", None), history=single.history,
        parameters=params, timings=single.timings, warnings=notes + list(single.warnings),
        scale_noise=single.scale_noise, scale_levels=single.scale_levels,
        scale_peaks=single.scale_peaks, sub_loops=single.sub_loops,
        rejected_sub_loops=single.rejected_sub_loops, single=single)
