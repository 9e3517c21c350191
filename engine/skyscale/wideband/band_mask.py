"""Masks of a wideband run: a given one, the automatic one on the band residual, or both.

The automatic mask (`skyscale.masks.EmissionMask`) looks at the term-0 residual, the
weighted mean of the channels' residuals, where the emission of every channel adds up
and the noise is lowest; it is renewed after every major cycle like that of
`skyscale.deconvolve`, and only grows.
"""

import numpy as np

from skyscale.core.validate import InputError
from skyscale.masks import EmissionMask

__all__ = ["resolve_masks", "band_mask_updater"]


def resolve_masks(mask, emission_mask, shape):
    """``(mask, emission_mask)`` from the arguments of `deconvolve_wideband`.

    ``mask`` may be a boolean array, ``'auto'``, an `EmissionMask` or None;
    ``emission_mask`` ``'auto'``, an `EmissionMask` or None (with an array ``mask``
    the two are intersected).  Returns the array (or None) and the automatic mask
    (``'auto'``, an `EmissionMask`, or None).
    """
    if isinstance(mask, str):
        if mask != "auto":
            raise InputError(f"mask is {mask!r}; give 'auto', an EmissionMask, a boolean "
                             "array or None")
        mask, emission_mask = None, emission_mask or "auto"
    elif isinstance(mask, EmissionMask):
        mask, emission_mask = None, mask
    if isinstance(emission_mask, str) and emission_mask != "auto":
        raise InputError(f"emission_mask is {emission_mask!r}; give 'auto', an "
                         "EmissionMask or None")
    if emission_mask is not None and not isinstance(emission_mask, (str, EmissionMask)):
        raise InputError(f"emission_mask is {type(emission_mask).__name__}; give 'auto', "
                         "an EmissionMask or None")
    if mask is not None and not hasattr(mask, "shape") and not isinstance(mask, (list, tuple)):
        raise InputError(f"mask is {mask!r}; give a boolean array, 'auto', an EmissionMask "
                         "or None")
    if mask is not None:
        mask = np.asarray(mask, dtype=bool)
        if mask.shape != shape:
            raise InputError(f"mask has shape {mask.shape}, expected the image's {shape}; "
                             "regrid or rebuild the mask")
        if not mask.any():
            raise InputError("mask selects no pixel; give a mask with True where "
                             "components may go, or none")
    return mask, emission_mask


def band_mask_updater(emission_mask, user_mask):
    """``update(band_residual, centres, noise) -> mask``: the automatic mask on the
    term-0 residual, kept inside ``user_mask`` when one is given.

    ``centres`` is non-zero where components are centred (always kept); ``noise`` is
    the smallest scale's term-0 noise of the run (the mask's reference noise).
    """
    emission_mask.reset()

    def update(band_residual, centres, noise):
        m = emission_mask.update(band_residual, model=centres, noise=noise)
        return m if user_mask is None else (m & user_mask)
    return update
