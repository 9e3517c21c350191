"""The sky as it can be seen: bright compact emission taken out, then restored.

A dirty image's off-source pixels are dominated by the PSF's sidelobes of its bright
compact sources: their robust noise reads many times the thermal noise, and their
sidelobes read as islands; so do those of bright extended emission.  `sky_view`
takes that emission out with a short clean of two scales, the delta and a Gaussian a
few beams wide (Högbom [1]_ with the scale chosen as in Cornwell [4]_: the peak,
times the loop gain, is taken out with the PSF seen through the scale centred on
it; the minor cycle runs on the pixels above the cycle's level within a patch of the
PSF, and a major cycle recomputes the whole residual exactly, as in Clark [2]_), and
returns the residual with those components put back through the restoring beam (a
restored image, common practice).  The sidelobes are
gone, the emission is where it was, and the noise of that image is measured the same
way as the image the structures are measured on.

References
----------
.. [1] Högbom, J. A. 1974, "Aperture synthesis with a non-regular distribution of
   interferometer baselines", A&AS 15, 417.
.. [2] Clark, B. G. 1980, "An efficient implementation of the algorithm 'CLEAN'",
   A&A 89, 377.
.. [3] Rousseeuw, P. J. & Croux, C. 1993, JASA 88, 1273 (robust noise).
.. [4] Cornwell, T. J. 2008, IEEE J. Sel. Topics Signal Process. 2(5), 793.
"""

import logging
import math
import time
from dataclasses import dataclass

import numpy as np
from scipy import fft as sfft

from skyscale.core.beam import FWHM_PER_SIGMA, Beam, fit_beam, restore
from skyscale.core.noise import detection_noise, robust_noise
from skyscale.masks.view_loop import view_loop

__all__ = ["VIEW_GAIN", "VIEW_DEPTH", "VIEW_SCALE_BEAMS", "VIEW_SIZE_PENALTY", "VIEW_COMPONENTS",
           "VIEW_CYCLES", "CYCLE_FRACTION", "PIXELS_PER_COMPONENT", "PATCH_PX",
           "MAX_CANDIDATES", "CANDIDATE_STEP", "TILE_PX", "TILE_QUANTILE", "MAIN_LOBE_BEAMS", "SkyView", "quiet_noise",
           "largest_sidelobe", "sky_view"]

logger = logging.getLogger(__name__)

#: Loop gain of the short clean.  The view is not a model: what the clean takes is put
#: back through the beam, so a gain above the usual 0.1 (Högbom 1974, common practice)
#: only makes it cheaper.  With deltas alone, on the invented 1024 px field of
#: `VIEW_DEPTH` with its structures twice as large, 0.3 and 4000 components left the
#: same noise as 0.1 and 12000 (2.1e-4 against 2.1e-4, the true 1e-4) in a third of
#: the time.
VIEW_GAIN = 0.3

#: The short clean stops at this many times the noise of the residual (measured after
#: each major cycle with `skyscale.core.noise.detection_noise`).  The noise it
#: measures holds the sidelobes of what is left, so a shallow stop stalls where they
#: are: with deltas alone, on an invented 1024 px field (a PSF of rms sidelobe 0.55 %,
#: a point at 1e4 times the noise and 0.7 of its flux in extended emission;
#: tests/advisor_fields.group_field) a stop at 10 or 5 sigma left the noise 10 or 8.6
#: times the true one, at 3 sigma 2.2 times.
VIEW_DEPTH = 3.0

#: At most this many components in all, or one per `PIXELS_PER_COMPONENT` pixels of
#: the image when that is more: the view is a cheap first look, not a model.  Bright
#: compact sources need a few each (gain 0.3 takes a peak down by a factor ten in 7
#: components, analytic: 0.7^7 = 0.082); the rest of the budget goes to the brightest
#: extended emission, whose sidelobes also hide the faint structures.
VIEW_COMPONENTS = 3000

#: See `VIEW_COMPONENTS`.
PIXELS_PER_COMPONENT = 256

#: At most this many major cycles.
VIEW_CYCLES = 8

#: A minor cycle goes down to this fraction of its starting peak (or to the final
#: level), or to 1.5 times the largest sidelobe beyond the patch when that is more:
#: the pixels below it wait for the next major cycle, as in Clark 1980.
CYCLE_FRACTION = 0.05

#: Components are deltas and round Gaussians of FWHM this many beams (unit sum): a
#: broad component takes extended emission out many beams at a time (Cornwell 2008),
#: where deltas alone spend the whole budget on it.
VIEW_SCALE_BEAMS = 4.0

#: Bias toward small scales, weight ``1 - VIEW_SIZE_PENALTY * s / s_max`` (Cornwell 2008,
#: b about 0.6, from memory): without it a broad component is taken on a bright
#: point, whose smoothed peak stands as high over the smoothed noise as the point's
#: own over the noise, and the view's model of a point is wrong by its sidelobes.
VIEW_SIZE_PENALTY = 0.6

#: The minor cycle updates the pixels within this many pixels of each component; the
#: major cycle sets the rest right (Clark 1980).
PATCH_PX = 512

#: The minor cycle works on at most this many of the brightest pixels of each scale.
MAX_CANDIDATES = 1 << 16

#: The clean's level rests on the noise of the quietest part of the residual: its
#: robust noise in tiles of this many pixels a side (at least 8 tiles a side) ...
TILE_PX = 64

#: ... at this quantile of the tiles.  Sidelobes vary over the image and the thermal
#: noise does not, so the quiet tiles see the thermal noise; a low quantile rather
#: than the least keeps the estimate from following chance low tiles.
TILE_QUANTILE = 0.25


@dataclass
class SkyView:
    """What `sky_view` made, and how.

    Attributes
    ----------
    image : (ny, nx) ndarray
        The residual plus the components restored through ``beam`` (Jy/beam): the
        image to measure.
    residual : (ny, nx) ndarray
        What the short clean left (Jy/beam).
    components : int
        Components taken out (0: the image was measured as given).
    flux : float
        Their total flux (the image's unit times pixels).
    cycles : int
        Major cycles run.
    noise_before, noise_after : float
        Robust noise of the image given and of the residual left
        (`skyscale.core.noise.detection_noise` at 5 sigma, unsmoothed).
    level : float
        The level the clean went down to (Jy/beam).
    stop : str
        Why it stopped, in words.
    beam : Beam
        The restoring beam.
    seconds : float
        Time taken.
    scales : tuple of float
        FWHMs in pixels of the components' Gaussians (0: delta).
    """

    image: np.ndarray
    residual: np.ndarray
    components: int
    flux: float
    cycles: int
    noise_before: float
    noise_after: float
    level: float
    stop: str
    beam: Beam
    seconds: float
    scales: tuple = (0.0,)

    def describe(self):
        """Which image was measured, in words, with its numbers."""
        if not self.components:
            return (f"measured on the image as given ({self.stop}; its noise "
                    f"{self.noise_before:.3g})")
        return (f"measured on the image with its bright emission taken out by a short "
                f"clean of scales {', '.join(f'{w:.0f}' for w in self.scales)} px "
                f"({self.components} components, {self.cycles} major "
                f"cycle(s), down to {self.level:.3g}: {self.stop}) and restored through "
                f"the beam; its noise {self.noise_after:.3g} where the image as given "
                f"read {self.noise_before:.3g}")

    def as_dict(self):
        """The numbers, as plain Python values (for a JSON report)."""
        return {"components": int(self.components), "flux": float(self.flux),
                "cycles": int(self.cycles), "noise_before": float(self.noise_before),
                "noise_after": float(self.noise_after), "level": float(self.level),
                "stop": self.stop, "seconds": float(self.seconds)}


def quiet_noise(image):
    """Robust noise of the quiet part of an image: the `TILE_QUANTILE` quantile of the
    1.4826 MAD noise ([3]_) of its tiles of about `TILE_PX` pixels a side.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> img = rng.normal(0, 1.0, (256, 256))
    >>> img[:128] *= 10                      # half the image ten times louder
    >>> 0.9 < quiet_noise(img) < 1.1
    True
    """
    ny, nx = image.shape
    ty = max(1, min(ny // TILE_PX, 64)) if ny >= 8 * TILE_PX else max(1, min(8, ny // 8))
    tx = max(1, min(nx // TILE_PX, 64)) if nx >= 8 * TILE_PX else max(1, min(8, nx // 8))
    step = max(1, int(math.sqrt(image.size / (1 << 20))))
    sub = image[::step, ::step]
    ys = np.linspace(0, sub.shape[0], ty + 1).astype(int)
    xs = np.linspace(0, sub.shape[1], tx + 1).astype(int)
    tiles = [robust_noise(sub[ys[i]:ys[i + 1], xs[j]:xs[j + 1]])
             for i in range(ty) for j in range(tx)]
    tiles = [t for t in tiles if t > 0]
    return float(np.quantile(tiles, TILE_QUANTILE)) if tiles else 0.0


#: The PSF's main lobe, for `largest_sidelobe`, reaches this many beam FWHMs from its
#: peak: a Gaussian main lobe is down to 2^-9 = 0.002 of its peak there (analytic,
#: exp(-4 ln 2 r^2 / FWHM^2)).
MAIN_LOBE_BEAMS = 1.5


def largest_sidelobe(psf, beam_fwhm_px, shape):
    """The PSF's largest absolute value beyond its main lobe (farther than
    `MAIN_LOBE_BEAMS` beam FWHMs from the peak at ``(py // 2, px // 2)``), over the
    offsets between two pixels of an image of ``shape``; relative to the peak."""
    py, px = psf.shape
    cy, cx = py // 2, px // 2
    ny, nx = shape
    cut = np.abs(psf[max(0, cy - ny + 1):cy + ny, max(0, cx - nx + 1):cx + nx])
    oy, ox = cy - max(0, cy - ny + 1), cx - max(0, cx - nx + 1)
    r = int(math.ceil(MAIN_LOBE_BEAMS * beam_fwhm_px))
    yy, xx = np.ogrid[-min(r, oy):min(r, cut.shape[0] - oy - 1) + 1,
                      -min(r, ox):min(r, cut.shape[1] - ox - 1) + 1]
    near = cut[oy + yy.min():oy + yy.max() + 1, ox + xx.min():ox + xx.max() + 1].copy()
    near[yy * yy + xx * xx <= (MAIN_LOBE_BEAMS * beam_fwhm_px) ** 2] = 0.0
    far = cut.copy()
    far[oy + yy.min():oy + yy.max() + 1, ox + xx.min():ox + xx.max() + 1] = near
    peak = float(abs(psf[cy, cx]))
    return float(far.max()) / peak if peak > 0 else 0.0


class _Grid:
    """The PSF and its smoothings on a periodic grid where image offsets never wrap.

    The PSF (peak at ``(py // 2, px // 2)``) is laid with its peak at index 0 of a grid
    large enough that the offset between two image pixels never reaches another PSF
    value: twice the image when the PSF covers every such offset, the image plus the
    PSF otherwise.  Convolutions on it are then exact linear ones on the image.
    """

    def __init__(self, psf, shape):
        ny, nx = shape
        py, px = psf.shape
        cy, cx = py // 2, px // 2
        # only offsets |d| < n matter: crop a larger PSF to them
        y0, y1 = max(0, cy - (ny - 1)), min(py, cy + ny)
        x0, x1 = max(0, cx - (nx - 1)), min(px, cx + nx)
        cut = psf[y0:y1, x0:x1]
        cy, cx = cy - y0, cx - x0
        gy = sfft.next_fast_len(max(2 * ny, ny + cut.shape[0]), real=True)
        gx = sfft.next_fast_len(max(2 * nx, nx + cut.shape[1]), real=True)
        kernel = np.zeros((gy, gx), dtype=np.float32)
        kernel[:cut.shape[0], :cut.shape[1]] = cut
        kernel = np.roll(kernel, (-cy, -cx), axis=(0, 1))
        self.grid = (gy, gx)
        self.shape = shape
        self.spectrum = sfft.rfft2(kernel)
        self._f2 = (sfft.fftfreq(gy)[:, None] ** 2 +
                    sfft.rfftfreq(gx)[None, :] ** 2).astype(np.float32)

    def transfer(self, var):
        """Fourier transform of a unit-sum round Gaussian of variance ``var`` (analytic)."""
        return np.exp(np.float32(-2 * np.pi ** 2 * var) * self._f2)

    def beam(self, var):
        """The PSF smoothed by a unit-sum Gaussian of variance ``var``, on the grid."""
        return sfft.irfft2(self.spectrum * self.transfer(var), s=self.grid) \
            .astype(np.float32)

    def smooth(self, image, var):
        """``image`` smoothed by a unit-sum Gaussian of variance ``var`` (zero outside)."""
        if var == 0:
            return image
        ny, nx = self.shape
        spec = sfft.rfft2(image, s=self.grid)
        return sfft.irfft2(spec * self.transfer(var), s=self.grid)[:ny, :nx] \
            .astype(np.float32)

    def planes(self, image_spectrum, models, variances):
        """The residual ``image - sum_j models[j] (*) G(variances[j]) (*) psf`` and
        its smoothings at ``variances[1:]`` (zero outside the image)."""
        ny, nx = self.shape
        total = image_spectrum
        seen = 0
        for model, var in zip(models, variances):
            if model.any():
                seen = seen + sfft.rfft2(model, s=self.grid) * self.transfer(var)
        if not isinstance(seen, int):
            total = image_spectrum - seen * self.spectrum
        # the residual outside the image is not zero on the grid: each smoothing is
        # of the residual cut to the image, as `smooth` makes it
        residual = sfft.irfft2(total, s=self.grid)[:ny, :nx].astype(np.float32)
        if len(variances) < 2:
            return [residual]
        cut = sfft.rfft2(residual, s=self.grid)
        return [residual] + [sfft.irfft2(cut * self.transfer(v), s=self.grid)[:ny, :nx]
                             .astype(np.float32) for v in variances[1:]]


#: A scale's candidates lie on a grid of this fraction of its FWHM (at least every
#: pixel): neighbours closer than that see nearly the same smoothed value, and the
#: minor cycle's cost grows with the candidates it scans at every step.
CANDIDATE_STEP = 0.25


def _candidates(planes, levels, widths):
    """The brightest pixels of every plane above its level (at most `MAX_CANDIDATES`
    each), on a grid of `CANDIDATE_STEP` times its scale's width:
    ``(values, ys, xs, scale)``."""
    out = [], [], [], []
    for j, (plane, level, width) in enumerate(zip(planes, levels, widths)):
        step = max(1, int(CANDIDATE_STEP * width))
        ys, xs = np.nonzero(plane[::step, ::step] > level)
        ys, xs = ys * step, xs * step
        values = plane[ys, xs].astype(np.float64)
        if values.size > MAX_CANDIDATES:
            keep = np.sort(np.argpartition(values, -MAX_CANDIDATES)[-MAX_CANDIDATES:])
            ys, xs, values = ys[keep], xs[keep], values[keep]
        for part, a in zip(out, (values, ys, xs, np.full(values.size, j))):
            part.append(a)
    return tuple(np.concatenate(a) for a in out)


def _patches(grid, variances, half):
    """The PSF smoothed by every pair of scales, cut to ``half`` pixels around its
    peak: ``(patches, pair)`` for `skyscale.masks.view_loop.view_loop`."""
    sums = sorted({vj + vt for vj in variances for vt in variances})
    gy, gx = grid.grid
    iy = np.arange(-half, half + 1) % gy
    ix = np.arange(-half, half + 1) % gx
    patches, beyond = [], 0.0
    for v in sums:
        full = grid.beam(v)
        cut = full[np.ix_(iy, ix)]
        patches.append(cut)
        # the largest sidelobe the patch leaves out, relative to its peak (Clark 1980)
        outside = np.abs(full).max(axis=None, initial=0.0, where=_outside(full.shape, half))
        beyond = max(beyond, float(outside) / float(cut[half, half]))
    pair = np.array([[sums.index(vj + vt) for vt in variances] for vj in variances])
    return (np.stack(patches), pair), beyond


def _outside(shape, half):
    """Grid cells farther than ``half`` from index 0 in y or x (periodic)."""
    gy, gx = shape
    dy = np.minimum(np.arange(gy), gy - np.arange(gy))
    dx = np.minimum(np.arange(gx), gx - np.arange(gx))
    return (dy[:, None] > half) | (dx[None, :] > half)


def sky_view(image, psf, *, beam=None, scales=None, gain=VIEW_GAIN, depth=VIEW_DEPTH,
             max_components=None, max_cycles=VIEW_CYCLES, cache=None):
    """The image with its bright emission cleaned out and restored: the sky as seen.

    Parameters
    ----------
    image : (ny, nx) ndarray
        Dirty (or residual) image, Jy/beam, finite.
    psf : (py, px) ndarray
        Its PSF, peak 1 at ``(py // 2, px // 2)``; twice the image's size makes the
        major cycle exact everywhere (a smaller one is exact where it reaches).
    beam : Beam, optional
        Restoring beam in pixels; default the fit to ``psf``.
    scales : sequence of float, optional
        FWHMs in pixels of the unit-sum Gaussian components (0: the delta, always
        used); default 0 and `VIEW_SCALE_BEAMS` beams.
    gain : float
        Loop gain.  Default `VIEW_GAIN` (0.3).
    depth : float
        Clean down to this many times the residual's noise, re-measured after each
        major cycle.  Default `VIEW_DEPTH` (3).
    max_components : int, optional
        At most this many components.  Default `VIEW_COMPONENTS`, or one per
        `PIXELS_PER_COMPONENT` pixels when that is more.
    max_cycles : int
        At most this many major cycles.  Default `VIEW_CYCLES`.
    cache : dict, optional
        Keeps the PSF's transform and its smoothed patches between calls with the same
        PSF, image shape and scales (a caller that views each major cycle's residual
        passes the same dict); default none kept.

    Returns
    -------
    SkyView
        ``image`` is ``residual + model (*) beam``.

    Notes
    -----
    Each major cycle, for every scale: the residual smoothed by the scale's unit-sum
    Gaussian, and its noise ``sigma``, the lesser of its robust noise with what lies
    beyond 5 sigma left out with a margin (`skyscale.core.noise.detection_noise`,
    1.4826 MAD [3]_) and that of its quiet tiles (`quiet_noise`); the scale's level
    is ``depth * sigma``.  The minor cycle (`skyscale.masks.view_loop.view_loop`)
    takes the candidate standing highest over its scale's level, with flux ``gain``
    times its value over the scale's own smoothed PSF peak (only positive peaks:
    emission is positive) [1]_ [4]_, each scale down to a fraction of its own peak
    (Clark's rule [2]_: at least what the sidelobes beyond the patch could raise);
    then the
    residual is recomputed exactly, ``image - model (*) psf``.  It ends when every
    scale is under its level, the components or cycles are spent, or a cycle takes
    nothing.  Everything the clean took is put back through the beam, so
    extended emission it reached is still seen, without its sidelobes.

    References
    ----------
    .. [1] Högbom 1974, A&AS 15, 417.
    .. [2] Clark 1980, A&A 89, 377.
    .. [3] Rousseeuw & Croux 1993, JASA 88, 1273.
    .. [4] Cornwell 2008, IEEE J. Sel. Topics Signal Process. 2(5), 793.

    Examples
    --------
    >>> import numpy as np
    >>> y, x = np.mgrid[-32:32, -32:32]
    >>> psf = np.exp(-(x**2 + y**2) / 4.0) - 0.05 * np.exp(-(x**2 + y**2) / 400.0)
    >>> psf /= psf[32, 32]
    >>> dirty = 100.0 * psf[16:48, 16:48]           # a point of flux 100 at (16, 16)
    >>> v = sky_view(dirty, psf)
    >>> v.components > 0, abs(float(v.residual.min())) < 1.0
    (True, True)
    """
    t0 = time.perf_counter()
    img = np.asarray(image, dtype=np.float32)
    if max_components is None:
        max_components = max(VIEW_COMPONENTS, img.size // PIXELS_PER_COMPONENT)
    psf32 = np.ascontiguousarray(psf, dtype=np.float32)
    used = beam if beam is not None else fit_beam(psf)
    beam_px = math.sqrt(used.major * used.minor)
    widths = (0.0, VIEW_SCALE_BEAMS * beam_px) if scales is None \
        else tuple(sorted({0.0} | {float(w) for w in scales}))
    variances = [(w / FWHM_PER_SIGMA) ** 2 for w in widths]
    # Cornwell 2008's bias toward small scales: weight 1 - b * s / s_max
    weights = np.array([1.0 - VIEW_SIZE_PENALTY * w / max(widths) if max(widths) > 0 else 1.0
                        for w in widths])
    margin = 0.5 * beam_px
    before = detection_noise(img, 5.0, margin_px=margin)
    cache = {} if cache is None else cache
    key = (img.shape, widths)
    if cache.get("key") != key:
        cache.clear()
        cache.update(key=key, grid=_Grid(psf32, img.shape), patches=None)
    grid = cache["grid"]
    models = [np.zeros(img.shape, dtype=np.float32) for _ in widths]
    patches = cache["patches"]
    if patches is not None:
        patches, beyond = patches
        fraction = max(CYCLE_FRACTION, 1.5 * beyond)
    spectrum = sfft.rfft2(img, s=grid.grid)
    planes = grid.planes(spectrum, models, variances)
    n_comp, cycles, stop = 0, 0, "nothing above the level"
    levels = [depth * before] * len(widths)
    while True:
        noises = [min(detection_noise(p, 5.0, margin_px=0.5 * math.hypot(beam_px, w)),
                      quiet_noise(p)) for p, w in zip(planes, widths)]
        levels = [depth * n for n in noises]
        peaks = [float(p.max()) / lv if lv > 0 else 0.0 for p, lv in zip(planes, levels)]
        top = max(peaks)
        if top <= 1.0:
            stop = f"every scale's peak left is under {depth:g} times its noise"
            break
        if n_comp >= max_components:
            stop = f"its {max_components} components were spent"
            break
        if cycles >= max_cycles:
            stop = f"its {max_cycles} major cycles were run"
            break
        if patches is None:
            patches, beyond = _patches(grid, variances, min(PATCH_PX, min(img.shape) - 1))
            cache["patches"] = (patches, beyond)
            fraction = max(CYCLE_FRACTION, 1.5 * beyond)
        # each scale down to a fraction of its own peak: at least what the sidelobes
        # beyond the patch could raise elsewhere (Clark 1980)
        cycle = np.array([lv * max(1.0, fraction * p) for lv, p in zip(levels, peaks)])
        values, ys, xs, which = _candidates(planes, cycle, widths)
        index, fluxes = view_loop(values, ys, xs, which, cycle, *patches, gain=gain,
                                  budget=max_components - n_comp, weights=weights)
        if not index.size:
            stop = "a minor cycle found nothing to take"
            break
        for j, model in enumerate(models):
            mine = which[index] == j
            np.add.at(model, (ys[index][mine], xs[index][mine]),
                      fluxes[mine].astype(np.float32))
        n_comp += index.size
        cycles += 1
        planes = grid.planes(spectrum, models, variances)
    residual = planes[0]
    if n_comp:
        model = sum(grid.smooth(m, v) for m, v in zip(models, variances))
        view = restore(model, residual, used)
        after = detection_noise(residual, 5.0, margin_px=margin)
        flux = float(sum(m.sum(dtype=np.float64) for m in models))
    else:
        view, after, flux = residual, before, 0.0
    seconds = time.perf_counter() - t0
    logger.debug("sky view: %d components in %d major cycles, noise %.3g -> %.3g (%s), "
                 "%.2f s", n_comp, cycles, before, after, stop, seconds)
    return SkyView(view, residual, n_comp, flux, cycles, float(before), float(after),
                   float(levels[0]), stop, used, seconds, widths)
