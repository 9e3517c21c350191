"""Suggest a set of scales from the beam, the cell size and the emission, and check one.

The advice follows the trade's rules of thumb (common practice): always the delta
scale (0 pixels); the first finite scale about the beam; then roughly doubling; the
largest scale no larger than the largest structure in the image and well below the
largest scale the array recovers; three to six scales.  Every decision is given a
reason in plain words, with its numbers.  The largest recoverable angle is taken as
about 0.6 / B_min radians for the shortest projected baseline B_min in wavelengths
(common practice, from memory).

References
----------
.. [1] Cornwell, T. J. 2008, "Multiscale CLEAN deconvolution of radio synthesis
   images", IEEE J. Sel. Topics Signal Process. 2(5), 793.
"""

import logging
import math
import numbers
import warnings
from dataclasses import dataclass

import numpy as np
from astropy import units as u
from scipy import ndimage
from scipy.spatial import ConvexHull, QhullError
from scipy.spatial.distance import pdist

from ._validate import as_image, check_choice
from .beam import Beam, fit_beam
from .noise import robust_noise

__all__ = ["DIAMETER_MEASURES", "STRUCTURE_FRACTION", "RECOVERABLE_FRACTION",
           "IMAGE_FRACTION", "SCALE_RATIO", "MIN_SCALE_RATIO", "DELTA_FRACTION",
           "RECOVERABLE_FACTOR", "ScaleChoiceWarning", "EmissionExtent", "ScaleSuggestion",
           "measure_emission_extent", "suggest_scales", "check_scales"]

logger = logging.getLogger(__name__)

# Gaussian FWHM = 2 sqrt(2 ln 2) sigma (analytic).
_FWHM_PER_SIGMA = 2.0 * math.sqrt(2.0 * math.log(2.0))

#: How an island's diameter is measured: the maximum Feret diameter (largest distance
#: across, default) or the diameter of the circle with the island's area.
DIAMETER_MEASURES = ("feret", "equal_area")

#: The largest suggested scale is at most this fraction of the largest structure.
STRUCTURE_FRACTION = 2.0 / 3.0

#: Suggested scales stay below this fraction of the largest recoverable scale.
RECOVERABLE_FRACTION = 0.5

#: Scales stay at or below this fraction of the image's smaller side.
IMAGE_FRACTION = 0.25

#: Successive suggested scales grow by this factor (roughly doubling, common practice).
SCALE_RATIO = 2.0

#: Two scales closer than this factor are nearly degenerate.
MIN_SCALE_RATIO = 1.5

#: A nonzero scale below this fraction of the beam FWHM behaves like a delta.
DELTA_FRACTION = 0.5

#: Largest recoverable angle = RECOVERABLE_FACTOR / B_min radians, B_min in wavelengths
#: (common practice, from memory).
RECOVERABLE_FACTOR = 0.6


class ScaleChoiceWarning(UserWarning):
    """A scale set that breaks one of the rules of thumb (allowed, but questionable)."""


# ----------------------------------------------------------------------------- inputs

def _arcsec(value, name, example):
    """A positive angle in arcsec from a Quantity ['angle'] or a float in arcsec."""
    if isinstance(value, u.Quantity):
        try:
            value = value.to_value(u.arcsec)
        except u.UnitConversionError:
            raise ValueError(f"{name} is {value!r}, which is not an angle; pass an angle "
                             f"Quantity or a float in arcsec, e.g. {name}={example}") from None
    try:
        out = float(value)
    except (TypeError, ValueError):
        raise ValueError(f"{name} is {value!r}; pass an angle Quantity or a float in "
                         f"arcsec, e.g. {name}={example}") from None
    if not (math.isfinite(out) and out > 0):
        raise ValueError(f"{name} is {value!r}; it must be a positive, finite angle, "
                         f"e.g. {name}={example}")
    return out


def _baseline(value):
    """The shortest baseline in wavelengths, a positive float."""
    if isinstance(value, u.Quantity):
        try:
            value = value.to_value(u.dimensionless_unscaled)
        except u.UnitConversionError:
            raise ValueError(f"shortest_baseline is {value!r}; give it in wavelengths "
                             "(divide a length by the wavelength), e.g. "
                             "shortest_baseline=350.0") from None
    try:
        out = float(value)
    except (TypeError, ValueError):
        raise ValueError(f"shortest_baseline is {value!r}; pass a positive number of "
                         "wavelengths, e.g. shortest_baseline=350.0") from None
    if not (math.isfinite(out) and out > 0):
        raise ValueError(f"shortest_baseline is {value!r}; it must be a positive, finite "
                         "number of wavelengths, e.g. shortest_baseline=350.0")
    return out


def _count(value, name):
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) or value < 1:
        raise ValueError(f"{name} is {value!r}; pass a whole number >= 1")
    return int(value)


def _beam_axes(beam, name="beam"):
    """``(geometric-mean FWHM, major FWHM)`` in pixels from a Beam or a positive float."""
    if isinstance(beam, Beam):
        return math.sqrt(beam.major * beam.minor), beam.major
    if isinstance(beam, numbers.Real) and not isinstance(beam, bool):
        value = float(beam)
        if math.isfinite(value) and value > 0:
            return value, value
    raise ValueError(f"{name} is {beam!r}; pass a skyscale.beam.Beam (FWHM in pixels) "
                     "or a positive FWHM in pixels")


def _recoverable_px(baseline, cell):
    """Largest recoverable scale in pixels, 0.6 / B_min radians (common practice)."""
    theta = (RECOVERABLE_FACTOR / baseline * u.rad).to_value(u.arcsec)
    return theta / cell


# ---------------------------------------------------------------------- emission extent

@dataclass(frozen=True)
class EmissionExtent:
    """Islands of emission in a smoothed image and how large they are.

    Attributes
    ----------
    largest_px : float
        The largest island diameter, as measured on the smoothed image (pixels).
    intrinsic_px : float
        The same island with the broadening by the beam and the smoothing removed
        (pixels); see `measure_emission_extent`.
    n_islands : int
        Islands kept (at least ``min_area`` pixels).
    areas : tuple of int
        Island areas in pixels, largest first.
    diameters : tuple of float
        Island diameters in pixels, in the order of ``areas``.
    noise : float
        Robust noise of the smoothed image (same unit as the image).
    threshold : float
        ``sigma * noise``: the island threshold.
    smoothing_px : float
        FWHM of the Gaussian smoothing in pixels (0 = none).
    diameter : str
        The measure used, one of `DIAMETER_MEASURES`.
    """

    largest_px: float
    intrinsic_px: float
    n_islands: int
    areas: tuple
    diameters: tuple
    noise: float
    threshold: float
    smoothing_px: float
    diameter: str = "feret"

    def as_dict(self):
        """The fields as plain Python values (for a JSON report)."""
        d = dict(self.__dict__)
        d["areas"], d["diameters"] = list(self.areas), list(self.diameters)
        return d


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


def _point_island(fwhm, contrast, diameter):
    """Diameter of the island that an unresolved source makes: a round Gaussian of
    ``fwhm`` pixels, ``contrast`` times the threshold at its peak pixel, sampled on the
    pixel grid and measured like any island."""
    if contrast <= 1.0:
        return 0.0
    radius = 0.5 * fwhm * math.sqrt(math.log2(contrast))     # continuous contour
    half = int(math.ceil(radius)) + 1
    yy, xx = np.mgrid[-half:half + 1, -half:half + 1]
    inside = contrast * np.exp2(-4.0 * (yy * yy + xx * xx) / (fwhm * fwhm)) > 1.0
    if diameter == "feret":
        return _feret(*np.nonzero(inside))
    return 2.0 * math.sqrt(np.count_nonzero(inside) / math.pi)


def measure_emission_extent(dirty, beam_fwhm_px, *, sigma=5.0, smoothing_px=None,
                            min_area=None, diameter="feret"):
    """Find islands of emission and measure the largest one.

    Parameters
    ----------
    dirty : (ny, nx) ndarray
        Dirty (or residual) image, Jy/beam.
    beam_fwhm_px : float or Beam
        Beam FWHM in pixels, or the fitted `Beam` (its major axis is used for the
        broadening correction and the geometric mean of its axes for the rest).
    sigma : float
        Islands are the connected pixels above ``sigma`` times the robust noise of the
        smoothed image.  Default 5.
    smoothing_px : float, optional
        FWHM in pixels of the Gaussian smoothing applied first; default the beam FWHM;
        0 turns smoothing off.
    min_area : int, optional
        Islands with fewer pixels are ignored; default a quarter of the beam area,
        at least 2 pixels (a single hot pixel is not emission).
    diameter : {'feret', 'equal_area'}
        ``'feret'`` (default): the maximum Feret diameter, the largest distance across
        the island, which never underestimates an elongated source.  ``'equal_area'``:
        the diameter of the circle of the island's area.

    Returns
    -------
    extent : EmissionExtent
        ``largest_px`` and ``intrinsic_px`` are 0 when no island is found.

    Raises
    ------
    ValueError
        For a non-2-D or non-finite ``dirty``, a non-positive beam or ``sigma``, a
        negative ``smoothing_px`` or ``min_area``, or an unknown ``diameter``.

    Notes
    -----
    Only positive islands count: negative regions of a dirty image are sidelobes or
    missing short spacings, not emission.  The noise is the robust noise
    (``1.4826 * MAD``) of the smoothed image, estimated again with the first islands
    left out.  Strong sidelobes above the threshold join or form islands; pass the
    size you know (``largest_size`` in `suggest_scales`) in that case.

    The smoothed image of a point source of peak :math:`P` is a Gaussian of FWHM
    :math:`F = \\sqrt{b^2 + s^2}` (beam major axis :math:`b`, smoothing :math:`s`;
    Gaussian widths add in quadrature), whose island at threshold :math:`T` is about
    :math:`D_p = F \\sqrt{\\log_2 (P/T)}` across; :math:`D_p` is measured on that
    Gaussian sampled on the pixel grid, like the islands.  The intrinsic diameter
    removes it in quadrature, :math:`D_i = \\sqrt{\\max(D^2 - D_p^2, 0)}`, with
    :math:`P` the island's peak.  This is exact for a Gaussian source (its own
    diameter at :math:`T/P` of its peak).  For an unresolved source it is small but
    not 0: a pixel of error in :math:`D` leaves :math:`\\sqrt{2 D_p}` or so.  For a
    flat-topped source far above the noise the beam's wings still add two to three
    beam widths (for a disk ten beams across, about a quarter), which the 2/3 rule of
    `suggest_scales` leaves room for.

    A diameter is the largest distance between the centres of an island's pixels
    plus one pixel, so one pixel is 1 across; with a noisy edge this largest distance
    reads a little high, which errs on the safe side.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> y, x = np.mgrid[:128, :128]
    >>> image = rng.normal(0, 1.0, (128, 128)) + 50.0 * ((y - 64)**2 + (x - 64)**2 < 20**2)
    >>> ext = measure_emission_extent(image, 3.0)
    >>> ext.n_islands, 40 <= ext.largest_px <= 46
    (1, True)
    """
    image = as_image(dirty, "dirty", dtype=np.float64)
    fwhm, major = _beam_axes(beam_fwhm_px, "beam_fwhm_px")
    if isinstance(sigma, bool) or not isinstance(sigma, numbers.Real) \
            or not (math.isfinite(sigma) and sigma > 0):
        raise ValueError(f"sigma is {sigma!r}; pass a positive multiple of the noise, e.g. 5")
    sigma = float(sigma)
    smooth = fwhm if smoothing_px is None else float(smoothing_px)
    if not (math.isfinite(smooth) and smooth >= 0):
        raise ValueError(f"smoothing_px is {smoothing_px!r}; pass a FWHM in pixels >= 0 "
                         "(0 turns smoothing off) or None for the beam FWHM")
    if min_area is None:
        min_area = max(2, int(round(0.25 * math.pi * fwhm * fwhm / (4 * math.log(2)))))
    elif isinstance(min_area, bool) or not isinstance(min_area, numbers.Integral) \
            or min_area < 1:
        raise ValueError(f"min_area is {min_area!r}; pass a whole number of pixels >= 1 "
                         "or None for a quarter of the beam area")
    check_choice(diameter, "diameter", DIAMETER_MEASURES)

    sm = ndimage.gaussian_filter(image, smooth / _FWHM_PER_SIGMA) if smooth > 0 else image
    noise = robust_noise(sm)
    for _ in range(2):          # leave the emission out and estimate the noise again
        emission = np.abs(sm) > sigma * noise
        noise = robust_noise(sm, mask=emission)
    threshold = sigma * noise
    if noise <= 0:
        logger.warning("dirty has zero robust noise; no islands measured")
        return EmissionExtent(0.0, 0.0, 0, (), (), 0.0, 0.0, smooth, diameter)

    labels, n = ndimage.label(sm > threshold)
    areas = np.bincount(labels.ravel(), minlength=n + 1)
    keep = [k for k in range(1, n + 1) if areas[k] >= min_area]
    keep.sort(key=lambda k: -areas[k])
    slices = ndimage.find_objects(labels)
    diameters, peaks = [], []
    for k in keep:
        sl = slices[k - 1]
        ys, xs = np.nonzero(labels[sl] == k)
        if diameter == "feret":
            diameters.append(_feret(ys, xs))
        else:
            diameters.append(2.0 * math.sqrt(areas[k] / math.pi))
        peaks.append(float(sm[sl][labels[sl] == k].max()))
    if not keep:
        logger.info("no island above %.3g (%g sigma) in the smoothed image", threshold, sigma)
        return EmissionExtent(0.0, 0.0, 0, (), (), noise, threshold, smooth, diameter)

    widest = int(np.argmax(diameters))
    largest = diameters[widest]
    point = _point_island(math.hypot(major, smooth), peaks[widest] / threshold, diameter)
    intrinsic = math.sqrt(max(largest * largest - point * point, 0.0))
    logger.debug("%d islands above %.3g; widest %.1f px (point source %.1f px, "
                 "intrinsic %.1f px)", len(keep), threshold, largest, point, intrinsic)
    return EmissionExtent(float(largest), float(intrinsic), len(keep),
                          tuple(int(areas[k]) for k in keep), tuple(diameters), float(noise),
                          float(threshold), smooth, diameter)


# ------------------------------------------------------------------------ suggestion

@dataclass(frozen=True)
class ScaleSuggestion:
    """A suggested set of scales and the reasons for it.

    Attributes
    ----------
    pixels : tuple of int
        Scale diameters in pixels, ascending, the first 0 (the delta scale).
    arcsec : tuple of float or None
        The same in arcsec; None when no cell size was given.
    reasons : list of str
        One short sentence per decision, with its numbers.
    beam_px : float
        Beam FWHM in pixels, the geometric mean of the major and minor axes.
    largest_structure_px : float or None
        The largest structure in pixels (given, or measured and corrected for the
        beam); None when it is unknown.
    recoverable_px : float or None
        The largest recoverable scale in pixels; None without a shortest baseline.
    image_limit_px : float
        A quarter of the image's smaller side, in pixels.
    beam : Beam
        The beam used.
    extent : EmissionExtent or None
        The measured emission, when it was measured.
    """

    pixels: tuple
    arcsec: tuple
    reasons: list
    beam_px: float
    largest_structure_px: float
    recoverable_px: float
    image_limit_px: float
    beam: Beam
    extent: EmissionExtent = None

    def as_dict(self):
        """Plain Python values, ready for a JSON report."""
        return {"pixels": list(self.pixels),
                "arcsec": None if self.arcsec is None else list(self.arcsec),
                "reasons": list(self.reasons), "beam_px": self.beam_px,
                "beam": {"major": self.beam.major, "minor": self.beam.minor,
                         "pa": self.beam.pa},
                "largest_structure_px": self.largest_structure_px,
                "recoverable_px": self.recoverable_px,
                "image_limit_px": self.image_limit_px,
                "extent": None if self.extent is None else self.extent.as_dict()}


def _violation(scale, limits):
    """The first ``(name, bound)`` that ``scale`` breaks, or None.  A limit is
    ``(name, bound, strict)``: strict ones must be undercut, others may be met."""
    for name, bound, strict in limits:
        if (scale >= bound) if strict else (scale > bound):
            return name, bound
    return None


def _resolve_beam(psf, beam):
    if beam is not None:
        if not isinstance(beam, Beam):
            raise ValueError(f"beam is {beam!r}; pass a skyscale.beam.Beam (FWHM in "
                             "pixels), e.g. Beam(4.0, 3.5, 20.0), or None to fit the PSF")
        return beam
    if psf is None:
        raise ValueError("psf is None and no beam was given; pass the PSF, or "
                         "beam=Beam(major, minor, pa) in pixels")
    return fit_beam(psf)


def suggest_scales(dirty, psf=None, *, cell_arcsec=None, largest_size=None,
                   shortest_baseline=None, max_count=6, min_count=3, beam=None, sigma=5.0):
    """Suggest scale diameters for a field, with a reason for each decision.

    Parameters
    ----------
    dirty : (ny, nx) ndarray
        Dirty image, Jy/beam.
    psf : (ny, nx) ndarray, optional
        The PSF, peak at ``(ny // 2, nx // 2)``; the beam is fitted to it.  Not needed
        when ``beam`` is given.
    cell_arcsec : Quantity ['angle'] or float, optional
        Pixel size (float: arcsec).  Needed by ``largest_size`` and
        ``shortest_baseline``, and for ``arcsec`` in the result.
    largest_size : Quantity ['angle'] or float, optional
        The largest angular size of the emission, if known (float: arcsec).  Default:
        measured from the islands of the dirty image.
    shortest_baseline : float, optional
        Shortest projected baseline in wavelengths; the largest recoverable scale is
        about ``0.6 / shortest_baseline`` radians.  Default: no such limit.
    max_count : int
        At most this many scales, the delta scale included.  Default 6.
    min_count : int
        Aim for at least this many scales while the emission allows.  Default 3.
    beam : Beam, optional
        A beam to use instead of fitting the PSF.
    sigma : float
        Island threshold in units of the robust noise, for the measured extent.
        Default 5.

    Returns
    -------
    suggestion : ScaleSuggestion

    Raises
    ------
    ValueError
        For a bad image, a non-positive angle or baseline, ``largest_size`` or
        ``shortest_baseline`` without ``cell_arcsec``, counts below 1 or
        ``min_count > max_count``, or neither ``psf`` nor ``beam``.

    Warns
    -----
    ScaleChoiceWarning
        For ``max_count = 1`` (delta scale only), a ``largest_size`` below the beam,
        or a ``shortest_baseline`` whose recoverable scale is under twice the beam
        (often a unit mistake).

    Notes
    -----
    The rules (common practice): 0 always; then the beam FWHM rounded to whole pixels;
    then doubling while the scale is at most 2/3 of the largest structure
    (`STRUCTURE_FRACTION`), below half the largest recoverable scale
    (`RECOVERABLE_FRACTION`) and at most a quarter of the image's smaller side
    (`IMAGE_FRACTION`), and the count below ``max_count``.  With compact emission,
    fewer than ``min_count`` scales pass; then further doubled scales are added while
    they stay within the largest structure itself (and the other limits).  The delta
    and beam scales are always given when ``max_count >= 2``.  With no island found
    and no ``largest_size``, the extent is unknown and ``min_count`` scales are given.

    References
    ----------
    .. [1] Cornwell 2008, IEEE J. Sel. Topics Signal Process. 2(5), 793.

    Examples
    --------
    >>> import numpy as np
    >>> from skyscale.beam import Beam
    >>> rng = np.random.default_rng(0)
    >>> y, x = np.mgrid[:256, :256]
    >>> disk = 50.0 * ((y - 128)**2 + (x - 128)**2 < 40**2)
    >>> s = suggest_scales(rng.normal(0, 1, (256, 256)) + disk, beam=Beam(4.0, 4.0),
    ...                    cell_arcsec=2.0)
    >>> s.pixels, s.arcsec
    ((0, 4, 8, 16, 32), (0.0, 8.0, 16.0, 32.0, 64.0))
    """
    image = as_image(dirty, "dirty", dtype=np.float64)
    max_count = _count(max_count, "max_count")
    min_count = _count(min_count, "min_count")
    if min_count > max_count:
        raise ValueError(f"min_count is {min_count} but max_count is {max_count}; "
                         "min_count must not exceed max_count")
    if max_count == 1:
        warnings.warn("max_count is 1, so only the delta scale (0 px) is given: that is "
                      "delta-only CLEAN; allow 2 or more for multi-scale",
                      ScaleChoiceWarning, stacklevel=2)
    cell = None if cell_arcsec is None else _arcsec(cell_arcsec, "cell_arcsec", "2.0")
    size_arcsec = baseline = None
    if largest_size is not None:
        size_arcsec = _arcsec(largest_size, "largest_size", "120.0")
        if cell is None:
            raise ValueError(f"largest_size is {largest_size!r} but cell_arcsec is None; "
                             "pass cell_arcsec to turn the size into pixels")
    if shortest_baseline is not None:
        baseline = _baseline(shortest_baseline)
        if cell is None:
            raise ValueError(f"shortest_baseline is {shortest_baseline!r} but cell_arcsec "
                             "is None; pass cell_arcsec to turn the recoverable scale into "
                             "pixels")
    used = _resolve_beam(psf, beam)
    beam_px = math.sqrt(used.major * used.minor)
    if size_arcsec is not None and size_arcsec / cell < beam_px:
        warnings.warn(f"largest_size is {size_arcsec:g} arcsec, smaller than the beam "
                      f"({beam_px * cell:.3g} arcsec): the emission is unresolved and only "
                      "the delta and beam scales make sense; check the value and its unit",
                      ScaleChoiceWarning, stacklevel=2)
    if baseline is not None and _recoverable_px(baseline, cell) < 2.0 * beam_px:
        warnings.warn(f"shortest_baseline is {baseline:g} wavelengths, so the largest "
                      f"recoverable scale ({_recoverable_px(baseline, cell):.3g} px) is "
                      f"under twice the beam ({beam_px:.3g} px); check the value and "
                      "that it is in wavelengths (a length divided by the wavelength)",
                      ScaleChoiceWarning, stacklevel=2)

    def angle(px):
        return "" if cell is None else f" ({px * cell:.3g} arcsec)"

    reasons = []
    first = max(1, int(round(beam_px)))
    reasons.append(f"beam FWHM {beam_px:.1f} px{angle(beam_px)}, geometric mean of "
                   f"{used.major:.1f} x {used.minor:.1f} px: first finite scale {first} px")

    extent = structure = recoverable = None
    if size_arcsec is not None:
        structure = size_arcsec / cell
        reasons.append(f"largest size given as {size_arcsec:.3g} arcsec = {structure:.1f} "
                       "px: largest scale at most 2/3 of it, "
                       f"{STRUCTURE_FRACTION * structure:.1f} px")
    else:
        extent = measure_emission_extent(image, used, sigma=sigma)
        if extent.n_islands == 0:
            reasons.append(f"no island above {sigma:g} sigma ({extent.threshold:.3g}) "
                           "after smoothing by the beam: the extent of the emission is "
                           f"unknown, so min_count = {min_count} scales are given")
        else:
            structure = extent.intrinsic_px
            reasons.append(f"largest island {extent.largest_px:.1f} px across "
                           f"({structure:.1f} px without the beam's broadening; "
                           f"{extent.n_islands} island(s) above {sigma:g} sigma = "
                           f"{extent.threshold:.3g}): largest scale at most 2/3 of it, "
                           f"{STRUCTURE_FRACTION * structure:.1f} px")
    if baseline is not None:
        recoverable = _recoverable_px(baseline, cell)
        reasons.append(f"largest recoverable scale {recoverable:.0f} px{angle(recoverable)}"
                       f", 0.6/B_min for B_min = {baseline:g} wavelengths: scales kept "
                       f"below half of it, {RECOVERABLE_FRACTION * recoverable:.1f} px")
    ny, nx = image.shape
    image_limit = IMAGE_FRACTION * min(ny, nx)
    reasons.append(f"image {ny} x {nx} px: scales kept at or below a quarter of the "
                   f"smaller side, {image_limit:.0f} px")

    common = [("half the largest recoverable scale", RECOVERABLE_FRACTION * recoverable,
               True)] if recoverable is not None else []
    common.append(("a quarter of the image", image_limit, False))
    soft, hard = list(common), list(common)
    if structure is not None:
        soft.insert(0, ("2/3 of the largest structure", STRUCTURE_FRACTION * structure,
                        False))
        hard.insert(0, ("the largest structure", structure, False))

    scales = [0]
    if max_count >= 2:
        scales.append(first)
        broken = _violation(first, soft)
        if broken:
            reasons.append(f"beam scale {first} px kept although above {broken[0]} "
                           f"({broken[1]:.1f} px): the delta and beam scales are always given")
    while len(scales) >= 2:
        nxt = int(round(scales[-1] * SCALE_RATIO))
        broken = _violation(nxt, soft)
        if len(scales) >= max_count or (broken and len(scales) >= min_count):
            if broken:
                reasons.append(f"scale {nxt} px dropped: above {broken[0]} "
                               f"({broken[1]:.1f} px)")
            else:
                reasons.append(f"stopped at max_count = {max_count} scales: the next "
                               f"scale, {nxt} px, is within the limits but left out")
            break
        if structure is None and len(scales) >= min_count:
            break
        if broken is None:
            scales.append(nxt)
            continue
        hard_broken = _violation(nxt, hard)
        if hard_broken is None:
            scales.append(nxt)
            reasons.append(f"scale {nxt} px added to reach min_count = {min_count}: above "
                           f"{broken[0]} ({broken[1]:.1f} px) but within {hard[0][0]} "
                           f"({hard[0][1]:.1f} px)")
            continue
        compact = "compact emission: " if hard_broken[0] == "the largest structure" else ""
        reasons.append(f"{compact}only {len(scales)} scales, fewer than min_count = "
                       f"{min_count}; no scale {nxt} px, which would be above "
                       f"{hard_broken[0]} ({hard_broken[1]:.1f} px)"
                       + ("; the delta and beam scales model it" if compact else ""))
        break

    pixels = tuple(scales)
    arcsec = None if cell is None else tuple(round(p * cell, 6) for p in pixels)
    logger.info("suggested scales %s px", pixels)
    for line in reasons:
        logger.debug("scale advice: %s", line)
    return ScaleSuggestion(pixels, arcsec, reasons, beam_px, structure, recoverable,
                           image_limit, used, extent)


# -------------------------------------------------------------------------- checking

def _scale_values(scales_px, cell):
    if isinstance(scales_px, u.Quantity) and scales_px.unit.physical_type == "angle":
        if cell is None:
            raise ValueError(f"scales_px is {scales_px!r}, an angle, but cell_arcsec is "
                             "None; pass cell_arcsec or the scales in pixels")
        scales_px = scales_px.to_value(u.arcsec) / cell
    try:
        values = np.atleast_1d(np.asarray(scales_px, dtype=np.float64))
    except (TypeError, ValueError):
        raise ValueError(f"scales_px is {scales_px!r}; pass a list of diameters in "
                         "pixels, e.g. [0, 4, 8, 16]") from None
    if values.ndim != 1 or values.size == 0 or not np.all(np.isfinite(values)) \
            or np.any(values < 0):
        raise ValueError(f"scales_px is {scales_px!r}; pass a non-empty list of finite "
                         "diameters in pixels >= 0, e.g. [0, 4, 8, 16]")
    return values


def _px(value):
    return f"{value:g}"


def check_scales(scales_px, dirty=None, psf=None, *, suggestion=None, cell_arcsec=None,
                 shortest_baseline=None, largest_size=None, beam=None, sigma=5.0,
                 max_affordable_scales=None):
    """Check a user's scale set against the advisor's rules; warn for each one broken.

    Parameters
    ----------
    scales_px : sequence of float or Quantity ['angle']
        Scale diameters in pixels (angles need ``cell_arcsec``).
    dirty : (ny, nx) ndarray, optional
        Dirty image: gives the image size and, unless ``largest_size`` is given, the
        largest structure (measured as in `suggest_scales`; needs ``psf`` or ``beam``).
    psf : (ny, nx) ndarray, optional
        The PSF, to fit the beam.
    suggestion : ScaleSuggestion, optional
        A previous suggestion for the same field: its beam, structure, recoverable and
        image limits are used where the other arguments do not give them.
    cell_arcsec : Quantity ['angle'] or float, optional
        Pixel size (float: arcsec).
    shortest_baseline : float, optional
        Shortest projected baseline in wavelengths.
    largest_size : Quantity ['angle'] or float, optional
        The largest angular size of the emission (float: arcsec).
    beam : Beam or float, optional
        The beam (or its FWHM in pixels) instead of fitting ``psf``.
    sigma : float
        Island threshold for the measured extent, in units of the noise.  Default 5.
    max_affordable_scales : int, optional
        The most scales the planned run can afford (from the cost planner); default
        no such check.

    Returns
    -------
    problems : list of str
        One sentence per rule broken; empty for a good set.

    Raises
    ------
    ValueError
        For negative, non-finite or empty scales, bad angles, counts or images, or a
        ``dirty`` without any way to get the beam.

    Warns
    -----
    ScaleChoiceWarning
        Once for each problem returned.

    Notes
    -----
    The rules (common practice): include the delta scale 0; no scale above the largest
    structure; every scale below half the largest recoverable scale; every scale at
    most a quarter of the image's smaller side; successive scales at least a factor
    1.5 apart (`MIN_SCALE_RATIO`), each given once; no nonzero scale below half the
    beam FWHM (`DELTA_FRACTION`), which would act as a delta.  Rules whose limit is
    unknown are skipped and logged.

    Examples
    --------
    >>> import warnings
    >>> with warnings.catch_warnings():
    ...     warnings.simplefilter("ignore")
    ...     problems = check_scales([4, 8, 16], beam=4.0)
    >>> len(problems), problems[0].split(":")[0]
    (1, 'no delta scale (0 px) in [4, 8, 16]')
    """
    if suggestion is not None and not isinstance(suggestion, ScaleSuggestion):
        raise ValueError(f"suggestion is {suggestion!r}; pass the ScaleSuggestion "
                         "returned by suggest_scales, or None")
    cell = None if cell_arcsec is None else _arcsec(cell_arcsec, "cell_arcsec", "2.0")
    values = _scale_values(scales_px, cell)
    if max_affordable_scales is not None:
        max_affordable_scales = _count(max_affordable_scales, "max_affordable_scales")

    beam_obj = beam_px = structure = recoverable = image_limit = None
    if suggestion is not None:
        beam_obj, beam_px = suggestion.beam, suggestion.beam_px
        structure, recoverable = suggestion.largest_structure_px, suggestion.recoverable_px
        image_limit = suggestion.image_limit_px
    if beam is not None:
        beam_px = _beam_axes(beam)[0]
        beam_obj = beam
    elif psf is not None:
        beam_obj = fit_beam(psf)
        beam_px = _beam_axes(beam_obj)[0]
    if largest_size is not None:
        if cell is None:
            raise ValueError(f"largest_size is {largest_size!r} but cell_arcsec is None; "
                             "pass cell_arcsec to turn the size into pixels")
        structure = _arcsec(largest_size, "largest_size", "120.0") / cell
    if dirty is not None:
        image = as_image(dirty, "dirty", dtype=np.float64)
        image_limit = IMAGE_FRACTION * min(image.shape)
        if largest_size is None:
            if beam_obj is None:
                raise ValueError("dirty was given but neither psf, beam nor suggestion; "
                                 "pass the PSF or the beam to measure the emission")
            extent = measure_emission_extent(image, beam_obj, sigma=sigma)
            structure = extent.intrinsic_px if extent.n_islands else None
    if shortest_baseline is not None:
        if cell is None:
            raise ValueError(f"shortest_baseline is {shortest_baseline!r} but cell_arcsec "
                             "is None; pass cell_arcsec to turn the recoverable scale into "
                             "pixels")
        recoverable = _recoverable_px(_baseline(shortest_baseline), cell)

    problems = []
    listed = "[" + ", ".join(_px(v) for v in values) + "]"
    if not np.any(values == 0):
        problems.append(f"no delta scale (0 px) in {listed}: unresolved sources will be "
                        "modelled by extended components; add 0")
    unique, counts = np.unique(values, return_counts=True)
    for v, k in zip(unique, counts):
        if k > 1:
            problems.append(f"scale {_px(v)} px is given {k} times; give each scale once")
    finite = unique[unique > 0]
    for a, b in zip(finite[:-1], finite[1:]):
        if b / a < MIN_SCALE_RATIO:
            problems.append(f"scales {_px(a)} and {_px(b)} px are closer than a factor "
                            f"{MIN_SCALE_RATIO:g} (ratio {b / a:.2f}): they model nearly the "
                            "same structure and cost time; drop one or space them by about 2")
    skipped = []
    if beam_px is None:
        skipped.append("delta in disguise (no beam)")
    else:
        for v in finite[finite < DELTA_FRACTION * beam_px]:
            problems.append(f"scale {_px(v)} px is below half the beam FWHM "
                            f"({DELTA_FRACTION * beam_px:.1f} px of {beam_px:.1f} px): it "
                            "acts as a delta scale; drop it or use 0")
    if structure is None:
        skipped.append("largest structure (unknown)")
    else:
        for v in finite[finite > structure]:
            problems.append(f"scale {_px(v)} px is above the largest structure "
                            f"({structure:.1f} px): it can pull sidelobes and noise into "
                            "the model; drop it")
    if recoverable is None:
        skipped.append("recoverable scale (no shortest_baseline)")
    else:
        for v in finite[finite >= RECOVERABLE_FRACTION * recoverable]:
            where = "above" if v >= recoverable else "near"
            problems.append(f"scale {_px(v)} px is {where} the largest recoverable scale "
                            f"({recoverable:.0f} px, 0.6/B_min); keep scales below half of "
                            f"it, {RECOVERABLE_FRACTION * recoverable:.0f} px")
    if image_limit is None:
        skipped.append("image size (no dirty)")
    else:
        for v in finite[finite > image_limit]:
            problems.append(f"scale {_px(v)} px is above a quarter of the image's smaller "
                            f"side ({image_limit:.0f} px): drop it or image a larger field")
    if max_affordable_scales is not None and values.size > max_affordable_scales:
        problems.append(f"{values.size} scales, but the planned run can afford "
                        f"{max_affordable_scales}: drop {values.size - max_affordable_scales}"
                        " (the largest or the most closely spaced)")
    if skipped:
        logger.info("scale rules not checked: %s", "; ".join(skipped))
    for message in problems:
        warnings.warn(message, ScaleChoiceWarning, stacklevel=2)
    return problems
