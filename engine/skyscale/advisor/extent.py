"""How large is the emission?  The largest extended structure, found on a ladder of
smoothings by `skyscale.masks.detect.detect_emission`.

References
----------
.. [1] Rousseeuw, P. J. & Croux, C. 1993, JASA 88, 1273 (robust noise).
.. [2] Cornwell, T. J. 2008, IEEE J. Sel. Topics Signal Process. 2(5), 793.
"""

import logging
import math
import numbers
from dataclasses import dataclass

import numpy as np

from skyscale.core.validate import as_image, check_choice
from skyscale.masks.detect import DIAMETER_MEASURES, detect_emission
from skyscale.masks.profiles import SHAPES
from skyscale.advisor.rules import beam_axes

__all__ = ["SAME_SIZE", "EmissionExtent", "measure_emission_extent"]

logger = logging.getLogger(__name__)

#: Readings of the largest structure within this fraction of the largest count as one:
#: the least smoothed of them is reported (its seen contour is closest to the
#: structure).  The profile fit's scatter across rungs on a disk or a Gaussian at a
#: signal-to-noise of a few tens is about 1 % (tests/test_advisor.py's fields).
SAME_SIZE = 0.02


@dataclass(frozen=True)
class EmissionExtent:
    """The largest extended structure and where on the smoothing ladder it was seen.

    Attributes
    ----------
    largest_px : float
        Its diameter as measured on the smoothed image (pixels), at half the peak of
        its extended part or at the detection level when that is higher; 0 when
        nothing was found.
    intrinsic_px : float
        Its own size (pixels): the diameter or FWHM of the disk or Gaussian whose
        profile, seen through the PSF and the smoothing, fits the island's.
    n_islands : int
        Islands at the rung where it was found (0: no emission found at any rung).
    areas : tuple of int
        Their areas in pixels, largest first.
    diameters : tuple of float
        Their measured diameters, in the order of ``areas``.
    noise : float
        Emission-free robust noise of that smoothed image.
    threshold : float
        ``sigma * noise`` there.
    smoothing_px : float
        FWHM of the smoothing where it was found (0 = none).
    diameter : str
        The measure used, one of `DIAMETER_MEASURES`.
    peak_snr : float
        Its peak in units of ``noise``.
    noise_by_smoothing : tuple of (float, float)
        ``(smoothing FWHM, noise)`` for every rung of the ladder.
    sigma : float
        The detection level in units of each rung's noise.
    n_detected : int
        Islands above the detection level, over all rungs (an island seen at several
        rungs counts at each); with ``n_islands`` 0, what was detected was too faint
        to measure or unresolved at every rung.
    shape : str
        The shape fitted to it (`skyscale.masks.profiles.SHAPES`); "" when nothing was
        found.
    peak : float
        Peak of its extended part, as seen on that smoothed image (the image's unit).
    compact : float
        Peak of the unresolved source fitted on it, as seen there; 0 when none.
    """

    largest_px: float
    intrinsic_px: float
    n_islands: int
    areas: tuple
    diameters: tuple
    noise: float
    threshold: float
    smoothing_px: float
    diameter: str = "equal_area"
    peak_snr: float = 0.0
    noise_by_smoothing: tuple = ()
    sigma: float = 5.0
    n_detected: int = 0
    shape: str = ""
    peak: float = 0.0
    compact: float = 0.0

    def note(self):
        """Where the structure was found, in words, for reasons and messages."""
        if not self.n_islands:
            return ""
        where = "unsmoothed" if self.smoothing_px == 0 else \
            f"at smoothing {self.smoothing_px:.0f} px"
        shape = f"a {self.shape}, " if self.shape in SHAPES else ""
        return (f"{shape}found {where}, peak {self.peak_snr:.0f} x that image's noise "
                f"{self.noise:.3g}")

    def as_dict(self):
        """The fields as plain Python values (for a JSON report)."""
        d = dict(self.__dict__)
        d["areas"], d["diameters"] = list(self.areas), list(self.diameters)
        d["noise_by_smoothing"] = [list(p) for p in self.noise_by_smoothing]
        return d


def measure_emission_extent(dirty, beam_fwhm_px, *, sigma=5.0, smoothing_px=None,
                            min_area=None, diameter="equal_area", psf=None):
    """Find the largest extended structure, each smoothing against its own noise.

    Parameters
    ----------
    dirty : (ny, nx) ndarray
        Dirty (or residual) image, Jy/beam.
    beam_fwhm_px : float or Beam
        Beam FWHM in pixels, or the fitted `Beam` (its major axis is used for the
        broadening correction and the geometric mean of its axes for the rest).
    sigma : float
        Detection level in units of each smoothed image's emission-free robust
        noise.  Default 5.
    smoothing_px : float or sequence of float, optional
        Smoothing FWHMs in pixels; default the ladder 0, the beam, then doubling up
        to a quarter of the image (`skyscale.masks.detect.smoothing_ladder`).  One number
        gives one smoothing (0: none).
    min_area : int, optional
        Islands with fewer pixels are ignored; default a quarter of the beam area,
        at least 2 pixels (a single hot pixel is not emission).
    diameter : {'equal_area', 'feret'}
        ``'equal_area'`` (default): the diameter of the circle of the contour's area,
        steady against noisy edges; ``'feret'``: the largest distance across, which
        never underestimates an elongated source but reads high on a noisy edge.
    psf : (py, px) ndarray, optional
        The PSF the dirty image was made with (peak at ``(py // 2, px // 2)``): the
        islands' profiles are fitted through it, sidelobes included.  Default a
        Gaussian beam of ``beam_fwhm_px`` (right for a restored or smoothed image).

    Returns
    -------
    extent : EmissionExtent
        ``n_islands`` is 0 when no emission was found at any smoothing.

    Raises
    ------
    ValueError
        For a non-2-D or non-finite ``dirty``, a non-positive beam or ``sigma``, a
        negative smoothing or ``min_area``, or an unknown ``diameter``.

    Notes
    -----
    Only positive islands count: negative regions of a dirty image are sidelobes or
    missing short spacings, not emission.  An island is measured at the rungs where
    it is extended (its peak signal-to-noise rose with the smoothing, or it was
    already detected there at the rung before), its peak is at least twice the
    detection level and the smoothing at most twice its size (see `skyscale.masks.detect`);
    the largest intrinsic diameter over those wins (readings within `SAME_SIZE` of it
    count as one, and the least smoothed of them is reported).  The island's pixels, sorted from
    the brightest, give its profile against the equal-area radius; it is fitted with
    a disk or a Gaussian seen through the PSF and the smoothing, plus an unresolved
    source seen the same way (`skyscale.masks.profiles.fit_profile`).  The size is the
    fitted shape's diameter at half its own peak: a Gaussian of FWHM :math:`f` reads
    :math:`f` and a disk its diameter, whatever their brightness, the PSF's sidelobes
    (a dirty disk is domed and ringed by them) or a compact source on them (whose
    peak would otherwise set the half level).  Where the profile cannot tell the two
    shapes apart the smaller size is taken.  In a dirty image the off-source
    fluctuations include the PSF's sidelobes; the noise of each rung is measured off
    the emission, so it holds them, and strong sidelobes are not taken for emission.

    Examples
    --------
    A disk of diameter 40 px seen through a Gaussian beam of FWHM 3 px
    (`scipy.ndimage.gaussian_filter`, sigma = FWHM / 2.3548):

    >>> import numpy as np
    >>> from scipy import ndimage
    >>> rng = np.random.default_rng(0)
    >>> y, x = np.mgrid[:128, :128]
    >>> disk = 50.0 * ((y - 64)**2 + (x - 64)**2 < 20**2)
    >>> image = rng.normal(0, 1.0, (128, 128)) + ndimage.gaussian_filter(disk, 3.0 / 2.3548)
    >>> ext = measure_emission_extent(image, 3.0)
    >>> ext.shape, 39 <= ext.intrinsic_px <= 42
    ('disk', True)
    """
    image = as_image(dirty, "dirty", dtype=np.float64)
    fwhm, major = beam_axes(beam_fwhm_px, "beam_fwhm_px")
    if isinstance(sigma, bool) or not isinstance(sigma, numbers.Real) \
            or not (math.isfinite(sigma) and sigma > 0):
        raise ValueError(f"sigma is {sigma!r}; pass a positive multiple of the noise, e.g. 5")
    ladder = None
    if smoothing_px is not None:
        ladder = [float(w) for w in np.atleast_1d(smoothing_px)]
        if not ladder or not all(math.isfinite(w) and w >= 0 for w in ladder):
            raise ValueError(f"smoothing_px is {smoothing_px!r}; pass FWHMs in pixels >= 0 "
                             "(0 turns smoothing off) or None for the ladder")
        ladder = sorted(set(ladder))
    if min_area is not None and (isinstance(min_area, bool) or
                                 not isinstance(min_area, numbers.Integral) or min_area < 1):
        raise ValueError(f"min_area is {min_area!r}; pass a whole number of pixels >= 1 "
                         "or None for a quarter of the beam area")
    check_choice(diameter, "diameter", DIAMETER_MEASURES)

    if psf is not None:
        psf = as_image(psf, "psf", dtype=np.float64)
    found = detect_emission(image, fwhm, ladder, sigma=float(sigma), measure=True,
                            beam_major_px=major, min_area=min_area, diameter=diameter,
                            psf=psf)
    noise_by = tuple(zip(found.smoothing_px, found.noise))
    extended = [i for i in found.islands if i.measured]
    if not extended:
        logger.info("no extended emission above %g sigma at smoothings %s px", sigma,
                    ", ".join(f"{w:.0f}" for w in found.smoothing_px))
        first_noise = found.noise[0] if found.noise else 0.0
        return EmissionExtent(0.0, 0.0, 0, (), (), first_noise, sigma * first_noise,
                              found.smoothing_px[0] if found.smoothing_px else 0.0,
                              diameter, 0.0, noise_by, float(sigma), len(found.islands))
    top = max(i.intrinsic_px for i in extended)
    best = min((i for i in extended if i.intrinsic_px >= (1 - SAME_SIZE) * top),
               key=lambda i: (i.smoothing_px, -i.intrinsic_px))
    rung = found.smoothing_px.index(best.smoothing_px)
    same = sorted((i for i in found.islands if i.smoothing_px == best.smoothing_px),
                  key=lambda i: -i.area)
    noise = found.noise[rung]
    logger.debug("largest structure %.1f px (a %s, %.1f px as seen) at smoothing %.1f px, "
                 "peak %.1f sigma", best.intrinsic_px, best.shape, best.diameter_px,
                 best.smoothing_px, best.peak_snr)
    return EmissionExtent(best.diameter_px, best.intrinsic_px, len(same),
                          tuple(i.area for i in same), tuple(i.diameter_px for i in same),
                          noise, sigma * noise, best.smoothing_px, diameter, best.peak_snr,
                          noise_by, float(sigma), len(found.islands), best.shape,
                          best.peak, best.compact)
