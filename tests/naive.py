"""Slow, obviously right numpy twins of the compiled kernels, under the same names.

Each function recomputes everything from scratch at every step, with whole-array
numpy operations and no tiling, so it can be read against the method's description.
The compiled kernels must give the same components and the same planes.  The
benchmark suite also uses `clean_loop` here as the plain numpy baseline.
"""

import numpy as np

__all__ = ["valid_pixels", "clean_loop", "stamp_components", "convolve_centred"]


def valid_pixels(shape, mask, lim):
    """(n_scales, h, w) bool: where each scale's components may be centred."""
    n = lim.shape[0]
    valid = np.zeros((n,) + tuple(shape), dtype=bool)
    for k in range(n):
        ya, yb, xa, xb = lim[k]
        valid[k, max(ya, 0):max(yb, 0), max(xa, 0):max(xb, 0)] = True
    return valid & (np.asarray(mask) != 0)[None]


def clean_loop(planes, mask, lim, mscale, ascale, patches, poff, phalf, *, gain, floor,
               peak_limit, ref, delta, max_iter):
    """Multi-scale CLEAN iterations, whole-array numpy (twin of kernels.clean_loop).

    Returns ``((y, x, k, flux), reason, peak_ref, fallbacks)``; ``planes`` is updated
    in place.
    """
    dt = planes.dtype
    n_planes, h, w = planes.shape
    valid = valid_pixels((h, w), mask, lim)
    ms = mscale.astype(dt)
    asc = ascale.astype(dt)
    ys, xs, ks, fs = [], [], [], []
    fallbacks = 0
    peak_ref = 0.0
    reason = "iterations"
    while True:
        ref_vals = np.where(valid[ref], np.abs(planes[ref]), -1)
        if not valid[ref].any():
            reason = "empty"
            break
        peak_ref = float(ref_vals.max())
        if peak_ref <= floor:
            reason = "depth"
            break
        if peak_ref > peak_limit:
            reason = "peak_rose"
            break
        if len(ys) >= max_iter:
            reason = "iterations"
            break
        response = np.where(valid, np.abs(planes) * ms[:, None, None], dt.type(-1))
        k, y, x = np.unravel_index(int(np.argmax(response)), response.shape)
        amp = planes[k, y, x] * asc[k]
        if delta >= 0 and k != delta and planes[delta, y, x] * amp <= 0:
            d = np.where(valid[delta], np.abs(planes[delta]) * ms[delta], dt.type(-1))
            k = delta
            y, x = np.unravel_index(int(np.argmax(d)), d.shape)
            amp = planes[k, y, x] * asc[k]
            fallbacks += 1
        f = dt.type(gain) * amp
        ys.append(y), xs.append(x), ks.append(k), fs.append(f)
        for l in range(n_planes):
            hp = int(phalf[k, l])
            side = 2 * hp + 1
            patch = patches[poff[k, l]:poff[k, l] + side * side].reshape(side, side)
            ya, yb = max(y - hp, 0), min(y + hp + 1, h)
            xa, xb = max(x - hp, 0), min(x + hp + 1, w)
            planes[l, ya:yb, xa:xb] -= f * patch[ya - y + hp:yb - y + hp, xa - x + hp:xb - x + hp]
    comps = (np.array(ys, dtype=np.int64), np.array(xs, dtype=np.int64),
             np.array(ks, dtype=np.int64), np.array(fs, dtype=dt))
    return comps, reason, peak_ref, fallbacks


def stamp_components(model, kernels, ys, xs, ks, fs):
    """Add each component's kernel to ``model`` with slicing (twin of kernels.stamp)."""
    ny, nx = model.shape
    for y, x, k, f in zip(ys, xs, ks, fs):
        kern = kernels[k]
        h = kern.shape[0] // 2
        ya, yb = max(y - h, 0), min(y + h + 1, ny)
        xa, xb = max(x - h, 0), min(x + h + 1, nx)
        model[ya:yb, xa:xb] += model.dtype.type(f) * kern[ya - y + h:yb - y + h, xa - x + h:xb - x + h]
    return model


def convolve_centred(image, kernel):
    """Direct sum ``out[q] = sum_p image[p] kernel[q - p + c]``, c = kernel centre."""
    ny, nx = image.shape
    ky, kx = kernel.shape
    cy, cx = ky // 2, kx // 2
    out = np.zeros((ny, nx))
    for py, px in zip(*np.nonzero(image)):
        ya, yb = max(py - cy, 0), min(py - cy + ky, ny)
        xa, xb = max(px - cx, 0), min(px - cx + kx, nx)
        out[ya:yb, xa:xb] += image[py, px] * kernel[ya - py + cy:yb - py + cy, xa - px + cx:xb - px + cx]
    return out
