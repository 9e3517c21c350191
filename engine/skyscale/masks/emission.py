"""The automatic mask: significant emission in the residual, scale by scale.

Detection is `skyscale.masks.detect.detect_emission`, the same routine the scale advisor
measures the emission with.

References
----------
.. [1] Rousseeuw, P. J. & Croux, C. 1993, JASA 88, 1273 (robust noise).
"""

import logging
import math
import warnings

import numpy as np
from astropy import units as u
from scipy import fft as sfft
from scipy import ndimage

from skyscale.core.validate import as_image
from skyscale.core.beam import Beam, gaussian_area
from skyscale.masks.detect import detect_emission
from skyscale.core.noise import detection_noise
from skyscale.masks.sidelobes import sidelobe_envelope, under_sidelobes
from skyscale.masks.sky_view import VIEW_CYCLES, largest_sidelobe, sky_view


__all__ = ["LATER_VIEW_CYCLES", "GROW_KEPT", "EmissionMask", "emission_mask", "bounding_box", "held_islands"]

logger = logging.getLogger(__name__)


def _positive(value, name, *, allow_zero=False, cell_arcsec=None):
    if isinstance(value, u.Quantity):
        if value.unit.physical_type == "angle":
            if cell_arcsec is None:
                raise ValueError(f"{name} is an angle ({value}) but cell_arcsec is None; "
                                 "pass cell_arcsec or give the value in pixels")
            value = value.to_value(u.arcsec) / float(cell_arcsec)
        else:
            value = value.to_value(u.pix)
    try:
        value = float(value)
    except (TypeError, ValueError):
        raise TypeError(f"{name} is {value!r}; give a number") from None
    if not np.isfinite(value) or value < 0 or (value == 0 and not allow_zero):
        raise ValueError(f"{name} is {value}; it must be a finite number "
                         f"{'>= 0' if allow_zero else '> 0'}")
    return value


#: Major cycles of the short clean (`skyscale.masks.sky_view.sky_view`) at an update
#: after the first that needed one: the deconvolution has taken most of the bright
#: emission out by then, and what is left needs a few.
LATER_VIEW_CYCLES = 2


#: An island found on a smoothed scale is grown by the growth radius less half the
#: smoothing, but by at least this fraction of it: the faint wings of broad emission
#: lie beyond what the smoothing spread above the level.
GROW_KEPT = 0.5


def bounding_box(mask):
    """``(rows, cols)`` slices of the smallest box holding every True pixel, or None."""
    rows = np.flatnonzero(mask.any(axis=1))
    if rows.size == 0:
        return None
    cols = np.flatnonzero(mask.any(axis=0))
    return slice(rows[0], rows[-1] + 1), slice(cols[0], cols[-1] + 1)


def held_islands(mask, held):
    """The islands of ``mask`` (8-connected, ``scipy.ndimage.label``) that hold a pixel
    of ``held``; labelled within ``mask``'s bounding box only."""
    out = np.zeros(mask.shape, dtype=bool)
    box = bounding_box(mask)
    if box is None:
        return out
    part = mask[box]
    labels, n = ndimage.label(part, structure=np.ones((3, 3), dtype=bool))
    if n:
        keep = np.zeros(n + 1, dtype=bool)
        keep[np.unique(labels[held[box] & part])] = True
        keep[0] = False
        out[box] = keep[labels]
    return out


def _alone(detected, points):
    """The islands of ``detected`` made of ``points`` pixels only: unresolved sources'
    cores, which are not grown (one delta component models each; the core already
    holds its main lobe above a quarter of its peak)."""
    if points is None or not (points & detected).any():
        return np.zeros(detected.shape, dtype=bool)
    box = bounding_box(detected)
    part = detected[box]
    labels, n = ndimage.label(part, structure=np.ones((3, 3), dtype=bool))
    size = np.bincount(labels.ravel(), minlength=n + 1)
    core = np.bincount(labels[points[box] & part], minlength=n + 1)
    keep = core == size
    keep[0] = False
    out = np.zeros(detected.shape, dtype=bool)
    out[box] = keep[labels]
    return out


class EmissionMask:
    """A mask that follows the significant emission in the residual, scale by scale.

    Parameters
    ----------
    scales : sequence of float or ScaleSet, or Quantity ['angle']
        Scale diameters in pixels (0 = delta) whose smoothed residuals are searched.
    beam_fwhm_px : float, Quantity or Beam
        Restoring-beam FWHM in pixels (an object with ``major`` and ``minor`` uses
        their geometric mean).  Sets the island size and the growth.
    sigma : float
        Detection threshold in units of the robust noise of each smoothed image.
    grow_beams : float
        Islands are grown by this many beam FWHMs (dilation by a disk), less half the
        smoothing of the scale that found them (which already spread them that far
        beyond the emission) but at least `GROW_KEPT` of it; unresolved sources'
        cores are not grown.
    min_island_beams : float
        Islands with fewer pixels than this many beam areas are dropped, unless they
        touch protected pixels.
    smooth_fraction : float
        The Gaussian used for scale ``s`` has FWHM ``smooth_fraction * s`` pixels.
    include_negative : bool
        Also follow significant negative residuals.
    cell_arcsec : float, optional
        Cell size, to accept angles for ``scales`` and ``beam_fwhm_px``.
    guard_negative : bool
        Raise each scale's level to the deepest negative value off the emission where
        that is deeper (see Notes).  Default True.
    psf : (py, px) ndarray, optional
        The PSF (peak 1 at ``(py // 2, px // 2)``).  Given, an island whose peak the
        sidelobes of a brighter one could reach is left out until that one is cleaned
        (`skyscale.masks.sidelobes.under_sidelobes`; counted in ``under_sidelobes``).
        Default None (`skyscale.deconvolve` gives its PSF).
    clean_first : bool
        With ``psf``, clean the residual's bright emission out and restore it before
        detection (`skyscale.masks.sky_view.sky_view`), when the PSF's sidelobes of
        the residual's peak can reach the detection level (its absolute peak times
        the PSF's largest sidelobe, `skyscale.masks.sky_view.largest_sidelobe`, above
        ``sigma`` times the noise).  Default False: a short clean cannot model broad
        emission the array samples sparsely, and what it leaves raises the level.

    Raises
    ------
    ValueError, TypeError
        For an empty or negative scale list, or a non-positive beam, sigma or fraction.

    Notes
    -----
    At every `update` the residual is smoothed by a unit-sum Gaussian per scale and
    each smoothed image is thresholded at ``sigma`` times its own noise, measured
    where it holds no emission (`skyscale.masks.detect.detect_emission`: robust noise,
    1.4826 * MAD [1]_, with the emission and the protected pixels left out); smoothing
    lowers the noise, so broad faint emission stands out at large scales.  Noise and
    sidelobes have both signs and emission one, so (``guard_negative``) each
    scale's level is raised to
    the deepest negative value off the emission where that is deeper, and the
    negative islands below ``-sigma`` times the noise are counted (``spurious``: as
    many positive islands at that plain level would be false), and what a wider
    scale adds is kept only for islands the smoothing made more significant (an
    unresolved source seen blurred adds nothing); see
    `skyscale.masks.detect.detect_emission`'s ``guard_negative``.  With ``psf``, the
    residual's bright emission is first cleaned out and restored
    (`skyscale.masks.sky_view.sky_view`), so its sidelobes do not make islands.  The
    detections are united, small islands dropped (``scipy.ndimage.label``,
    8-connected) and the rest grown.  Pixels holding model flux, and the islands of
    the previous mask that hold any, are always kept: an island on which nothing was
    cleaned (a sidelobe taken for emission early on) goes when it is not found again.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> residual = rng.normal(0, 1, (128, 128)).astype(np.float32)
    >>> residual[60:68, 60:68] += 20
    >>> m = EmissionMask([0, 8], beam_fwhm_px=4).update(residual)
    >>> bool(m[64, 64]), bool(m[5, 5])
    (True, False)
    """

    @classmethod
    def for_beam(cls, scales, beam, **options):
        """An emission mask for a `skyscale.Beam` (pixels): the round beam of its area.

        The detection works with a round beam; the one of the same area as ``beam``
        has the FWHM ``sqrt(major * minor)``, so its beam area (`skyscale.core.beam.
        gaussian_area`) is the beam's.  ``options`` are those of the class.
        """
        return cls(scales, math.sqrt(beam.major * beam.minor), **options)

    def __init__(self, scales, beam_fwhm_px, *, sigma=5.0, grow_beams=1.0,
                 min_island_beams=1.0, smooth_fraction=0.5, include_negative=False,
                 cell_arcsec=None, guard_negative=True, psf=None, clean_first=False):
        if isinstance(scales, u.Quantity):
            scales = [_positive(s, "scales", allow_zero=True, cell_arcsec=cell_arcsec)
                      for s in np.atleast_1d(scales)]
        try:
            px = np.array([float(s) for s in scales], dtype=np.float64)
        except (TypeError, ValueError):
            raise TypeError(f"scales is {scales!r}; give diameters in pixels, e.g. "
                            "[0, 4, 8, 16]") from None
        if px.size == 0 or not np.all(np.isfinite(px)) or np.any(px < 0):
            raise ValueError(f"scales is {px.tolist()}; give at least one finite "
                             "diameter >= 0 pixels, e.g. [0, 4, 8, 16]")
        if hasattr(beam_fwhm_px, "major") and hasattr(beam_fwhm_px, "minor"):
            beam_fwhm_px = np.sqrt(float(beam_fwhm_px.major) * float(beam_fwhm_px.minor))
        self.scales = tuple(float(s) for s in np.unique(px))
        self.beam_fwhm_px = _positive(beam_fwhm_px, "beam_fwhm_px", cell_arcsec=cell_arcsec)
        self.sigma = _positive(sigma, "sigma")
        if self.sigma < 3:
            warnings.warn(f"sigma is {self.sigma}; below 3 the mask picks up noise "
                          "peaks", stacklevel=2)
        self.grow_beams = _positive(grow_beams, "grow_beams", allow_zero=True)
        self.min_island_beams = _positive(min_island_beams, "min_island_beams",
                                          allow_zero=True)
        self.smooth_fraction = _positive(smooth_fraction, "smooth_fraction")
        self.include_negative = bool(include_negative)
        self.guard_negative = bool(guard_negative)
        self.psf = None if psf is None else as_image(psf, "psf")
        self.clean_first = bool(clean_first)
        #: Islands left out at the last update as a brighter island's sidelobes.
        self.under_sidelobes = 0
        self._sidelobe = None
        self._envelope = None
        self._view_cache = {}
        #: How the image detected at the last update was made, when ``psf`` is given
        #: and the residual's sidelobes could reach the detection level
        #: (`skyscale.masks.sky_view.SkyView.as_dict`); None when it was looked at as
        #: given.
        self.view = None
        #: Updates since the last `reset` whose residual was cleaned first.
        self.views = 0
        #: The level each scale was cut at, at the last update (``sigma`` times its
        #: noise, or the deepest negative off the emission when deeper).
        self.levels = {}
        #: Negative islands below ``-sigma`` times the noise, by scale, at the last
        #: update: about as many positive islands at that level are expected to be
        #: false (noise and sidelobes have both signs, emission one).
        self.spurious = {}
        #: Beam area in pixels, pi FWHM^2 / (4 ln 2) (`skyscale.core.beam.gaussian_area`).
        self.beam_area_px = gaussian_area(self.beam_fwhm_px, self.beam_fwhm_px)
        #: The mask of the last `update`, or None.
        self.mask = None
        #: Robust noise of each smoothed image at the last update, by scale.
        self.noise = {}

    def reset(self):
        """Forget the previous mask (start over on a new image)."""
        self.mask = None
        self.noise = {}
        self.levels = {}
        self.spurious = {}
        self.view = None
        self.views = 0
        self._sidelobe = None
        self._envelope = None
        self._view_cache = {}

    def _sidelobes_matter(self, residual, noise):
        """Whether the PSF's sidelobes of the residual's brightest pixel can reach the
        detection level: its absolute peak times the PSF's largest sidelobe
        (`skyscale.masks.sky_view.largest_sidelobe`) above ``sigma`` times the noise
        (the deconvolution's, or the residual's robust noise)."""
        if self._sidelobe is None:
            self._sidelobe = largest_sidelobe(self.psf, self.beam_fwhm_px, residual.shape)
        if noise is None or not noise > 0:
            noise = detection_noise(residual, self.sigma, margin_px=0.5 * self.beam_fwhm_px)
        return float(np.abs(residual).max()) * self._sidelobe > self.sigma * noise

    def smoothing_px(self):
        """Smoothing FWHM in pixels for each scale (``smooth_fraction`` of it)."""
        return {s: self.smooth_fraction * s for s in self.scales}

    def _grow(self, mask, spread=0.0):
        full = self.grow_beams * self.beam_fwhm_px
        radius = max(GROW_KEPT * full, full - spread)
        if radius < 1 or not mask.any():
            return mask
        r = int(np.floor(radius))
        yy, xx = np.mgrid[-r:r + 1, -r:r + 1]
        disk = (xx ** 2 + yy ** 2 <= radius ** 2).astype(np.float64)
        # only the mask's bounding box grown by r can change: a compact mask in a large
        # image costs what its box costs
        rows = np.flatnonzero(mask.any(axis=1))
        cols = np.flatnonzero(mask.any(axis=0))
        y0, y1 = max(rows[0] - r, 0), min(rows[-1] + r + 1, mask.shape[0])
        x0, x1 = max(cols[0] - r, 0), min(cols[-1] + r + 1, mask.shape[1])
        box = mask[y0:y1, x0:x1]
        ny, nx = box.shape
        shape = (sfft.next_fast_len(ny + 2 * r + 1, real=True),
                 sfft.next_fast_len(nx + 2 * r + 1, real=True))
        kern = np.zeros(shape)
        kern[:2 * r + 1, :2 * r + 1] = disk
        conv = sfft.irfft2(sfft.rfft2(box.astype(np.float64), s=shape) * sfft.rfft2(kern),
                           s=shape)
        # Linear convolution with the disk centred: output offset by r.  Counts are
        # integers, so > 0.5 is exact dilation.
        out = np.zeros(mask.shape, dtype=bool)
        out[y0:y1, x0:x1] = conv[r:r + ny, r:r + nx] > 0.5
        return out

    def update(self, residual, model=None, previous=None, noise=None):
        """Compute the mask for this major cycle.

        Parameters
        ----------
        residual : (ny, nx) array_like
            Current residual (or dirty) image, Jy/beam.
        model : (ny, nx) array_like, optional
            Current model; its non-zero pixels are always in the mask.
        previous : (ny, nx) array_like of bool, optional
            Pixels that must stay in the mask.  Default: the islands of the last
            update's mask that hold model flux (the others stay only where they are
            found again: the mask keeps no island on which nothing was cleaned).
        noise : float, optional
            The residual's noise from the deconvolution (see
            `skyscale.masks.detect.detect_emission`'s ``reference_noise``).

        Returns
        -------
        mask : (ny, nx) ndarray of bool
            Also stored as ``self.mask``.

        Raises
        ------
        ValueError
            If ``model`` or ``previous`` is not on the residual's grid, or the residual
            differs in shape from the last update's (call `reset` first).
        """
        res = as_image(residual, "residual")
        shape = res.shape
        protected = np.zeros(shape, dtype=bool)
        last = None
        if previous is None and self.mask is not None:
            if self.mask.shape != shape:
                raise ValueError(f"residual has shape {shape} but the last update's was "
                                 f"{self.mask.shape}; call reset() before masking a new image")
            last = self.mask
        for name, extra in (("previous", previous), ("model", model)):
            if extra is None:
                continue
            extra = np.asarray(extra)
            if extra.shape != shape:
                raise ValueError(f"{name} has shape {extra.shape} but residual has {shape}; "
                                 f"pass a {name} on the residual's grid")
            protected |= np.nan_to_num(extra) != 0
        if last is not None:
            protected |= held_islands(last, protected)
        widths = self.smoothing_px()
        sky = res
        self.view = None
        if self.psf is not None and self.clean_first and self._sidelobes_matter(res, noise):
            seen = sky_view(res, self.psf, beam=Beam(self.beam_fwhm_px, self.beam_fwhm_px),
                            cache=self._view_cache,
                            max_cycles=VIEW_CYCLES if not self.views else LATER_VIEW_CYCLES)
            sky, self.view = seen.image, seen.as_dict()
            self.views += 1
        found = detect_emission(sky, self.beam_fwhm_px, [widths[s] for s in self.scales],
                                sigma=self.sigma, exclude=protected,
                                include_negative=self.include_negative,
                                reference_noise=noise,
                                guard_negative=self.guard_negative)
        self.noise = dict(zip(self.scales, found.noise))
        self.levels = dict(zip(self.scales, found.levels))
        self.spurious = dict(zip(self.scales, found.spurious))
        detected = found.mask
        labels, n = ndimage.label(detected, structure=np.ones((3, 3), dtype=bool))
        self.under_sidelobes = 0
        if n:
            island_pixels = np.bincount(labels.ravel())
            keep = island_pixels >= self.min_island_beams * self.beam_area_px
            if self.psf is not None and self.view is None:   # (a view has no sidelobes)
                if self._envelope is None:
                    self._envelope = sidelobe_envelope(self.psf, shape)
                lobes = under_sidelobes(sky, labels, self._envelope,
                                        margin_px=0.5 * self.beam_fwhm_px)
                self.under_sidelobes = int(np.count_nonzero(lobes & keep))
                keep &= ~lobes
            keep[np.unique(labels[protected])] = True
            keep[0] = False
            detected = keep[labels]
        alone = _alone(detected, found.points)
        mask = alone | protected
        for width, part in found.found:
            # a smoothed rung's islands already reach about half its smoothing beyond
            # the emission: grown by the rest of the growth radius
            mask |= self._grow(detected & part & ~alone, 0.5 * width)
        self.mask = mask
        logger.debug("auto mask: %d islands found, %d pixels (%.2f%%); noise by scale %s; "
                     "negative islands (false ones expected) by scale %s",
                     n, int(mask.sum()), 100.0 * mask.mean(),
                     {k: f"{v:.3g}" for k, v in self.noise.items()}, self.spurious)
        return mask


def emission_mask(residual, scales, beam_fwhm_px, *, model=None, previous=None, **options):
    """One-shot automatic mask: ``EmissionMask(scales, beam_fwhm_px, **options).update(...)``.

    Parameters
    ----------
    residual : (ny, nx) array_like
        Residual or dirty image, Jy/beam.
    scales : sequence of float
        Scale diameters in pixels.
    beam_fwhm_px : float, Quantity or Beam
        Beam FWHM in pixels.
    model, previous : (ny, nx) array_like, optional
        Pixels always kept (see `EmissionMask.update`).
    **options
        Keyword options of `EmissionMask` (sigma, grow_beams, min_island_beams, ...).

    Returns
    -------
    mask : (ny, nx) ndarray of bool

    Examples
    --------
    >>> import numpy as np
    >>> bool(emission_mask(np.zeros((64, 64)), [0, 4], 3.0).any())
    False
    """
    return EmissionMask(scales, beam_fwhm_px, **options).update(residual, model=model,
                                                            previous=previous)
