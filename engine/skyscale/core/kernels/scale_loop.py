"""The single-scale sub-loop: Hogbom iterations on one scale over its active pixels.

A multi-scale minor cycle chooses a scale, then cleans that scale's smoothed residual
with this loop.  The loop works on the *active set*: the pixels of that plane that can
still be chosen (inside the mask, inside the scale's allowed centres, above the
sub-loop's level).  Each component subtracts the whole scale beam
``B_kk = PSF (*) scale_k (*) scale_k`` from every active pixel, read from a beam image
that covers every offset between two pixels of the image, so the active pixels stay
exact however many components are taken; the caller then updates the whole residual
once by FFT (Offringa & Smirnov 2017).

Each pass over the active set both subtracts the last component and finds the next
peak.  The peak is the largest ``|value|``, ties going to the lowest active index, so
the result is the same whatever the thread count: the parallel version splits the set
into a fixed number of chunks that depends only on its size, keeps each chunk's own
peak, and merges them in chunk order.

References
----------
.. [1] Hogbom, J. A. 1974, A&AS 15, 417.
.. [2] Offringa, A. R. & Smirnov, O. 2017, MNRAS 471, 301.
"""

import numba
import numpy as np
from numba import prange

from skyscale.core.kernels.config import JIT_OPTIONS, PARALLEL_JIT_OPTIONS
from skyscale.core.kernels.tracked import pixel_runs
from skyscale.core.stops import SCALE_LOOP_STOP_CODES

__all__ = ["PARALLEL_MIN_ACTIVE", "scale_loop"]


#: Active sets smaller than this run serially: a parallel region per component costs
#: more than the work.  Measured on the 2-core development machine at 2 threads (load
#: below 1, 300 components): parallel / serial time 1.6 at 8,000 pixels, 0.8 to 0.9 at
#: 20,000, 0.7 at 50,000, 0.5 to 0.6 at 150,000.  With one thread the serial loop runs.
PARALLEL_MIN_ACTIVE = 32_768

#: Pixels per chunk of the parallel pass (fixed, so chunking never depends on threads).
CHUNK = 8192

#: The serial loop reads the beam run by run when the active pixels lie in runs of at
#: least this many along x on average (1.8 times faster than the pixel path on disks
#: of 10-60 px, where runs are long; slower on scattered pixels).  Both ways give the
#: same bits.
MIN_RUN_LENGTH = 8


@numba.njit(**JIT_OPTIONS)
def _stop_code(arg, best, level, it, max_iter):
    """0 to go on, else the `skyscale.core.stops.SCALE_LOOP_STOP_CODES` key that ends the loop."""
    if arg < 0:
        return 2
    if best <= level:
        return 3
    if it >= max_iter:
        return 1
    return 0


@numba.njit(**JIT_OPTIONS)
def _record(values, arg, gain, inv_peak, out_idx, out_flux, it):
    """Store component ``it`` at active index ``arg``; return its flux."""
    f = gain * float(values[arg]) * inv_peak
    out_idx[it] = arg
    out_flux[it] = f
    return f


@numba.njit(**JIT_OPTIONS)
def _linear_subtract_and_scan(values, lin, flat, f, origin, lo, hi):
    """Subtract ``f`` times the beam centred on the last component from values[lo:hi]
    and return their peak: the beam value of pixel ``j`` is ``flat[origin + lin[j]]``
    (one linear offset per pixel, `_linear_offsets`)."""
    best = -1.0
    arg = -1
    for j in range(lo, hi):
        v = values[j]
        if f != 0.0:
            v = values.dtype.type(float(v) - f * float(flat[origin + lin[j]]))
            values[j] = v
        a = abs(v)
        if a > best:
            best = a
            arg = j
    return best, arg


@numba.njit(**JIT_OPTIONS)
def _linear_offsets(ys, xs, width):
    lin = np.empty(ys.shape[0], dtype=np.int64)
    for j in range(ys.shape[0]):
        lin[j] = ys[j] * width + xs[j]
    return lin


@numba.njit(**JIT_OPTIONS)
def _scale_loop_serial(values, ys, xs, beam, cy, cx, inv_peak, gain, level, max_iter,
                       out_idx, out_flux, stats):
    n = values.shape[0]
    width = beam.shape[1]
    flat = beam.ravel()
    lin = _linear_offsets(ys, xs, width)
    centre = cy * width + cx
    best, arg = _linear_subtract_and_scan(values, lin, flat, 0.0, 0, 0, n)
    it = 0
    while True:
        reason = _stop_code(arg, best, level, it, max_iter)
        if reason:
            break
        f = _record(values, arg, gain, inv_peak, out_idx, out_flux, it)
        it += 1
        best, arg = _linear_subtract_and_scan(values, lin, flat, f, centre - lin[arg], 0, n)
    stats[0] = best
    return it, reason


@numba.njit(**JIT_OPTIONS)
def _runs_subtract_and_scan(values, bits, sign_off, run_y, run_x, run_start, run_len, flat,
                            width, cy, cx, f, y0, x0):
    """`_subtract_and_scan` over runs of pixels consecutive along x, for pixels in
    row-major order: each run reads its beam row contiguously, and the peak is found on
    the bit patterns of ``|value|`` (for non-negative floats they order as the values
    do), so both loops vectorise.  The same arithmetic and the same first index of the
    largest ``|value|``, so the same bits as `_subtract_and_scan`."""
    best = bits.dtype.type(-1)
    for r in range(run_y.shape[0]):
        q0 = run_start[r]
        ln = run_len[r]
        if f != 0.0:
            base = (cy + run_y[r] - y0) * width + cx + run_x[r] - x0
            row = flat[base:base + ln]
            seg = values[q0:q0 + ln]
            for t in range(ln):
                seg[t] = values.dtype.type(float(seg[t]) - f * float(row[t]))
        b = bits[q0:q0 + ln]
        for t in range(ln):
            m = b[t] & sign_off
            if m > best:
                best = m
    if best < 0:
        return -1.0, -1
    for j in range(bits.shape[0]):
        if bits[j] & sign_off == best:
            return abs(float(values[j])), j
    return -1.0, -1


@numba.njit(**JIT_OPTIONS)
def _scale_loop_runs(values, bits, sign_off, ys, xs, run_y, run_x, run_start, run_len, beam,
                     cy, cx, inv_peak, gain, level, max_iter, out_idx, out_flux, stats):
    flat = beam.ravel()
    width = beam.shape[1]
    best, arg = _runs_subtract_and_scan(values, bits, sign_off, run_y, run_x, run_start,
                                        run_len, flat, width, cy, cx, 0.0, 0, 0)
    it = 0
    while True:
        reason = _stop_code(arg, best, level, it, max_iter)
        if reason:
            break
        f = _record(values, arg, gain, inv_peak, out_idx, out_flux, it)
        it += 1
        best, arg = _runs_subtract_and_scan(values, bits, sign_off, run_y, run_x, run_start,
                                            run_len, flat, width, cy, cx, f, ys[arg], xs[arg])
    stats[0] = best
    return it, reason


@numba.njit(**PARALLEL_JIT_OPTIONS)
def _scale_loop_parallel(values, ys, xs, beam, cy, cx, inv_peak, gain, level, max_iter,
                         out_idx, out_flux, stats):
    n = values.shape[0]
    width = beam.shape[1]
    flat = beam.ravel()
    lin = _linear_offsets(ys, xs, width)
    centre = cy * width + cx
    n_chunks = (n + CHUNK - 1) // CHUNK
    cbest = np.empty(n_chunks, dtype=np.float64)
    carg = np.empty(n_chunks, dtype=np.int64)
    f = 0.0
    origin = 0
    it = 0
    reason = 1
    best = -1.0
    while True:
        for c in prange(n_chunks):
            lo = c * CHUNK
            hi = min(lo + CHUNK, n)
            b, a = _linear_subtract_and_scan(values, lin, flat, f, origin, lo, hi)
            cbest[c] = b
            carg[c] = a
        best = -1.0
        arg = -1
        for c in range(n_chunks):       # chunk order: ties go to the lowest index
            if carg[c] >= 0 and cbest[c] > best:
                best = cbest[c]
                arg = carg[c]
        reason = _stop_code(arg, best, level, it, max_iter)
        if reason:
            break
        f = _record(values, arg, gain, inv_peak, out_idx, out_flux, it)
        it += 1
        origin = centre - lin[arg]
    stats[0] = best
    return it, reason


def scale_loop(values, ys, xs, beam, *, beam_peak, gain, level, max_iter, parallel=None):
    """Clean one scale's active pixels in place until a stop condition.

    Parameters
    ----------
    values : (n,) float32 or float64 ndarray
        The scale's smoothed residual at the active pixels (Jy/beam); updated in place,
        so it must be a writeable C-contiguous 1-D float32 or float64 array (anything
        else is refused: a converted copy would leave the caller's array unchanged).
    ys, xs : (n,) array_like of int
        Image coordinates of the active pixels, within the image the beam covers
        (``0 <= ys < ny``, ``0 <= xs < nx``); converted to contiguous int64.
    beam : (2 ny - 1, 2 nx - 1) array_like
        The scale beam ``PSF (*) scale_k (*) scale_k`` at every offset between two image
        pixels, zero offset at ``(ny - 1, nx - 1)``; converted to a contiguous array of
        ``values``' dtype.
    beam_peak : float
        ``B_kk(0)`` (finite, > 0): a component of integrated flux ``a`` lowers the plane
        by ``a * B_kk(0)`` at its centre.
    gain : float
        Loop gain.
    level : float
        Stop when the largest ``|value|`` is at or below this.
    max_iter : int
        Most components this call may take.
    parallel : bool, optional
        Default: parallel when the active set has at least `PARALLEL_MIN_ACTIVE` pixels
        and more than one thread is in use.  Every path gives the same result.

    Returns
    -------
    idx : (m,) int64 ndarray
        Active-set index of each component, in order.
    flux : (m,) float64 ndarray
        Integrated flux of each component, ``gain * value / B_kk(0)``.
    reason : str
        A value of `skyscale.core.stops.SCALE_LOOP_STOP_CODES`.
    peak : float
        The largest ``|value|`` when the loop stopped.

    Raises
    ------
    ValueError
        For ``values`` that cannot be updated in place, coordinates of another length
        or outside the beam's image, a beam with an even side, or a ``beam_peak``,
        ``gain`` or ``level`` that is not finite (``beam_peak`` also <= 0).

    References
    ----------
    .. [1] Hogbom 1974, A&AS 15, 417.
    .. [2] Offringa & Smirnov 2017, MNRAS 471, 301.
    """
    if not (isinstance(values, np.ndarray) and values.ndim == 1
            and values.dtype in (np.float32, np.float64) and values.flags.c_contiguous
            and values.flags.writeable):
        got = (f"{type(values).__name__} {getattr(values, 'dtype', '')} "
               f"{getattr(values, 'shape', '')}").strip()
        raise ValueError(f"values is {got}; it is updated in place, so pass a writeable "
                         "C-contiguous 1-D float32 or float64 array, e.g. "
                         "np.ascontiguousarray(values, dtype=np.float32)")
    ys = np.ascontiguousarray(ys, dtype=np.int64)
    xs = np.ascontiguousarray(xs, dtype=np.int64)
    if ys.shape != values.shape or xs.shape != values.shape:
        raise ValueError(f"ys and xs have shapes {ys.shape} and {xs.shape}, values has "
                         f"{values.shape}; give one (y, x) per active pixel")
    beam = np.ascontiguousarray(beam, dtype=values.dtype)
    if beam.ndim != 2 or beam.shape[0] % 2 == 0 or beam.shape[1] % 2 == 0:
        raise ValueError(f"beam has shape {beam.shape}; give the (2 ny - 1, 2 nx - 1) scale "
                         "beam with its zero offset at the centre")
    ny, nx = (beam.shape[0] + 1) // 2, (beam.shape[1] + 1) // 2
    if values.size and (ys.min() < 0 or xs.min() < 0 or ys.max() >= ny or xs.max() >= nx):
        raise ValueError(f"active pixels span y {ys.min()}..{ys.max()}, x {xs.min()}.."
                         f"{xs.max()}, outside the {ny} x {nx} image the beam covers; give "
                         "coordinates in that image")
    for name, v in (("beam_peak", beam_peak), ("gain", gain), ("level", level)):
        if not np.isfinite(float(v)):
            raise ValueError(f"{name} is {v}; give a finite number")
    if not float(beam_peak) > 0:
        raise ValueError(f"beam_peak is {beam_peak}; give B_kk(0) > 0 (the scale beam's "
                         "centre)")
    max_iter = max(int(max_iter), 0)
    out_idx = np.empty(max_iter, dtype=np.int64)
    out_flux = np.empty(max_iter, dtype=np.float64)
    stats = np.zeros(1, dtype=np.float64)
    if parallel is None:
        parallel = values.size >= PARALLEL_MIN_ACTIVE and numba.get_num_threads() > 1
    cy, cx = (beam.shape[0] - 1) // 2, (beam.shape[1] - 1) // 2
    args = (1.0 / float(beam_peak), float(gain), float(level), max_iter, out_idx, out_flux,
            stats)
    runs = None
    if not parallel and values.size > 1 and np.all(np.isfinite(values)) and np.all(
            np.diff(ys * (int(xs.max()) + 1) + xs) > 0):
        # finite values at pixels in row-major order (as numpy.nonzero gives them): in
        # runs long enough, reading the beam row by row pays
        runs = pixel_runs(ys, xs)
        if values.size < MIN_RUN_LENGTH * runs[0].size:
            runs = None
    if parallel:
        m, code = _scale_loop_parallel(values, ys, xs, beam, cy, cx, *args)
    elif runs is not None:
        ints = np.int32 if values.dtype == np.float32 else np.int64
        m, code = _scale_loop_runs(values, values.view(ints), ints(np.iinfo(ints).max), ys,
                                   xs, *runs, beam, cy, cx, *args)
    else:
        m, code = _scale_loop_serial(values, ys, xs, beam, cy, cx, *args)
    return out_idx[:m], out_flux[:m], SCALE_LOOP_STOP_CODES[code], float(stats[0])
