"""The `Engine`: precomputed scale beams and the multi-scale minor cycle.

A minor cycle alternates two steps until every scale is below its floor:

1. choose the scale whose smoothed residual holds the most significant peak (the
   penalised matched-filter response, see `Engine`);
2. clean that scale alone with the compiled single-scale sub-loop over its active
   pixels, subtracting its whole scale beam, then update the residual and every
   scale's smoothed residual once, exactly, by FFT.

Nothing is ever subtracted approximately, so a minor cycle with the image-plane PSF
ends on the residual the major cycle will compute (Offringa & Smirnov 2017).

References
----------
.. [1] Cornwell, T. J. 2008, "Multiscale CLEAN deconvolution of radio synthesis
   images", IEEE J. Sel. Topics Signal Process. 2(5), 793.
.. [2] Offringa, A. R. & Smirnov, O. 2017, MNRAS 471, 301.
.. [3] Hogbom, J. A. 1974, A&AS 15, 417.
"""

import logging
import time
import warnings
from dataclasses import dataclass, field, replace

import numpy as np

from skyscale.core.threads import thread_limit
from skyscale.core.validate import (NUMBER_RULES, InputError, as_image, check_number,
                                    resolve_dtype)
from skyscale.core.fft import Convolver, MultiConvolver, convolution_grid, get_backend
from skyscale.core.kernels import scale_loop, stamp_components
from skyscale.core.kernels.tracked import masked_peak
from skyscale.core.cycle_work import CycleWork
from skyscale.core.levels import allowed_peak, scale_levels
from skyscale.core.noise import scale_noise
from skyscale.core.grids import fft_work
from skyscale.core.memory import MEMORY_HEADROOM, engine_memory, fits_memory
from skyscale.core.precompute import BeamBank, beam_peaks
from skyscale.core.psf import check_psf
from skyscale.core.result import COMPONENT_DTYPE
from skyscale.core.scale_choice import REENTRY, ScaleChoice  # noqa: F401 (REENTRY offered here too)
from skyscale.core.scales import ScaleSet
from skyscale.core.windows import measurement_window
from skyscale.core.defaults import DEFAULTS

__all__ = ["Engine", "MinorCycleResult", "ScaleState"]

logger = logging.getLogger(__name__)

#: A sub-loop may not raise the peak residual in the cycle's mask (within the box the
#: cycle works in) above the cycle's start (or `skyscale.core.levels.LEVEL_ALLOWANCE` times
#: the delta scale's stop level) by more than this fraction (rounding); past it the
#: sub-loop is undone.  The mask is the cycle's own: one that grows between major
#: cycles may hold a higher peak in its new pixels.
PEAK_RISE_TOLERANCE = 1e-5

#: A sub-loop that would raise the peak is retried with half its components this many
#: times before its scale is given up for the rest of the cycle.
MAX_HALVINGS = 3


#: A sub-loop is applied directly to the tracked pixels (exact, see
#: `skyscale.core.kernels.tracked`) when its multiply-adds (components x tracked pixels x
#: (scales + 1)) are at most this multiple of the FFT update's work (``S log2 S`` summed
#: over its transforms); otherwise by an FFT update of the whole box.  Measured on the
#: development machine: a direct multiply-add costs about ten times an FFT work unit.
DIRECT_COST_RATIO = 0.1



def _covers(outer, inner):
    """Whether window ``outer`` holds window ``inner`` (None: the whole image)."""
    if outer is None:
        return True
    if inner is None:
        return False
    return (outer[0] <= inner[0] and inner[1] <= outer[1] and outer[2] <= inner[2]
            and inner[3] <= outer[3])


@dataclass
class ScaleState:
    """The residual seen by every scale: smoothed planes, their peaks and noise."""

    planes: np.ndarray         #: (n_scales, ny, nx) residual smoothed by each scale
    peaks: np.ndarray          #: peak |plane| where each scale may place components
    noise: np.ndarray          #: each scale's noise, measured where there is no emission
    noise_pixels: np.ndarray   #: (subsampled) pixels each noise estimate used
    noise_how: list = None     #: 'measured' or 'scaled' (from the smallest scale) per scale
    #: (y0, y1, x0, x1) of the part of ``planes`` that was smoothed (zero outside it;
    #: `skyscale.core.windows.measurement_window`), or None for the whole image
    window: tuple = None


@dataclass
class MinorCycleResult:
    """What one minor cycle did."""

    model: np.ndarray          #: updated model (Jy/pixel); the input model is not changed
    components: np.ndarray     #: components added, `COMPONENT_DTYPE`
    stop_reason: str           #: a key of `skyscale.core.stops.MINOR_STOP_REASONS`
    #: Largest |residual| (unsmoothed, Jy/beam) in the mask, or anywhere without one, when
    #: the cycle started; 0 for an empty mask.  Sub-loops are kept only while this
    #: stays at most `skyscale.core.levels.allowed_peak` of it (checked in the box the cycle
    #: works in); across major cycles a growing mask takes in new pixels, so the next
    #: cycle's start may be higher.
    peak_start: float
    peak_end: float            #: the same over the same pixels at the end (its own residual)
    floor: float               #: the delta scale's floor in this cycle, Jy/beam
    residual: np.ndarray = None  #: the residual as the minor cycle updated it
    region: tuple = ()         #: (y0, y1, x0, x1) box the cycle worked in
    scale_peaks_start: np.ndarray = None  #: per-scale peak at the start
    scale_peaks_end: np.ndarray = None    #: per-scale peak at the end
    scale_floors: np.ndarray = None       #: per-scale floor of this cycle
    scale_levels: np.ndarray = None       #: per-scale stop level of the run
    scale_noise: np.ndarray = None        #: per-scale noise used for the levels
    rounds: int = 0            #: sub-loops run (each ends with an exact update)
    fft_updates: int = 0       #: sub-loops applied by an FFT update of the whole box
    direct_updates: int = 0    #: sub-loops applied directly to the tracked pixels
    rejected: int = 0          #: sub-loops undone because they raised the peak
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
        Bias toward small scales, weight ``1 - size_penalty * s / s_max``; default
        `skyscale.core.defaults.DEFAULTS` (0.3, see Notes).
    loop_gain : float
        Fraction of each component's flux taken per iteration; default 0.1.
    scale_loop_depth : float
        Each sub-loop cleans its scale to this fraction of the scale's peak; default 0.5.
    dtype : {float32, float64}
        Working precision of the smoothed residuals; default float32.
    threads : int, optional
        Threads for kernels and FFTs; default all cores.
    fft : {'auto', 'scipy', 'numpy', 'pyfftw'} or backend
        FFT backend; default scipy.fft (the same bits at any thread count, see
        `skyscale.core.fft`).
    cell_arcsec : float, optional
        Cell size, needed when scales are angles.
    max_memory : int, optional
        Refuse (ValueError) an engine whose predicted peak, times the planner's margin
        `skyscale.cost.MEMORY_HEADROOM`, is over this many bytes: the rule and the
        account (`skyscale.cost.engine_memory`, kept as ``memory``) of
        `skyscale.plan_run`, so an engine is refused exactly when the plan says the run
        will not fit.
    psf_patch : optional
        No longer used (the minor cycle subtracts whole scale beams); a value gives a
        DeprecationWarning.

    Notes
    -----
    Choice of component.  Let ``R`` be the residual (the dirty image of what the model
    has not explained), ``s_k`` the unit-sum kernel of scale ``k``, ``R_k = s_k (*) R``
    and ``B_kk = PSF (*) s_k (*) s_k``.  Adding a component of integrated flux ``a``
    and shape ``s_k`` at pixel ``p`` changes the data misfit (chi-square, for which the
    PSF is the normal matrix and ``R`` the gradient) by

    .. math:: \\Delta\\chi^2 = -2 a R_k(p) + a^2 B_{kk}(0),

    which is smallest for ``a = R_k(p) / B_kk(0)`` and then equals
    ``-R_k(p)^2 / B_kk(0)``.  The best component therefore maximises
    ``|R_k(p)| / sqrt(B_kk(0))`` ([1]_).  The same quantity is the signal-to-noise
    ratio of ``R_k(p)`` when the noise has the PSF as its covariance (natural
    weighting), because the noise of ``R_k`` is then ``sigma sqrt(B_kk(0))``.  By
    Cauchy-Schwarz ``B_jk(0) <= sqrt(B_jj(0) B_kk(0))``, so a source shaped exactly
    like scale ``j`` is fitted best by scale ``j`` itself, and a point source by the
    delta scale, without any bias.  The size penalty ``w_k = 1 - p s_k / s_max``
    multiplies this response only to break near-ties in favour of smaller scales where
    noise and blending make them as good; with the response divided by
    ``sqrt(B_kk(0))`` (not ``B_kk(0)``, which measures flux and grows with the scale
    without bound) a mild ``p = 0.3`` does that.  The often-quoted ``p`` of about 0.6
    belongs to the flux-normalised response and, used here, would hand extended
    emission to the delta scale.  The flux taken is ``gain * R_k(p) / B_kk(0)``.

    With a single delta scale this is Hogbom's CLEAN [3]_.

    References
    ----------
    .. [1] Cornwell 2008, IEEE J. Sel. Topics Signal Process. 2(5), 793.
    .. [2] Offringa & Smirnov 2017, MNRAS 471, 301.
    .. [3] Hogbom 1974, A&AS 15, 417.
    """

    def __init__(self, psf, scales=DEFAULTS.scales, *, image_shape=None,
                 scale_shape=DEFAULTS.scale_shape, size_penalty=DEFAULTS.size_penalty,
                 loop_gain=DEFAULTS.loop_gain,
                 scale_loop_depth=DEFAULTS.scale_loop_depth, dtype=None, threads=None,
                 fft="auto", cell_arcsec=None, max_memory=None, psf_patch=None):
        t0 = time.perf_counter()
        if psf_patch is not None:
            warnings.warn("psf_patch is no longer used: minor cycles subtract whole scale "
                          "beams; drop the argument", DeprecationWarning, stacklevel=2)
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
            raise InputError(f"loop_gain is {loop_gain}, expected 0 < loop_gain <= 1; "
                             "0.1 is the usual choice")
        if not 0.0 <= scale_loop_depth < 1.0:
            raise InputError(f"scale_loop_depth is {scale_loop_depth}, expected a fraction "
                             "in [0, 1); 0.5 is the default")
        self.loop_gain = float(loop_gain)
        self.size_penalty = float(size_penalty)
        self.scale_loop_depth = float(scale_loop_depth)
        self.weights = self.scales.weights(size_penalty)
        self.threads = threads
        self.fft = get_backend(fft, threads=threads)
        self.memory = engine_memory(self.image_shape, self.psf.shape,
                                    self.scales.support_radii, self.dtype.itemsize)
        if max_memory is not None and not fits_memory(self.memory["total"], max_memory):
            raise InputError(f"the engine needs about {self.memory['total'] / 2**20:.0f} MiB "
                             f"(predicted peak, with a {MEMORY_HEADROOM:.2f}x margin), over "
                             f"max_memory {max_memory / 2**20:.0f} MiB; use fewer or smaller "
                             "scales, a smaller image, or raise max_memory")
        self.kernels = self.scales.kernels(self.dtype)
        self._kernels64 = [k.astype(np.float64) for k in self.kernels]
        self.beam_peaks = beam_peaks(self.psf, self._kernels64)
        bad = [s for s, b in zip(self.scales.pixels, self.beam_peaks) if not b > 0]
        if bad:
            raise InputError(f"scales {bad} px see a PSF whose doubly smoothed peak is "
                             "<= 0 (the array does not recover structure that large); "
                             "drop them or use smaller scales")
        #: The index of the residual's own response in the pair beams: a delta scale of
        #: unit weight (its smoothed residual is the residual), else ``n_scales`` (the
        #: unsmoothed kernel the bank appends).
        self.residual_index = next(
            (i for i, k in enumerate(self.kernels) if k.size == 1 and float(k.ravel()[0]) == 1.0),
            len(self.kernels))
        #: Scale and pair beams, made for the extent each minor cycle's box needs.
        self.bank = BeamBank(self.psf, self._kernels64, self.image_shape, self.fft,
                             dtype=self.dtype)
        with thread_limit(threads):
            self.smoother = MultiConvolver(self.kernels, self.image_shape, backend=self.fft,
                                           precision=self.dtype)
        self._psf_convolver = None
        self.max_memory = max_memory
        self._box_tools = {}
        self._window_smoothers = {}
        #: ``B_0k(0)``: the PSF smoothed once by scale k, at its centre.
        py, px = self.psf.shape
        self.cross_peaks = np.array([
            float(np.sum(k.astype(np.float64) * self.psf[py // 2 - k.shape[0] // 2:
                                                         py // 2 + k.shape[0] // 2 + 1,
                                                         px // 2 - k.shape[1] // 2:
                                                         px // 2 + k.shape[1] // 2 + 1]))
            for k in self.kernels])
        self.response_scale = self.weights / np.sqrt(self.beam_peaks)
        self.precompute_seconds = time.perf_counter() - t0
        logger.info("engine ready: %d scales %s, %.1f MiB, %.2f s", len(self.scales),
                    list(self.scales.pixels), self.memory["total"] / 2**20,
                    self.precompute_seconds)

    # ------------------------------------------------------------------ helpers
    @property
    def n_scales(self):
        return len(self.scales)

    @property
    def psf_convolver(self):
        """The PSF convolution over the whole image (float64), made on first use."""
        if self._psf_convolver is None:
            self._psf_convolver = Convolver(self.psf, self.image_shape, backend=self.fft)
        return self._psf_convolver

    def _pair_keys(self):
        """The beams direct updates need beyond ``beams``: every pair of scales, and
        each scale's response in the unsmoothed residual (index ``n_scales``) unless a
        delta scale of unit weight stands for it."""
        n = self.n_scales
        keys = [(j, k) for j in range(n) for k in range(j + 1, n)]
        if self.residual_index == n:
            keys += [(n, k) for k in range(n)]
        return keys

    @property
    def beams(self):
        """Each scale's beam ``PSF (*) s_k (*) s_k`` at every offset within the image,
        ``(2 ny - 1, 2 nx - 1)``, zero offset at ``(ny - 1, nx - 1)`` (made on first use;
        minor cycles use beams of their box's extent)."""
        ny, nx = self.image_shape
        out = []
        for k in range(self.n_scales):
            b = self.bank.get(k, k, self.image_shape)
            hy, hx = b.shape[0] // 2, b.shape[1] // 2
            out.append(b[hy - ny + 1:hy + ny, hx - nx + 1:hx + nx])
        return out

    def pair_beam(self, j, k, shape):
        """``PSF (*) s_j (*) s_k`` covering the offsets of a box of ``shape``
        (``j = residual_index``: the residual's own response to scale ``k``)."""
        return self.bank.get(j, k, shape)

    def _direct_ok(self, direct_work, fft_work_units):
        """Whether a sub-loop of ``direct_work`` multiply-adds is applied directly (the
        pair beams it needs are in ``memory``, which ``max_memory`` was checked against)."""
        return direct_work <= DIRECT_COST_RATIO * fft_work_units

    def _fft_update_cost(self, shape):
        """FFT work units (``S log2 S``) of one update of a box of ``shape``."""
        finite = [k for k in self.kernels if k.size > 1]
        smoothing = 0.0
        if finite:
            widest = max(k.shape for k in finite)
            smoothing = (1 + len(finite)) * fft_work(convolution_grid(widest, shape))
        return 2 * fft_work(convolution_grid(self.psf.shape, shape)) + smoothing

    def smooth(self, residual):
        """Residual smoothed by every scale kernel: ``(n_scales, ny, nx)``."""
        return self.smoother(np.asarray(residual), dtype=self.dtype)

    def allowed(self, mask=None):
        """Per scale, where its components may be centred: in the mask, and at least the
        kernel's radius from the image edge.  ``(n_scales, ny, nx)`` bool."""
        ny, nx = self.image_shape
        out = np.zeros((self.n_scales, ny, nx), dtype=bool)
        for k, r in enumerate(self.scales.support_radii):
            out[k, r:ny - r, r:nx - r] = True
            if mask is not None:
                out[k] &= mask
        return out

    def _box(self, allowed):
        """(y0, y1, x0, x1): the allowed centres' bounding box grown by the largest radius."""
        ny, nx = self.image_shape
        r = max(self.scales.support_radii)
        rows = np.nonzero(allowed.any(axis=(0, 2)))[0]
        cols = np.nonzero(allowed.any(axis=(0, 1)))[0]
        return (max(int(rows[0]) - r, 0), min(int(rows[-1]) + r + 1, ny),
                max(int(cols[0]) - r, 0), min(int(cols[-1]) + r + 1, nx))

    def _tools(self, shape):
        """PSF convolver and smoother for a box of ``shape`` (kept for reuse)."""
        shape = tuple(shape)
        if shape not in self._box_tools:
            if len(self._box_tools) >= 4:
                self._box_tools.pop(next(iter(self._box_tools)))
            self._box_tools[shape] = (
                Convolver(self.psf, shape, backend=self.fft, precision=self.dtype),
                MultiConvolver(self.kernels, shape, backend=self.fft, precision=self.dtype))
        return self._box_tools[shape]

    @staticmethod
    def _peaks(planes, allowed):
        return np.array([masked_peak(p, a) for p, a in zip(planes, allowed)])

    def measure(self, residual, mask=None, noise_region=None, previous=None, planes=None,
                smallest_only=False, planes_window=None):
        """Smooth ``residual`` by every scale; return peaks and noise as a `ScaleState`.

        Noise is measured outside ``mask`` (grown by each scale's radius), inside
        ``noise_region`` (where the residual is exact; default everywhere), with
        clipping of what emission is left (`skyscale.core.noise.scale_noise`, which also
        high-passes the residual so that broad emission the mask missed cannot inflate
        the smallest scale's noise).  A compact mask in a large image is smoothed and
        measured in a window around it (`skyscale.core.windows.measurement_window`).
        ``previous`` (a `ScaleState`) supplies the smallest scale's noise when too
        little of the image is left to measure it; ``planes``, this residual already
        smoothed over ``planes_window`` (a new mask, the same residual), saves the
        smoothing when that window covers this mask's.  ``smallest_only`` measures the
        smallest scale's noise alone (the same value; the others are NaN), for a caller
        that renews the mask from it and then measures again.
        """
        residual = np.asarray(residual)
        mask = None if mask is None else np.asarray(mask, dtype=bool)
        window = self._window(mask)
        if planes is not None and not _covers(planes_window, window):
            planes = None
        if planes is None:
            planes_window = window
            with thread_limit(self.threads):
                planes = self._smooth_window(residual, window)
        allowed = self.allowed(mask)
        n = self.n_scales
        pick = [0, n - 1] if smallest_only and n > 2 else list(range(n))
        radii = np.asarray(self.scales.support_radii)[pick]
        cut = (slice(None), slice(None)) if window is None else \
            (slice(window[0], window[1]), slice(window[2], window[3]))
        sigma, used, how = scale_noise(planes[(pick,) + cut], radii,
                                       mask=None if mask is None else mask[cut],
                                       region=None if noise_region is None
                                       else np.asarray(noise_region, dtype=bool)[cut],
                                       ratios=np.sqrt(self.beam_peaks)[pick],
                                       cross=self.cross_peaks[pick],
                                       previous=None if previous is None
                                       else float(previous.noise[0]))
        if len(pick) < n:
            sigma = np.concatenate([sigma[:1], np.full(n - 1, np.nan)])
            used = np.concatenate([used[:1], np.zeros(n - 1, used.dtype)])
            how = how[:1] + ["not measured"] * (n - 1)
        return ScaleState(planes, self._peaks(planes, allowed), sigma, used, how,
                          planes_window)

    def _window(self, mask):
        """The part of the image a measurement for ``mask`` smooths (None: all)."""
        return measurement_window(mask, self.image_shape, 2 * max(self.scales.support_radii))

    def _smooth_window(self, residual, window):
        """`smooth` over ``window`` only (zero elsewhere); the whole image for None."""
        if window is None:
            return self.smooth(residual)
        y0, y1, x0, x1 = window
        shape = (y1 - y0, x1 - x0)
        if shape not in self._window_smoothers:
            self._window_smoothers.clear()        # one window shape at a time
            self._window_smoothers[shape] = MultiConvolver(
                self.kernels, shape, backend=self.fft, precision=self.dtype)
        planes = np.zeros((self.n_scales,) + tuple(self.image_shape), dtype=self.dtype)
        smoothed = self._window_smoothers[shape](np.asarray(residual[y0:y1, x0:x1]),
                                                 dtype=self.dtype)
        planes[:, y0:y1, x0:x1] = smoothed
        return planes

    # --------------------------------------------------------------- the cycle
    def minor_cycle(self, residual, model=None, *, mask=None, threshold=0.0,
                    noise_threshold=None, extended_depth=DEFAULTS.extended_depth,
                    cycle_depth=DEFAULTS.cycle_depth,
                    max_components=DEFAULTS.max_components, callback=None, noise_region=None,
                    state=None, exact_residual=True):
        """Clean ``residual`` down to this cycle's floors and return the updated model.

        Parameters
        ----------
        residual : (ny, nx) ndarray
            Current residual image, Jy/beam (the caller's own major cycle made it).
        model : (ny, nx) ndarray, optional
            Current model, Jy/pixel; default zeros.  It is not modified.
        mask : (ny, nx) bool ndarray, optional
            Where components may go; default everywhere.
        threshold : float
            Absolute stop level, Jy/beam, applied to every scale's smoothed residual.
        noise_threshold : float, optional
            Stop each scale at this multiple of its own noise (see `scale_levels`).
        extended_depth : float
            Inside a mask, the largest scale stops at this fraction of the noise
            multiple (`skyscale.core.levels.scale_levels`); default 0.25.
        cycle_depth : float
            Each scale is cleaned down to this fraction of its peak at the cycle's
            start (never below its stop level); default 0.2.
        max_components : int
            Most components this cycle may add; default 20000.
        callback : callable, optional
            Called as ``callback(dict)`` after every sub-loop with keys
            ``stage='minor'``, ``components``, ``peak``, ``scale``.
        noise_region : (ny, nx) bool ndarray, optional
            Where the residual is exact, for the noise; default everywhere.
        state : ScaleState, optional
            `measure` of this very residual, when the caller already has it.
        exact_residual : bool
            Compute the whole residual at the end (``result.residual``, one PSF
            convolution of the image); default True.  A driver whose major cycle
            recomputes it anyway passes False and gets ``residual=None``, with
            ``peak_end`` over the mask's pixels in the cycle's box.

        Returns
        -------
        MinorCycleResult
        """
        t0 = time.perf_counter()
        residual = as_image(residual, "residual", dtype=np.float64)
        if residual.shape != self.image_shape:
            raise InputError(f"residual has shape {residual.shape}, the engine was built "
                             f"for {self.image_shape}; build an Engine with image_shape="
                             f"{residual.shape}")
        if model is None:
            model = np.zeros(residual.shape, dtype=self.dtype)
        else:
            model = as_image(model, "model", dtype=self.dtype)
            if model.shape != residual.shape:
                raise InputError(f"model has shape {model.shape}, expected the residual's "
                                 f"{residual.shape}")
        if mask is not None:
            mask = np.asarray(mask, dtype=bool)
            if mask.shape != residual.shape:
                raise InputError(f"mask has shape {mask.shape}, expected the image's "
                                 f"{residual.shape}; regrid or rebuild the mask")
        threshold = check_number(threshold, "threshold", **NUMBER_RULES["threshold"])
        noise_threshold = check_number(noise_threshold, "noise_threshold",
                                       **NUMBER_RULES["noise_threshold"])
        extended_depth = check_number(extended_depth, "extended_depth",
                                      **NUMBER_RULES["extended_depth"])
        cycle_depth = check_number(cycle_depth, "cycle_depth", **NUMBER_RULES["cycle_depth"])
        max_components = check_number(max_components, "max_components",
                                      **NUMBER_RULES["max_components"])
        with thread_limit(self.threads):
            return self._minor_cycle(residual, model, mask, float(threshold), noise_threshold,
                                     float(extended_depth), float(cycle_depth),
                                     int(max_components), callback, noise_region, state, t0,
                                     bool(exact_residual))

    def _minor_cycle(self, residual, model, mask, threshold, noise_threshold, extended_depth,
                     cycle_depth, budget, callback, noise_region, state, t0, exact_residual):
        if state is None:
            state = self.measure(residual, mask, noise_region)
        elif not _covers(state.window, self._window(mask)):    # measured for another mask
            state = replace(state, planes=self._smooth_window(residual, None), window=None)
        planes = state.planes
        t_smooth = time.perf_counter()
        allowed = self.allowed(mask)
        levels = scale_levels(state.noise, threshold=threshold, noise_threshold=noise_threshold,
                              extended_depth=extended_depth, masked=mask is not None,
                              scales=self.scales.pixels)
        start = self._peaks(planes, allowed)
        floors = np.maximum(levels, cycle_depth * start)
        in_mask = np.ones(residual.shape, bool) if mask is None else mask
        peak_start = float(np.max(np.abs(residual), where=in_mask, initial=0.0))
        guard = allowed_peak(peak_start, levels, self.scales.has_delta)
        guard *= 1.0 + PEAK_RISE_TOLERANCE
        out = dict(scale_peaks_start=start, scale_floors=floors, scale_levels=levels,
                   scale_noise=state.noise)
        if not allowed.any():         # an empty mask, or one no scale may centre in
            return MinorCycleResult(model.copy(), np.zeros(0, COMPONENT_DTYPE), "empty",
                                    peak_start, peak_start, float(floors[0]), residual,
                                    scale_peaks_end=start, **out)
        # Work on the box that holds every allowed centre, grown by the largest kernel
        # radius: there the smoothed residuals are exact, and the FFTs are that size.
        box = self._box(allowed)
        work = CycleWork(self, residual, planes, allowed, in_mask, box)
        del planes, allowed
        total = np.zeros(work.shape, dtype=np.float64)
        peaks = work.peaks()
        pieces = []
        added = rounds = rejected = 0
        blocked = np.zeros(self.n_scales, dtype=bool)
        choice = ScaleChoice(floors, levels, self.response_scale, self.scale_loop_depth)
        t_loop = 0.0
        while True:
            k, level, reason = choice.next(peaks, blocked, added, budget)
            if k is None:
                break
            ta = time.perf_counter()
            active = work.active(k, level, floors, blocked)
            values = work.planes_t[k][active]
            ys, xs = work.tys[active], work.txs[active]
            idx, flux, _, _ = scale_loop(values, ys, xs, self.bank.get(k, k, work.shape),
                                         beam_peak=self.beam_peaks[k], gain=self.loop_gain,
                                         level=level, max_iter=budget - added)
            t_loop += time.perf_counter() - ta
            rounds += 1
            # Apply the sub-loop; if it would raise the peak in the mask, try its first
            # half, then quarter, ... (the rise grows with the flux taken) before
            # giving the scale up for this cycle.
            tries = 0
            peak0 = None
            while idx.size:
                peak0 = work.apply(k, ys[idx], xs[idx], flux, guard)
                if peak0 is not None:
                    break
                rejected += 1
                tries += 1
                keep = idx.size // 2 if tries <= MAX_HALVINGS else 0
                idx, flux = idx[:keep], flux[:keep]
            if idx.size == 0:
                blocked[k] = True
                continue
            stamp_components(total, [self._kernels64[k]], ys[idx], xs[idx],
                             np.zeros(idx.size, np.int64), flux)
            peaks = work.peaks()
            table = np.zeros(idx.size, dtype=COMPONENT_DTYPE)
            table["y"], table["x"], table["flux"] = ys[idx] + box[0], xs[idx] + box[2], flux
            table["scale"] = np.float32(self.scales.pixels[k])
            pieces.append(table)
            added += idx.size
            blocked[:] = False
            if callback is not None:
                callback({"stage": "minor", "components": added, "peak": peak0,
                          "scale": self.scales.pixels[k]})
        y0, y1, x0, x1 = box
        new_model = model.astype(np.float64)
        new_model[y0:y1, x0:x1] += total
        if exact_residual:
            if added:
                step = np.zeros(residual.shape, dtype=np.float64)
                step[y0:y1, x0:x1] = total
                residual = residual - self.psf_convolver(step, out_dtype=np.float64)
            peak_end = float(np.max(np.abs(residual), where=in_mask, initial=0.0))
        else:
            residual = None
            peak_end = work.tracked_peak()
        table = np.concatenate(pieces) if pieces else np.zeros(0, COMPONENT_DTYPE)
        t1 = time.perf_counter()
        logger.debug("minor cycle: %d components in %d sub-loops (%d rejected; %d FFT "
                     "updates, %d direct), peak %.4g -> %.4g, %s", table.size, rounds,
                     rejected, work.fft_updates, work.direct_updates, peak_start, peak_end,
                     reason)
        return MinorCycleResult(
            new_model.astype(self.dtype), table, reason, peak_start, peak_end,
            float(floors[0]), residual, box, scale_peaks_end=peaks, rounds=rounds,
            rejected=rejected, seconds=t1 - t0, fft_updates=work.fft_updates,
            direct_updates=work.direct_updates,
            timings={"smooth": t_smooth - t0, "loop": t_loop, "update": work.seconds}, **out)
