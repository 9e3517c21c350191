"""The rules of thumb for a scale set: one rule set for suggesting and for checking.

The rules (common practice): always the delta scale (0 pixels); no scale above 2/3 of
the largest structure in the image (`STRUCTURE_FRACTION`); every scale below half the
largest scale the array recovers (`RECOVERABLE_FRACTION`), about 0.6 / B_min radians
for the shortest projected baseline B_min in wavelengths (common practice, from
memory); every scale at most a quarter of the image's smaller side
(`IMAGE_FRACTION`); successive scales at least a factor 1.5 apart
(`MIN_SCALE_RATIO`), each given once; no nonzero scale below half the beam FWHM
(`DELTA_FRACTION`), which would act as a delta.  `skyscale.advisor.suggest_scales`
builds its set inside these limits and `check_scales` reports each rule a set breaks,
with the same words and numbers.

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

from skyscale.core.validate import as_image
from skyscale.core.beam import Beam, fit_beam

__all__ = ["STRUCTURE_FRACTION", "RECOVERABLE_FRACTION", "IMAGE_FRACTION", "SCALE_RATIO",
           "MIN_SCALE_RATIO", "DELTA_FRACTION", "RECOVERABLE_FACTOR", "DEFAULT_MAX_COUNT",
           "ScaleChoiceWarning", "ScaleLimits", "scale_limits", "rule_problems",
           "check_scales", "arcsec_value", "baseline_wavelengths", "count_value", "beam_axes",
           "recoverable_pixels"]

logger = logging.getLogger(__name__)

#: The largest scale is at most this fraction of the largest structure.
STRUCTURE_FRACTION = 2.0 / 3.0

#: Scales stay below this fraction of the largest recoverable scale.
RECOVERABLE_FRACTION = 0.5

#: Scales stay at or below this fraction of the image's smaller side.
IMAGE_FRACTION = 0.25

#: Successive suggested scales grow by about this factor (roughly doubling, common
#: practice).
SCALE_RATIO = 2.0

#: Two scales closer than this factor are nearly degenerate.
MIN_SCALE_RATIO = 1.5

#: A nonzero scale below this fraction of the beam FWHM behaves like a delta.
DELTA_FRACTION = 0.5

#: Largest recoverable angle = RECOVERABLE_FACTOR / B_min radians, B_min in wavelengths
#: (common practice, from memory).
RECOVERABLE_FACTOR = 0.6

#: Scales suggested at most, the delta scale included: three or four to start (common
#: practice).
DEFAULT_MAX_COUNT = 4

class ScaleChoiceWarning(UserWarning):
    """A scale set that breaks one of the rules of thumb (allowed, but questionable)."""


# ----------------------------------------------------------------------------- inputs

def arcsec_value(value, name, example):
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


def baseline_wavelengths(value):
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


def count_value(value, name):
    """A whole number >= 1 (a scale count), refused otherwise with ``name`` in the error."""
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) or value < 1:
        raise ValueError(f"{name} is {value!r}; pass a whole number >= 1")
    return int(value)


def beam_axes(beam, name="beam"):
    """``(geometric-mean FWHM, major FWHM)`` in pixels from a Beam or a positive float."""
    if isinstance(beam, Beam):
        return math.sqrt(beam.major * beam.minor), beam.major
    if isinstance(beam, numbers.Real) and not isinstance(beam, bool):
        value = float(beam)
        if math.isfinite(value) and value > 0:
            return value, value
    raise ValueError(f"{name} is {beam!r}; pass a skyscale.core.beam.Beam (FWHM in pixels) "
                     "or a positive FWHM in pixels")


def recoverable_pixels(baseline, cell):
    """Largest recoverable scale in pixels, 0.6 / B_min radians (common practice)."""
    theta = (RECOVERABLE_FACTOR / baseline * u.rad).to_value(u.arcsec)
    return theta / cell



# ---------------------------------------------------------------------------- limits

@dataclass(frozen=True)
class ScaleLimits:
    """What the rules compare a scale set against; None where it is unknown.

    Attributes
    ----------
    beam_px : float or None
        Beam FWHM in pixels (geometric mean of the axes).
    structure_px : float or None
        The largest structure in pixels.
    structure_note : str
        Where ``structure_px`` comes from, for the messages (e.g. "measured at
        smoothing 16 px").
    recoverable_px : float or None
        Largest recoverable scale in pixels.
    image_limit_px : float or None
        A quarter of the image's smaller side.
    """

    beam_px: float = None
    structure_px: float = None
    structure_note: str = ""
    recoverable_px: float = None
    image_limit_px: float = None

    def upper(self):
        """The limits on the largest scale, ``(name, bound, strict)``, tightest first;
        a strict bound must be undercut, the others may be met."""
        limits = []
        if self.structure_px is not None:
            limits.append(("2/3 of the largest structure",
                           STRUCTURE_FRACTION * self.structure_px, False))
        if self.recoverable_px is not None:
            limits.append(("half the largest recoverable scale",
                           RECOVERABLE_FRACTION * self.recoverable_px, True))
        if self.image_limit_px is not None:
            limits.append(("a quarter of the image", self.image_limit_px, False))
        return sorted(limits, key=lambda lim: lim[1])

    def largest_allowed(self):
        """``(pixels, name)``: the largest whole number of pixels every upper limit
        allows, and the limit that sets it; ``(None, None)`` without limits."""
        limits = self.upper()
        if not limits:
            return None, None
        best = None
        for name, bound, strict in limits:
            px = math.ceil(bound) - 1 if strict else math.floor(bound + 1e-9)
            if best is None or px < best[0]:
                best = (px, name)
        return best


def scale_limits(image_shape=None, beam=None, *, structure_px=None, structure_note="",
                 cell=None, baseline=None):
    """`ScaleLimits` from what is known (beam: a `Beam` or a FWHM in pixels; cell in
    arcsec; baseline in wavelengths)."""
    beam_px = None if beam is None else beam_axes(beam)[0]
    recoverable = None if baseline is None else recoverable_pixels(baseline, cell)
    image_limit = None if image_shape is None else IMAGE_FRACTION * min(image_shape)
    return ScaleLimits(beam_px, structure_px, structure_note, recoverable, image_limit)


def _px(value):
    return f"{value:g}"


def rule_problems(values, limits, *, max_affordable_scales=None):
    """One sentence per rule of thumb that the scale set ``values`` (pixels) breaks.

    Rules whose limit is unknown (None in ``limits``) are skipped and logged.
    """
    values = np.asarray(values, dtype=np.float64)
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
    if limits.beam_px is None:
        skipped.append("delta in disguise (no beam)")
    else:
        for v in finite[finite < DELTA_FRACTION * limits.beam_px]:
            problems.append(f"scale {_px(v)} px is below half the beam FWHM "
                            f"({DELTA_FRACTION * limits.beam_px:.1f} px of "
                            f"{limits.beam_px:.1f} px): it acts as a delta scale; drop it "
                            "or use 0")
    if limits.structure_px is None:
        skipped.append("largest structure (unknown)")
    else:
        bound = STRUCTURE_FRACTION * limits.structure_px
        note = f", {limits.structure_note}" if limits.structure_note else ""
        for v in finite[finite > bound + 1e-9]:
            problems.append(f"scale {_px(v)} px is above 2/3 of the largest structure "
                            f"({bound:.1f} px of {limits.structure_px:.1f} px{note}): it can "
                            "pull sidelobes and noise into the model; drop it")
    if limits.recoverable_px is None:
        skipped.append("recoverable scale (no shortest_baseline)")
    else:
        rec = limits.recoverable_px
        for v in finite[finite >= RECOVERABLE_FRACTION * rec]:
            where = "above" if v >= rec else "near"
            problems.append(f"scale {_px(v)} px is {where} the largest recoverable scale "
                            f"({rec:.0f} px, 0.6/B_min); keep scales below half of it, "
                            f"{RECOVERABLE_FRACTION * rec:.0f} px")
    if limits.image_limit_px is None:
        skipped.append("image size (no dirty)")
    else:
        for v in finite[finite > limits.image_limit_px]:
            problems.append(f"scale {_px(v)} px is above a quarter of the image's smaller "
                            f"side ({limits.image_limit_px:.0f} px): drop it or image a "
                            "larger field")
    if max_affordable_scales is not None and values.size > max_affordable_scales:
        problems.append(f"{values.size} scales, but the planned run can afford "
                        f"{max_affordable_scales}: drop {values.size - max_affordable_scales}"
                        " (the largest or the most closely spaced)")
    if skipped:
        logger.info("scale rules not checked: %s", "; ".join(skipped))
    return problems


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


def check_scales(scales_px, dirty=None, psf=None, *, suggestion=None, cell_arcsec=None,
                 shortest_baseline=None, largest_size=None, beam=None, sigma=5.0,
                 max_affordable_scales=None):
    """Check a user's scale set against the advisor's rules; warn for each one broken.

    Parameters
    ----------
    scales_px : sequence of float or Quantity ['angle']
        Scale diameters in pixels (angles need ``cell_arcsec``).
    dirty : (ny, nx) ndarray, optional
        Dirty image: gives the image size and, unless ``largest_size`` or
        ``suggestion`` gives it, the largest structure (measured as in
        `skyscale.advisor.suggest_scales`; needs ``psf`` or ``beam``).
    psf : (ny, nx) ndarray, optional
        The PSF, to fit the beam and to fit the emission's profiles through.
    suggestion : ScaleSuggestion, optional
        A suggestion for the same field: its limits (beam, structure, recoverable
        scale, image) are used where the other arguments do not give them, so the
        check judges exactly as the suggestion did.
    cell_arcsec : Quantity ['angle'] or float, optional
        Pixel size (float: arcsec).
    shortest_baseline : float, optional
        Shortest projected baseline in wavelengths.
    largest_size : Quantity ['angle'] or float, optional
        The largest angular size of the emission (float: arcsec).
    beam : Beam or float, optional
        The beam (or its FWHM in pixels) instead of fitting ``psf``.
    sigma : float
        Detection level for the measured extent, in units of each smoothed image's
        noise.  Default 5.
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
    The rules are those of the module docstring, the same that
    `skyscale.advisor.suggest_scales` builds its set by: a suggested set passes.

    Examples
    --------
    >>> import warnings
    >>> with warnings.catch_warnings():
    ...     warnings.simplefilter("ignore")
    ...     problems = check_scales([4, 8, 16], beam=4.0)
    >>> len(problems), problems[0].split(":")[0]
    (1, 'no delta scale (0 px) in [4, 8, 16]')
    """
    from skyscale.advisor.suggest import ScaleSuggestion
    from skyscale.advisor.extent import measure_emission_extent
    if suggestion is not None and not isinstance(suggestion, ScaleSuggestion):
        raise ValueError(f"suggestion is {suggestion!r}; pass the ScaleSuggestion "
                         "returned by suggest_scales, or None")
    cell = None if cell_arcsec is None else arcsec_value(cell_arcsec, "cell_arcsec", "2.0")
    values = _scale_values(scales_px, cell)
    if max_affordable_scales is not None:
        max_affordable_scales = count_value(max_affordable_scales, "max_affordable_scales")

    known = suggestion.limits if suggestion is not None else ScaleLimits()
    beam_obj = suggestion.beam if suggestion is not None else None
    beam_px, structure, note = known.beam_px, known.structure_px, known.structure_note
    recoverable, image_limit = known.recoverable_px, known.image_limit_px
    if beam is not None:
        beam_obj, beam_px = beam, beam_axes(beam)[0]
    elif psf is not None and suggestion is None:
        beam_obj = fit_beam(psf)
        beam_px = beam_axes(beam_obj)[0]
    if largest_size is not None:
        if cell is None:
            raise ValueError(f"largest_size is {largest_size!r} but cell_arcsec is None; "
                             "pass cell_arcsec to turn the size into pixels")
        size = arcsec_value(largest_size, "largest_size", "120.0")
        structure, note = size / cell, f"given as {size:g} arcsec"
    if dirty is not None:
        image = as_image(dirty, "dirty", dtype=np.float64)
        image_limit = IMAGE_FRACTION * min(image.shape)
        if largest_size is None and suggestion is None:
            if beam_obj is None:
                raise ValueError("dirty was given but neither psf, beam nor suggestion; "
                                 "pass the PSF or the beam to measure the emission")
            extent = measure_emission_extent(image, beam_obj, sigma=sigma, psf=psf)
            structure = extent.intrinsic_px if extent.n_islands else None
            note = extent.note()
    if shortest_baseline is not None:
        if cell is None:
            raise ValueError(f"shortest_baseline is {shortest_baseline!r} but cell_arcsec "
                             "is None; pass cell_arcsec to turn the recoverable scale into "
                             "pixels")
        recoverable = recoverable_pixels(baseline_wavelengths(shortest_baseline), cell)
    limits = ScaleLimits(beam_px, structure, note, recoverable, image_limit)
    problems = rule_problems(values, limits, max_affordable_scales=max_affordable_scales)
    for message in problems:
        warnings.warn(message, ScaleChoiceWarning, stacklevel=2)
    return problems
