"""Numba kernels of the joint multi-term minor cycle (numpy twins in tests/naive.py).

Both kernels judge a pixel by its *equivalent peak*
``e = sqrt(H_00 r^T H^{-1} r)``, with ``r`` the Taylor residuals smoothed by one scale
at that pixel and ``H`` that scale's Hessian: ``r^T H^{-1} r`` is how much the best
multi-term component there lowers the misfit ([1]_), and the factor ``H_00`` puts it in
the units of the term-0 residual, so that with one term ``e = |r_0|``, the single-term
engine's quantity, and the noise levels of the term-0 residual apply.

References
----------
.. [1] Rau, U. & Cornwell, T. J. 2011, A&A 532, A71.
.. [2] Hogbom, J. A. 1974, A&AS 15, 417.
"""

import numba
import numpy as np
from numba import prange

from skyscale.core.kernels.config import JIT_OPTIONS, PARALLEL_JIT_OPTIONS

__all__ = ["joint_response", "joint_loop", "PARALLEL_MIN_PIXELS"]

#: Sets of pixels smaller than this are scanned serially inside the joint loop.
PARALLEL_MIN_PIXELS = 32_768
#: Pixels per chunk of the parallel scan (fixed, so results never depend on threads).
CHUNK = 8192


@numba.njit(**PARALLEL_JIT_OPTIONS)
def _joint_response(planes, hinv, h00, out):
    n, ny, nx = planes.shape
    for y in prange(ny):
        for x in range(nx):
            s = 0.0
            for t in range(n):
                rt = planes[t, y, x]
                for q in range(n):
                    s += rt * hinv[t, q] * planes[q, y, x]
            out[y, x] = np.sqrt(max(h00 * s, 0.0))


def joint_response(planes, hinv, h00):
    """Equivalent peak ``sqrt(H_00 r^T H^{-1} r)`` at every pixel.

    Parameters
    ----------
    planes : (n, ny, nx) ndarray
        The Taylor residuals smoothed by one scale.
    hinv : (n, n) ndarray
        That scale's inverse Hessian.
    h00 : float
        That scale's ``H[0, 0]``.

    Returns
    -------
    (ny, nx) float64 ndarray
    """
    planes = np.ascontiguousarray(planes, dtype=np.float64)
    out = np.empty(planes.shape[1:], dtype=np.float64)
    _joint_response(planes, np.ascontiguousarray(hinv, dtype=np.float64), float(h00), out)
    return out


@numba.njit(**JIT_OPTIONS)
def _update_scan(values, ys, xs, beams, cy, cx, amps, yc, xc, hinv, h00, lo, hi):
    """Subtract the component ``amps`` at (yc, xc) from values[:, lo:hi] (none when
    yc < 0) and return the largest equivalent peak there and its index."""
    n = values.shape[0]
    best = -1.0
    arg = -1
    for j in range(lo, hi):
        if yc >= 0:
            by = cy + ys[j] - yc
            bx = cx + xs[j] - xc
            for t in range(n):
                acc = 0.0
                for q in range(n):
                    acc += amps[q] * beams[by, bx, t + q]
                values[t, j] -= acc
        s = 0.0
        for t in range(n):
            for q in range(n):
                s += values[t, j] * hinv[t, q] * values[q, j]
        e2 = h00 * s
        if e2 > best:
            best = e2
            arg = j
    return best, arg


@numba.njit(**PARALLEL_JIT_OPTIONS)
def _parallel_scan(values, ys, xs, beams, cy, cx, amps, yc, xc, hinv, h00, bests, args):
    m = values.shape[1]
    nchunks = bests.shape[0]
    for c in prange(nchunks):
        lo = c * CHUNK
        hi = min(lo + CHUNK, m)
        b, a = _update_scan(values, ys, xs, beams, cy, cx, amps, yc, xc, hinv, h00, lo, hi)
        bests[c] = b
        args[c] = a
    best = -1.0
    arg = -1
    for c in range(nchunks):          # merged in chunk order: the first of equal peaks
        if bests[c] > best:
            best = bests[c]
            arg = args[c]
    return best, arg


@numba.njit(**JIT_OPTIONS)
def _joint_loop(values, ys, xs, beams, cy, cx, hinv, h00, gain, level, max_iter, parallel,
                out_idx, out_amps):
    n, m = values.shape
    amps = np.zeros(n)
    nchunks = (m + CHUNK - 1) // CHUNK
    bests = np.empty(max(nchunks, 1))
    args = np.empty(max(nchunks, 1), dtype=np.int64)
    yc = -1
    xc = -1
    it = 0
    level2 = level * level
    while True:
        if parallel:
            best, arg = _parallel_scan(values, ys, xs, beams, cy, cx, amps, yc, xc, hinv,
                                       h00, bests, args)
        else:
            best, arg = _update_scan(values, ys, xs, beams, cy, cx, amps, yc, xc, hinv, h00,
                                     0, m)
        if arg < 0 or best <= level2 or it >= max_iter:
            break
        for t in range(n):
            acc = 0.0
            for q in range(n):
                acc += hinv[t, q] * values[q, arg]
            amps[t] = gain * acc
            out_amps[it, t] = amps[t]
        out_idx[it] = arg
        yc = ys[arg]
        xc = xs[arg]
        it += 1
    return it, np.sqrt(max(best, 0.0))


def joint_loop(values, ys, xs, beams, *, hinv, h00, gain, level, max_iter):
    """Joint Hogbom iterations of all Taylor terms on one scale over a set of pixels.

    Each step takes the pixel of the largest equivalent peak (the first on ties), stops
    at or below ``level`` or after ``max_iter`` components, takes the amplitudes
    ``gain * H^{-1} r`` there, and subtracts that component's cross-term beams
    ``B_{t+q} (*) s_k (*) s_k`` from every term's values ([1]_, [2]_).

    Parameters
    ----------
    values : (n, m) float64 ndarray
        Each term's smoothed residual at the pixels; updated in place.
    ys, xs : (m,) int ndarray
        The pixels' positions.
    beams : (by, bx, 2 n - 1) ndarray
        The scale's cross-term beams ``B_m (*) s_k (*) s_k`` interleaved (the last axis
        is ``m``, so one subtraction reads them from one cache line), zero offset at
        ``((by - 1) // 2, (bx - 1) // 2)``, covering every offset between two of the
        pixels.
    hinv : (n, n) ndarray
    h00 : float
    gain, level : float
    max_iter : int

    Returns
    -------
    idx : (k,) int64 ndarray
        Index into the pixels of each component.
    amps : (k, n) float64 ndarray
        Each component's Taylor amplitudes (integrated flux of each term, Jy).
    peak : float
        The largest equivalent peak left.
    """
    if values.dtype != np.float64 or not values.flags.c_contiguous:
        raise ValueError("values must be a C-contiguous float64 array (it is updated in place)")
    n, m = values.shape
    beams = np.ascontiguousarray(beams)
    if beams.ndim != 3 or beams.shape[2] != 2 * n - 1:
        raise ValueError(f"beams has shape {beams.shape}, expected (by, bx, {2 * n - 1})")
    ys = np.ascontiguousarray(ys, dtype=np.int64)
    xs = np.ascontiguousarray(xs, dtype=np.int64)
    cy, cx = (beams.shape[0] - 1) // 2, (beams.shape[1] - 1) // 2
    if m and (np.ptp(ys) > cy or np.ptp(xs) > cx):
        raise ValueError("beams do not cover every offset between the pixels")
    max_iter = int(max(max_iter, 0))
    out_idx = np.zeros(max_iter, dtype=np.int64)
    out_amps = np.zeros((max_iter, n), dtype=np.float64)
    it, peak = _joint_loop(values, ys, xs, beams, cy, cx,
                           np.ascontiguousarray(hinv, dtype=np.float64), float(h00),
                           float(gain), float(level), max_iter, m >= PARALLEL_MIN_PIXELS,
                           out_idx, out_amps)
    return out_idx[:it].copy(), out_amps[:it].copy(), float(peak)
