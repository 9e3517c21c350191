"""The `Engine`: precomputed scale beams and the multi-scale minor cycle around the kernels.

References
----------
.. [1] Cornwell, T. J. 2008, "Multiscale CLEAN deconvolution of radio synthesis
   images", IEEE J. Sel. Topics Signal Process. 2(5), 793.
.. [2] Clark, B. G. 1980, A&A 89, 377.
.. [3] Hogbom, J. A. 1974, A&AS 15, 417.
"""

import copy as _copy
import logging
import time
from dataclasses import dataclass, field

import numpy as np

from ._threads import thread_limit
from ._validate import as_image, resolve_dtype
from .fft import Convolver, fast_shape, get_backend
from .kernels import clean_loop, stamp_components, tile_maxima
from .precompute import cross_term_patches, plan_memory
from .psf import PSF_PATCH_LEVEL, check_psf, describe_psf
from .result import COMPONENT_DTYPE
from .scales import ScaleSet

__all__ = ["Engine", "MinorCycleResult", "LoopState", "MINOR_STOP_REASONS"]

logger = logging.getLogger(__name__)

#: A minor cycle hands back early when its tracked peak rises above this multiple of
#: the peak it started from.  Sidelobes of components nearby may raise a pixel a
#: little before it is cleaned itself; a rise of this size means the cycle is fitting
#: what is not there.
PEAK_RISE_LIMIT = 1.1

#: Why a minor cycle handed back to the major cycle.
MINOR_STOP_REASONS = {
    "depth": "the residual peak reached the cycle's floor (cycle_depth or PSF sidelobe level)",
    "threshold": "the residual peak reached the global threshold",
    "max_components": "the component budget of this cycle was spent",
    "peak_rose": "the residual peak rose during the cycle; handed back early",
    "empty": "no pixel may be cleaned (empty mask or nothing above the floor)",
}


@dataclass
class MinorCycleResult:
    """What one minor cycle did."""

    model: np.ndarray          #: updated model (Jy/pixel); the input model is not changed
    components: np.ndarray     #: components added, `COMPONENT_DTYPE`
    stop_reason: str           #: a key of `MINOR_STOP_REASONS`
    peak_start: float          #: peak |residual| in the mask at the start, Jy/beam
    peak_end: float            #: the same at the end, as tracked by the minor cycle
    floor: float               #: the level the cycle cleaned down to, Jy/beam
    region: tuple = ()         #: (y0, y1, x0, x1) sub-region searched
    fallbacks: int = 0         #: components taken as deltas because a scale's sign disagreed
    seconds: float = 0.0
    timings: dict = field(default_factory=dict)


class Engine:
    """Precomputed multi-scale beams, reusable across major cycles.

    Parameters
    ----------
    psf : (py, px) ndarray
        The PSF, peak 1 at ``(py // 2, px // 2)``, at least the image's size.
    scales : sequence of float, Quantity ['angle'], or ScaleSet
        Scale diameters (pixels, or angles with ``cell_arcsec``); default
        ``[0, 4, 8, 16]``.
    image_shape : (int, int), optional
        Shape of the images to clean; default the PSF's shape.
    scale_shape : {'paraboloid', 'gaussian'}
        Scale kernel shape; default the tapered paraboloid of [1]_.
    size_penalty : float
        Bias toward small scales, weight ``1 - size_penalty * s / s_max``; default 0.6.
    loop_gain : float
        Fraction of each component's flux taken per iteration; default 0.1.
    psf_patch : int, optional
        Half-width in pixels of the minor-cycle PSF patch; default the smallest one
        beyond which ``|psf| <= psf_patch_level`` (0.1).
    dtype : {float32, float64}
        Working precision; default float32.
    threads : int, optional
        Threads for kernels and FFTs; default all cores.
    fft : {'auto', 'numpy', 'pyfftw'} or backend
        FFT backend; default pyfftw when installed.
    cell_arcsec : float, optional
        Cell size, needed when scales are angles.
    tile : int
        Tile side of the peak search; default 16.
    max_memory : int, optional
        Refuse (ValueError) a precompute needing more bytes than this.

    Notes
    -----
    For each scale pair the cross term ``PSF (*) scale_k (*) scale_l`` is kept as a
    patch of half-width ``psf_patch + r_k + r_l``.  A component is chosen where the
    penalised matched-filter response ``w_k |R_k| / sqrt(B_kk(0))`` peaks, with
    ``R_k`` the residual smoothed by scale k and ``B_kk(0)`` the peak of the doubly
    smoothed PSF; its integrated flux is ``R_k / B_kk(0)`` ([1]_).  The square of the
    response is the drop in the squared smoothed residual a full-gain component would
    give, so components are taken in order of the residual they explain.  With a
    single delta scale this is Hogbom's CLEAN [3]_.
    """

    def __init__(self, psf, scales=(0, 4, 8, 16), *, image_shape=None,
                 scale_shape="paraboloid", size_penalty=0.6, loop_gain=0.1, psf_patch=None,
                 psf_patch_level=PSF_PATCH_LEVEL, dtype=None, threads=None, fft="auto",
                 cell_arcsec=None, tile=16, max_memory=None):
        t0 = time.perf_counter()
        self.dtype = resolve_dtype(dtype)
        psf_arr = as_image(psf, "psf", dtype=self.dtype)
        self.image_shape = tuple(image_shape) if image_shape is not None else psf_arr.shape
        self.psf = check_psf(psf_arr, self.image_shape, dtype=self.dtype)
        if isinstance(scales, ScaleSet):
            self.scales = scales
        else:
            self.scales = ScaleSet(scales, shape=scale_shape, cell_arcsec=cell_arcsec,
                                   image_shape=self.image_shape)
        if not 0.0 < loop_gain <= 1.0:
            raise ValueError(f"loop_gain is {loop_gain}, expected 0 < loop_gain <= 1; "
                             "0.1 is the usual choice")
        if int(tile) < 1:
            raise ValueError(f"tile is {tile}, expected a positive number of pixels")
        self.loop_gain = float(loop_gain)
        self.size_penalty = float(size_penalty)
        self.weights = self.scales.weights(size_penalty)
        self.threads = threads
        self.tile = int(tile)
        self.fft = get_backend(fft, threads=threads)
        self.psf_info = describe_psf(self.psf, self.image_shape, patch_half=psf_patch,
                                     patch_level=psf_patch_level)
        self.memory = plan_memory(self.image_shape, self.psf.shape, self.scales.support_radii,
                                  self.psf_info.patch_half, self.dtype.itemsize)
        if max_memory is not None and self.memory["total"] > max_memory:
            raise ValueError(f"the precompute needs {self.memory['total'] / 2**20:.0f} MiB, over "
                             f"max_memory {max_memory / 2**20:.0f} MiB; use fewer or smaller "
                             "scales, a smaller psf_patch, or raise max_memory")
        self.kernels = self.scales.kernels(self.dtype)
        with thread_limit(threads):
            pk = cross_term_patches(self.psf, [k.astype(np.float64) for k in self.kernels],
                                    self.psf_info.patch_half, self.image_shape, self.fft)
        self.patches, self.patch_offset, self.patch_half, self.beam_peaks = pk
        bad = [s for s, b in zip(self.scales.pixels, self.beam_peaks) if not b > 0]
        if bad:
            raise ValueError(f"scales {bad} px see a PSF whose doubly smoothed peak is <= 0 "
                             "(the array does not recover structure that large); drop them "
                             "or use smaller scales")
        self.patches = self.patches.astype(self.dtype)
        self.amp_scale = 1.0 / self.beam_peaks
        self.response_scale = self.weights / np.sqrt(self.beam_peaks)
        self._smoothers = {}
        self.precompute_seconds = time.perf_counter() - t0
        logger.info("engine ready: %d scales %s, PSF patch half-width %d px, %.1f MiB, %.2f s",
                    len(self.scales), list(self.scales.pixels), self.psf_info.patch_half,
                    self.memory["total"] / 2**20, self.precompute_seconds)

    # ------------------------------------------------------------------ helpers
    @property
    def n_scales(self):
        return len(self.scales)

    @property
    def delta_index(self):
        """Index of the delta plane, or -1 when the set has no delta scale."""
        return 0 if self.scales.has_delta else -1

    def smooth(self, residual):
        """Residual smoothed by every scale kernel: ``(n_scales, ny, nx)``."""
        shape = residual.shape
        planes = np.empty((self.n_scales,) + shape, dtype=self.dtype)
        for k, kern in enumerate(self.kernels):
            if kern.size == 1:
                planes[k] = residual * kern[0, 0]
                continue
            key = (k, shape)
            conv = self._smoothers.get(key)
            if conv is None:
                conv = self._smoothers[key] = Convolver(kern, shape, backend=self.fft)
            planes[k] = conv(residual, out_dtype=self.dtype)
        return planes

    def _limits(self, shape, box):
        """Per-scale allowed centres in box coordinates: a kernel must fit the image."""
        y0, y1, x0, x1 = box
        lim = np.empty((self.n_scales, 4), dtype=np.int64)
        for k, r in enumerate(self.scales.support_radii):
            lim[k] = (max(r, y0) - y0, min(shape[0] - r, y1) - y0,
                      max(r, x0) - x0, min(shape[1] - r, x1) - x0)
        return lim

    def _region(self, planes, mask, floor):
        """Bounding box of the pixels that may still exceed the floor, with a margin."""
        shape = planes.shape[1:]
        any_above = np.zeros(shape, dtype=bool)
        full = (0, shape[0], 0, shape[1])
        lim = self._limits(shape, full)
        level = floor * self.response_scale[0]
        for k in range(self.n_scales):
            ya, yb, xa, xb = lim[k]
            if ya >= yb or xa >= xb:
                continue
            resp = np.abs(planes[k, ya:yb, xa:xb]) * self.response_scale[k]
            any_above[ya:yb, xa:xb] |= resp > level
        if mask is not None:
            any_above &= mask
        ys = np.nonzero(any_above.any(axis=1))[0]
        if ys.size == 0:
            return None
        xs = np.nonzero(any_above.any(axis=0))[0]
        m = self.psf_info.main_lobe_radius + max(self.scales.support_radii)
        return (max(ys[0] - m, 0), min(ys[-1] + m + 1, shape[0]),
                max(xs[0] - m, 0), min(xs[-1] + m + 1, shape[1]))

    def loop_state(self, residual, mask=None, region=None):
        """Return a `LoopState` over ``region`` (default the whole image)."""
        return LoopState(self, residual, mask, region)

    # --------------------------------------------------------------- the cycle
    def minor_cycle(self, residual, model=None, *, mask=None, threshold=0.0, cycle_depth=0.2,
                    max_components=100000, callback=None, chunk=2000):
        """Clean ``residual`` down to this cycle's floor and return the updated model.

        Parameters
        ----------
        residual : (ny, nx) ndarray
            Current residual image, Jy/beam (the caller's own major cycle made it).
        model : (ny, nx) ndarray, optional
            Current model, Jy/pixel; default zeros.  It is not modified.
        mask : (ny, nx) bool ndarray, optional
            Where components may go; default everywhere.
        threshold : float
            Global threshold in Jy/beam; the cycle never cleans below it.
        cycle_depth : float
            Clean down to this fraction of the cycle's starting peak (bounded below by
            the PSF's level outside the patch times that peak, [2]_); default 0.2.
        max_components : int
            Most components this cycle may add.
        callback : callable, optional
            Called as ``callback(dict)`` every ``chunk`` components with keys
            ``stage='minor'``, ``components``, ``peak``.

        Returns
        -------
        MinorCycleResult
        """
        t0 = time.perf_counter()
        residual = as_image(residual, "residual", dtype=self.dtype)
        if residual.shape[0] > self.psf.shape[0] or residual.shape[1] > self.psf.shape[1]:
            raise ValueError(f"residual has shape {residual.shape}, larger than the PSF "
                             f"{self.psf.shape}; give a PSF at least the image's size")
        if model is None:
            model = np.zeros(residual.shape, dtype=self.dtype)
        else:
            model = as_image(model, "model", dtype=self.dtype)
            if model.shape != residual.shape:
                raise ValueError(f"model has shape {model.shape}, expected the residual's "
                                 f"{residual.shape}")
        if mask is not None:
            mask = np.asarray(mask, dtype=bool)
            if mask.shape != residual.shape:
                raise ValueError(f"mask has shape {mask.shape}, expected the image's "
                                 f"{residual.shape}; regrid or rebuild the mask")
        if not 0.0 <= cycle_depth < 1.0:
            raise ValueError(f"cycle_depth is {cycle_depth}, expected a fraction in [0, 1)")
        with thread_limit(self.threads):
            return self._minor_cycle(residual, model, mask, float(threshold), float(cycle_depth),
                                     int(max_components), callback, int(chunk), t0)

    def _minor_cycle(self, residual, model, mask, threshold, cycle_depth, budget, callback,
                     chunk, t0):
        planes_full = self.smooth(residual)
        t_smooth = time.perf_counter()
        if mask is not None and not mask.any():
            return MinorCycleResult(model.copy(), np.zeros(0, COMPONENT_DTYPE), "empty",
                                    0.0, 0.0, threshold)
        ref_plane = np.abs(planes_full[0])
        peak_start = float(ref_plane[mask].max() if mask is not None else ref_plane.max())
        floor = max(threshold, cycle_depth * peak_start,
                    self.psf_info.outside_level * peak_start)
        floor_is_threshold = floor == threshold
        empty = MinorCycleResult(model.copy(), np.zeros(0, COMPONENT_DTYPE), "empty",
                                 peak_start, peak_start, floor)
        if budget <= 0:
            empty.stop_reason = "max_components"
            return empty
        if peak_start <= floor:
            empty.stop_reason = "threshold" if floor_is_threshold else "depth"
            return empty
        box = self._region(planes_full, mask, floor)
        if box is None:
            return empty
        y0, y1, x0, x1 = box
        planes = np.ascontiguousarray(planes_full[:, y0:y1, x0:x1])
        del planes_full
        mbox = (np.ones((y1 - y0, x1 - x0), dtype=np.uint8) if mask is None
                else np.ascontiguousarray(mask[y0:y1, x0:x1], dtype=np.uint8))
        lim = self._limits(residual.shape, box)
        maxima = tile_maxima(planes, mbox, lim, self.response_scale, self.tile)
        pieces = []
        added, fallbacks = 0, 0
        peak_end = peak_start
        reason = "empty"
        while added < budget:
            comps, code, peak_end, fb = clean_loop(
                planes, mbox, lim, self.response_scale, self.amp_scale, self.patches,
                self.patch_offset, self.patch_half, self.tile, maxima, gain=self.loop_gain,
                floor=floor, peak_limit=peak_start * PEAK_RISE_LIMIT, ref=0,
                delta=self.delta_index, max_iter=min(chunk, budget - added))
            pieces.append(comps)
            added += comps[0].size
            fallbacks += fb
            if callback is not None:
                callback({"stage": "minor", "components": added, "peak": peak_end})
            if code != "iterations":
                reason = {"depth": "threshold" if floor_is_threshold else "depth"}.get(code, code)
                break
        else:
            reason = "max_components"
        t_loop = time.perf_counter()
        ys = np.concatenate([p[0] for p in pieces]) + y0
        xs = np.concatenate([p[1] for p in pieces]) + x0
        ks = np.concatenate([p[2] for p in pieces])
        fs = np.concatenate([p[3] for p in pieces]).astype(np.float64)
        new_model = model.copy()
        stamp_components(new_model, self.kernels, ys, xs, ks, fs)
        table = np.zeros(ys.size, dtype=COMPONENT_DTYPE)
        table["y"], table["x"], table["flux"] = ys, xs, fs
        table["scale"] = np.asarray(self.scales.pixels, dtype=np.float32)[ks]
        t1 = time.perf_counter()
        logger.debug("minor cycle: %d components, peak %.4g -> %.4g (floor %.4g), %s, region %s",
                     ys.size, peak_start, peak_end, floor, reason, box)
        return MinorCycleResult(new_model, table, reason, peak_start, peak_end, floor, box,
                                fallbacks, t1 - t0,
                                {"smooth": t_smooth - t0, "loop": t_loop - t_smooth,
                                 "model": t1 - t_loop})


class LoopState:
    """The minor-cycle loop over a fixed sub-region, stepped by hand.

    For benchmarks and the cost model: ``state = engine.loop_state(residual)`` then
    ``state.iterate(n)`` adds ``n`` components (no floor, no stop but an empty
    region) and returns them.  ``bytes_per_iteration`` is what one iteration reads
    and writes in the planes (patch areas, tiles rescanned included) on average.
    """

    def __init__(self, engine, residual, mask=None, region=None):
        self.engine = engine
        planes_full = engine.smooth(as_image(residual, "residual", dtype=engine.dtype))
        shape = planes_full.shape[1:]
        self.region = region or (0, shape[0], 0, shape[1])
        y0, y1, x0, x1 = self.region
        self.planes = np.ascontiguousarray(planes_full[:, y0:y1, x0:x1])
        self.mask = (np.ones(self.planes.shape[1:], dtype=np.uint8) if mask is None
                     else np.ascontiguousarray(np.asarray(mask)[y0:y1, x0:x1], dtype=np.uint8))
        self.lim = engine._limits(shape, self.region)
        self.maxima = tile_maxima(self.planes, self.mask, self.lim, engine.response_scale,
                                  engine.tile)

    @property
    def bytes_per_iteration(self):
        """Plane bytes one iteration touches, averaged over the scale of the component."""
        e = self.engine
        t = e.tile
        h, w = self.planes.shape[1:]
        side = np.minimum(2 * e.patch_half + 1 + t, max(h, w))
        per_k = (np.minimum(side, h) * np.minimum(side, w)).sum(axis=1)
        return float(per_k.mean()) * 2 * e.dtype.itemsize

    def copy(self):
        """An independent copy (planes and peaks): every timed round can do the same work."""
        twin = _copy.copy(self)
        twin.planes = self.planes.copy()
        twin.maxima = tuple(a.copy() for a in self.maxima)
        return twin

    def iterate(self, n):
        e = self.engine
        with thread_limit(e.threads):
            comps, code, peak, _ = clean_loop(
                self.planes, self.mask, self.lim, e.response_scale, e.amp_scale, e.patches,
                e.patch_offset, e.patch_half, e.tile, self.maxima, gain=e.loop_gain, floor=-1.0,
                peak_limit=np.inf, ref=0, delta=e.delta_index, max_iter=n)
        return comps
