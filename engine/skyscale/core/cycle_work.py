"""One minor cycle's residual and smoothed residuals in its box, kept exact.

The `skyscale.Engine`'s minor cycle works in the box around its mask.  The box's
residual and every scale's smoothed residual are exact as of the last FFT update; the
tracked pixels (the mask in the box, or the whole box without one) are exact after
every sub-loop.  A sub-loop is applied directly to the tracked pixels
(`skyscale.core.kernels.tracked.direct_subtract` with the scale's pair beams) when that
costs less than an FFT update, which otherwise applies every component since the last
one to the whole box at once.

References
----------
.. [1] Offringa, A. R. & Smirnov, O. 2017, MNRAS 471, 301.
"""

import time

import numpy as np

from skyscale.core.kernels import stamp_components
from skyscale.core.kernels.tracked import (direct_subtract, direct_subtract_rows,
                                          masked_peak, pixel_runs, tracked_peaks)

__all__ = ["CycleWork"]


class CycleWork:
    """A minor cycle's box of the residual and its smoothed residuals.

    Parameters
    ----------
    engine : Engine
        Its scales, beams, convolvers and the rule choosing direct or FFT updates.
    residual : (ny, nx) float64 ndarray
        The residual at the cycle's start (not modified).
    planes : (n_scales, ny, nx) ndarray
        ``residual`` smoothed by every scale (not modified: the box is copied).
    allowed : (n_scales, ny, nx) bool ndarray
        Where each scale may centre components (`Engine.allowed`).
    in_mask : (ny, nx) bool ndarray
        Where the peak guard looks (the mask, or everywhere).
    box : (y0, y1, x0, x1)
        The box the cycle works in (`Engine._box`).

    Notes
    -----
    ``apply`` subtracts a sub-loop's components exactly, by ``apply_direct`` on the
    tracked pixels or ``apply_fft`` on the whole box, and returns the new peak in the
    mask, or None (nothing changed) when it would pass the guard.
    """

    def __init__(self, engine, residual, planes, allowed, in_mask, box):
        self.e = engine
        y0, y1, x0, x1 = box
        self.box = box
        self.shape = (y1 - y0, x1 - x0)
        self.sub = residual[y0:y1, x0:x1].copy()          # float64, exact at last FFT
        self.planes = planes[:, y0:y1, x0:x1].copy()      # FFT updates write here
        allowed = allowed[:, y0:y1, x0:x1]
        guard_px = in_mask[y0:y1, x0:x1]
        self.guard_px = np.ascontiguousarray(guard_px)
        tracked = guard_px | allowed.any(axis=0)
        self.tys, self.txs = np.nonzero(tracked)
        self.full = self.tys.size == tracked.size     # every pixel: views, no gathers
        self.runs = pixel_runs(self.tys, self.txs)
        if self.full:
            self.allowed_t = allowed.reshape(allowed.shape[0], -1)
            self.guard_t = guard_px.ravel()
        else:
            self.allowed_t = np.ascontiguousarray(allowed[:, self.tys, self.txs])
            self.guard_t = guard_px[self.tys, self.txs]
        engine.bank.make([(k, k) for k in range(engine.n_scales)], self.shape)
        self._gather()
        self.pending = []                                 # (k, ys, xs, flux) since last FFT
        self._scratch = None
        self.fft_updates = self.direct_updates = 0
        self.seconds = 0.0
        n_t = self.tys.size
        self._fft_cost = engine._fft_update_cost(self.shape)
        self._direct_cost = n_t * (engine.n_scales + 1)

    def _gather(self):
        if self.full:
            self.resid_t = self.sub.ravel()
            self.planes_t = self.planes.reshape(self.planes.shape[0], -1)
        else:
            flat = self.tys * self.shape[1] + self.txs
            self.resid_t = self.sub.ravel().take(flat)
            self.planes_t = self.planes.reshape(self.planes.shape[0], -1).take(flat, axis=1)

    def peaks(self):
        """Each scale's peak over its allowed tracked pixels."""
        return tracked_peaks(self.planes_t, self.allowed_t)

    def tracked_peak(self):
        """The residual's peak over the mask's pixels in the box."""
        r = self.resid_t if self.resid_t is not None else self.planes_t[self.e.residual_index]
        r = r[self.guard_t]
        return float(np.abs(r).max()) if r.size else 0.0

    def active(self, k, level, floors, blocked):
        """Indices (into the tracked pixels) of scale ``k``'s sub-loop: allowed, above
        ``level``, and not claimed by another live scale with a larger penalised
        response (a bright compact source seen through a broad scale's smoothing stays
        the delta scale's, as with a per-component choice of scale)."""
        e = self.e
        mag = np.abs(self.planes_t[k])
        idx = np.flatnonzero(self.allowed_t[k] & (mag > level))
        resp = e.response_scale[k] * mag[idx]
        for j in range(e.n_scales):
            if j != k and not blocked[j]:
                pj = np.abs(self.planes_t[j][idx])
                claims = self.allowed_t[j][idx] & (pj > floors[j])
                resp = np.where(claims & (e.response_scale[j] * pj > resp), -1.0, resp)
        return idx[resp >= 0]

    def apply(self, k, ys, xs, flux, guard):
        """Subtract scale ``k``'s components; return the new peak in the mask, or None
        (nothing changed) when it would exceed ``guard``."""
        t0 = time.perf_counter()
        try:
            if self.e._direct_ok(len(flux) * self._direct_cost, self._fft_cost):
                return self.apply_direct(k, ys, xs, flux, guard)
            return self.apply_fft(k, ys, xs, flux, guard)
        finally:
            self.seconds += time.perf_counter() - t0

    def apply_direct(self, k, ys, xs, flux, guard):
        """Subtract the components from the tracked pixels of the residual and of every
        scale's smoothed residual (exact there); the rest of the box waits for the next
        FFT update.  Returns the new peak in the mask, or None when it passes ``guard``."""
        e = self.e
        r = e.residual_index         # a unit delta scale's plane is the residual itself
        d = r if r < e.n_scales else None
        e.bank.make([(j, k) for j in range(e.n_scales)] + [(r, k)], self.shape)
        first = (self.resid_t if d is None else self.planes_t[d]).copy()
        direct_subtract(first, self.tys, self.txs, ys, xs, flux,
                        e.pair_beam(r, k, self.shape), runs=self.runs)
        peak = float(np.max(np.abs(first), where=self.guard_t, initial=0.0))
        if peak > guard:
            return None
        planes = self.planes_t
        rows = [j for j in range(e.n_scales) if j != d]
        direct_subtract_rows(planes, rows, self.tys, self.txs, ys, xs, flux,
                             [e.pair_beam(j, k, self.shape) for j in rows], runs=self.runs)
        if d is not None:
            planes[d][:] = first
        if d is None:
            self.resid_t = first
        else:
            self.resid_t = None       # the delta scale's plane holds it now
        self.pending.append((k, ys, xs, flux))
        self.direct_updates += 1
        return peak

    def apply_fft(self, k, ys, xs, flux, guard):
        """Bring the whole box up to date by FFT with these components and every one
        applied directly since the last update.  Returns the new peak in the mask, or
        None (nothing changed) when it passes ``guard``."""
        e = self.e
        parts = self.pending + [(k, ys, xs, flux)]
        step = np.zeros(self.shape, dtype=e.dtype)
        stamp_components(step, e._kernels64, np.concatenate([p[1] for p in parts]),
                         np.concatenate([p[2] for p in parts]),
                         np.concatenate([np.full(len(p[3]), p[0], np.int64) for p in parts]),
                         np.concatenate([p[3] for p in parts]))
        psf_convolver, smoother = e._tools(self.shape)    # made at the first FFT update
        full = psf_convolver.transform(step)
        ny, nx = self.shape
        if self._scratch is None:
            self._scratch = np.empty_like(self.sub)
        np.subtract(self.sub, full[:ny, :nx], out=self._scratch)
        del full
        peak = masked_peak(self._scratch, self.guard_px)
        if peak > guard:
            return None
        self.sub, self._scratch = self._scratch, self.sub
        smoother(self.sub, out=self.planes)
        self._gather()
        self.pending = []
        self.fft_updates += 1
        return peak
