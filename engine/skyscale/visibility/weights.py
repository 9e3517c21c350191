"""Imaging weights for visibilities: natural, uniform and Briggs robust weighting.

The weights given with the data (``1 / sigma^2`` per sample, the natural weights) are
turned into imaging weights on the image's own uv grid: cell ``du = 1 / (npix * cell)``
wavelengths, the Fourier cell of the image.  Every sample is counted twice, once at
``(u, v)`` and once at its Hermitian twin ``(-u, -v)``, because the sky is real.

References
----------
.. [1] Briggs, D. S. 1995, PhD thesis, New Mexico Institute of Mining and Technology
   (uniform and robust weighting, the robustness parameter and its normalisation).
.. [2] Thompson, A. R., Moran, J. M. & Swenson, G. W. 2017, Interferometry and
   Synthesis in Radio Astronomy, 3rd ed., ch. 10 (weighting of visibilities).
"""

import numpy as np

from skyscale.core.validate import check_choice

__all__ = ["WEIGHTINGS", "SPEED_OF_LIGHT", "uv_cells", "weight_density", "imaging_weights"]

#: The weighting schemes `imaging_weights` knows.
WEIGHTINGS = ("natural", "uniform", "briggs")

#: Speed of light in m/s (exact, SI definition).
SPEED_OF_LIGHT = 299792458.0


def uv_cells(uvw, freqs, shape, cell_rad):
    """Flat uv-grid index of every sample ``(row, channel)`` and of its Hermitian twin.

    Parameters
    ----------
    uvw : (nrow, 3) ndarray
        Baselines in metres.
    freqs : (nchan,) ndarray
        Channel frequencies, Hz.
    shape : (ny, nx) tuple
        Image shape; the uv grid has the same shape, cell ``1 / (n * cell)``.
    cell_rad : float
        Image cell in radians.

    Returns
    -------
    cell, twin : (nrow, nchan) int64 ndarrays
        Indices into the flattened ``(ny, nx)`` uv grid (v along the rows, u along the
        columns, zero frequency at ``(ny // 2, nx // 2)``, wrapped at the edges).
    """
    ny, nx = shape
    scale = np.asarray(freqs, dtype=np.float64)[None, :] / SPEED_OF_LIGHT
    u = uvw[:, 0:1] * scale
    v = uvw[:, 1:2] * scale
    # np.rint rounds half to even, so rint(-x) == -rint(x): the twin lands on the
    # mirror cell exactly.
    iu = np.rint(u * (nx * cell_rad)).astype(np.int64)
    iv = np.rint(v * (ny * cell_rad)).astype(np.int64)
    cell = ((ny // 2 + iv) % ny) * nx + (nx // 2 + iu) % nx
    twin = ((ny // 2 - iv) % ny) * nx + (nx // 2 - iu) % nx
    return cell, twin


def weight_density(cell, twin, weights, size):
    """Total weight per uv cell, each sample counted at itself and at its twin.

    Parameters
    ----------
    cell, twin : (nrow, nchan) int64 ndarrays
        From `uv_cells`.
    weights : (nrow, nchan) ndarray
        Weights, zero where flagged.
    size : int
        Number of uv cells (``ny * nx``).

    Returns
    -------
    (size,) float64 ndarray
    """
    w = np.asarray(weights, dtype=np.float64).ravel()
    return (np.bincount(cell.ravel(), weights=w, minlength=size)
            + np.bincount(twin.ravel(), weights=w, minlength=size))


def imaging_weights(uvw, freqs, weights, shape, cell_rad, *, weighting="natural", robust=0.0):
    """Imaging weights for natural, uniform or Briggs robust weighting.

    Parameters
    ----------
    uvw : (nrow, 3) ndarray
        Baselines in metres.
    freqs : (nchan,) ndarray
        Channel frequencies, Hz.
    weights : (nrow, nchan) ndarray
        Natural weights (``1 / sigma^2``), zero where flagged.
    shape : (ny, nx) tuple
        Image shape; the density is counted on its uv grid.
    cell_rad : float
        Image cell, radians.
    weighting : {'natural', 'uniform', 'briggs'}
        Default 'natural'.
    robust : float
        Briggs robustness R, used by 'briggs' only; default 0.  Large R tends to
        natural weighting, small (negative) R to uniform weighting ([1]_).

    Returns
    -------
    (nrow, nchan) float64 ndarray
        The imaging weights; zero where ``weights`` is zero.

    Notes
    -----
    With ``W_k`` the total natural weight in uv cell ``k`` (samples and their twins)
    and ``W(i)`` the density in sample ``i``'s cell:

    .. math::

        w^{uni}_i = \\frac{w_i}{W(i)}, \\qquad
        w^{rob}_i = \\frac{w_i}{1 + W(i) f^2}, \\qquad
        f^2 = \\frac{(5 \\cdot 10^{-R})^2}{\\sum_k W_k^2 / \\sum_k W_k}

    so that every occupied cell carries the same total uniform weight (1), and the
    robust weights go to ``w_i`` as ``R -> +inf`` and to ``w_i / (W(i) f^2)``, a
    multiple of the uniform weights, as ``R -> -inf`` ([1]_, ch. 3).

    References
    ----------
    .. [1] Briggs, D. S. 1995, PhD thesis, New Mexico Institute of Mining and
       Technology.
    """
    check_choice(weighting, "weighting", WEIGHTINGS)
    w = np.asarray(weights, dtype=np.float64)
    if weighting == "natural":
        return w.copy()
    ny, nx = shape
    cell, twin = uv_cells(uvw, freqs, shape, cell_rad)
    density = weight_density(cell, twin, w, ny * nx)
    local = density[cell]
    out = np.zeros_like(w)
    used = w > 0
    if weighting == "uniform":
        out[used] = w[used] / local[used]
        return out
    f2 = (5.0 * 10.0 ** (-float(robust))) ** 2 / (np.sum(density ** 2) / np.sum(density))
    out[used] = w[used] / (1.0 + local[used] * f2)
    return out
