"""Where a finished run truly stands: the warnings a run that ends must give.

A run can end with exit code 0 and a plausible stop reason and still be far from the
noise: a threshold above the peak, a mask that misses bright emission, a noise that could
not be measured, a budget spent with emission left.  `outcome_warnings` looks at the
result once the loop has ended and says each such problem in one sentence that names it
and the fix.  It never changes the result.
"""

import numpy as np

from skyscale.core.stops import LEVEL_STOPS

__all__ = ["OUTSIDE_SIGMA", "outcome_warnings", "level_words"]

#: The residual outside the mask counts as significant emission left out when its peak
#: is above this many times the noise (and above the stop level); a Gaussian noise peak
#: this high is rare even over a million independent pixels (common practice: 5 sigma
#: detections).
OUTSIDE_SIGMA = 5.0


def level_words(peaks, levels, scales):
    """``'16 px 1.8 x its level, 8 px 1.2 x'``: scales above their stop level, worst first."""
    ratio = np.asarray(peaks, float) / np.maximum(np.asarray(levels, float), 1e-30)
    order = [i for i in np.argsort(-ratio) if ratio[i] > 1.0]
    return ", ".join(f"{scales[i]:g} px at {ratio[i]:.2g} x its level" for i in order)


def outcome_warnings(result, *, threshold, noise_threshold, region=None, user_mask=None,
                     slack=1.05):
    """Warnings about a finished run whose result is not what its stop reason suggests.

    Parameters
    ----------
    result : DeconvolutionResult
        The run's result (``history``, ``scale_peaks``, ``scale_levels``,
        ``scale_noise``, ``noise_region``, ``mask``, ``residual``).
    threshold : float
        The absolute threshold, Jy/beam.
    noise_threshold : float or None
        The noise multiple; None for no noise stop.
    region : (ny, nx) bool ndarray, optional
        Where the residual can be trusted (exact, with data); default everywhere.
    user_mask : (ny, nx) bool ndarray, optional
        The mask the caller gave (blank pixels left out), or None.
    slack : float
        A scale within this factor of its level counts as having reached it.

    Returns
    -------
    list of str
        One sentence each: the problem, the figures, and the fix.
    """
    out = []
    first = result.history[0] if result.history else None
    stop = result.stop_reason
    if threshold > 0 and first is not None and threshold >= first.peak and \
            result.components.size == 0:
        out.append(
            f"the threshold {threshold:.4g} Jy/beam is above the dirty image's peak "
            f"{first.peak:.4g} Jy/beam{' in the mask' if result.mask is not None else ''}, "
            "so nothing was cleaned; thresholds are in Jy/beam: give a lower one (on the "
            "command line a unit may be written, such as 0.6mJy)")
    noise = np.asarray(result.scale_noise or [0.0], float)
    how = (result.noise_region or {}).get("how") or [""]
    if noise_threshold is not None and not noise[0] > 0:
        out.append(
            "the noise could not be measured (no trustworthy pixel free of emission), so "
            "the noise stop had no level; give a fixed threshold, or a mask that leaves "
            "some empty sky outside it")
    elif result.mask is not None and ("whole image" in how[0] or how[0].startswith("kept")):
        pct = 100.0 * float(result.mask.mean())
        fix = ("give a tighter mask, or add the automatic mask (emission_mask='auto', "
               "--emission-mask), which is then kept inside yours" if user_mask is not None
               and result.emission_mask is None else
               "check the stop levels against the residual, or give a mask of your own "
               "around the emission")
        out.append(
            f"the mask covers {pct:.0f} % of the image and leaves too few pixels outside "
            f"it to measure the noise there: {how[0]}; the noise (and so the stop "
            f"levels) may be off; {fix}")
    peaks, levels = result.scale_peaks, result.scale_levels
    if peaks is not None and levels is not None and stop not in LEVEL_STOPS \
            and stop not in ("nothing_to_clean",) and result.components.size > 0:
        above = np.asarray(peaks) > np.asarray(levels) * slack
        if above.any():
            out.append(
                f"the run stopped ({stop}) with the residual in the mask still above the "
                "stop level on scales " + level_words(peaks, levels, result.scales) +
                ": the result is not cleaned to the noise; " + _fix_for(stop))
    if result.mask is not None and noise[0] > 0 and "whole image" not in how[0] and (
            user_mask is not None or stop in LEVEL_STOPS):
        outside = ~result.mask if region is None else (region & ~result.mask)
        if outside.any():
            res = np.abs(np.asarray(result.residual, float))
            res = np.where(outside, res, 0.0)
            at = np.unravel_index(int(np.argmax(res)), res.shape)
            peak = float(res[at])
            floor = max(OUTSIDE_SIGMA * noise[0], float(levels[0]) if levels else 0.0)
            if peak > floor:
                out.append(
                    f"the mask leaves significant emission outside it: the residual "
                    f"there peaks at {peak:.4g} Jy/beam ({peak / noise[0]:.0f} x the "
                    f"noise) at pixel (y, x) = ({at[0]}, {at[1]}); its sidelobes may "
                    "have been cleaned inside the mask as negative flux; widen the mask "
                    "to take that emission in, or use the automatic mask")
    return out


def _fix_for(stop):
    """The usual remedy for each early stop."""
    return {
        "max_components": "raise the component budget (max_components, "
                          "--max-components) or give a mask around the emission",
        "max_major_cycles": "raise the major-cycle budget (max_major_cycles, "
                            "--max-major-cycles)",
        "no_progress": "check that the PSF belongs to this image; a mask around the "
                       "emission, or fewer or smaller scales, usually lets it go on",
        "diverging": "check that the PSF belongs to this image and is centred",
        "interrupted": "resume the run to finish it",
        "empty_mask": "give a mask that allows pixels where the emission is",
    }.get(stop, "see the report's history")
