"""Multi-scale emission detection: one home for the scale advisor and the automatic mask.

The residual (or dirty image) is smoothed by unit-sum Gaussians at a ladder of
widths.  Smoothing lowers the noise (white noise of rms ``n`` smoothed by a unit-sum
kernel ``k`` has rms ``n sqrt(sum k^2)``, analytic), so broad emission that is faint per
pixel stands out once smoothed.  Each smoothed image is compared against its own
noise, measured where it holds no emission: the robust noise
(`skyscale.core.noise.robust_noise`, 1.4826 MAD [1]_) is estimated, the pixels above the
detection level are left out together with a margin of half the smoothed beam, and
the estimate is repeated until it settles.  A structure is found at the smoothing
where it is significant, and measured only where it is extended: where the smoothing
raised its peak signal-to-noise (it is resolved there) or where it had already been
detected whole at the rung before; an unresolved source, or several of them blurred
together, loses signal-to-noise as the smoothing grows and is mostly new blur.

References
----------
.. [1] Rousseeuw, P. J. & Croux, C. 1993, JASA 88, 1273 (robust noise).
.. [2] Cornwell, T. J. 2008, IEEE J. Sel. Topics Signal Process. 2(5), 793
   (multi-scale: structure is detected at the scale that matches it).
"""

import logging
import math
from dataclasses import dataclass

import numpy as np
from scipy import ndimage

from skyscale.core.beam import FWHM_PER_SIGMA, gaussian_area
from skyscale.core.noise import detection_noise
from skyscale.masks.islands import (COMPACT_APART, DIAMETER_MEASURES, ELONGATED, Island,
                                    measure_islands, point_island)
from skyscale.masks.mask_guards import (MASK_GAIN, POINT_AREA, TRIM_SIGMA, off_emission,
                                        point_cores, resolved_part)
from skyscale.masks.profiles import transfer_of_beam, transfer_of_psf
from skyscale.masks.smoothing import LADDER_RATIO, smoothed_images, smoothing_ladder

__all__ = ["FWHM_PER_SIGMA", "LADDER_RATIO", "COMPACT_APART", "ELONGATED", "MASK_GAIN",
           "TRIM_SIGMA", "POINT_AREA", "DIAMETER_MEASURES", "Island", "Detection",
           "smoothing_ladder", "smoothed_images", "point_island", "detect_emission"]

logger = logging.getLogger(__name__)


@dataclass
class Detection:
    """What `detect_emission` found.

    Attributes
    ----------
    smoothing_px : tuple of float
        The ladder (FWHM, pixels).
    noise : tuple of float
        Emission-free robust noise of each smoothed image.
    sigma : float
        Detection level in units of each rung's noise.
    mask : (ny, nx) ndarray of bool
        Pixels above the level at any rung (the union).
    islands : list of Island
        Positive islands of at least ``min_area`` pixels at every rung, when measured.
    levels : tuple of float
        The level each rung was cut at: ``sigma * noise``, or with ``guard_negative``
        the deepest negative value off the emission when that is higher.
    spurious : tuple of int
        With ``guard_negative``, negative islands of at least ``min_area`` pixels
        below ``-sigma * noise`` at each rung, off the emission: as many positive ones
        are expected from noise and sidelobes alone, which are of either sign while
        emission is positive.  Empty without ``guard_negative``.
    points : (ny, nx) ndarray of bool or None
        With ``guard_negative``, the first rung's islands taken as unresolved sources,
        cut to their cores (see `POINT_AREA`); None without.
    found : tuple of (float, (ny, nx) ndarray of bool)
        Each rung's smoothing FWHM and what it added to ``mask`` (their union is
        ``mask``).
    """

    smoothing_px: tuple
    noise: tuple
    sigma: float
    mask: np.ndarray
    islands: list
    levels: tuple = ()
    spurious: tuple = ()
    points: np.ndarray = None
    found: tuple = ()

    @property
    def thresholds(self):
        """Detection level of each rung, ``sigma * noise``."""
        return tuple(self.sigma * n for n in self.noise)


def detect_emission(image, beam_fwhm_px, smoothing_px=None, *, sigma=5.0, exclude=None,
                    include_negative=False, measure=False, beam_major_px=None,
                    min_area=None, diameter="equal_area", reference_noise=None, psf=None,
                    guard_negative=False):
    """Detect emission in an image smoothed at a ladder of widths.

    Parameters
    ----------
    image : (ny, nx) ndarray
        Residual or dirty image (Jy/beam), finite, float64 or float32.
    beam_fwhm_px : float
        Beam FWHM in pixels (sets the default ladder, the noise margin and the
        smallest island).
    smoothing_px : sequence of float, optional
        Smoothing FWHMs in pixels; default `smoothing_ladder`.
    sigma : float
        Detection level in units of each rung's own noise.  Default 5.
    exclude : (ny, nx) ndarray of bool, optional
        Pixels left out of every noise estimate.
    include_negative : bool
        Also detect significant negative values (the mask only; islands are
        positive).
    measure : bool
        Measure the positive islands (`Island`); default only the mask and noise.
    beam_major_px : float, optional
        Beam major axis for the broadening correction; default ``beam_fwhm_px``.
    min_area : int, optional
        Islands with fewer pixels are not measured; default a quarter of the beam
        area, at least 2 pixels.
    diameter : {'equal_area', 'feret'}
        How an island's contour is measured (`DIAMETER_MEASURES`).
    reference_noise : float, optional
        The unsmoothed image's noise from a better estimate (the deconvolution's own,
        which broad emission cannot inflate).  When it is below this routine's estimate
        at the first rung, every rung's noise is scaled down by their ratio: emission
        the exclusion missed inflated them all.
    psf : (py, px) ndarray, optional
        The PSF (peak at ``(py // 2, px // 2)``) the islands' profiles are fitted
        through; default a round Gaussian beam of ``beam_fwhm_px``.
    guard_negative : bool
        Cut each rung at the deepest negative value off the emission when that is
        above ``sigma * noise`` (see Notes).  Default False; ignored with
        ``include_negative`` (negative values are then wanted).

    Returns
    -------
    Detection

    Notes
    -----
    An island's size is that of the disk or Gaussian whose profile, seen through the
    PSF and the smoothing with an unresolved source on it, fits the island's
    (`skyscale.masks.profiles.fit_profile`): its diameter at half its own peak, so a
    Gaussian reads as its FWHM and a disk as its diameter, whatever its brightness
    and whatever compact source sits on it.  Islands are 8-connected.

    Noise and the PSF's sidelobes come with both signs, emission only positive.  With
    ``guard_negative``, what reaches below ``-sigma * noise`` off the emission (pixels
    farther than the noise margin from any above the level, and not in ``exclude``)
    is counted as negative islands (``spurious``: as many positive islands are
    expected to be false), and the rung's level is raised to the deepest such value,
    so that a sidelobe is not taken for emission where one of the same depth but the
    other sign lies off it (a rule of our own); an island no larger than an
    unresolved source of its peak makes is cut to its core above a quarter of its peak
    (`POINT_AREA`), and a wider rung adds only islands the smoothing made more
    significant.  On noise alone the deepest of ``N``
    independent Gaussian values is near ``sqrt(2 ln N)`` sigma (analytic, an upper
    estimate): 5.0 for 512 x 512 independent pixels, less for noise correlated over
    the beam, so it raises a 5 sigma level little there.
    """
    ladder = smoothing_ladder(beam_fwhm_px, image.shape) if smoothing_px is None \
        else tuple(float(w) for w in smoothing_px)
    guard_negative = guard_negative and not include_negative
    major = float(beam_fwhm_px if beam_major_px is None else beam_major_px)
    transfer = None
    if measure:
        transfer = transfer_of_beam(beam_fwhm_px) if psf is None else transfer_of_psf(psf)
    if min_area is None:
        min_area = max(2, int(round(0.25 * gaussian_area(beam_fwhm_px, beam_fwhm_px))))
    mask = np.zeros(image.shape, dtype=bool)
    noises, islands, levels, spurious = [], [], [], []
    finer = None
    previous = None
    points = None
    by_rung = []
    correction = 1.0
    for i, (width, sm) in enumerate(smoothed_images(image, ladder)):
        margin = 0.5 * math.hypot(beam_fwhm_px, width)
        noise = detection_noise(sm, sigma, exclude=exclude, margin_px=margin)
        if noise == 0:
            noise = float(np.std(sm))
        if i == 0 and reference_noise is not None and 0 < reference_noise < noise:
            correction = float(reference_noise) / noise
        noise *= correction
        noises.append(noise)
        if noise == 0:
            previous = None
            levels.append(0.0)
            continue
        level = sigma * noise
        rung_sigma = sigma
        if guard_negative:
            # off the emission as this rung's own noise sees it: a lower reference
            # noise must not let sidelobes around the bright emission pass for it
            off = off_emission(sm, level / correction, margin, exclude)
            neg_labels, n_neg = ndimage.label((sm < -level) & off,
                                              structure=np.ones((3, 3), dtype=bool))
            if n_neg:
                n_neg = int(np.count_nonzero(np.bincount(neg_labels.ravel())[1:] >= min_area))
            spurious.append(n_neg)
            if off.any() and -float(sm[off].min()) > level:
                level = -float(sm[off].min())
                rung_sigma = level / noise
        levels.append(level)
        found_here = (np.abs(sm) if include_negative else sm) > level
        if guard_negative and finer is not None:
            found_here = resolved_part(found_here, sm, noise, *finer,
                                        include_negative, mask)
        elif guard_negative:
            found_here, points = point_cores(found_here, sm, level,
                                              math.hypot(beam_fwhm_px, width))
        finer = (sm, noise)
        mask |= found_here
        by_rung.append((width, found_here))
        if measure:
            islands.extend(measure_islands(sm, rung_sigma, noise, previous, width,
                                    (float(beam_fwhm_px), major), min_area, diameter,
                                    i < 2, transfer, psf))
            previous = (sm, noise)
    logger.debug("emission detected at %d rungs %s px; noise %s", len(ladder), ladder,
                 ", ".join(f"{n:.3g}" for n in noises))
    return Detection(ladder, tuple(noises), float(sigma), mask, islands, tuple(levels),
                     tuple(spurious), points, tuple(by_rung))
