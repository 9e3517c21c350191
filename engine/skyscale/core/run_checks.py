"""Checks of a whole run before any work: every option of `skyscale.deconvolve`, the
user's mask against the image, and the result of a run with nothing to clean.

`check_run_options` is the single place where the options of `skyscale.deconvolve` are
checked.  The checks of single values it uses are `skyscale.core.validate`'s.
"""

import numpy as np

from skyscale.core.beam import fit_beam
from skyscale.core.noise import robust_noise
from skyscale.core.psf import check_psf
from skyscale.core.result import COMPONENT_DTYPE, CycleRecord, DeconvolutionResult
from skyscale.core.scales import SCALE_SHAPES, ScaleSet
from skyscale.core.validate import (FFT_BACKENDS, NUMBER_RULES, InputError, as_image,
                                    check_choice, check_number, resolve_dtype)

__all__ = ["check_run_options", "check_mask", "EMISSION_SIGMA"]

#: A pixel holds emission when ``|dirty|`` exceeds this many robust noise sigmas
#: (used only to tell a user that a mask leaves all emission out).
EMISSION_SIGMA = 5.0


def check_mask(mask, shape, *, dirty=None, name="mask"):
    """Check a user mask: its grid, that it allows some pixel, that it holds emission.

    Parameters
    ----------
    mask : (ny, nx) array_like of bool
        Where components may go.
    shape : (int, int)
        The image's shape.
    dirty : (ny, nx) ndarray, optional
        When given, a mask that leaves out every pixel above `EMISSION_SIGMA` robust
        noise sigmas while the image has such pixels is refused.

    Returns
    -------
    (ny, nx) bool ndarray
    """
    m = np.asarray(mask)
    if m.dtype.kind not in "biuf":
        raise InputError(f"{name} has dtype {m.dtype}; give a boolean array "
                         "(True = components may go there)")
    m = m.astype(bool)
    if m.shape != tuple(shape):
        raise InputError(f"{name} has shape {m.shape}, expected the image's {tuple(shape)}; "
                         "make the mask on the image's grid")
    if not m.any():
        raise InputError(f"{name} allows no pixel (it is all False/0); give a mask that "
                         "covers the emission, or pass mask=None to clean everywhere")
    if dirty is not None and not m.all():
        absd = np.abs(dirty)
        sigma = robust_noise(dirty)
        level = EMISSION_SIGMA * sigma
        if sigma > 0 and float(absd.max()) > level and float(absd[m].max()) <= level:
            peak = np.unravel_index(int(np.argmax(absd)), absd.shape)
            raise InputError(
                f"{name} excludes all emission: nothing inside it exceeds {EMISSION_SIGMA:g} "
                f"times the noise ({level:.3g} Jy/beam), while the image peaks at "
                f"{float(absd[peak]):.3g} Jy/beam at [y, x] {tuple(int(p) for p in peak)}; "
                "check the mask's position and grid, or widen it")
    return m


def _early_result(dirty, psf, *, scales, restore, beam, params, mask, reason, note):
    absd = np.abs(dirty if mask is None else dirty[mask]).astype(np.float64)
    peak, rms = float(absd.max()), float(np.sqrt(np.mean(absd ** 2)))
    res = DeconvolutionResult(
        model=np.zeros_like(dirty), residual=dirty.copy(),
        components=np.zeros(0, COMPONENT_DTYPE), stop_reason=reason,
        history=[CycleRecord(0, 0, peak, rms, 0.0)], scales=tuple(scales), mask=mask,
        parameters=params, timings={"precompute": 0.0, "minor": 0.0, "major": 0.0},
        warnings=[note])
    if restore:
        res.beam = beam if beam is not None else fit_beam(check_psf(psf, dirty.shape,
                                                                    dtype=dirty.dtype))
        res.restored = dirty.copy()
    return res


def check_run_options(dirty, psf, *, scales, loop_gain, threshold, noise_threshold,
                      max_components, max_major_cycles, cycle_depth, mask, size_penalty,
                      scale_shape, psf_patch, threads, fft, dtype, cell_arcsec, restore,
                      beam, extended_depth, scale_loop_depth, model=None):
    """Check every option of `skyscale.deconvolve` before any work starts.

    Parameters
    ----------
    dirty, psf, scales, loop_gain, threshold, noise_threshold, max_components,
    max_major_cycles, cycle_depth, mask, size_penalty, scale_shape, psf_patch, threads,
    fft, dtype, cell_arcsec, restore, beam, extended_depth, scale_loop_depth, model
        As given to `deconvolve`.  A ``mask`` that is ``'auto'`` or an `EmissionMask` is
        left to the engine; an array mask is checked here.

    Returns
    -------
    early : DeconvolutionResult or None
        A finished result when there is nothing to clean (the dirty image is constant,
        zero included: stop reason ``'nothing_to_clean'``); None otherwise.
    psf : (py, px) ndarray
        The checked PSF (`skyscale.core.psf.check_psf`), for the rest of the run.

    Raises
    ------
    InputError
        For the first bad option, naming it, the value and the fix.
    """
    dt = resolve_dtype(dtype)
    check_choice(scale_shape, "scale_shape", SCALE_SHAPES)
    check_choice(fft, "fft", FFT_BACKENDS)
    values = dict(loop_gain=loop_gain, threshold=threshold, noise_threshold=noise_threshold,
                  max_components=max_components, max_major_cycles=max_major_cycles,
                  cycle_depth=cycle_depth, size_penalty=size_penalty, psf_patch=psf_patch,
                  threads=threads, cell_arcsec=cell_arcsec, extended_depth=extended_depth,
                  scale_loop_depth=scale_loop_depth)
    for name, value in values.items():
        check_number(value, name, **NUMBER_RULES[name])
    if beam is not None and not hasattr(beam, "major"):
        raise InputError(f"beam is {beam!r}; pass a skyscale.Beam in pixels "
                         "(Beam.from_sky converts arcsec) or None to fit one to the PSF")
    image = as_image(dirty, "dirty", dtype=dt)
    scale_set = ScaleSet(scales, shape=scale_shape, cell_arcsec=cell_arcsec,
                         image_shape=image.shape)
    if model is not None:
        start = as_image(model, "model", dtype=dt)
        if start.shape != image.shape:
            raise InputError(f"model has shape {start.shape}, expected the dirty image's "
                             f"{image.shape}; start from a model made on the same grid")
    if isinstance(mask, str):
        check_choice(mask, "mask", ("auto",))
        mask = None
    elif mask is not None and hasattr(mask, "update"):     # an EmissionMask
        mask = None
    user_mask = None
    if mask is not None:
        user_mask = check_mask(mask, image.shape, dirty=image)
        ys, xs = np.nonzero(user_mask)
        extent = max(int(ys.max() - ys.min()) + 1, int(xs.max() - xs.min()) + 1)
        if scale_set.pixels[-1] > extent:
            raise InputError(
                f"scale {scale_set.pixels[-1]:g} px is wider than the mask, which spans at "
                f"most {extent} px; drop that scale or widen the mask")
    checked_psf = check_psf(psf, image.shape, dtype=dt)   # warns once if it normalises
    if float(image.max()) == float(image.min()) and model is None:
        note = (f"the dirty image is constant ({float(image.flat[0]):.6g} Jy/beam "
                "everywhere): there is no structure to clean")
        params = {"scales": list(scale_set.pixels)}
        early = _early_result(image, checked_psf, scales=scale_set.pixels, restore=restore,
                              beam=beam, params=params, mask=user_mask,
                              reason="nothing_to_clean", note=note)
        return early, checked_psf
    return None, checked_psf

