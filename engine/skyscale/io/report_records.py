"""What a run used and how long it took, for the report: scales, mask level, time.

`skyscale.io.report.build_report` puts these records into ``report.json``: the scales
in pixels and arcsec, the emission mask's detection level, and timings that add up to
the run's total (the threads in effect come with the result, from
`skyscale.core.threads.threads_in_effect`).
"""

import math

import numpy as np

__all__ = ["REPORT_UNITS", "scales_record", "emission_mask_record", "timings_record"]

#: Units of the report's figures whose key does not name one (``units`` in the report).
REPORT_UNITS = {
    "image.shape": "pixel (ny, nx)",
    "history.peak": "Jy/beam (peak |residual| where the run measured it: in the mask "
                    "when there is one, and where the residual is exact)",
    "history.rms": "Jy/beam (same region as history.peak)",
    "history.flux": "Jy (total model flux)",
    "history.scale_peaks": "Jy/beam, one per scale in the order of scales.pixels",
    "history.components": "count (cumulative)",
    "history.minor_iterations": "count",
    "final.components": "count of iterations (components.csv merges those at the same "
                        "pixel and scale)",
    "final.component_table_rows": "count of rows of components.csv (one per pixel and "
                                  "scale)",
    "per_scale.components": "count of iterations",
    "per_scale.flux_fraction": "fraction of the total model flux",
    "stop.sub_loops": "count",
    "stop.fft_updates": "count",
    "stop.direct_updates": "count",
    "machine.threads": "threads (the Numba kernels' count in effect)",
}

#: Where each timing of ``timings_s`` was spent.
_TIMING_NOTES = {
    "precompute": "scale beams and their transforms (inside the deconvolution)",
    "minor": "minor cycles",
    "major": "major cycles: the residual recomputed from the model",
    "other": "everything else from the start to the end of the deconvolution: reading "
             "and checking the inputs, planning, set-up, noise measurements and mask "
             "updates between cycles, restoring",
    "outputs": "writing the images, the component table and the figures "
               "(report.json itself is written after)",
    "total": "start to end of the run: precompute + minor + major + other + outputs",
}


def scales_record(result, cell, requested_unit):
    """The scales used: pixels, arcsec (with the cell size) and the unit they were given in."""
    pixels = [float(s) for s in result.scales]
    return {"pixels": pixels,
            "arcsec": [s * cell for s in pixels] if cell is not None else None,
            "cell_arcsec": cell,
            "requested_unit": "pixel" if requested_unit is None else str(requested_unit)}


def emission_mask_record(result, cell):
    """The emission mask's detection level: sigma multiple and, per scale, Jy/beam."""
    em = getattr(result, "emission_mask", None)
    if em is None or not hasattr(em, "sigma"):
        return {"used": False}
    sigma = float(em.sigma)
    fraction = float(getattr(em, "smooth_fraction", float("nan")))
    rows = []
    for s, n in sorted((getattr(em, "noise", None) or {}).items()):
        row = {"scale_px": float(s), "smoothing_fwhm_px": fraction * float(s),
               "noise_jy_per_beam": float(n), "level_jy_per_beam": sigma * float(n)}
        if cell is not None:
            row["scale_arcsec"] = float(s) * cell
        rows.append(row)
    mask = getattr(result, "mask", None)
    count = None if mask is None else int(np.count_nonzero(mask))
    return {"used": True, "sigma": sigma,
            "sigma_unit": "multiples of the robust noise of the residual smoothed at each scale",
            "per_scale": rows,
            "levels_measured": "at the last mask update (after the last accepted major cycle)"
            if rows else "not measured: the mask was never updated",
            "beam_fwhm_px": _number(getattr(em, "beam_fwhm_px", None)),
            "grow_beams": _number(getattr(em, "grow_beams", None)),
            "min_island_beams": _number(getattr(em, "min_island_beams", None)),
            "mask_pixels": count}


def _number(value):
    """A finite float, or None."""
    try:
        value = float(value)
    except (TypeError, ValueError):
        return None
    return value if math.isfinite(value) else None


def _seconds(a, b):
    return max(0.0, (b - a).total_seconds())


def timings_record(result, started, deconvolved, finished):
    """Cycle timings, and with the clock times the rest of the run, adding up to the total."""
    timings = {k: float(v) for k, v in (getattr(result, "timings", None) or {}).items()}
    notes = {k: _TIMING_NOTES[k] for k in timings if k in _TIMING_NOTES}
    if started is None or finished is None:
        notes["total"] = "not recorded (the caller gave no start and end time)"
        return timings, notes
    total = _seconds(started, finished)
    if deconvolved is not None:
        inside = sum(timings.get(k, 0.0) for k in ("precompute", "minor", "major"))
        timings["other"] = max(0.0, _seconds(started, deconvolved) - inside)
        timings["outputs"] = _seconds(deconvolved, finished)
    timings["total"] = total
    notes.update({k: _TIMING_NOTES[k] for k in ("other", "outputs", "total") if k in timings})
    return timings, notes
