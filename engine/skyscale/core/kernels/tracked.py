"""Kernels on the minor cycle's tracked pixels: exact direct updates and peaks.

Between two FFT updates the minor cycle keeps the residual and every scale's smoothed
residual exact only where it looks: the *tracked pixels* (the mask, or the whole box
without one).  A sub-loop of a few components is applied there directly: each tracked
value ``v[q]`` loses ``sum_i f_i B(q - p_i)``, with ``B`` the beam that takes a
component of the sub-loop's scale to that plane (``PSF (*) s_k`` for the residual,
``PSF (*) s_j (*) s_k`` for scale ``j``, at every offset within the image), so the
tracked values stay exact; the other pixels catch up at the next FFT update, which
applies every component since the last one at once (Clark 1980 kept an approximate
minor cycle exact only through its major cycles; here the tracked pixels are exact at
every step, as in the FFT-updated minor cycle of Offringa & Smirnov 2017).

Both kernels split the pixels into chunks of a fixed size, never by thread, and each
pixel's sum runs over the components in their order, so the result is the same bits
whatever the thread count.

References
----------
.. [1] Clark, B. G. 1980, A&A 89, 377.
.. [2] Offringa, A. R. & Smirnov, O. 2017, MNRAS 471, 301.
"""

import numba
import numpy as np
from numba import prange

from skyscale.core.kernels.config import JIT_OPTIONS, PARALLEL_JIT_OPTIONS

__all__ = ["CHUNK", "PARALLEL_MIN_WORK", "direct_subtract", "direct_subtract_rows",
           "masked_peak", "pixel_runs", "tracked_peaks"]

#: Tracked pixels per chunk of the peak scan, and runs of pixels per chunk of the
#: direct update (each pixel's sum runs over the components in order, whatever the
#: chunk or thread, so the split never changes a bit).
CHUNK = 2048
RUNS_PER_CHUNK = 64

#: Below this many multiply-adds (pixels x components) a call runs serially: a parallel
#: region costs more than the work.
PARALLEL_MIN_WORK = 200_000


def _direct_subtract_py(values, rows, run_y, run_x, run_start, run_len, cys, cxs, cf,
                        beams, cy, cx):
    # values (n_values, n); row rows[p] loses the components through beams[p].  The
    # tasks are (row, chunk of runs) pairs; each pixel's sum runs over the components in
    # order in float64, whatever the task or thread.
    n_runs = run_y.shape[0]
    m = cys.shape[0]
    n_chunks = (n_runs + RUNS_PER_CHUNK - 1) // RUNS_PER_CHUNK
    for task in prange(rows.shape[0] * n_chunks):
        p = task // n_chunks
        c = task - p * n_chunks
        beam = beams[p]
        width = beam.shape[1]
        flat = beam.ravel()
        row = rows[p]
        r0 = c * RUNS_PER_CHUNK
        r1 = min(r0 + RUNS_PER_CHUNK, n_runs)
        lo = run_start[r0]
        acc = np.zeros(run_start[r1 - 1] + run_len[r1 - 1] - lo, dtype=np.float64)
        for r in range(r0, r1):
            q0 = run_start[r] - lo
            ln = run_len[r]
            for i in range(m):
                f = cf[i]
                base = (cy + run_y[r] - cys[i]) * width + cx + run_x[r] - cxs[i]
                for t in range(ln):
                    acc[q0 + t] += f * float(flat[base + t])
        for t in range(acc.shape[0]):
            values[row, lo + t] = values.dtype.type(float(values[row, lo + t]) - acc[t])


_direct_serial = numba.njit(**JIT_OPTIONS)(_direct_subtract_py)
_direct_parallel = numba.njit(**PARALLEL_JIT_OPTIONS)(_direct_subtract_py)


def pixel_runs(tys, txs):
    """Runs of consecutive pixels along x: ``(run_y, run_x, run_start, run_len)``.

    ``tys, txs`` must be in row-major order (as `numpy.nonzero` gives them); the runs let
    `direct_subtract` read each beam row contiguously.
    """
    tys = np.asarray(tys, dtype=np.int64)
    txs = np.asarray(txs, dtype=np.int64)
    if tys.size == 0:
        z = np.zeros(0, np.int64)
        return z, z, z, z
    new = np.ones(tys.size, dtype=bool)
    new[1:] = (tys[1:] != tys[:-1]) | (txs[1:] != txs[:-1] + 1)
    start = np.flatnonzero(new)
    length = np.diff(np.append(start, tys.size))
    return tys[start], txs[start], start.astype(np.int64), length.astype(np.int64)


def _tracked_peaks_py(planes, allowed, out):
    n_scales, n = planes.shape
    n_chunks = (n + CHUNK - 1) // CHUNK
    part = np.zeros((n_chunks, n_scales), dtype=np.float64)
    for c in prange(n_chunks):
        lo = c * CHUNK
        hi = min(lo + CHUNK, n)
        for k in range(n_scales):
            best = 0.0
            for q in range(lo, hi):
                if allowed[k, q]:
                    a = abs(float(planes[k, q]))
                    if a > best:
                        best = a
            part[c, k] = best
    for k in range(n_scales):
        best = 0.0
        for c in range(n_chunks):
            if part[c, k] > best:
                best = part[c, k]
        out[k] = best


_peaks_serial = numba.njit(**JIT_OPTIONS)(_tracked_peaks_py)
_peaks_parallel = numba.njit(**PARALLEL_JIT_OPTIONS)(_tracked_peaks_py)


def _coords(a, name, n):
    a = np.ascontiguousarray(a, dtype=np.int64)
    if a.shape != (n,):
        raise ValueError(f"{name} has shape {a.shape}, expected ({n},); give one index each")
    return a


def direct_subtract(values, tys, txs, cys, cxs, flux, beam, *, runs=None, parallel=None):
    """Subtract components' beams from tracked values in place: exact direct update.

    ``values[q] -= sum_i flux[i] * beam[c + (tys[q] - cys[i]), c + (txs[q] - cxs[i])]``
    with ``c`` the beam's centre, the sum over the components in their order.

    Parameters
    ----------
    values : (n,) float32 or float64 ndarray
        Values at the tracked pixels; updated in place (writeable, C-contiguous).
    tys, txs : (n,) array_like of int
        The tracked pixels' coordinates, in row-major order.
    cys, cxs : (m,) array_like of int
        The components' coordinates, in the same frame.
    flux : (m,) array_like of float
        The components' integrated fluxes.
    beam : (2 ny - 1, 2 nx - 1) ndarray
        The response at every offset between two pixels of an ``ny x nx`` image, zero
        offset at the centre; every offset used must lie inside it.
    runs : tuple, optional
        `pixel_runs` of ``tys, txs``, when the caller keeps them.
    parallel : bool, optional
        Default: parallel when ``n * m`` is at least `PARALLEL_MIN_WORK`.  Both paths
        give the same bits.

    Raises
    ------
    ValueError
        For values that cannot be updated in place, coordinates of other lengths or
        not in row-major order, or offsets outside the beam.
    """
    if not (isinstance(values, np.ndarray) and values.ndim == 1):
        raise ValueError("values is updated in place: pass a writeable C-contiguous 1-D "
                         "float32 or float64 array")
    direct_subtract_rows(values[None, :], [0], tys, txs, cys, cxs, flux, [beam], runs=runs,
                         parallel=parallel)
    return values


def direct_subtract_rows(values, rows, tys, txs, cys, cxs, flux, beams, *, runs=None,
                         parallel=None):
    """`direct_subtract` for several rows of ``values`` at once, each with its own beam.

    ``values[rows[p]]`` loses the components through ``beams[p]``: one call, one
    parallel region, for a sub-loop's update of the residual and every smoothed
    residual.  Each row's values are the same bits as `direct_subtract` gives.

    Parameters
    ----------
    values : (n_values, n) float32 or float64 ndarray
        Updated in place (writeable, C-contiguous).
    rows : sequence of int
        Rows of ``values`` to update, each once.
    tys, txs, cys, cxs, flux, runs
        As for `direct_subtract`.
    beams : sequence of (2 ny - 1, 2 nx - 1) ndarray
        One per row, all of one shape and dtype.
    parallel : bool, optional
        Default: parallel when ``n * m * len(rows)`` is at least `PARALLEL_MIN_WORK`.
    """
    if not (isinstance(values, np.ndarray) and values.ndim == 2
            and values.dtype in (np.float32, np.float64) and values.flags.c_contiguous
            and values.flags.writeable):
        raise ValueError("values is updated in place: pass a writeable C-contiguous "
                         "float32 or float64 array (1-D for direct_subtract, 2-D for "
                         "direct_subtract_rows)")
    n = values.shape[1]
    rows = np.ascontiguousarray(rows, dtype=np.int64).ravel()
    if rows.size != len(beams) or rows.size != np.unique(rows).size or (
            rows.size and (rows.min() < 0 or rows.max() >= values.shape[0])):
        raise ValueError(f"rows {rows.tolist()} must be distinct rows of values (0 to "
                         f"{values.shape[0] - 1}), one per beam ({len(beams)} given)")
    tys, txs = _coords(tys, "tys", n), _coords(txs, "txs", n)
    flux = np.ascontiguousarray(flux, dtype=np.float64).ravel()
    m = flux.shape[0]
    cys, cxs = _coords(cys, "cys", m), _coords(cxs, "cxs", m)
    beams = tuple(np.ascontiguousarray(b) for b in beams)
    if not beams or not (n and m):
        return values
    shape, dtype = beams[0].shape, beams[0].dtype
    if len(shape) != 2 or shape[0] % 2 == 0 or shape[1] % 2 == 0:
        raise ValueError(f"beam has shape {shape}; give a (2 ny - 1, 2 nx - 1) beam "
                         "with its zero offset at the centre")
    if any(b.shape != shape or b.dtype != dtype for b in beams):
        raise ValueError("beams must all have one shape and dtype; give the pair beams of "
                         "one extent")
    cy, cx = shape[0] // 2, shape[1] // 2
    dy = (int(tys.min()) - int(cys.max()), int(tys.max()) - int(cys.min()))
    dx = (int(txs.min()) - int(cxs.max()), int(txs.max()) - int(cxs.min()))
    if min(dy) < -cy or max(dy) > cy or min(dx) < -cx or max(dx) > cx:
        raise ValueError(f"offsets reach y {dy}, x {dx}, outside the beam's +-{cy}, "
                         f"+-{cx}; give a beam that covers the image")
    if runs is None:
        order = tys * (int(txs.max()) + 1) + txs
        if n > 1 and np.any(np.diff(order) <= 0):
            raise ValueError("tys, txs must be distinct pixels in row-major order, as "
                             "numpy.nonzero gives them")
        runs = pixel_runs(tys, txs)
    if parallel is None:
        parallel = n * m * rows.size >= PARALLEL_MIN_WORK
    run = _direct_parallel if parallel else _direct_serial
    run(values, rows, *runs, cys, cxs, flux, beams, cy, cx)
    return values


def tracked_peaks(planes, allowed, *, parallel=None):
    """Each scale's largest ``|value|`` over its allowed tracked pixels (0 where none).

    Parameters
    ----------
    planes : (n_scales, n) float32 or float64 ndarray
    allowed : (n_scales, n) bool ndarray
    parallel : bool, optional
        Default: parallel from `PARALLEL_MIN_WORK` values on.

    Returns
    -------
    (n_scales,) float64 ndarray
    """
    planes = np.ascontiguousarray(planes)
    allowed = np.ascontiguousarray(allowed, dtype=np.bool_)
    if planes.ndim != 2 or allowed.shape != planes.shape:
        raise ValueError(f"planes {planes.shape} and allowed {allowed.shape} must be the "
                         "same (n_scales, n) shape")
    out = np.zeros(planes.shape[0], dtype=np.float64)
    if parallel is None:
        parallel = planes.size >= PARALLEL_MIN_WORK
    (_peaks_parallel if parallel else _peaks_serial)(planes, allowed, out)
    return out


def _masked_peak_py(image, mask):
    ny = image.shape[0]
    part = np.zeros(ny, dtype=np.float64)
    for y in prange(ny):
        best = 0.0
        for x in range(image.shape[1]):
            if mask[y, x]:
                a = abs(float(image[y, x]))
                if a > best:
                    best = a
        part[y] = best
    return part.max() if ny else 0.0


_masked_peak_serial = numba.njit(**JIT_OPTIONS)(_masked_peak_py)
_masked_peak_parallel = numba.njit(**PARALLEL_JIT_OPTIONS)(_masked_peak_py)


def masked_peak(image, mask, *, parallel=None):
    """Largest ``|image|`` where ``mask`` is True (0 where it is nowhere).

    Parameters
    ----------
    image : (ny, nx) float32 or float64 ndarray
    mask : (ny, nx) bool ndarray
    parallel : bool, optional
        Default: parallel from `PARALLEL_MIN_WORK` pixels on; the maximum is the same
        either way.
    """
    image = np.asarray(image)
    mask = np.asarray(mask, dtype=np.bool_)
    if image.ndim != 2 or mask.shape != image.shape:
        raise ValueError(f"image {image.shape} and mask {mask.shape} must be the same 2-D "
                         "shape")
    if parallel is None:
        parallel = image.size >= PARALLEL_MIN_WORK
    return float((_masked_peak_parallel if parallel else _masked_peak_serial)(image, mask))
