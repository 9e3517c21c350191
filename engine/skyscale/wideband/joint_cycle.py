"""The joint multi-term, multi-scale minor cycle (`WidebandEngine`).

A minor cycle alternates two steps until every scale is below its floor:

1. choose the scale whose Taylor residuals hold the most significant equivalent peak
   (`skyscale.wideband.kernels.joint_response`, weighted like the single-term engine:
   ``w_k / sqrt(H_k[0, 0])``);
2. clean that scale alone with the compiled joint sub-loop
   (`skyscale.wideband.kernels.joint_loop`) over its pixels above the sub-loop's level,
   then update every term's residual exactly, ``R_t -= sum_q B_{t+q} (*) dI_q`` by FFT,
   and smooth them again by every scale.

Nothing is subtracted approximately, so the minor cycle ends on the residuals the
major cycle computes from the channels.  A sub-loop that would raise the term-0 peak
in the mask above the cycle's start (or the delta scale's level allowance,
`skyscale.core.levels.allowed_peak`) is halved and retried, then given up, as in the
single-term engine.

References
----------
.. [1] Rau, U. & Cornwell, T. J. 2011, A&A 532, A71.
.. [2] Offringa, A. R. & Smirnov, O. 2017, MNRAS 471, 301.
.. [3] Cornwell, T. J. 2008, IEEE J. Sel. Topics Signal Process. 2(5), 793.
"""

import logging
import time
from dataclasses import dataclass, field

import numpy as np

from skyscale.core.fft import Convolver, MultiConvolver, get_backend
from skyscale.core.kernels import stamp_components
from skyscale.core.levels import allowed_peak
from skyscale.core.noise import scale_noise
from skyscale.core.engine import MAX_HALVINGS, PEAK_RISE_TOLERANCE
from skyscale.core.precompute import BeamBank
from skyscale.core.scale_choice import ScaleChoice
from skyscale.core.scales import ScaleSet
from skyscale.core.threads import thread_limit
from skyscale.wideband.hessian import invert_hessians, scale_hessians
from skyscale.wideband.kernels import joint_loop, joint_response

__all__ = ["WIDEBAND_COMPONENT_DTYPE", "WidebandEngine", "JointCycleResult"]

logger = logging.getLogger(__name__)

#: Component table of a wideband run: position, scale (pixels), the term-0 flux at the
#: reference frequency (Jy) and the higher terms' amplitudes (Jy; 0 beyond the run's).
WIDEBAND_COMPONENT_DTYPE = np.dtype([("y", np.int32), ("x", np.int32),
                                     ("scale", np.float32), ("flux", np.float64),
                                     ("term1", np.float64), ("term2", np.float64)])



@dataclass
class JointCycleResult:
    """What one joint minor cycle did."""

    terms: np.ndarray          #: (n, ny, nx) updated Taylor-term models, Jy/pixel
    residuals: np.ndarray      #: (n, ny, nx) Taylor residuals as the cycle left them
    components: np.ndarray     #: `WIDEBAND_COMPONENT_DTYPE`
    stop_reason: str           #: a key of `skyscale.core.stops.MINOR_STOP_REASONS`
    rounds: int = 0
    rejected: int = 0
    seconds: float = 0.0
    timings: dict = field(default_factory=dict)


class WidebandEngine:
    """Spectral PSFs, per-scale Hessians and cross-term beams, reusable across cycles.

    Parameters
    ----------
    moments : (2 n - 1, py, px) ndarray
        Spectral PSFs ``B_m`` (`skyscale.wideband.taylor.taylor_sums` of the channel
        PSFs), ``B_0`` with peak 1 at the centre.
    scales : ScaleSet
    image_shape : (int, int)
    size_penalty, loop_gain, scale_loop_depth : float
        As `skyscale.Engine`.
    dtype : {float32, float64}
        Precision of the cross-term beams.
    threads : int, optional
    fft : str or backend

    Notes
    -----
    With one term the choice of scale and pixel, the amplitudes and the subtraction are
    those of `skyscale.Engine` (the equivalent peak is ``|R_0|``); the single-term path
    of `skyscale.deconvolve_wideband` runs that engine itself.
    """

    def __init__(self, moments, scales, image_shape, *, size_penalty, loop_gain,
                 scale_loop_depth, dtype=np.float32, threads=None, fft="auto"):
        t0 = time.perf_counter()
        self.moments = np.asarray(moments, dtype=np.float64)
        self.n_terms = (self.moments.shape[0] + 1) // 2
        self.scales = scales if isinstance(scales, ScaleSet) else ScaleSet(
            scales, image_shape=image_shape)
        self.image_shape = tuple(image_shape)
        self.loop_gain = float(loop_gain)
        self.scale_loop_depth = float(scale_loop_depth)
        self.dtype = np.dtype(dtype)
        self.threads = threads
        self.fft = get_backend(fft, threads=threads)
        self.kernels = [k.astype(np.float64) for k in self.scales.kernels(np.float64)]
        with thread_limit(threads):
            self.hessians = scale_hessians(self.moments, self.kernels)
            self.inverses = invert_hessians(self.hessians, self.scales.pixels)
            self.h00 = self.hessians[:, 0, 0].copy()
            self.weights = self.scales.weights(size_penalty)
            self.response_scale = self.weights / np.sqrt(self.h00)
            self.banks = [BeamBank(m, self.kernels, self.image_shape, self.fft, dtype=self.dtype)
                          for m in self.moments]
            # the cycle's updates and smoothing in the working precision (their own size
            # bounds the rounding, as in the single-term engine); the major cycle's
            # residuals from scratch in float64
            self.smoother = MultiConvolver(self.kernels, self.image_shape, backend=self.fft,
                                           precision=self.dtype)
            self.moment_convolvers = [Convolver(m, self.image_shape, backend=self.fft)
                                      for m in self.moments]
            self.update_convolvers = self.moment_convolvers if self.dtype == np.float64 else [
                Convolver(m, self.image_shape, backend=self.fft, precision=self.dtype)
                for m in self.moments]
        self._interleaved = {}
        py, px = self.moments.shape[1:]
        self.cross_peaks = np.array([
            float(np.sum(k * self.moments[0][py // 2 - k.shape[0] // 2:
                                             py // 2 + k.shape[0] // 2 + 1,
                                             px // 2 - k.shape[1] // 2:
                                             px // 2 + k.shape[1] // 2 + 1]))
            for k in self.kernels])
        self.precompute_seconds = time.perf_counter() - t0

    @property
    def n_scales(self):
        return len(self.scales)

    # ---------------------------------------------------------------- pieces
    def smooth(self, residuals):
        """``(n_scales, n, ny, nx)``: every term's residual smoothed by every scale."""
        out = np.empty((self.n_scales, self.n_terms) + self.image_shape)
        for t in range(self.n_terms):
            out[:, t] = self.smoother(residuals[t], dtype=np.float64)
        return out

    def responses(self, planes):
        """``(n_scales, ny, nx)`` equivalent peaks of each scale."""
        return np.stack([joint_response(planes[k], self.inverses[k], self.h00[k])
                         for k in range(self.n_scales)])

    def allowed(self, mask=None):
        """Per scale, where its components may be centred (as `skyscale.Engine.allowed`)."""
        ny, nx = self.image_shape
        out = np.zeros((self.n_scales, ny, nx), dtype=bool)
        for k, r in enumerate(self.scales.support_radii):
            out[k, r:ny - r, r:nx - r] = True
            if mask is not None:
                out[k] &= mask
        return out

    def noise(self, planes, mask=None):
        """Each scale's noise in its term-0 smoothed residual
        (`skyscale.core.noise.scale_noise`); returns ``(sigma, how)``."""
        sigma, _, how = scale_noise(planes[:, 0], self.scales.support_radii, mask=mask,
                                    ratios=np.sqrt(self.h00), cross=self.cross_peaks)
        return sigma, how

    @staticmethod
    def peaks(responses, allowed):
        return np.array([float(np.max(r, where=a, initial=0.0))
                         for r, a in zip(responses, allowed)])

    def cross_beams(self, k, extent):
        """Scale ``k``'s cross-term beams for a box of ``extent``, interleaved
        ``(by, bx, 2 n - 1)`` for `skyscale.wideband.kernels.joint_loop` (kept)."""
        parts = [bank.get(k, k, extent) for bank in self.banks]
        key = (k, parts[0].shape)
        if key not in self._interleaved:
            self._interleaved = {kk: v for kk, v in self._interleaved.items()
                                 if kk[1] == parts[0].shape}    # a larger box remade them
            self._interleaved[key] = np.ascontiguousarray(np.stack(parts, axis=-1))
        return self._interleaved[key]

    def subtract(self, residuals, increments, *, full_precision=False):
        """``R_t -= sum_q B_{t+q} (*) dI_q`` in place, exactly (image plane, by FFT):
        in the working precision (a minor cycle's update), or in float64 with
        ``full_precision`` (a major cycle's residuals from scratch)."""
        convs = self.moment_convolvers if full_precision else self.update_convolvers
        conv = convs[0]
        ny, nx = self.image_shape
        spectra = [None if not np.any(d) else
                   self.fft.rfft2(d.astype(conv.precision, copy=False), conv.fshape)
                   for d in increments]
        for t in range(self.n_terms):
            acc = None
            for q, s in enumerate(spectra):
                if s is None:
                    continue
                term = s * convs[t + q].spectrum
                acc = term if acc is None else acc + term
            if acc is not None:
                residuals[t] -= self.fft.irfft2(acc, conv.fshape)[:ny, :nx]
        return residuals

    # ---------------------------------------------------------------- the cycle
    def minor_cycle(self, residuals, terms, *, levels, planes=None, mask=None,
                    cycle_depth=0.2, max_components=20000, callback=None):
        """Clean the Taylor residuals jointly down to this cycle's floors.

        Parameters
        ----------
        residuals : (n, ny, nx) float64 ndarray
            Taylor residuals (Jy/beam); not modified.
        terms : (n, ny, nx) ndarray
            Taylor-term models (Jy/pixel); not modified.
        levels : (n_scales,) ndarray
            Each scale's stop level for the equivalent peak (Jy/beam).
        planes : (n_scales, n, ny, nx) ndarray, optional
            ``smooth(residuals)``, when the caller has it.
        mask : (ny, nx) bool ndarray, optional
        cycle_depth : float
            Each scale is cleaned to this fraction of its starting peak (not below its
            level).
        max_components : int
        callback : callable, optional
            ``callback(dict)`` after each sub-loop, ``stage='minor'``.

        Returns
        -------
        JointCycleResult
        """
        with thread_limit(self.threads):
            return self._minor_cycle(np.array(residuals, dtype=np.float64), terms, levels,
                                     planes, mask, float(cycle_depth), int(max_components),
                                     callback)

    def _minor_cycle(self, residuals, terms, levels, planes, mask, cycle_depth, budget,
                     callback):
        t0 = time.perf_counter()
        n = self.n_terms
        if planes is None:
            planes = self.smooth(residuals)
        allowed = self.allowed(mask)
        responses = self.responses(planes)
        peaks = self.peaks(responses, allowed)
        floors = np.maximum(levels, cycle_depth * peaks)
        in_mask = np.ones(self.image_shape, bool) if mask is None else mask
        peak_start = float(np.max(np.abs(residuals[0]), where=in_mask, initial=0.0))
        guard = allowed_peak(peak_start, levels, self.scales.has_delta)
        guard *= 1.0 + PEAK_RISE_TOLERANCE
        new_terms = np.array(terms, dtype=np.float64)
        pieces = []
        added = rounds = rejected = 0
        blocked = np.zeros(self.n_scales, dtype=bool)
        reason = "depth"
        t_loop = t_update = 0.0
        if not allowed.any():
            return JointCycleResult(new_terms, residuals, np.zeros(0, WIDEBAND_COMPONENT_DTYPE),
                                    "empty")
        rows = np.nonzero(allowed.any(axis=(0, 2)))[0]
        cols = np.nonzero(allowed.any(axis=(0, 1)))[0]
        extent = (int(rows[-1] - rows[0] + 1), int(cols[-1] - cols[0] + 1))
        choice = ScaleChoice(floors, levels, self.response_scale, self.scale_loop_depth)
        while True:
            k, level, reason = choice.next(peaks, blocked, added, budget)
            if k is None:
                break
            ta = time.perf_counter()
            ys, xs = np.nonzero(allowed[k] & (responses[k] > level))
            values = np.ascontiguousarray(planes[k][:, ys, xs])
            beams = self.cross_beams(k, extent)
            idx, amps, _ = joint_loop(values, ys, xs, beams, hinv=self.inverses[k],
                                      h00=self.h00[k], gain=self.loop_gain, level=level,
                                      max_iter=budget - added)
            tb = time.perf_counter()
            t_loop += tb - ta
            rounds += 1
            tries = 0
            while idx.size:
                trial = self._increments(k, ys[idx], xs[idx], amps)
                updated = self.subtract(residuals.copy(), trial)
                if float(np.max(np.abs(updated[0]), where=in_mask, initial=0.0)) <= guard:
                    residuals = updated
                    new_terms += trial
                    break
                rejected += 1
                tries += 1
                keep = idx.size // 2 if tries <= MAX_HALVINGS else 0
                idx, amps = idx[:keep], amps[:keep]
            if idx.size == 0:
                blocked[k] = True
                t_update += time.perf_counter() - tb
                continue
            planes = self.smooth(residuals)
            responses = self.responses(planes)
            peaks = self.peaks(responses, allowed)
            t_update += time.perf_counter() - tb
            table = np.zeros(idx.size, dtype=WIDEBAND_COMPONENT_DTYPE)
            table["y"], table["x"] = ys[idx], xs[idx]
            table["scale"] = np.float32(self.scales.pixels[k])
            table["flux"] = amps[:, 0]
            for t in range(1, n):
                table[f"term{t}"] = amps[:, t]
            pieces.append(table)
            added += idx.size
            blocked[:] = False
            if callback is not None:
                callback({"stage": "minor", "components": added, "peak": float(peaks.max()),
                          "scale": self.scales.pixels[k]})
        table = np.concatenate(pieces) if pieces else np.zeros(0, WIDEBAND_COMPONENT_DTYPE)
        return JointCycleResult(new_terms, residuals, table, reason, rounds, rejected,
                                time.perf_counter() - t0, {"loop": t_loop, "update": t_update})

    def _increments(self, k, ys, xs, amps):
        """``(n, ny, nx)``: each term's model increment of scale-``k`` components."""
        out = np.zeros((self.n_terms,) + self.image_shape)
        zeros = np.zeros(ys.size, np.int64)
        for t in range(self.n_terms):
            stamp_components(out[t], [self.kernels[k]], ys, xs, zeros, amps[:, t])
        return out
