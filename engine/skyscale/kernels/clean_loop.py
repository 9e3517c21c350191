"""The multi-scale minor-cycle loop: matched-filter peak search and patch subtraction.

Every scale's smoothed residual ("plane") is cut to the minor cycle's sub-region and
tiled.  Each tile keeps its peak (the penalised matched-filter response) and each
row of tiles keeps the peak of its tiles, so that a search reads ``n_scales *
n_tile_rows`` numbers instead of whole images.  Subtracting a component touches
only the cross-term patch around it; the tiles under the patch are rescanned in the
same pass (fused), so each pixel under the patch is read and written once.

References
----------
.. [1] Cornwell, T. J. 2008, IEEE J. Sel. Topics Signal Process. 2(5), 793.
.. [2] Hogbom, J. A. 1974, A&AS 15, 417.
"""

import numba
import numpy as np
from numba import prange

from .._config import JIT_OPTIONS, PARALLEL_JIT_OPTIONS

__all__ = ["LOOP_STOP_CODES", "tile_maxima", "clean_loop"]

#: Why the compiled loop handed back, by the code it returns.
LOOP_STOP_CODES = {
    1: "iterations",      # the iteration budget of this call was spent
    2: "empty",           # no pixel left to search (empty mask or region)
    3: "depth",           # the reference peak reached the cycle's floor
    4: "peak_rose",       # the reference peak rose above the cycle's limit
}


@numba.njit(**JIT_OPTIONS)
def _scan_tile(planes, mask, lim, mscale, tile, tmax, targ, l, ty, tx):
    """Recompute the peak of one tile of plane ``l`` (strict >: first in row order)."""
    h, w = planes.shape[1], planes.shape[2]
    y0 = max(ty * tile, lim[l, 0])
    y1 = min(ty * tile + tile, h, lim[l, 1])
    x0 = max(tx * tile, lim[l, 2])
    x1 = min(tx * tile + tile, w, lim[l, 3])
    s = mscale[l]
    best = planes.dtype.type(-1.0)
    arg = -1
    for y in range(y0, y1):
        for x in range(x0, x1):
            if mask[y, x]:
                v = abs(planes[l, y, x]) * s
                if v > best:
                    best = v
                    arg = y * w + x
    tmax[l, ty, tx] = best
    targ[l, ty, tx] = arg


@numba.njit(**JIT_OPTIONS)
def _row_peak(tmax, targ, rmax, rarg, l, ty):
    """Peak over the tiles of one tile row; ties go to the smaller flat index."""
    best = tmax.dtype.type(-1.0)
    arg = -1
    for tx in range(tmax.shape[2]):
        i = targ[l, ty, tx]
        if i < 0:
            continue
        v = tmax[l, ty, tx]
        if v > best or (v == best and i < arg):
            best = v
            arg = i
    rmax[l, ty] = best
    rarg[l, ty] = arg


@numba.njit(**PARALLEL_JIT_OPTIONS)
def _tile_maxima(planes, mask, lim, mscale, tile, tmax, targ, rmax, rarg):
    n_planes, n_ty, n_tx = tmax.shape
    for item in prange(n_planes * n_ty):
        l = item // n_ty
        ty = item - l * n_ty
        for tx in range(n_tx):
            _scan_tile(planes, mask, lim, mscale, tile, tmax, targ, l, ty, tx)
        _row_peak(tmax, targ, rmax, rarg, l, ty)


@numba.njit(**JIT_OPTIONS)
def _best(rmax, rarg, first, last):
    """Best (value, plane, flat index) over planes ``first..last-1``."""
    bv = rmax.dtype.type(-1.0)
    bl = -1
    bi = -1
    for l in range(first, last):
        for ty in range(rmax.shape[1]):
            i = rarg[l, ty]
            if i < 0:
                continue
            v = rmax[l, ty]
            if v > bv or (v == bv and l == bl and i < bi):
                bv = v
                bl = l
                bi = i
    return bv, bl, bi


@numba.njit(**PARALLEL_JIT_OPTIONS)
def _clean_loop(planes, mask, lim, mscale, ascale, patches, poff, phalf, tile,
                tmax, targ, rmax, rarg, gain, floor, peak_limit, ref, delta, max_iter,
                out_y, out_x, out_k, out_f, stats):
    n_planes, h_img, w_img = planes.shape
    n_tx = tmax.shape[2]
    ty_lo = np.empty(n_planes, dtype=np.int64)
    tx_lo = np.empty(n_planes, dtype=np.int64)
    tx_hi = np.empty(n_planes, dtype=np.int64)
    start = np.empty(n_planes + 1, dtype=np.int64)
    n = 0
    reason = 1
    fallbacks = 0
    peak_ref = 0.0
    while True:
        _, _, ri = _best(rmax, rarg, ref, ref + 1)
        if ri < 0:
            reason = 2
            break
        peak_ref = abs(float(planes[ref, ri // w_img, ri % w_img]))
        if peak_ref <= floor:
            reason = 3
            break
        if peak_ref > peak_limit:
            reason = 4
            break
        if n >= max_iter:
            reason = 1
            break
        bv, k, bi = _best(rmax, rarg, 0, n_planes)
        y = bi // w_img
        x = bi - y * w_img
        amp = planes[k, y, x] * ascale[k]
        if delta >= 0 and k != delta and planes[delta, y, x] * amp <= 0:
            # A finite scale whose sign disagrees with the unsmoothed residual at its
            # centre would fit a sidelobe or a hole: take the best delta instead.
            _, k, bi = _best(rmax, rarg, delta, delta + 1)
            y = bi // w_img
            x = bi - y * w_img
            amp = planes[k, y, x] * ascale[k]
            fallbacks += 1
        f = planes.dtype.type(gain) * amp
        out_y[n] = y
        out_x[n] = x
        out_k[n] = k
        out_f[n] = f
        n += 1
        # Work items: one per (plane, tile row) under that plane's cross-term patch.
        total = 0
        for l in range(n_planes):
            hp = phalf[k, l]
            start[l] = total
            ty_lo[l] = max(y - hp, 0) // tile
            ty_hi = min(y + hp, h_img - 1) // tile
            tx_lo[l] = max(x - hp, 0) // tile
            tx_hi[l] = min(x + hp, w_img - 1) // tile
            total += ty_hi - ty_lo[l] + 1
        start[n_planes] = total
        for item in prange(total):
            pl = 0
            while start[pl + 1] <= item:
                pl += 1
            ty = ty_lo[pl] + item - start[pl]
            ph = phalf[k, pl]
            side = 2 * ph + 1
            base = poff[k, pl]
            y0 = ty * tile
            y1 = min(y0 + tile, h_img)
            pya = max(y - ph, y0)
            pyb = min(y + ph + 1, y1)
            pxa = max(x - ph, 0)
            pxb = min(x + ph + 1, w_img)
            for yy in range(pya, pyb):
                row = base + (yy - y + ph) * side + ph - x
                for xx in range(pxa, pxb):
                    planes[pl, yy, xx] -= f * patches[row + xx]
            for tx in range(tx_lo[pl], tx_hi[pl] + 1):
                _scan_tile(planes, mask, lim, mscale, tile, tmax, targ, pl, ty, tx)
            _row_peak(tmax, targ, rmax, rarg, pl, ty)
    stats[0] = peak_ref
    stats[1] = fallbacks
    return n, reason


def tile_maxima(planes, mask, lim, mscale, tile):
    """Tile and tile-row peaks of the penalised matched-filter response.

    Parameters
    ----------
    planes : (n_scales, h, w) ndarray
        Scale-smoothed residuals over the sub-region.
    mask : (h, w) uint8 ndarray
        Non-zero where components may go.
    lim : (n_scales, 4) int64 ndarray
        Per scale ``y_lo, y_hi, x_lo, x_hi``: where that scale's centres may go.
    mscale : (n_scales,) ndarray
        Response scale per plane: size-penalty weight / sqrt(peak of the doubly
        smoothed PSF).
    tile : int
        Tile side in pixels.

    Returns
    -------
    tmax, targ, rmax, rarg : ndarrays
        Tile peaks ``(n_scales, n_ty, n_tx)`` and their flat indices (-1 for none);
        tile-row peaks ``(n_scales, n_ty)`` and their flat indices.
    """
    n_planes, h, w = planes.shape
    n_ty, n_tx = -(-h // tile), -(-w // tile)
    tmax = np.empty((n_planes, n_ty, n_tx), dtype=planes.dtype)
    targ = np.empty((n_planes, n_ty, n_tx), dtype=np.int64)
    rmax = np.empty((n_planes, n_ty), dtype=planes.dtype)
    rarg = np.empty((n_planes, n_ty), dtype=np.int64)
    _tile_maxima(planes, mask, lim, mscale.astype(planes.dtype), int(tile), tmax, targ, rmax, rarg)
    return tmax, targ, rmax, rarg


def clean_loop(planes, mask, lim, mscale, ascale, patches, poff, phalf, tile, maxima, *,
               gain, floor, peak_limit, ref, delta, max_iter):
    """Run minor-cycle iterations in place until a stop condition.

    Parameters
    ----------
    planes, mask, lim, mscale, tile
        As in `tile_maxima`; ``planes`` is updated in place.
    ascale : (n_scales,) ndarray
        1 / peak of the doubly smoothed PSF per scale: turns a plane value into the
        component's integrated flux.
    patches : (n,) ndarray
        Cross-term patches ``PSF (*) scale_k (*) scale_l``, flattened and packed.
    poff, phalf : (n_scales, n_scales) int64 ndarrays
        Offset into ``patches`` and half-width of each patch.
    maxima : tuple
        ``(tmax, targ, rmax, rarg)`` from `tile_maxima`, updated in place.
    gain : float
        Loop gain.
    floor : float
        Stop when the reference plane's peak |value| is at or below this.
    peak_limit : float
        Stop when the reference plane's peak rises above this.
    ref, delta : int
        Index of the reference plane (the smallest scale) and of the delta plane
        (-1 when there is none).
    max_iter : int
        Most components this call may add.

    Returns
    -------
    comps : tuple of ndarrays
        ``(y, x, k, flux)`` of the components added, in order.
    reason : str
        A value of `LOOP_STOP_CODES`.
    peak_ref : float
        The reference plane's peak when the loop stopped.
    fallbacks : int
        Components taken as deltas because a larger scale disagreed in sign.
    """
    max_iter = int(max_iter)
    dt = planes.dtype
    out_y = np.empty(max_iter, dtype=np.int64)
    out_x = np.empty(max_iter, dtype=np.int64)
    out_k = np.empty(max_iter, dtype=np.int64)
    out_f = np.empty(max_iter, dtype=dt)
    stats = np.zeros(2, dtype=np.float64)
    tmax, targ, rmax, rarg = maxima
    n, code = _clean_loop(planes, mask, lim, mscale.astype(dt), ascale.astype(dt), patches,
                          poff, phalf, int(tile), tmax, targ, rmax, rarg, float(gain),
                          float(floor), float(peak_limit), int(ref), int(delta), max_iter,
                          out_y, out_x, out_k, out_f, stats)
    return ((out_y[:n], out_x[:n], out_k[:n], out_f[:n]), LOOP_STOP_CODES[code],
            float(stats[0]), int(stats[1]))
