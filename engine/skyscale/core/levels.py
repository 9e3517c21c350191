"""Per-scale stop levels: where each scale's smoothed residual counts as cleaned.

Each scale's smoothed residual has its own noise (smoothing lowers it), so each scale
has its own stop level, and cleaning goes on while any scale is above its level: broad
emission that is faint per pixel but significant once smoothed is cleaned too.
"""

import numpy as np

from skyscale.core.validate import InputError
from skyscale.core.defaults import DEFAULTS

__all__ = ["LEVEL_ALLOWANCE", "scale_levels", "allowed_peak"]

#: Near the noise a broad component's sidelobes may lift a noise peak of the unsmoothed
#: residual a little; a minor or major cycle may leave the peak in the mask up to this
#: multiple of the delta scale's stop level (it is then cleaned again like any peak).
LEVEL_ALLOWANCE = 1.1

#: A scale whose smoothing lowers the noise by half (``sigma_k = sigma_0 / 2``) or more
#: spans enough beams to go the full `extended_depth` deeper inside a mask; one that
#: lowers it less goes deeper in proportion (``BREADTH_GAIN * (1 - sigma_k / sigma_0)``).
BREADTH_GAIN = 2.0


def scale_levels(noise, *, threshold=0.0, noise_threshold=None,
                 extended_depth=DEFAULTS.extended_depth, masked=False, scales=None):
    """Stop level of each scale's smoothed residual, Jy/beam.

    Parameters
    ----------
    noise : (n_scales,) array_like
        Each scale's own noise (`skyscale.core.noise.scale_noise`).
    threshold : float
        Absolute level (Jy/beam) applied to every scale.
    noise_threshold : float, optional
        Multiple of each scale's own noise; None for none.
    extended_depth : float
        With ``masked``, scale ``s`` uses the multiple
        ``noise_threshold * (1 - (1 - extended_depth) * s / s_max)``: the full multiple
        for the delta scale, ``extended_depth`` of it for the largest.
    masked : bool
        Whether components are confined to a mask (given or automatic).
    scales : sequence of float, optional
        Scale diameters (pixels); needed for the deeper levels inside a mask.

    Returns
    -------
    levels : (n_scales,) float64 ndarray
        ``max(threshold, nu_k * sigma_k)``.

    Examples
    --------
    >>> scale_levels([1.0, 0.5], noise_threshold=3, masked=True, scales=[0, 8]).tolist()
    [3.0, 0.375]
    """
    sigma = np.asarray(noise, dtype=np.float64)
    levels = np.full(sigma.shape, float(threshold))
    if noise_threshold is None:
        return levels
    if not 0.0 < extended_depth <= 1.0:
        raise InputError(f"extended_depth is {extended_depth}, expected a fraction in (0, 1]; "
                         f"{DEFAULTS.extended_depth} is the default")
    nu = np.full(sigma.shape, float(noise_threshold))
    if masked and scales is not None and np.max(scales) > 0:
        size = np.asarray(scales, dtype=np.float64) / float(np.max(scales))
        if sigma.size > 1 and sigma[0] > 0:
            # how far smoothing lowers a scale's noise says how many beams it spans: a
            # scale about the beam's size has as many noise peaks as the delta scale and
            # keeps its level (cleaning it deeper would only model noise)
            span = np.clip(BREADTH_GAIN * (1.0 - sigma / sigma[0]), 0.0, 1.0)
            size = np.minimum(size, span)
        nu *= 1.0 - (1.0 - extended_depth) * size
    return np.maximum(levels, nu * sigma)


def allowed_peak(peak, levels, has_delta=True):
    """Highest peak |residual| in the mask a cycle may leave: its start, or
    `LEVEL_ALLOWANCE` times the delta scale's stop level if that is higher."""
    return max(float(peak), LEVEL_ALLOWANCE * float(levels[0]) if has_delta else 0.0)
