"""Suggest a set of scales from the beam, the cell size and the emission, and check one.

The advice follows the trade's rules of thumb (common practice): always the delta
scale (0 pixels); the first finite scale about the beam; the largest at most 2/3 of
the largest structure, below half the largest scale the array recovers and at most a
quarter of the image; roughly doubling in between; three or four scales to start.
The rules live in `skyscale.advisor.rules` (the same ones judge a user's set in
`check_scales`), the extent of the emission is measured by
`skyscale.advisor.extent.measure_emission_extent`.  Every decision is given a reason in plain
words, with its numbers.

This module also keeps the names it always had: everything below is importable from
``skyscale.advisor``.

References
----------
.. [1] Cornwell, T. J. 2008, "Multiscale CLEAN deconvolution of radio synthesis
   images", IEEE J. Sel. Topics Signal Process. 2(5), 793.
"""

import logging
import math
import warnings
from dataclasses import dataclass, field

import numpy as np

from skyscale.core.validate import InputError, as_image
from skyscale.core.beam import Beam, fit_beam
from skyscale.masks.detect import DIAMETER_MEASURES
from skyscale.masks.sky_view import sky_view
from skyscale.advisor.extent import EmissionExtent, measure_emission_extent
from skyscale.advisor.rules import (DEFAULT_MAX_COUNT, DELTA_FRACTION, IMAGE_FRACTION,
                                    MIN_SCALE_RATIO, RECOVERABLE_FACTOR, RECOVERABLE_FRACTION,
                                    SCALE_RATIO, STRUCTURE_FRACTION, ScaleChoiceWarning,
                                    ScaleLimits, arcsec_value, baseline_wavelengths,
                                    count_value, recoverable_pixels, check_scales,
                                    scale_limits)

__all__ = ["DIAMETER_MEASURES", "STRUCTURE_FRACTION", "RECOVERABLE_FRACTION",
           "IMAGE_FRACTION", "SCALE_RATIO", "MIN_SCALE_RATIO", "DELTA_FRACTION",
           "RECOVERABLE_FACTOR", "DEFAULT_MAX_COUNT", "ScaleChoiceWarning", "ScaleLimits",
           "EmissionExtent", "ScaleSuggestion", "measure_emission_extent", "suggest_scales",
           "check_scales", "resolve_scales"]

logger = logging.getLogger(__name__)


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
    limits : ScaleLimits
        What the rules judged the set by; `check_scales` uses them too.
    fuller : tuple of int or None
        The roughly doubling set the limits allow when it has more scales than
        ``max_count``; None otherwise.
    costs : dict
        Predicted seconds and bytes of a run with ``pixels`` and with ``fuller``
        (from `skyscale.plan_run`), when ``fuller`` is given.
    view : dict or None
        How the measured image was made (`skyscale.masks.sky_view.SkyView.as_dict`):
        the bright emission cleaned out and restored; None when the image was measured
        as given.
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
    limits: ScaleLimits = None
    fuller: tuple = None
    costs: dict = field(default_factory=dict)
    view: dict = None

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
                "extent": None if self.extent is None else self.extent.as_dict(),
                "fuller": None if self.fuller is None else list(self.fuller),
                "costs": dict(self.costs),
                "view": None if self.view is None else dict(self.view)}


def _resolve_beam(psf, beam):
    if beam is not None:
        if not isinstance(beam, Beam):
            raise ValueError(f"beam is {beam!r}; pass a skyscale.core.beam.Beam (FWHM in "
                             "pixels), e.g. Beam(4.0, 3.5, 20.0), or None to fit the PSF")
        return beam
    if psf is None:
        raise ValueError("psf is None and no beam was given; pass the PSF, or "
                         "beam=Beam(major, minor, pa) in pixels")
    return fit_beam(psf)


def _spaced(first, largest, steps):
    """Whole-pixel scales from ``first`` to ``largest`` evenly spaced in log, with
    ``steps`` gaps, or fewer where rounding would bring two within `MIN_SCALE_RATIO`."""
    for n in range(max(1, steps), 0, -1):
        ratio = (largest / first) ** (1.0 / n)
        out = [int(round(first * ratio ** i)) for i in range(n)] + [int(largest)]
        if all(b / a >= MIN_SCALE_RATIO * (1 - 1e-9) for a, b in zip(out[:-1], out[1:])):
            return out
    return [first]


def _costs(dirty, psf, chosen, fuller):
    """Predicted time and memory of the two sets, or the reason they are unknown: the
    figures ``skyscale plan`` gives for the same image, PSF and scales (the dynamic
    range measured on the dirty image, the run's default budgets)."""
    from skyscale.cost.planner import bytes_text, plan_run, seconds_text
    shape = dirty.shape
    try:
        small = plan_run(shape, psf if psf is not None else (2 * shape[0], 2 * shape[1]),
                         chosen, dirty=dirty)
        big = plan_run(shape, small.psf_shape, fuller, dirty=dirty)
    except (ValueError, TypeError) as exc:
        return {}, f"their cost was not predicted ({exc})"
    costs = {"seconds": small.total_seconds, "bytes": small.memory_bytes,
             "fuller_seconds": big.total_seconds, "fuller_bytes": big.memory_bytes}
    text = (f"the planner (skyscale.plan_run, as skyscale plan; {small.max_components} "
            f"components at most) predicts {seconds_text(big.total_seconds)} and "
            f"{bytes_text(big.memory_bytes)} for the {len(fuller)} scales against "
            f"{seconds_text(small.total_seconds)} and {bytes_text(small.memory_bytes)} for "
            f"these {len(chosen)}")
    return costs, text


def suggest_scales(dirty, psf=None, *, cell_arcsec=None, largest_size=None,
                   shortest_baseline=None, max_count=DEFAULT_MAX_COUNT, min_count=None,
                   beam=None, sigma=5.0, clean_first=True):
    """Suggest scale diameters for a field, with a reason for each decision.

    Parameters
    ----------
    dirty : (ny, nx) ndarray
        Dirty image, Jy/beam.
    psf : (py, px) ndarray, optional
        The PSF, peak at ``(py // 2, px // 2)``; the beam is fitted to it, and the
        bright emission is cleaned out with it before measuring (``clean_first``; the
        profiles are then fitted through the beam), or, without that, the emission's
        profiles are fitted through it, sidelobes and all.  Not needed when ``beam``
        is given (the image is then measured as given, through that beam).
    cell_arcsec : Quantity ['angle'] or float, optional
        Pixel size (float: arcsec).  Needed by ``largest_size`` and
        ``shortest_baseline``, and for ``arcsec`` in the result.
    largest_size : Quantity ['angle'] or float, optional
        The largest angular size of the emission, if known (float: arcsec).  Default:
        measured (`measure_emission_extent`).
    shortest_baseline : float, optional
        Shortest projected baseline in wavelengths; the largest recoverable scale is
        about ``0.6 / shortest_baseline`` radians.  Default: no such limit.
    max_count : int
        At most this many scales, the delta scale included.  Default 4 (three or
        four to start, common practice); when the emission spans more doublings the
        reasons say so, with the predicted cost of the fuller set.
    min_count : int, optional
        Scales given when the extent of the emission is unknown (none found and no
        ``largest_size``).  Default 3, or ``max_count`` when that is smaller.
    beam : Beam, optional
        A beam to use instead of fitting the PSF.
    sigma : float
        Detection level for the measured extent, in units of each smoothed image's
        noise.  Default 5.
    clean_first : bool
        With a ``psf``, measure the emission on the image with its bright emission
        taken out by a short clean and restored through the beam
        (`skyscale.masks.sky_view.sky_view`): the PSF's sidelobes of bright compact
        sources otherwise dominate the noise and hide the structures.  Default True;
        without a ``psf`` the image is measured as given.

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
    The rules (`skyscale.advisor.rules`, common practice): 0 always; then the beam
    FWHM rounded to whole pixels; the largest scale is the largest whole number of
    pixels that every limit allows: 2/3 of the largest structure, below half the
    largest recoverable scale, at most a quarter of the image.  In between, scales
    evenly spaced in log by about a factor 2 (at least 1.5).  When that takes more
    than ``max_count`` scales, ``max_count`` are spaced evenly between the same ends
    and the reasons give the fuller set and what it costs.  When 2/3 of the
    structure is under 1.5 beam scales, the emission is compact and 0 and the beam
    scale are given.  With no emission found and no ``largest_size``, the extent is
    unknown and ``min_count`` scales doubling from the beam are given.

    References
    ----------
    .. [1] Cornwell 2008, IEEE J. Sel. Topics Signal Process. 2(5), 793.

    Examples
    --------
    A disk of diameter 60 px seen through a Gaussian beam of FWHM 4 px:

    >>> import numpy as np
    >>> from scipy import ndimage
    >>> from skyscale.core.beam import Beam
    >>> rng = np.random.default_rng(0)
    >>> y, x = np.mgrid[:256, :256]
    >>> disk = ndimage.gaussian_filter(50.0 * ((y - 128)**2 + (x - 128)**2 < 30**2),
    ...                                4.0 / 2.3548)
    >>> s = suggest_scales(rng.normal(0, 1, (256, 256)) + disk, beam=Beam(4.0, 4.0),
    ...                    cell_arcsec=2.0)
    >>> s.pixels, s.arcsec
    ((0, 4, 12, 39), (0.0, 8.0, 24.0, 78.0))
    >>> suggest_scales(rng.normal(0, 1, (256, 256)) + disk, beam=Beam(4.0, 4.0),
    ...                max_count=6).pixels
    (0, 4, 9, 18, 39)
    """
    image = as_image(dirty, "dirty", dtype=np.float64)
    max_count = count_value(max_count, "max_count")
    min_count = min(3, max_count) if min_count is None else count_value(min_count, "min_count")
    if min_count > max_count:
        raise ValueError(f"min_count is {min_count} but max_count is {max_count}; "
                         "min_count must not exceed max_count")
    if max_count == 1:
        warnings.warn("max_count is 1, so only the delta scale (0 px) is given: that is "
                      "delta-only CLEAN; allow 2 or more for multi-scale",
                      ScaleChoiceWarning, stacklevel=2)
    cell = None if cell_arcsec is None else arcsec_value(cell_arcsec, "cell_arcsec", "2.0")
    size_arcsec = baseline = None
    if largest_size is not None:
        size_arcsec = arcsec_value(largest_size, "largest_size", "120.0")
        if cell is None:
            raise ValueError(f"largest_size is {largest_size!r} but cell_arcsec is None; "
                             "pass cell_arcsec to turn the size into pixels")
    if shortest_baseline is not None:
        baseline = baseline_wavelengths(shortest_baseline)
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
    if baseline is not None and recoverable_pixels(baseline, cell) < 2.0 * beam_px:
        warnings.warn(f"shortest_baseline is {baseline:g} wavelengths, so the largest "
                      f"recoverable scale ({recoverable_pixels(baseline, cell):.3g} px) is "
                      f"under twice the beam ({beam_px:.3g} px); check the value and "
                      "that it is in wavelengths (a length divided by the wavelength)",
                      ScaleChoiceWarning, stacklevel=2)

    def angle(px):
        return "" if cell is None else f" ({px * cell:.3g} arcsec)"

    reasons = []
    first = max(1, int(round(beam_px)))
    reasons.append(f"beam FWHM {beam_px:.1f} px{angle(beam_px)}, geometric mean of "
                   f"{used.major:.1f} x {used.minor:.1f} px: first finite scale {first} px")

    extent = structure = view = None
    note = ""
    if size_arcsec is not None:
        structure = size_arcsec / cell
        note = f"given as {size_arcsec:g} arcsec"
        reasons.append(f"largest size given as {size_arcsec:.3g} arcsec = {structure:.1f} "
                       "px: largest scale at most 2/3 of it, "
                       f"{STRUCTURE_FRACTION * structure:.1f} px")
    else:
        if clean_first and psf is not None:
            seen = sky_view(image, psf, beam=used)
            view, measured, through = seen.as_dict(), seen.image, None
            reasons.append(f"the emission is {seen.describe()}")
        else:
            view, measured, through = None, image, psf
            reasons.append("the emission is measured on the image as given"
                           + ("" if psf is not None else " (no PSF to clean it with)"))
        extent = measure_emission_extent(measured, used, sigma=sigma, psf=through)
        ladder = extent.noise_by_smoothing
        if extent.n_islands == 0:
            noise = (f"(measured off the emission) at smoothings from 0 to "
                     f"{ladder[-1][0]:.0f} px (noise {ladder[0][1]:.3g} unsmoothed, "
                     f"{ladder[-1][1]:.3g} at {ladder[-1][0]:.0f} px)")
            if extent.n_detected:
                reasons.append(f"no extended emission found: {extent.n_detected} island(s) "
                               f"above {sigma:g} times the noise {noise}, none both "
                               "resolved and twice that bright, so none measurable: the "
                               "extent is unknown")
            else:
                reasons.append(f"no extended emission found: nothing above {sigma:g} times "
                               f"the noise {noise}: the extent is unknown")
        else:
            structure = extent.intrinsic_px
            note = extent.note()
            compact = "" if extent.compact <= 0 or extent.peak <= 0 else \
                (f", a compact source on it set apart, its peak "
                 f"{extent.compact / extent.peak:.2g} x the structure's there")
            reasons.append(
                f"largest extended structure {structure:.1f} px across{angle(structure)}, "
                f"{note} (the image's noise measured off the emission at each smoothing, "
                f"{sigma:g} sigma islands; {extent.largest_px:.1f} px as seen at half its "
                f"peak, its profile fitted by a {extent.shape} seen through the "
                f"{'PSF' if through is not None else 'beam'} and the smoothing"
                f"{compact}): largest scale at most 2/3 of it, "
                f"{STRUCTURE_FRACTION * structure:.1f} px")
    limits = scale_limits(image.shape, beam_px, structure_px=structure, structure_note=note,
                          cell=cell, baseline=baseline)
    if baseline is not None:
        rec = limits.recoverable_px
        reasons.append(f"largest recoverable scale {rec:.0f} px{angle(rec)}, 0.6/B_min for "
                       f"B_min = {baseline:g} wavelengths: scales kept below half of it, "
                       f"{RECOVERABLE_FRACTION * rec:.1f} px")
    ny, nx = image.shape
    reasons.append(f"image {ny} x {nx} px: scales kept at or below a quarter of the "
                   f"smaller side, {limits.image_limit_px:.0f} px")

    top, binding = limits.largest_allowed()
    bound = {name: b for name, b, _ in limits.upper()}[binding]
    fuller, costs = None, {}
    if max_count == 1:
        scales = [0]
    elif structure is None:
        scales = [0] + [first * 2 ** i for i in range(min_count - 1)
                        if first * 2 ** i <= top or i == 0]
        reasons.append(f"{len(scales)} scales, doubling from the beam scale (min_count = "
                       f"{min_count}, within {binding}); pass largest_size if you know the "
                       "size of the emission")
    elif max_count == 2 or top < MIN_SCALE_RATIO * first:
        scales = [0, first]
        if max_count == 2 and top >= MIN_SCALE_RATIO * first:
            reasons.append("max_count = 2: the delta and beam scales")
        elif binding.startswith("2/3"):
            reasons.append(f"compact emission: {binding} is {bound:.1f} px, under "
                           f"{MIN_SCALE_RATIO:g} times the beam scale: the delta and beam "
                           "scales model it")
        else:
            reasons.append(f"{binding} is {bound:.1f} px, under {MIN_SCALE_RATIO:g} times "
                           f"the beam scale: only the delta and beam scales (the beam scale "
                           "is always given)")
    else:
        steps = max(1, int(math.floor(math.log2(top / first) + 0.5)))
        ladder = _spaced(first, top, steps)
        if len(ladder) + 1 > max_count:
            fuller = tuple([0] + ladder)
            ladder = _spaced(first, top, max_count - 2)
        scales = [0] + ladder
        ratio = (top / first) ** (1.0 / max(1, len(ladder) - 1))
        reasons.append(f"largest scale {top} px{angle(top)}: {binding} ({bound:.1f} px); "
                       f"from {first} to {top} px the scales are spaced by a factor "
                       f"{ratio:.2f}")
        if fuller is not None:
            costs, cost_text = _costs(image, psf, scales, fuller)
            reasons.append(
                f"more scales would help: roughly doubling from {first} to {top} px takes "
                f"{len(fuller)} scales ({', '.join(map(str, fuller))} px), which follow the "
                f"emission's sizes more closely; {cost_text}; pass max_count = "
                f"{len(fuller)} to get them")

    pixels = tuple(int(p) for p in scales)
    arcsec = None if cell is None else tuple(round(p * cell, 6) for p in pixels)
    logger.info("suggested scales %s px", pixels)
    for line in reasons:
        logger.debug("scale advice: %s", line)
    return ScaleSuggestion(pixels, arcsec, reasons, beam_px, structure,
                           limits.recoverable_px, limits.image_limit_px, used, extent,
                           limits, fuller, costs, view)


def resolve_scales(scales, dirty, psf, cell_arcsec=None, **options):
    """Scales as given, or suggested for ``scales='auto'``: ``(scales, reasons)``.

    Parameters
    ----------
    scales : 'auto' or sequence of float or Quantity ['angle']
        ``'auto'`` (any case) asks `suggest_scales`; anything else is returned as is.
    dirty : (ny, nx) ndarray
    psf : (py, px) ndarray
    cell_arcsec : Quantity ['angle'] or float, optional
    **options
        Keyword options of `suggest_scales` (``largest_size``, ``shortest_baseline``,
        ``max_count``, ...).

    Returns
    -------
    scales : tuple of float or the input
        Pixels for ``'auto'``.
    reasons : list of str
        The advisor's reasons; empty when the scales were given.

    Raises
    ------
    ValueError
        For a string other than ``'auto'``.

    Examples
    --------
    >>> import numpy as np
    >>> resolve_scales([0, 4, 8], np.zeros((8, 8)), None)
    ([0, 4, 8], [])
    """
    if not isinstance(scales, str):
        return scales, []
    if scales.strip().lower() != "auto":
        raise InputError(f"scales is {scales!r}; pass diameters in pixels, e.g. "
                         "[0, 4, 8, 16], or 'auto' to ask the scale advisor")
    s = suggest_scales(dirty, psf, cell_arcsec=cell_arcsec, **options)
    return tuple(float(p) for p in s.pixels), list(s.reasons)
