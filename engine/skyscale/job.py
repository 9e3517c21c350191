"""A whole run on FITS files: read, check, deconvolve, restore, write every output.

This is the API behind ``skyscale run`` and ``skyscale demo``; pipelines that hold
FITS files can call `run_files` directly.
"""

import datetime as _dt
import logging
import os
import warnings

import numpy as np

from .beam import Beam
from .cycles import deconvolve
from .fitsio import (cell_size_arcsec, check_same_grid, provenance_history, read_image,
                     write_image, write_table_csv)

__all__ = ["RUN_DEFAULTS", "OUTPUT_NAMES", "run_files", "component_rows", "merge_params",
           "scales_in_pixels", "restoring_beam", "deconvolve_options",
           "build_mask"]

logger = logging.getLogger(__name__)

#: Every run parameter with its default (the keys a configuration file may hold).
RUN_DEFAULTS = {
    "scales": [0, 4, 8, 16],
    "scale_unit": "pixel",
    "scale_shape": "paraboloid",
    "loop_gain": 0.1,
    "threshold": 0.0,
    "noise_threshold": None,
    "max_components": 20000,
    "max_major_cycles": 20,
    "cycle_depth": 0.2,
    "size_penalty": 0.6,
    "psf_patch": None,
    "mask": None,
    "mask_regions": None,
    "auto_mask": False,
    "auto_mask_sigma": None,
    "threads": None,
    "beam": None,
    "plots": True,
    "overwrite": False,
}

#: File names of the outputs inside the output directory.
OUTPUT_NAMES = {
    "model": "model.fits", "residual": "residual.fits", "restored": "restored.fits",
    "mask": "mask.fits", "components": "components.csv", "report": "report.json",
    "convergence": "convergence.png", "panels": "panels.png",
}


def component_rows(components, wcs=None):
    """Rows for the component table: y, x, RA and Dec (degrees) where a WCS exists."""
    rows = []
    if wcs is not None and components.size:
        sky = wcs.pixel_to_world_values(components["x"].astype(float),
                                        components["y"].astype(float))
        ra, dec = np.atleast_1d(sky[0]), np.atleast_1d(sky[1])
    for i, c in enumerate(components):
        row = {"y": int(c["y"]), "x": int(c["x"])}
        if wcs is not None:
            row["ra_deg"] = f"{ra[i]:.7f}"
            row["dec_deg"] = f"{dec[i]:.7f}"
        row["scale_px"] = f"{float(c['scale']):g}"
        row["flux_jy"] = f"{float(c['flux']):.6e}"
        rows.append(row)
    return rows


def merge_params(params):
    """Return `RUN_DEFAULTS` updated with ``params`` (None keeps the default).

    Raises
    ------
    ValueError
        If ``params`` holds a key that is not a run parameter.
    """
    merged = dict(RUN_DEFAULTS)
    merged.update({k: v for k, v in (params or {}).items() if v is not None or k not in merged})
    unknown = sorted(set(merged) - set(RUN_DEFAULTS))
    if unknown:
        raise ValueError(f"unknown run parameters {unknown}; valid ones are "
                         f"{', '.join(sorted(RUN_DEFAULTS))}")
    return merged


def scales_in_pixels(params, cell, dirty, psf, reasons):
    """Scale diameters in pixels from merged run parameters.

    ``'auto'`` asks the advisor on ``dirty`` and ``psf`` and appends its reasons to
    ``reasons``; arcsec scales are divided by ``cell``.
    """
    scales = params["scales"]
    if isinstance(scales, str) and scales == "auto":
        from .advisor import suggest_scales
        s = suggest_scales(dirty, psf, cell_arcsec=cell)
        reasons.extend(s.reasons)
        return [float(p) for p in s.pixels]
    values = [float(v) for v in scales]
    if params["scale_unit"] == "arcsec":
        if cell is None:
            raise ValueError("scale_unit is 'arcsec' but the dirty image has no celestial WCS; "
                             "give scales in pixels")
        return [v / cell for v in values]
    if params["scale_unit"] != "pixel":
        raise ValueError(f"scale_unit is {params['scale_unit']!r}; valid values are "
                         "'pixel', 'arcsec'")
    return values


def restoring_beam(params, cell):
    """The user's restoring beam (``params['beam']``, arcsec and degrees) or None."""
    if params["beam"] is None:
        return None
    maj, mnr, pa = params["beam"]
    if cell is None:
        raise ValueError("beam is given in arcsec but the image has no celestial WCS")
    return Beam.from_sky(maj, mnr, pa, cell)


def deconvolve_options(params, psf, cell, scales_px, mask=None, beam=None):
    """Keyword arguments of `deconvolve` for one image from merged run parameters.

    Parameters
    ----------
    params : dict
        Merged run parameters (`merge_params`).
    psf : (py, px) ndarray
        The image's PSF (the automatic mask takes its beam width from it).
    cell : float or None
        Cell size, arcsec.
    scales_px : list of float
        Scale diameters in pixels (`scales_in_pixels`).
    mask : (ny, nx) bool ndarray, optional
    beam : Beam, optional
        Restoring beam; default the fit to the PSF.

    Returns
    -------
    dict
        Everything but the image, the PSF and the callback.
    """
    auto = None
    if params["auto_mask"]:
        from .beam import fit_beam
        from .masks import AutoMask
        kw = {} if params["auto_mask_sigma"] is None else {"sigma": params["auto_mask_sigma"]}
        auto = AutoMask(scales_px, fit_beam(psf).major, **kw)
    return dict(scales=scales_px, loop_gain=params["loop_gain"], threshold=params["threshold"],
                noise_threshold=params["noise_threshold"],
                max_components=params["max_components"],
                max_major_cycles=params["max_major_cycles"], cycle_depth=params["cycle_depth"],
                mask=mask, size_penalty=params["size_penalty"],
                scale_shape=params["scale_shape"], psf_patch=params["psf_patch"],
                threads=params["threads"], cell_arcsec=cell, beam=beam, auto_mask=auto)


def build_mask(params, image, shape):
    """The mask from ``params['mask']`` and ``params['mask_regions']`` (their overlap), or None."""
    mask = None
    if params.get("mask"):
        from .masks import load_mask
        mask = load_mask(params["mask"], shape)
    if params.get("mask_regions"):
        from .masks import regions_to_mask
        region = regions_to_mask(params["mask_regions"], shape, wcs=image.wcs)
        mask = region if mask is None else (mask & region)
    return mask


def run_files(dirty_path, psf_path, out_dir, params=None, *, callback=None, inputs_extra=None):
    """Deconvolve FITS files and write model, residual, restored, table, report, figures.

    Parameters
    ----------
    dirty_path, psf_path : str
        FITS files: dirty image (Jy/beam) and PSF on the same grid.
    out_dir : str
        Output directory (created if missing).  Existing outputs are refused unless
        ``params['overwrite']``; nothing is written before the run has finished.
    params : dict, optional
        Any of `RUN_DEFAULTS`; missing keys take the defaults.
    callback : callable, optional
        Progress callback passed to `deconvolve`.

    Returns
    -------
    result : DeconvolutionResult
    written : dict
        Output kind -> path.
    report : dict
        The JSON report as written.
    """
    merged = merge_params(params)
    start = _dt.datetime.now(_dt.timezone.utc)
    dirty = read_image(dirty_path, name="dirty")
    psf = read_image(psf_path, name="psf")
    check_same_grid(dirty, psf)
    cell = cell_size_arcsec(dirty.wcs) if dirty.wcs is not None else None
    names = {k: os.path.join(out_dir, v) for k, v in OUTPUT_NAMES.items()}
    if not merged["overwrite"]:
        clash = [p for p in names.values() if os.path.exists(p)]
        if clash:
            raise FileExistsError(f"{clash[0]} exists; choose another output directory or "
                                  "pass --overwrite (overwrite=True)")
    reasons = []
    scales_px = scales_in_pixels(merged, cell, dirty.data, psf.data, reasons)
    scale_warnings = []
    if not reasons:   # the user's own set: check it against the rules of thumb
        from .advisor import check_scales
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            from .cost import max_affordable_scales
            afford = max_affordable_scales(dirty.data.shape, psf.data, scales_px,
                                           max_components=merged["max_components"],
                                           threads=merged["threads"],
                                           psf_patch=merged["psf_patch"])
            scale_warnings = check_scales(scales_px, dirty.data, psf.data, cell_arcsec=cell,
                                          max_affordable_scales=len(afford.scales))
    mask = build_mask(merged, dirty, dirty.data.shape)
    beam = restoring_beam(merged, cell)
    from .cost import check_fits_memory, plan_run
    plan = plan_run(dirty.data.shape, psf.data, scales_px,
                    max_components=merged["max_components"], threads=merged["threads"],
                    psf_patch=merged["psf_patch"])
    check_fits_memory(plan)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        result = deconvolve(dirty.data, psf.data,
                            **deconvolve_options(merged, psf.data, cell, scales_px, mask, beam),
                            callback=callback)
    result.warnings.extend(scale_warnings)
    result.warnings.extend(str(w.message) for w in caught)
    end = _dt.datetime.now(_dt.timezone.utc)
    record = dict(merged, scales=scales_px, psf_patch=result.parameters.get("psf_patch"))
    history = provenance_history(record, start, end)
    ow = merged["overwrite"]
    os.makedirs(out_dir, exist_ok=True)
    written = {
        "model": write_image(names["model"], result.model, like=dirty, bunit="Jy/pixel",
                             history=history, overwrite=ow),
        "residual": write_image(names["residual"], result.residual, like=dirty,
                                bunit="Jy/beam", beam=result.beam if dirty.wcs else None,
                                history=history, overwrite=ow),
        "restored": write_image(names["restored"], result.restored, like=dirty,
                                bunit="Jy/beam", beam=result.beam if dirty.wcs else None,
                                history=history, overwrite=ow),
    }
    if result.mask is not None:
        written["mask"] = write_image(names["mask"], result.mask.astype(np.float32), like=dirty,
                                      bunit="", history=history, overwrite=ow)
    rows = component_rows(result.components, dirty.wcs)
    fields = ["y", "x"] + (["ra_deg", "dec_deg"] if dirty.wcs is not None else []) + \
        ["scale_px", "flux_jy"]
    written["components"] = write_table_csv(names["components"], rows, fields, overwrite=ow)
    if merged["plots"]:
        try:
            from .plots import plot_convergence, plot_panels
            written["convergence"] = plot_convergence(result, names["convergence"], overwrite=ow)
            written["panels"] = plot_panels(dirty.data, result, names["panels"], wcs=dirty.wcs,
                                            mask=result.mask, overwrite=ow)
        except ImportError as exc:
            result.warnings.append(f"figures skipped: {exc}")
    from .report import build_report, file_sha256, write_report
    inputs = {name: {"path": os.path.abspath(p), "shape": list(img.data.shape),
                     "sha256": file_sha256(p)}
              for name, p, img in (("dirty", dirty_path, dirty), ("psf", psf_path, psf))}
    inputs.update(inputs_extra or {})
    extra = {"start": start.isoformat(), "end": end.isoformat(), "outputs": written,
             "plan": plan.as_dict() if hasattr(plan, "as_dict") else dict(plan)}
    if reasons:
        extra["scale_reasons"] = reasons
    report = build_report(result, inputs=inputs, parameters=record, cell_arcsec=cell,
                          threads=merged["threads"], extra=extra)
    written["report"] = write_report(names["report"], report, overwrite=ow)
    return result, written, report
