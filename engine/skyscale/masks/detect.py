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
from scipy import fft as sfft
from scipy import ndimage
from scipy.spatial import ConvexHull, QhullError
from scipy.spatial.distance import pdist

from skyscale.core.beam import FWHM_PER_SIGMA, gaussian_area
from skyscale.core.noise import detection_noise, grow_mask
from skyscale.masks.profiles import (fit_profile, seen_point, subtract_point, transfer_of_beam,
                                     transfer_of_psf)

__all__ = ["FWHM_PER_SIGMA", "LADDER_RATIO", "COMPACT_APART", "ELONGATED", "MASK_GAIN", "TRIM_SIGMA", "POINT_AREA", "DIAMETER_MEASURES",
           "Island", "Detection", "smoothing_ladder", "smoothed_images",
           "point_island", "detect_emission", "negative_noise"]

logger = logging.getLogger(__name__)


#: Successive smoothing widths of the ladder grow by this factor.
LADDER_RATIO = 2.0

#: How an island's diameter is measured: the diameter of the circle with the contour's
#: area (default; steady against noisy edges) or the maximum Feret diameter (largest
#: distance across; never underestimates an elongated source, but reads high on a
#: noisy edge).
DIAMETER_MEASURES = ("equal_area", "feret")

#: An island is taken as extended at a rung (and measured there) when its peak
#: signal-to-noise is at least this multiple of the previous rung's over the same
#: pixels (smoothing helped: it is resolved), ...
RESOLVED_GAIN = 1.0

#: ... or when at least this fraction of its pixels was already detected at the
#: previous rung (it is the same emission, seen whole).  Unresolved sources blurred
#: together by a wide kernel pass neither test: they lose signal-to-noise, and their
#: island at the wider rung is mostly new blur (a quarter of it was detected before
#: for one source when the width doubles, a Gaussian's area growing as its width
#: squared).  The unsmoothed image and the first rung count as extended.
RESOLVED_COVER = 0.5

#: An extended island's size is trusted (``measured``) where its peak is at least this
#: multiple of the detection level, so that its contour at half the peak lies above
#: the detection level, ...
MEASURE_PEAK = 2.0

#: ... and where the smoothing is at most this multiple of the beam or of the size seen
#: at half the island's peak less the smoothed beam's (in quadrature; a conservative
#: reading: no compact source or loose fit inflates it).  Wider, the smoothing dwarfs
#: the size: the profile no longer pins the shape nor its size, and the rung that
#: maximises a structure's signal-to-noise is never wider than its size.
MEASURE_WIDTH = 1.0

#: An island is elongated when the diameter of the largest disk inside its contour is
#: under this fraction of its equal-area diameter (a round island's noisy edge costs
#: the inscribed disk a pixel or two, so round ones are left as they are); its size is
#: then its smaller extent: the inscribed diameter less the broadening of the contour
#: (the seen less the fitted size, in quadrature), at most the fitted size times the
#: ratio.  The largest scale
#: follows the smaller extent of the largest structure (common practice: a scale
#: wider than the structure pulls in what surrounds it).
ELONGATED = 0.9

#: A compact source fitted on a structure at least this many smoothed beams across is
#: subtracted (seen through the PSF, sidelobes and all) and the structure fitted again;
#: on a smaller one the two are nearly one profile (taking out the compact part would
#: carve a flat top into a Gaussian, and fitting both lets a wider disk with a point
#: at its centre pass for the structure): the structure is fitted alone.
COMPACT_APART = 2.0


# ------------------------------------------------------------------------- smoothing

def smoothing_ladder(beam_fwhm_px, shape, *, ratio=LADDER_RATIO, image_fraction=0.25):
    """Smoothing FWHMs in pixels: 0, the beam, then growing by ``ratio`` while at most
    ``image_fraction`` of the image's smaller side.

    Examples
    --------
    >>> smoothing_ladder(4.0, (256, 256))
    (0.0, 4.0, 8.0, 16.0, 32.0, 64.0)
    """
    top = image_fraction * min(shape)
    ladder = [0.0]
    width = float(beam_fwhm_px)
    while width <= top * (1 + 1e-9):
        ladder.append(width)
        width *= ratio
    return tuple(ladder)


def smoothed_images(image, smoothing_px):
    """Yield ``(fwhm, smoothed image)`` for each FWHM, one forward FFT for all.

    The kernels are unit-sum round Gaussians; FWHMs below half a pixel give the image
    itself.  The image is zero-padded by four sigmas of the widest kernel (at most
    its own size), so emission does not wrap around the edges.  The transforms are
    single precision (float32 in and out), ample for finding emission.
    """
    sigmas = [w / FWHM_PER_SIGMA if w >= 0.5 else 0.0 for w in smoothing_px]
    widest = max(sigmas) if sigmas else 0.0
    ny, nx = image.shape
    spec = fy = fx = shape = None
    if widest > 0:
        pad = min(int(math.ceil(4 * widest)), max(ny, nx))
        shape = (sfft.next_fast_len(ny + 2 * pad, real=True),
                 sfft.next_fast_len(nx + 2 * pad, real=True))
        spec = sfft.rfft2(image.astype(np.float32, copy=False), s=shape)
        fy = sfft.fftfreq(shape[0])[:, None] ** 2
        fx = sfft.rfftfreq(shape[1])[None, :] ** 2
    done = {}
    for width, sig in zip(smoothing_px, sigmas):
        if sig not in done:
            if sig == 0:
                done[sig] = image
            else:
                # Fourier transform of a unit-sum Gaussian (analytic).
                transfer = np.exp(-2 * np.pi ** 2 * sig ** 2 * (fy + fx))
                done[sig] = sfft.irfft2(spec * transfer.astype(spec.real.dtype),
                                        s=shape)[:ny, :nx]
        yield float(width), done[sig]


# --------------------------------------------------------------------------- islands

def _feret(ys, xs):
    """Largest distance across a set of pixels, centre to centre plus one pixel."""
    pts = np.column_stack([ys, xs]).astype(np.float64)
    if len(pts) > 3:
        try:
            pts = pts[ConvexHull(pts).vertices]
        except QhullError:          # collinear pixels: the extremes are among them all
            pass
    if len(pts) < 2:
        return 1.0
    return float(pdist(pts).max()) + 1.0


def _width_ratio(inside):
    """Diameter of the largest disk inside a contour over its equal-area diameter
    (Euclidean distance transform, ``scipy.ndimage.distance_transform_edt``), at most 1."""
    if inside.sum() < 4:
        return 1.0
    depth = ndimage.distance_transform_edt(np.pad(inside, 1))
    inscribed = 2.0 * float(depth.max()) - 1.0
    return min(1.0, inscribed / (2.0 * math.sqrt(inside.sum() / math.pi)))


def _diameter(ys, xs, measure):
    if measure == "feret":
        return _feret(ys, xs)
    return 2.0 * math.sqrt(len(ys) / math.pi)


def point_island(fwhm, contrast, measure="equal_area"):
    """Diameter of the island an unresolved source makes: a round Gaussian of ``fwhm``
    pixels, ``contrast`` times the contour level at its peak pixel, sampled on the
    pixel grid and measured like any island (0 for a contrast of 1 or less)."""
    if contrast <= 1.0:
        return 0.0
    radius = 0.5 * fwhm * math.sqrt(math.log2(contrast))     # continuous contour
    half = int(math.ceil(radius)) + 1
    yy, xx = np.mgrid[-half:half + 1, -half:half + 1]
    inside = contrast * np.exp2(-4.0 * (yy * yy + xx * xx) / (fwhm * fwhm)) > 1.0
    return _diameter(*np.nonzero(inside), measure)


@dataclass(frozen=True)
class Island:
    """One island of emission at one rung of the smoothing ladder.

    Attributes
    ----------
    smoothing_px : float
        FWHM of the smoothing where it was found (0 = none).
    area : int
        Pixels above the detection level.
    peak_snr : float
        Its peak in units of that rung's noise.
    gain : float or None
        ``peak_snr`` over the previous rung's peak signal-to-noise on the same pixels;
        None at the first rung.
    cover : float or None
        Fraction of its pixels detected at the previous rung; None at the first.
    diameter_px : float
        Diameter of its contour at half the peak of its extended part (or at the
        detection level when that is higher), as measured on the smoothed image.
    intrinsic_px : float
        The size of the shape fitted to its profile (`skyscale.masks.profiles.fit_profile`),
        seen through the PSF and the smoothing, with an unresolved source on it: a
        disk's diameter or a Gaussian's FWHM; with ``diameter='feret'``, times the
        ratio of the seen contour's Feret diameter to its equal-area diameter.
    resolved : bool
        Extended at this rung (see `RESOLVED_GAIN` and `RESOLVED_COVER`).
    measured : bool
        Extended, and its size trusted (see `MEASURE_PEAK` and `MEASURE_WIDTH`).
    shape : str
        The shape fitted (`skyscale.masks.profiles.SHAPES`, or ``"point"``).
    peak : float
        Peak of its extended part, as seen on the smoothed image (0: none fits).
    compact : float
        Peak of the unresolved source fitted on it, as seen on the smoothed image.
    parts : int
        Islands of the rung before, each bright enough to be measured there, that it
        joins (0 at the first rung).  Two or more: a group of separate objects
        blurred together, not one structure, and not measured.
    width_ratio : float
        Its half-peak contour's inscribed diameter over its equal-area diameter; under
        `ELONGATED` the size given is the smaller extent.
    """

    smoothing_px: float
    area: int
    peak_snr: float
    gain: float
    cover: float
    diameter_px: float
    intrinsic_px: float
    resolved: bool
    measured: bool
    shape: str = ""
    peak: float = 0.0
    compact: float = 0.0
    parts: int = 0
    width_ratio: float = 1.0


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


def _largest_piece(mask):
    """The largest 8-connected piece of a mask."""
    labels, n = ndimage.label(mask, structure=np.ones((3, 3), dtype=bool))
    if n <= 1:
        return mask
    return labels == (1 + int(np.argmax(np.bincount(labels.ravel())[1:])))


def _islands(sm, sigma, noise, previous, width, beam, min_area, measure, first, transfer,
             psf):
    """Positive islands of one rung, measured (``beam``: ``(geometric mean, major)``)."""
    level = sigma * noise
    labels, n = ndimage.label(sm > level, structure=np.ones((3, 3), dtype=bool))
    if n == 0:
        return []
    areas = np.bincount(labels.ravel(), minlength=n + 1)
    spread = math.hypot(beam[1], width)
    found, point, ranked = [], None, None
    bright_before = None
    if previous is not None:        # the rung before's islands bright enough to measure
        prev_img, prev_noise = previous
        prev_labels, m = ndimage.label(prev_img > sigma * prev_noise,
                                       structure=np.ones((3, 3), dtype=bool))
        if m:
            peaks = _label_max(prev_img, prev_labels, m)
            sizes = np.bincount(prev_labels.ravel(), minlength=m + 1)[1:]
            bright = np.zeros(m + 1, dtype=bool)
            bright[1:] = (peaks >= MEASURE_PEAK * sigma * prev_noise) & (sizes >= min_area)
            bright_before = (prev_labels, bright)
    for k, sl in enumerate(ndimage.find_objects(labels), start=1):
        if sl is None or areas[k] < min_area:
            continue
        inside = labels[sl] == k
        values = sm[sl][inside]
        peak = float(values.max())
        gain = cover = None
        parts = 0
        if bright_before is not None:
            under = bright_before[0][sl][inside]
            parts = int(np.count_nonzero(bright_before[1][np.unique(under[under > 0])]))
        if previous is not None:
            prev_img, prev_noise = previous
            before = prev_img[sl][inside]
            prev_snr = float(before.max()) / prev_noise
            gain = math.inf if prev_snr <= 0 else (peak / noise) / prev_snr
            cover = float(np.mean(before > sigma * prev_noise))
        # The guard: the size seen at half the island's own peak, less what an
        # unresolved source makes there (in quadrature); small for a point, even one
        # on a structure, and never inflated by a fit that the profile cannot pin.
        top = max(level, 0.5 * peak)
        seen = _diameter(*np.nonzero(inside & (sm[sl] >= top)), measure)
        guard = math.sqrt(max(seen * seen - point_island(spread, peak / top, measure) ** 2,
                              0.0))
        resolved = first or (gain is not None and
                             (gain >= RESOLVED_GAIN or cover >= RESOLVED_COVER))
        measured = resolved and peak >= MEASURE_PEAK * level \
            and width <= MEASURE_WIDTH * max(guard, beam[1]) and parts < 2
        if not measured:            # the guard's reading; no profile fitted
            found.append(Island(width, int(areas[k]), peak / noise, gain, cover, seen,
                                guard, resolved, False, parts=parts))
            continue
        if point is None:           # the seen point, once per rung
            point = seen_point(psf, width, beam[0])
            ranked = np.sort(point.ravel())[::-1]
        fit = fit_profile(values, transfer, width, beam[0], ranked, noise)
        compact = fit.compact
        structure = sm[sl]
        if fit.flux > 0 and fit.size_px >= COMPACT_APART * spread:
            # take the compact source out, sidelobes and all, and fit again
            box = np.where(inside, sm[sl], 0.0)
            at = np.unravel_index(int(np.argmax(box)), box.shape)
            structure = subtract_point(box, point, at, fit.flux)
            fit = fit_profile(structure[inside], transfer,
                              width, beam[0], ranked, noise)
            compact += fit.compact
        elif fit.shape != "point" and fit.size_px < COMPACT_APART * spread:
            # too small to tell a compact source on it apart: the structure alone
            fit = fit_profile(values, transfer, width, beam[0], ranked, noise,
                              compact=False)
            compact = 0.0
        if fit.peak < level:        # no extended part above the detection level
            found.append(Island(width, int(areas[k]), peak / noise, gain, cover, seen,
                                0.0, True, True, "point", 0.0, compact, parts))
            continue
        half = inside & (sm[sl] >= max(level, 0.5 * fit.peak))
        ys, xs = np.nonzero(half)
        across = _diameter(ys, xs, measure)
        intrinsic = fit.size_px
        ratio = 1.0
        if measure == "feret" and len(ys):
            intrinsic *= max(1.0, across / _diameter(ys, xs, "equal_area"))
        elif len(ys):       # the shape without the compact source taken out above
            ratio = _width_ratio(_largest_piece(
                inside & (structure >= max(level, 0.5 * fit.peak))))
            if ratio < ELONGATED:
                # the seen contour is the structure broadened on every side: take the
                # broadening (seen less fitted size, in quadrature) off its width too
                blur = max(across * across - intrinsic * intrinsic, 0.0)
                intrinsic = min(intrinsic * ratio,
                                math.sqrt(max((ratio * across) ** 2 - blur, 0.0)) or
                                intrinsic * ratio)
        found.append(Island(width, int(areas[k]), peak / noise, gain, cover, across,
                            intrinsic, True, True, fit.shape, fit.peak, compact, parts,
                            ratio))
    return found


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
            # emission is positive and noise and sidelobes of either sign: the
            # negative side's spread is a floor the reference cannot go under
            floor = negative_noise(sm, exclude)
            correction = min(1.0, max(float(reference_noise), floor) / noise)
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
            off = _off_emission(sm, level / correction, margin, exclude)
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
            found_here = _resolved_part(found_here, sm, noise, *finer,
                                        include_negative, mask)
        elif guard_negative:
            found_here, points = _point_cores(found_here, sm, level,
                                              math.hypot(beam_fwhm_px, width))
        finer = (sm, noise)
        mask |= found_here
        by_rung.append((width, found_here))
        if measure:
            islands.extend(_islands(sm, rung_sigma, noise, previous, width,
                                    (float(beam_fwhm_px), major), min_area, diameter,
                                    i < 2, transfer, psf))
            previous = (sm, noise)
    logger.debug("emission detected at %d rungs %s px; noise %s", len(ladder), ladder,
                 ", ".join(f"{n:.3g}" for n in noises))
    return Detection(ladder, tuple(noises), float(sigma), mask, islands, tuple(levels),
                     tuple(spurious), points, tuple(by_rung))


#: A wider rung adds an island to the mask only when its peak signal-to-noise rose by
#: this factor over the rung before's on the same pixels.  An unresolved source seen
#: through a smoothing of half a beam or less keeps about the same signal-to-noise
#: (its peak and beam-correlated noise fall alike: 0.83 and 0.82 on the invented
#: field of tests/test_sky_as_seen.py), so a gain of 1 does not set it apart.
MASK_GAIN = 1.1

#: ... and only where the rung before is above this many times its own noise: the
#: wider rung's island reaches a smoothing width beyond the emission, the finer one's
#: less far.
TRIM_SIGMA = 2.0

#: An island no larger than this multiple of the island an unresolved source of its
#: peak would make (`point_island`) is an unresolved source: the mask keeps its core,
#: the pixels above a quarter of its peak (one delta component models it; its faint
#: wings are not emission of their own).  A round Gaussian's area above a fraction f
#: of its peak is pi (FWHM / 2)^2 log2(1 / f) (analytic): 1.39 beam areas at f = 1/4,
#: so the core passes a smallest-island rule of one beam area.
POINT_AREA = 1.5


def _point_cores(found, sm, level, spread):
    """Islands of unresolved sources cut to their cores (see `POINT_AREA`)."""
    labels, n = ndimage.label(found, structure=np.ones((3, 3), dtype=bool))
    cores = np.zeros(found.shape, dtype=bool)
    if n == 0:
        return found, cores
    out = found.copy()
    for k, sl in enumerate(ndimage.find_objects(labels), start=1):
        if sl is None:
            continue
        inside = labels[sl] == k
        peak = float(sm[sl][inside].max())
        point = point_island(spread, peak / level)
        if inside.sum() <= POINT_AREA * math.pi * point * point / 4.0:
            core = inside & (sm[sl] >= 0.25 * peak)
            out[sl] &= ~inside | core
            cores[sl] |= core
    return out, cores


def _label_max(values, labels, n):
    """Largest value of each label ``1..n`` (what ``scipy.ndimage.maximum`` gives for
    ``index=range(1, n + 1)``), read from the labelled pixels alone."""
    sel = labels > 0
    out = np.full(n + 1, -np.inf)
    np.maximum.at(out, labels[sel], values[sel].astype(np.float64, copy=False))
    return out[1:]


def _resolved_part(found, sm, noise, before, before_noise, signed, known):
    """What a wider rung adds to the mask: its islands where smoothing helped.

    A wider rung blurs every island beyond its emission.  An island the smoothing
    did not make clearly more significant (its peak signal-to-noise did not rise by
    `MASK_GAIN` over the rung before's on the same pixels) is an unresolved source,
    or emission already found, seen blurred: it adds nothing.  An island it did is kept
    where the rung before is above `TRIM_SIGMA` times its own noise.
    """
    labels, n = ndimage.label(found, structure=np.ones((3, 3), dtype=bool))
    if n == 0:
        return found
    now = np.abs(sm) if signed else sm
    then = np.abs(before) if signed else before
    gain = _label_max(now, labels, n) / noise
    base = _label_max(then, labels, n) / before_noise
    keep = np.zeros(n + 1, dtype=bool)
    keep[1:] = gain >= MASK_GAIN * np.maximum(base, 0.0)
    return keep[labels] & (then > TRIM_SIGMA * before_noise)


#: `negative_noise` reads at most about this many pixels (an even subsample).
NEGATIVE_SAMPLES = 1 << 18


def negative_noise(image, exclude=None):
    """Robust noise of an image's negative side: ``1.4826 * median(-x)`` over its
    negative pixels ``x`` (not in ``exclude``), read from an even subsample.

    For noise of deviation sigma around zero the median of ``|x|`` over the negative
    half is the 0.75 quantile of the normal distribution, 0.6745 sigma (analytic;
    1 / 0.6745 = 1.4826 as in the MAD of Rousseeuw & Croux 1993), so this reads sigma;
    positive emission does not raise it, sidelobes of either sign do.  0 with no
    negative pixel.
    """
    step = max(1, int(math.sqrt(image.size / NEGATIVE_SAMPLES)))
    data = image[::step, ::step]
    below = data < 0
    if exclude is not None:
        below &= ~np.asarray(exclude, dtype=bool)[::step, ::step]
    if not below.any():
        return 0.0
    return 1.4826 * float(np.median(-data[below]))


def _off_emission(sm, level, margin, exclude):
    """Pixels farther than ``margin`` from any above ``level``, and not in ``exclude``."""
    above = sm > level
    off = ~above
    if above.any() and margin >= 1:
        off = ~grow_mask(above, int(round(margin)))
    if exclude is not None:
        off &= ~np.asarray(exclude, dtype=bool)
    return off
