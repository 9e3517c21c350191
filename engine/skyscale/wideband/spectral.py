"""Spectral index and curvature maps from restored Taylor-term images.

With ``I(nu) = I_0 (nu / nu_0)^(alpha + beta log(nu / nu_0))`` and
``x = (nu - nu_0) / nu_0`` the Taylor expansion is
``I_0 [1 + alpha x + (alpha (alpha - 1) / 2 + beta) x^2 + ...]``, so

.. math:: \\alpha \\approx I_1 / I_0, \\qquad
          \\beta \\approx I_2 / I_0 - \\alpha (\\alpha - 1) / 2

([1]_, eqs. 39-40): the ``'taylor'`` method.  Those ratios are the polynomial's slope
at ``nu_0``, and the polynomial is a least-squares fit across the band, so the
spectrum's higher orders leak into them: for ``S ~ nu^-0.7`` over 1-2 GHz,
``I_1 / I_0`` is -0.724 with two terms and -0.744 with three (numpy.polyfit of the
spectrum).  The default ``'band'`` method fits the power law (with curvature, for three
terms) by weighted least squares to ``log P(x_c)``, the Taylor polynomial evaluated at
each channel, which gives -0.704 and -0.701 there, and the intensity at ``nu_0`` to
0.03 % (``'reference_intensity'``).  Pixels where the polynomial is not positive at
every channel fall back to the ratios.

Errors are first order in each term's residual noise, the terms' noise taken as
independent ([1]_, sect. 4.3).

References
----------
.. [1] Rau, U. & Cornwell, T. J. 2011, A&A 532, A71.
"""

import numpy as np

from skyscale.core.noise import robust_noise
from skyscale.core.validate import check_choice

__all__ = ["DEFAULT_INDEX_SNR", "INDEX_METHODS", "term_noise", "spectral_maps"]

#: Spectral maps are blanked where the restored term-0 image is below this multiple of
#: its residual noise.
DEFAULT_INDEX_SNR = 10.0

#: How the spectral index is taken from the Taylor terms (see the module's notes).
INDEX_METHODS = ("band", "taylor")


def term_noise(coefficient_residuals, mask=None):
    """Robust noise (1.4826 MAD) of each term's residual in coefficient units,
    outside ``mask`` when it leaves pixels."""
    return np.array([robust_noise(r, mask) for r in coefficient_residuals])


def _taylor_ratios(restored, noise, i0):
    alpha = restored[1] / i0
    alpha_err = np.sqrt(noise[1] ** 2 + (alpha * noise[0]) ** 2) / np.abs(i0)
    out = {"alpha": alpha, "alpha_error": alpha_err, "reference_intensity": i0}
    if restored.shape[0] >= 3:
        ratio = restored[2] / i0
        beta = ratio - alpha * (alpha - 1.0) / 2.0
        ratio_err = np.sqrt(noise[2] ** 2 + (ratio * noise[0]) ** 2) / np.abs(i0)
        out["beta"] = beta
        out["beta_error"] = np.sqrt(ratio_err ** 2 + ((alpha - 0.5) * alpha_err) ** 2)
    return out


def _band_fit(restored, noise, keep, offsets, weights):
    """The power law through the Taylor polynomial across the channels, at ``keep``."""
    n = restored.shape[0]
    vals = restored[:, keep].astype(np.float64)                    # (n, m)
    powers = np.vander(offsets, n, increasing=True)                 # (nchan, n)
    poly = powers @ vals                                            # (nchan, m)
    good = np.all(poly > 0, axis=0)
    logs = np.log1p(offsets)
    design = np.vander(logs, 3 if n >= 3 else 2, increasing=True)   # 1, L, (L^2)
    sw = np.sqrt(weights)[:, None]
    proj = np.linalg.pinv(design * sw) * sw.T                       # (params, nchan)
    with np.errstate(divide="ignore", invalid="ignore"):
        logp = np.log(np.where(poly > 0, poly, np.nan))
        params = proj @ logp                                        # (params, m)
        # d param / d I_t = sum_c proj[., c] x_c^t / P_c
        deriv = np.einsum("pc,ct,cm->ptm", proj, powers, 1.0 / poly)
    errors = np.sqrt(np.einsum("ptm,t->pm", deriv ** 2, noise[:n] ** 2))
    return good, params, errors


def spectral_maps(restored, noise, *, offsets=None, weights=None, snr=DEFAULT_INDEX_SNR,
                  method="band"):
    """Spectral index (and curvature) with their errors, blanked where too faint.

    Parameters
    ----------
    restored : (n, ny, nx) ndarray
        Restored Taylor-term images (coefficients, Jy/beam), ``n`` 2 or 3.
    noise : (n,) array_like
        Each term's residual noise, Jy/beam (`term_noise`).
    offsets, weights : (nchan,) array_like
        The channels' ``x_c`` and weights; needed by ``method='band'``.
    snr : float
        Blank where ``restored[0] < snr * noise[0]``.
    method : {'band', 'taylor'}
        See the module's notes; default 'band'.

    Returns
    -------
    dict
        ``alpha``, ``alpha_error``, ``reference_intensity`` (Jy/beam at ``nu_0``) and,
        with three terms, ``beta``, ``beta_error``: (ny, nx) float64, NaN where blanked;
        ``blank_level`` (Jy/beam) and ``method``.
    """
    check_choice(method, "index_method", INDEX_METHODS)
    restored = np.asarray(restored, dtype=np.float64)
    noise = np.asarray(noise, dtype=np.float64)
    level = float(snr * noise[0])
    keep = restored[0] > level
    i0 = np.where(keep, restored[0], np.nan)
    out = _taylor_ratios(restored, noise, i0)
    if method == "band" and keep.any():
        good, params, errors = _band_fit(restored, noise, keep,
                                         np.asarray(offsets, dtype=np.float64),
                                         np.asarray(weights, dtype=np.float64))
        names = [("reference_intensity", None), ("alpha", "alpha_error")]
        if restored.shape[0] >= 3:
            names.append(("beta", "beta_error"))
        where = np.nonzero(keep)
        sel = (where[0][good], where[1][good])
        for p, (name, err) in enumerate(names):
            value = np.exp(params[p]) if p == 0 else params[p]
            out[name][sel] = value[good]
            if err is not None:
                out[err][sel] = errors[p][good]
    out["blank_level"] = level
    out["method"] = method
    return out
