"""Islands of emission at one rung of the smoothing ladder, and how each is measured.

An island is measured only where it is extended: where the smoothing raised its peak
signal-to-noise (it is resolved there) or where it had already been detected whole at
the rung before; an unresolved source, or several of them blurred together, loses
signal-to-noise as the smoothing grows and is mostly new blur.  Its size is that of
the disk or Gaussian whose profile, seen through the PSF and the smoothing, fits it
(`skyscale.masks.profiles.fit_profile`).

References
----------
.. [1] Cornwell, T. J. 2008, IEEE J. Sel. Topics Signal Process. 2(5), 793.
"""

import math
from dataclasses import dataclass

import numpy as np
from scipy import ndimage
from scipy.spatial import ConvexHull, QhullError
from scipy.spatial.distance import pdist

from skyscale.masks.profiles import fit_profile, seen_point, subtract_point

__all__ = ["DIAMETER_MEASURES", "RESOLVED_GAIN", "RESOLVED_COVER", "MEASURE_PEAK",
           "MEASURE_WIDTH", "ELONGATED", "COMPACT_APART", "Island", "point_island",
           "measure_islands", "label_max"]


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


def _largest_piece(mask):
    """The largest 8-connected piece of a mask."""
    labels, n = ndimage.label(mask, structure=np.ones((3, 3), dtype=bool))
    if n <= 1:
        return mask
    return labels == (1 + int(np.argmax(np.bincount(labels.ravel())[1:])))


def measure_islands(sm, sigma, noise, previous, width, beam, min_area, measure, first, transfer,
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
            peaks = label_max(prev_img, prev_labels, m)
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


def label_max(values, labels, n):
    """Largest value of each label ``1..n`` (what ``scipy.ndimage.maximum`` gives for
    ``index=range(1, n + 1)``), read from the labelled pixels alone."""
    sel = labels > 0
    out = np.full(n + 1, -np.inf)
    np.maximum.at(out, labels[sel], values[sel].astype(np.float64, copy=False))
    return out[1:]
