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
from skyscale.masks.sky_view import sky_view

__all__ = ["EmissionMask", "emission_mask"]

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
        Islands are grown by this many beam FWHMs (dilation by a disk).
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
        The PSF (peak 1 at ``(py // 2, px // 2)``).  Given, the bright emission left
        in the residual is cleaned out and restored before detection
        (`skyscale.masks.sky_view.sky_view`), so that its sidelobes, positive shelves
        near the main lobe included, are not taken for emission.  Default None: the
        residual is looked at as given.

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
    8-connected) and the rest grown.  Pixels holding model flux and pixels of the
    previous mask are always kept, so the mask only grows over major cycles.

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
                 cell_arcsec=None, guard_negative=True, psf=None):
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
        #: How the image detected at the last update was made, when ``psf`` is given
        #: (`skyscale.masks.sky_view.SkyView.as_dict`).
        self.view = None
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

    def smoothing_px(self):
        """Smoothing FWHM in pixels for each scale (``smooth_fraction`` of it)."""
        return {s: self.smooth_fraction * s for s in self.scales}

    def _grow(self, mask):
        radius = self.grow_beams * self.beam_fwhm_px
        if radius < 1 or not mask.any():
            return mask
        r = int(np.floor(radius))
        yy, xx = np.mgrid[-r:r + 1, -r:r + 1]
        disk = (xx ** 2 + yy ** 2 <= radius ** 2).astype(np.float64)
        ny, nx = mask.shape
        shape = (sfft.next_fast_len(ny + 2 * r + 1, real=True),
                 sfft.next_fast_len(nx + 2 * r + 1, real=True))
        kern = np.zeros(shape)
        kern[:2 * r + 1, :2 * r + 1] = disk
        conv = sfft.irfft2(sfft.rfft2(mask.astype(np.float64), s=shape) * sfft.rfft2(kern),
                           s=shape)
        # Linear convolution with the disk centred: output offset by r.  Counts are
        # integers, so > 0.5 is exact dilation.
        return conv[r:r + ny, r:r + nx] > 0.5

    def update(self, residual, model=None, previous=None, noise=None):
        """Compute the mask for this major cycle.

        Parameters
        ----------
        residual : (ny, nx) array_like
            Current residual (or dirty) image, Jy/beam.
        model : (ny, nx) array_like, optional
            Current model; its non-zero pixels are always in the mask.
        previous : (ny, nx) array_like of bool, optional
            Pixels that must stay in the mask.  Default: the mask of the last update.
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
        if previous is None and self.mask is not None:
            if self.mask.shape != shape:
                raise ValueError(f"residual has shape {shape} but the last update's was "
                                 f"{self.mask.shape}; call reset() before masking a new image")
            previous = self.mask
        for name, extra in (("previous", previous), ("model", model)):
            if extra is None:
                continue
            extra = np.asarray(extra)
            if extra.shape != shape:
                raise ValueError(f"{name} has shape {extra.shape} but residual has {shape}; "
                                 f"pass a {name} on the residual's grid")
            protected |= np.nan_to_num(extra) != 0
        widths = self.smoothing_px()
        sky = res
        if self.psf is not None:
            seen = sky_view(res, self.psf, beam=Beam(self.beam_fwhm_px, self.beam_fwhm_px))
            sky, self.view = seen.image, seen.as_dict()
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
        if n:
            island_pixels = np.bincount(labels.ravel())
            keep = island_pixels >= self.min_island_beams * self.beam_area_px
            keep[np.unique(labels[protected])] = True
            keep[0] = False
            detected = keep[labels]
        mask = self._grow(detected) | protected
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
