"""Taylor-weighted images and spectral PSFs of a multi-channel observation.

The sky brightness at each pixel is written as a short Taylor series in
``x = (nu - nu_0) / nu_0`` about the reference frequency ``nu_0``:
``I(nu) = sum_t x^t I_t``.  With channel weights ``w_c`` (summing to ``W``), the
Taylor-weighted dirty images and spectral PSFs are

.. math:: I^D_t = \\frac{1}{W} \\sum_c w_c x_c^t I^D_c, \\qquad
          B_m = \\frac{1}{W} \\sum_c w_c x_c^m B_c,

and the Taylor residuals of a model ``{I_q}`` are
``R_t = I^D_t - sum_q B_{t+q} (*) I_q`` ([1]_, eqs. 19-21): ``B_0`` is the
familiar band-averaged PSF, and ``B_{t+q}`` the cross-term beams of the Hessian.

References
----------
.. [1] Rau, U. & Cornwell, T. J. 2011, A&A 532, A71.
.. [2] Rousseeuw, P. J. & Croux, C. 1993, JASA 88, 1273 (robust noise for the weights).
"""

import numpy as np

from skyscale.core.noise import robust_noise
from skyscale.core.validate import InputError

__all__ = ["MAX_TERMS", "channel_weights", "reference_frequency", "taylor_offsets",
           "taylor_sums", "channel_model"]

#: Most Taylor terms the wideband engine fits (the Hessian grows ill-conditioned fast).
MAX_TERMS = 3


def channel_weights(dirty, weights=None):
    """Weight of each channel: given, or the inverse variance of its dirty image.

    Parameters
    ----------
    dirty : (nchan, ny, nx) ndarray
        Per-channel dirty images.
    weights : (nchan,) array_like or 'noise' or 'equal', optional
        Given weights (non-negative, not all zero); ``'equal'`` (the default, None)
        gives every channel weight 1; ``'noise'`` takes ``1 / sigma_c^2`` with
        ``sigma_c`` the robust noise (1.4826 MAD, [2]_) of channel ``c``'s dirty image,
        which is right only where the dirty images are dominated by noise: the
        sidelobes of bright emission raise it, more where the PSF is broader.

    Returns
    -------
    (nchan,) float64 ndarray
        The weights, normalised to sum to 1.
    """
    nchan = dirty.shape[0]
    if isinstance(weights, str) and weights == "noise":
        sigma = np.array([robust_noise(plane) for plane in dirty])
        if not np.all(sigma > 0):
            bad = np.nonzero(~(sigma > 0))[0].tolist()
            raise InputError(f"channels {bad} of dirty have zero robust noise, so their "
                             "weights cannot come from the data; give channel_weights= "
                             "explicitly or drop those channels")
        w = 1.0 / sigma ** 2
    elif weights is None or isinstance(weights, str):
        if weights not in (None, "equal"):
            raise InputError(f"channel_weights is {weights!r}; give 'noise', 'equal' or "
                             "one non-negative number per channel")
        w = np.ones(nchan)
    else:
        w = np.asarray(weights, dtype=np.float64).ravel()
        if w.shape != (nchan,) or not np.all(np.isfinite(w)) or np.any(w < 0) or w.sum() <= 0:
            raise InputError(f"channel_weights has {w.size} values {w[:4].tolist()}...; give "
                             f"{nchan} finite non-negative numbers (one per channel), not all "
                             "zero")
    return w / w.sum()


def reference_frequency(freqs, weights):
    """The weighted mean frequency, Hz: the Taylor series' centre by default."""
    return float(np.sum(np.asarray(weights) * np.asarray(freqs)))


def taylor_offsets(freqs, nu0):
    """``x_c = (nu_c - nu_0) / nu_0`` for each channel."""
    return (np.asarray(freqs, dtype=np.float64) - nu0) / nu0


def taylor_sums(planes, weights, offsets, n):
    """``sum_c w_c x_c^t planes[c]`` for ``t = 0 .. n-1`` (weights summing to 1).

    Parameters
    ----------
    planes : (nchan, ny, nx) ndarray
    weights, offsets : (nchan,) ndarray
    n : int

    Returns
    -------
    (n, ny, nx) float64 ndarray
    """
    out = np.zeros((n,) + planes.shape[1:], dtype=np.float64)
    for c in range(planes.shape[0]):
        if weights[c] == 0:
            continue
        plane = np.asarray(planes[c], dtype=np.float64)
        for t in range(n):
            out[t] += (weights[c] * offsets[c] ** t) * plane
    return out


def channel_model(terms, offset):
    """The model of one channel, ``sum_t x^t terms[t]`` (Jy/pixel)."""
    out = np.zeros(terms.shape[1:], dtype=np.float64)
    for t in range(terms.shape[0]):
        out += offset ** t * terms[t]
    return out
