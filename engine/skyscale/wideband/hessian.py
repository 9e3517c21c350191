"""The per-scale Hessian of the multi-term fit and its inverse.

For scale ``k`` and Taylor terms ``t, q`` the Hessian is the peak of the cross-term
beam ``H_k[t, q] = (B_{t+q} (*) s_k (*) s_k)(0)``: a component of scale ``k`` with
Taylor amplitudes ``a`` changes the scale-``k`` smoothed Taylor residuals at its own
pixel by ``H_k a``.  The amplitudes that best explain residuals ``r`` there are
``a = H_k^{-1} r``, and they lower the data misfit by ``r^T H_k^{-1} r`` ([1]_, eqs.
23-26).

References
----------
.. [1] Rau, U. & Cornwell, T. J. 2011, A&A 532, A71.
"""

import numpy as np

from skyscale.core.precompute import beam_peaks
from skyscale.core.validate import InputError

__all__ = ["MAX_CONDITION", "scale_hessians", "invert_hessian", "invert_hessians"]

#: A Hessian whose condition number (largest over smallest eigenvalue) is above this
#: cannot separate the Taylor terms in float64 sums of float32 images: the band is too
#: narrow for that many terms.
MAX_CONDITION = 1e7


def scale_hessians(moments, kernels):
    """``H[k, t, q] = (B_{t+q} (*) s_k (*) s_k)(0)`` for every scale ``k``.

    Parameters
    ----------
    moments : (2 n - 1, py, px) ndarray
        The spectral PSFs ``B_m`` (`skyscale.wideband.taylor.taylor_sums` of the PSFs).
    kernels : list of (2r+1, 2r+1) ndarray
        Unit-sum scale kernels.

    Returns
    -------
    (n_scales, n, n) float64 ndarray
    """
    n = (moments.shape[0] + 1) // 2
    peaks = np.array([beam_peaks(m, kernels) for m in moments])   # (2n-1, n_scales)
    out = np.empty((len(kernels), n, n))
    for t in range(n):
        for q in range(n):
            out[:, t, q] = peaks[t + q]
    return out


def invert_hessian(h):
    """The inverse of a symmetric 1 x 1, 2 x 2 or 3 x 3 matrix by its adjugate.

    Written out rather than delegated, so that the tests can check it against
    `numpy.linalg.inv`.
    """
    h = np.asarray(h, dtype=np.float64)
    n = h.shape[0]
    if n == 1:
        return np.array([[1.0 / h[0, 0]]])
    if n == 2:
        det = h[0, 0] * h[1, 1] - h[0, 1] * h[1, 0]
        return np.array([[h[1, 1], -h[0, 1]], [-h[1, 0], h[0, 0]]]) / det
    if n == 3:
        adj = np.empty((3, 3))
        for i in range(3):
            for j in range(3):
                rows = [r for r in range(3) if r != j]
                cols = [c for c in range(3) if c != i]
                minor = (h[rows[0], cols[0]] * h[rows[1], cols[1]]
                         - h[rows[0], cols[1]] * h[rows[1], cols[0]])
                adj[i, j] = (-1) ** (i + j) * minor
        det = float(np.dot(h[0], adj[:, 0]))
        return adj / det
    raise ValueError(f"invert_hessian handles 1 to 3 terms, got {n}")


def invert_hessians(hessians, scales=None):
    """Invert each scale's Hessian, or say which scale's band cannot hold the terms.

    Parameters
    ----------
    hessians : (n_scales, n, n) ndarray
    scales : sequence of float, optional
        Scale diameters (pixels), for the message.

    Returns
    -------
    (n_scales, n, n) float64 ndarray

    Raises
    ------
    InputError
        When a Hessian is not positive definite or its condition number is above
        `MAX_CONDITION`.
    """
    out = np.empty_like(hessians, dtype=np.float64)
    for k, h in enumerate(hessians):
        eig = np.linalg.eigvalsh(h)
        if not eig[0] > 0 or eig[-1] / eig[0] > MAX_CONDITION:
            scale = scales[k] if scales is not None else k
            n = h.shape[0]
            raise InputError(
                f"the {n}-term Hessian of scale {scale} px is singular or ill-conditioned "
                f"(eigenvalues {eig.tolist()}): the channels' frequencies and weights do not "
                f"span enough bandwidth for {n} Taylor terms; use terms={n - 1} or give more "
                "channels across a wider band")
        out[k] = invert_hessian(h)
    return out
