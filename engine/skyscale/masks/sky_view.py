"""The sky as it can be seen: bright compact emission taken out, then restored.

A dirty image's off-source pixels are dominated by the PSF's sidelobes of its bright
compact sources: their robust noise reads many times the thermal noise, and their
sidelobes read as islands.  `sky_view` takes that emission out with a short clean of
the delta scale (Högbom [1]_: the peak, times the loop gain, is taken out with the
PSF centred on it; the minor cycle runs on the pixels above the cycle's level with
the exact PSF values between them, and a major cycle recomputes the whole residual
exactly, as in Clark [2]_), and returns the residual with those components put back
through the restoring beam (a restored image, common practice).  The sidelobes are
gone, the emission is where it was, and the noise of that image is measured the same
way as the image the structures are measured on.

References
----------
.. [1] Högbom, J. A. 1974, "Aperture synthesis with a non-regular distribution of
   interferometer baselines", A&AS 15, 417.
.. [2] Clark, B. G. 1980, "An efficient implementation of the algorithm 'CLEAN'",
   A&A 89, 377.
.. [3] Rousseeuw, P. J. & Croux, C. 1993, JASA 88, 1273 (robust noise).
"""

import logging
import math
import time
from dataclasses import dataclass

import numpy as np
from scipy import fft as sfft

from skyscale.core.beam import Beam, fit_beam, restore
from skyscale.core.noise import detection_noise, robust_noise

__all__ = ["VIEW_GAIN", "VIEW_DEPTH", "VIEW_COMPONENTS", "VIEW_CYCLES", "CYCLE_FRACTION",
           "PIXELS_PER_COMPONENT", "MAX_CANDIDATES", "TILE_PX", "TILE_QUANTILE", "SkyView", "quiet_noise",
           "sky_view"]

logger = logging.getLogger(__name__)

#: Loop gain of the short clean.  The view is not a model: what the clean takes is put
#: back through the beam, so a gain above the usual 0.1 (Högbom 1974, common practice)
#: only makes it cheaper.  On the invented 1024 px field of `VIEW_DEPTH` with its
#: structures twice as large, 0.3 and 4000 components leave the same noise as 0.1 and
#: 12000 (2.1e-4 against 2.1e-4, the true 1e-4) in a third of the time.
VIEW_GAIN = 0.3

#: The short clean stops at this many times the noise of the residual (measured after
#: each major cycle with `skyscale.core.noise.detection_noise`).  The noise it
#: measures holds the sidelobes of what is left, so a shallow stop stalls where they
#: are: on an invented 1024 px field (a PSF of rms sidelobe 0.55 %, a point at 1e4
#: times the noise and 0.7 of its flux in extended emission) a stop at 10 or 5 sigma
#: leaves the noise 10 or 8.6 times the true one, at 3 sigma 2.2 times.
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
#: level): the pixels below it wait for the next major cycle, as in Clark 1980.
CYCLE_FRACTION = 0.05

#: The minor cycle works on at most this many of the brightest pixels.
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

    def describe(self):
        """Which image was measured, in words, with its numbers."""
        if not self.components:
            return (f"measured on the image as given ({self.stop}; its noise "
                    f"{self.noise_before:.3g})")
        return (f"measured on the image with its bright emission taken out by a short "
                f"delta-scale clean ({self.components} components, {self.cycles} major "
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


class _Convolver:
    """``model (*) psf`` on the image's grid, exact (linear), the PSF's transform once.

    The PSF (peak at ``(py // 2, px // 2)``) is laid on a periodic grid large enough
    that offsets between two image pixels never wrap onto another PSF value: twice the
    image when the PSF covers every such offset, the image plus the PSF otherwise.
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

    def __call__(self, model):
        ny, nx = self.shape
        spec = sfft.rfft2(model.astype(np.float32, copy=False), s=self.grid)
        return sfft.irfft2(spec * self.spectrum, s=self.grid)[:ny, :nx]


def _minor_cycle(residual, psf, level, budget, gain):
    """Högbom's loop on the pixels above ``level``, with the exact PSF between them.

    Returns the components as ``(ys, xs, fluxes)`` and the peak left.
    """
    ys, xs = np.nonzero(residual > level)
    values = residual[ys, xs].astype(np.float64)
    if values.size > MAX_CANDIDATES:
        keep = np.argpartition(values, -MAX_CANDIDATES)[-MAX_CANDIDATES:]
        ys, xs, values = ys[keep], xs[keep], values[keep]
    cy, cx = psf.shape[0] // 2, psf.shape[1] // 2
    py, px = psf.shape
    cy_, cx_, fl = [], [], []
    peak = float(values.max()) if values.size else 0.0
    while values.size and len(fl) < budget:
        i = int(np.argmax(values))
        peak = float(values[i])
        if peak <= level:
            break
        flux = gain * peak
        dy = ys - ys[i] + cy
        dx = xs - xs[i] + cx
        inside = (dy >= 0) & (dy < py) & (dx >= 0) & (dx < px)
        if inside.all():
            values -= flux * psf[dy, dx]
        else:
            values[inside] -= flux * psf[dy[inside], dx[inside]]
        cy_.append(ys[i])
        cx_.append(xs[i])
        fl.append(flux)
    return np.array(cy_, dtype=np.intp), np.array(cx_, dtype=np.intp), np.array(fl), peak


def sky_view(image, psf, *, beam=None, gain=VIEW_GAIN, depth=VIEW_DEPTH,
             max_components=None, max_cycles=VIEW_CYCLES):
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

    Returns
    -------
    SkyView
        ``image`` is ``residual + model (*) beam``.

    Notes
    -----
    Each major cycle: the noise ``sigma`` of the residual is measured
    (`skyscale.core.noise.detection_noise`, 1.4826 MAD [3]_ with what lies beyond 5
    sigma left out with a margin of half a beam); the final level is ``depth *
    sigma``; the minor cycle takes components of flux ``gain`` times the peak at the
    peak (only positive peaks: emission is positive) down to ``max(final level,
    CYCLE_FRACTION * peak)`` [1]_ [2]_, on the brightest pixels above that level; then
    the residual is recomputed exactly, ``image - model (*) psf``.  It ends when the
    peak is under the final level, the components or cycles are spent, or a cycle
    takes nothing.  Everything the clean took is put back through the beam, so
    extended emission it reached is still seen, without its sidelobes.

    References
    ----------
    .. [1] Högbom 1974, A&AS 15, 417.
    .. [2] Clark 1980, A&A 89, 377.
    .. [3] Rousseeuw & Croux 1993, JASA 88, 1273.

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
    margin = 0.5 * math.sqrt(used.major * used.minor)
    before = detection_noise(img, 5.0, margin_px=margin)
    convolve = None
    model = np.zeros(img.shape, dtype=np.float32)
    residual = img
    noise = min(before, quiet_noise(img))
    n_comp, cycles, level, stop = 0, 0, depth * before, "nothing above the level"
    while True:
        level = depth * noise
        peak = float(residual.max())
        if noise <= 0 or peak <= level:
            stop = f"the peak left is under {depth:g} times the residual's noise"
            break
        if n_comp >= max_components:
            stop = f"its {max_components} components were spent"
            break
        if cycles >= max_cycles:
            stop = f"its {max_cycles} major cycles were run"
            break
        cycle_level = max(level, CYCLE_FRACTION * peak)
        ys, xs, fl, _ = _minor_cycle(residual, psf32, cycle_level,
                                     max_components - n_comp, gain)
        if not fl.size:
            stop = "a minor cycle found nothing to take"
            break
        np.add.at(model, (ys, xs), fl.astype(np.float32))
        n_comp += fl.size
        cycles += 1
        if convolve is None:
            convolve = _Convolver(psf32, img.shape)
        residual = (img - convolve(model)).astype(np.float32)
        noise = min(detection_noise(residual, 5.0, margin_px=margin), quiet_noise(residual))
    view = restore(model, residual, used) if n_comp else residual
    seconds = time.perf_counter() - t0
    logger.debug("sky view: %d components in %d major cycles, noise %.3g -> %.3g (%s), "
                 "%.2f s", n_comp, cycles, before, noise, stop, seconds)
    after = detection_noise(residual, 5.0, margin_px=margin) if n_comp else before
    return SkyView(view, residual, n_comp, float(model.sum(dtype=np.float64)), cycles,
                   float(before), float(after), float(level), stop, used, seconds)
