"""The textbook multi-scale CLEAN in plain numpy: the baseline the engine is compared with.

Every iteration, as the method is usually written down (Cornwell 2008):

1. for every scale ``k``, the penalised response ``w_k |R_k| / sqrt(B_kk(0))`` over the
   mask (``R_k`` the residual smoothed by scale ``k``, ``B_kl = PSF (*) s_k (*) s_l``);
   the largest over scales and pixels chooses the component;
2. its flux ``gain * R_k(p) / B_kk(0)`` is added to the model;
3. every scale's residual is updated over the whole image:
   ``R_l -= flux * B_lk(. - p)``, with the cross terms kept at every offset between two
   image pixels, so the residual is exact and no major cycle is needed.

The engine's choices are taken over unchanged so that only the loop differs: its scale
kernels, weights ``w_k`` and allowed centres (`skyscale.core.engine.Engine`).  The cross
terms are made with ``numpy.fft``.  Single-threaded, as numpy is.

References
----------
.. [1] Cornwell, T. J. 2008, IEEE J. Sel. Topics Signal Process. 2(5), 793.
.. [2] Hogbom, J. A. 1974, A&AS 15, 417.
"""

import time

import numpy as np
from scipy.fft import next_fast_len

__all__ = ["cross_terms", "TextbookBeams", "textbook_clean"]


def _fft_conv_full(a, b):
    s = [next_fast_len(x + y - 1, real=True) for x, y in zip(a.shape, b.shape)]
    out = np.fft.irfft2(np.fft.rfft2(a, s) * np.fft.rfft2(b, s), s)
    return out[:a.shape[0] + b.shape[0] - 1, :a.shape[1] + b.shape[1] - 1]


def cross_terms(psf, kernels, image_shape, dtype=np.float32):
    """``B_kl = PSF (*) s_k (*) s_l`` at every offset ``|d| <= n - 1``: dict ``(k, l) ->
    (2 ny - 1, 2 nx - 1)`` array, zero offset at ``(ny - 1, nx - 1)``, for ``k <= l``."""
    ny, nx = image_shape
    cy, cx = psf.shape[0] // 2, psf.shape[1] // 2
    out = {}
    for k in range(len(kernels)):
        for l in range(k, len(kernels)):
            kk = _fft_conv_full(np.asarray(kernels[k], float), np.asarray(kernels[l], float))
            r = kk.shape[0] // 2
            full = _fft_conv_full(np.asarray(psf, float), kk)
            oy, ox = cy + r, cx + r                       # zero offset in ``full``
            out[k, l] = np.ascontiguousarray(
                full[oy - (ny - 1):oy + ny, ox - (nx - 1):ox + nx], dtype=dtype)
    return out


class TextbookBeams:
    """Cross terms and per-scale constants of the textbook loop (numpy.fft)."""

    def __init__(self, psf, kernels, image_shape, weights, dtype=np.float32):
        t0 = time.perf_counter()
        self.terms = cross_terms(psf, kernels, image_shape, dtype)
        self.n = len(kernels)
        self.peaks = np.array([float(self.terms[k, k][image_shape[0] - 1, image_shape[1] - 1])
                               for k in range(self.n)])
        self.response = np.asarray(weights, float) / np.sqrt(self.peaks)
        self.seconds = time.perf_counter() - t0

    def term(self, k, l):
        return self.terms[min(k, l), max(k, l)]


def textbook_clean(dirty, beams, kernels, allowed, *, gain=0.1, level, max_iter,
                   max_seconds=None, check_every=1, callback=None):
    """Clean until the delta scale's peak |residual| in the mask is at most ``level``.

    Parameters
    ----------
    dirty : (ny, nx) ndarray
    beams : TextbookBeams
    kernels : list of ndarray
        Scale kernels (unit sum), smallest first; the first is the delta scale.
    allowed : (n_scales, ny, nx) bool ndarray
        Where each scale's components may be centred (`Engine.allowed(mask)`).
    gain : float
    level : float
        Stop level of the delta scale's residual in the mask, Jy/beam.
    max_iter : int
    max_seconds : float, optional
        Stop (labelled ``'time'``) after this long.

    Returns
    -------
    dict
        ``model``, ``residual``, ``components`` (count), ``per_scale`` (counts),
        ``seconds``, ``precompute_seconds``, ``per_iteration_seconds``, ``stop``.
    """
    from scipy.signal import fftconvolve
    t0 = time.perf_counter()
    ny, nx = dirty.shape
    n = beams.n
    planes = np.stack([fftconvolve(dirty.astype(np.float64), np.asarray(k, float), mode="same")
                       if k.size > 1 else dirty.astype(np.float64) * float(k.ravel()[0])
                       for k in kernels]).astype(np.float32)
    weight = np.stack([allowed[k] * beams.response[k] for k in range(n)]).astype(np.float32)
    inside = allowed[0]
    model = np.zeros((ny, nx))
    counts = np.zeros(n, dtype=np.int64)
    buf = np.empty((ny, nx), np.float32)
    it = 0
    stop = "max_iter"
    while it < max_iter:
        if it % check_every == 0:
            if float(np.abs(planes[0][inside]).max()) <= level:
                stop = "level"
                break
            if max_seconds is not None and time.perf_counter() - t0 > max_seconds:
                stop = "time"
                break
        best, arg, kbest = -1.0, 0, 0
        for k in range(n):
            np.abs(planes[k], out=buf)
            buf *= weight[k]
            j = int(buf.argmax())
            if buf.flat[j] > best:
                best, arg, kbest = float(buf.flat[j]), j, k
        y, x = divmod(arg, nx)
        flux = gain * float(planes[kbest].flat[arg]) / beams.peaks[kbest]
        r = kernels[kbest].shape[0] // 2
        model[y - r:y + r + 1, x - r:x + r + 1] += flux * kernels[kbest]
        for l in range(n):
            b = beams.term(l, kbest)
            planes[l] -= np.float32(flux) * b[ny - 1 - y:2 * ny - 1 - y, nx - 1 - x:2 * nx - 1 - x]
        counts[kbest] += 1
        it += 1
        if callback is not None and it % 1000 == 0:
            callback(it, time.perf_counter() - t0)
    seconds = time.perf_counter() - t0
    return {"model": model, "residual": planes[0], "components": it,
            "per_scale": counts.tolist(), "seconds": seconds,
            "precompute_seconds": beams.seconds, "per_iteration_seconds": seconds / max(it, 1),
            "stop": stop}
