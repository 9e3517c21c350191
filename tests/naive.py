"""Slow, obviously right numpy twins of the compiled kernels, under the same names.

Each function recomputes everything from scratch at every step, with whole-array
numpy operations and no tiling, so it can be read against the method's description.
The compiled kernels must give the same components and the same values.
"""

import numpy as np

__all__ = ["scale_loop", "smooth_all", "stamp_components", "convolve_centred", "view_loop",
           "joint_response", "joint_loop",
           "direct_subtract", "tracked_peaks", "masked_peak"]


def scale_loop(values, ys, xs, beam, *, beam_peak, gain, level, max_iter):
    """Hogbom iterations over a set of pixels, whole-array numpy (twin of
    kernels.scale_loop).

    At each step: the largest ``|value|`` (first index on ties, as ``np.argmax``), stop
    at or below ``level``, take ``gain * value / beam_peak``, subtract that times the
    beam at every pixel's offset from the component.  ``values`` is updated in place.
    Returns ``(idx, flux, reason, peak)``.
    """
    cy, cx = (beam.shape[0] - 1) // 2, (beam.shape[1] - 1) // 2
    idx, flux = [], []
    reason = "iterations"
    peak = -1.0
    while True:
        if values.size == 0:
            reason = "empty"
            break
        i = int(np.argmax(np.abs(values)))
        peak = float(abs(values[i]))
        if peak <= level:
            reason = "level"
            break
        if len(idx) >= max_iter:
            reason = "iterations"
            break
        f = gain * float(values[i]) * (1.0 / float(beam_peak))
        idx.append(i)
        flux.append(f)
        shifted = beam[cy + ys - ys[i], cx + xs - xs[i]].astype(np.float64)
        values[:] = (values.astype(np.float64) - f * shifted).astype(values.dtype)
    return np.array(idx, dtype=np.int64), np.array(flux), reason, peak


def smooth_all(image, kernels):
    """Every scale's smoothed image by direct sums (twin of fft.MultiConvolver)."""
    return np.stack([convolve_centred(image, k) for k in kernels])


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


def direct_subtract(values, tys, txs, cys, cxs, flux, beam):
    """Twin of `skyscale.core.kernels.tracked.direct_subtract`: pixel by pixel, the
    components summed in their order in float64, then subtracted in the values' dtype."""
    cy, cx = beam.shape[0] // 2, beam.shape[1] // 2
    for q in range(values.shape[0]):
        acc = 0.0
        for i in range(len(flux)):
            acc += float(flux[i]) * float(beam[cy + tys[q] - cys[i], cx + txs[q] - cxs[i]])
        values[q] = values.dtype.type(float(values[q]) - acc)
    return values


def tracked_peaks(planes, allowed):
    """Twin of `skyscale.core.kernels.tracked.tracked_peaks`."""
    return np.array([float(np.abs(p[a]).max()) if a.any() else 0.0
                     for p, a in zip(planes, allowed)])


def masked_peak(image, mask):
    """Twin of `skyscale.core.kernels.tracked.masked_peak`."""
    return float(np.abs(image[mask]).max()) if mask.any() else 0.0


def view_loop(values, ys, xs, scale, levels, patches, pair, *, gain, budget, weights=None):
    """Multi-scale Hogbom steps over candidates, whole-array numpy (twin of
    masks.view_loop.view_loop).

    At each step: of the candidates whose value over its scale's level is above 1,
    the one with the largest such ratio times its scale's weight (first index on
    ties, as ``np.argmax``); stop when none is above 1; take ``gain`` times
    its value over its own scale's patch peak; subtract that times the patch of the
    pair (its scale, each candidate's scale) at every candidate within the patch.
    ``values`` is updated in place.  Returns ``(index, flux)``.
    """
    half = (patches.shape[1] - 1) // 2
    index, flux = [], []
    weights = np.ones(len(levels)) if weights is None else np.asarray(weights, float)
    while len(index) < budget and values.size:
        ratio = values / levels[scale]
        score = np.where(ratio > 1.0, ratio * weights[scale], 0.0)
        k = int(np.argmax(score))
        if not score[k] > 0.0:
            break
        j = scale[k]
        f = gain * float(values[k]) / float(patches[pair[j, j], half, half])
        dy, dx = ys - ys[k], xs - xs[k]
        near = (np.abs(dy) <= half) & (np.abs(dx) <= half)
        values[near] -= f * patches[pair[j, scale[near]], dy[near] + half,
                                    dx[near] + half].astype(np.float64)
        index.append(k)
        flux.append(f)
    return np.array(index, dtype=np.int64), np.array(flux)


def joint_response(planes, hinv, h00):
    """Equivalent peak ``sqrt(H_00 r^T H^-1 r)`` at every pixel, whole-array numpy
    (twin of skyscale.wideband.kernels.joint_response)."""
    quad = np.einsum("tyx,tq,qyx->yx", planes, hinv, planes)
    return np.sqrt(np.maximum(h00 * quad, 0.0))


def joint_loop(values, ys, xs, beams, *, hinv, h00, gain, level, max_iter):
    """Joint Hogbom iterations of all Taylor terms, whole-array numpy (twin of
    skyscale.wideband.kernels.joint_loop).

    At each step: the largest ``H_00 r^T H^-1 r`` (first index on ties), stop at or
    below ``level**2`` or after ``max_iter``, amplitudes ``gain * H^-1 r``, subtract
    ``sum_q a_q beams[t + q]`` at every pixel's offset from every term.  ``values`` is
    updated in place.  Returns ``(idx, amps, peak)``.
    """
    n = values.shape[0]
    beams = np.moveaxis(beams, -1, 0)          # (by, bx, 2n - 1) -> (2n - 1, by, bx)
    cy, cx = (beams.shape[1] - 1) // 2, (beams.shape[2] - 1) // 2
    idx, amps = [], []
    while True:
        quad = h00 * np.einsum("tj,tq,qj->j", values, hinv, values)
        if quad.size == 0:
            peak = 0.0
            break
        j = int(np.argmax(quad))
        peak = float(np.sqrt(max(quad[j], 0.0)))
        if quad[j] <= level * level or len(idx) >= max_iter:
            break
        a = gain * hinv @ values[:, j]
        idx.append(j)
        amps.append(a)
        by, bx = cy + ys - ys[j], cx + xs - xs[j]
        for t in range(n):
            values[t] -= sum(a[q] * beams[t + q][by, bx] for q in range(n))
    return (np.array(idx, dtype=np.int64), np.array(amps).reshape(-1, n), peak)
