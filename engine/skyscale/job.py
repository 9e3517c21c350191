"""A whole run on FITS files: read, check, deconvolve, restore, write every output.

This is the API behind ``skyscale run`` and ``skyscale demo``; pipelines that hold
FITS files can call `run_files` directly.
"""

import datetime as _dt
import logging
import os
import warnings

import numpy as np

from ._atomic import (INCOMPLETE_MARKER, check_output_dir, incomplete_marker,
                      remove_stale_temps)
from ._validate import InputError, mask_nonfinite
from .beam import Beam
from .cycles import deconvolve
from .fitsio import (cell_size_arcsec, check_same_grid, provenance_history, read_image,
                     read_shape, write_image, write_table_csv)
from .options import coerce_params, option_label

__all__ = ["RUN_DEFAULTS", "OUTPUT_NAMES", "run_files", "component_rows", "resume_inputs",
           "BEAM_MIN_PIXELS"]

from .levels import DEFAULT_EXTENDED_DEPTH
from .minor import DEFAULT_SIZE_PENALTY

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
    "size_penalty": DEFAULT_SIZE_PENALTY,
    "extended_depth": DEFAULT_EXTENDED_DEPTH,
    "psf_patch": None,
    "mask": None,
    "mask_regions": None,
    "auto_mask": False,
    "auto_mask_sigma": None,
    "threads": None,
    "beam": None,
    "plots": True,
    "overwrite": False,
    "nonfinite": "refuse",
}

#: A restoring beam narrower than this many pixels is refused (a beam in degrees
#: read as arcsec comes out around 0.001 pixel).
BEAM_MIN_PIXELS = 0.5
#: BUNIT values (lower case, no spaces) of images in Jy per pixel: models, not dirty images.
_PER_PIXEL_UNITS = ("jy/pixel", "jy/pix", "jy/px", "jy/pixels")

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


def _scales_in_pixels(params, cell, dirty, psf, reasons, label):
    scales = params["scales"]
    if isinstance(scales, str) and scales == "auto":
        from .advisor import suggest_scales
        s = suggest_scales(dirty, psf, cell_arcsec=cell)
        reasons.extend(s.reasons)
        return [float(p) for p in s.pixels]
    values = [float(v) for v in scales]
    if params["scale_unit"] == "arcsec":
        if cell is None:
            raise InputError(f"{label} are in arcsec but the dirty image has no celestial "
                             "WCS to convert them; give scales in pixels")
        return [v / cell for v in values]
    return values


def _build_mask(params, image, shape, labels):
    mask = None
    if params.get("mask"):
        from .masks import load_mask
        _check_mask_grid(image, params["mask"], labels["mask"])
        mask = load_mask(params["mask"], shape)
        if not mask.any():
            raise InputError(f"{labels['mask']} {params['mask']} allows no pixel (it is all "
                             "0); give a mask that covers the emission")
    if params.get("mask_regions"):
        from .masks import regions_to_mask
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            region = regions_to_mask(params["mask_regions"], shape, wcs=image.wcs)
        for w in caught:
            if "selects no pixel" in str(w.message):
                raise InputError(f"{labels['mask_regions']}: {w.message} (positions are x y "
                                 "in pixels from 0, or RA Dec with a unit)")
        if mask is not None:
            if not (mask & region).any():
                raise InputError(f"{labels['mask']} and {labels['mask_regions']} do not "
                                 "overlap; components go only where both allow (they are "
                                 "intersected), so give regions inside the mask or only one")
            region = mask & region
        mask = region
    return mask


def _check_mask_grid(image, path, label):
    """Refuse a FITS mask whose WCS puts its pixels elsewhere on the sky than the image's."""
    mask_img = read_image(path, name="mask")
    if image.wcs is None or mask_img.wcs is None or mask_img.data.shape != image.data.shape:
        return                                  # nothing to compare, or load_mask says it
    try:
        check_same_grid(image, mask_img, name="mask")
    except InputError as exc:
        raise InputError(f"{label} {path}: {exc}") from None
    ny, nx = image.data.shape
    corners = np.array([[0.0, 0.0], [nx - 1.0, ny - 1.0]])
    world = mask_img.wcs.pixel_to_world_values(corners[:, 0], corners[:, 1])
    back = np.array(image.wcs.world_to_pixel_values(*world)).T
    shift = float(np.max(np.abs(back - corners)))
    if not shift <= 0.5:
        raise InputError(f"{label} {path} is on another grid: its pixels lie up to "
                         f"{shift:.3g} pixels from the dirty image's (compare CRPIX/CRVAL); "
                         "regrid the mask onto the dirty image")


def _check_units(image, warn_list):
    unit = (image.bunit or "").lower().replace(" ", "")
    if unit in _PER_PIXEL_UNITS:
        raise InputError(f"dirty file {image.path} has BUNIT {image.bunit!r}: that is a model "
                         "image (Jy per pixel), not a dirty image (Jy/beam); give the dirty "
                         "image, or correct BUNIT if its pixels are in fact Jy/beam")
    if unit and unit not in ("jy/beam", "jy/bm", "jybeam", "jy/beam^-1"):
        warn_list.append(f"dirty BUNIT is {image.bunit!r}, not Jy/beam; thresholds and "
                         "fluxes are read in the image's own unit")


def _restoring_beam(params, cell, label):
    maj, mnr, pa = params["beam"]
    if cell is None:
        raise InputError(f"{label} is given in arcsec but the image has no celestial WCS "
                         "to turn it into pixels; leave it out to fit the PSF")
    if maj / cell < BEAM_MIN_PIXELS:
        as_deg = maj * 3600.0 / cell
        if as_deg >= BEAM_MIN_PIXELS:
            raise InputError(
                f"{label} major axis {maj:g} arcsec is {maj / cell:.2g} pixel: it looks like "
                f"degrees (as in BMAJ); give arcsec ({maj * 3600:.4g},{mnr * 3600:.4g},{pa:g})"
                f" or write the unit ({maj:g}deg,{mnr:g}deg,{pa:g})")
        raise InputError(f"{label} major axis {maj:g} arcsec is under {BEAM_MIN_PIXELS} pixel "
                         f"(cell {cell:g} arcsec); give the FWHMs in arcsec")
    return Beam.from_sky(maj, mnr, pa, cell)


def _prepare_out(out_dir, names, overwrite, label):
    check_output_dir(out_dir, label)
    remove_stale_temps(out_dir)
    if overwrite:
        return
    marker = os.path.join(out_dir, INCOMPLETE_MARKER)
    clash = [p for p in names.values() if os.path.exists(p)]
    if os.path.exists(marker):
        raise FileExistsError(f"{out_dir} holds the incomplete outputs of an earlier run "
                              f"({INCOMPLETE_MARKER}); pass --overwrite (overwrite=True) to "
                              "replace them, or choose another output directory")
    if clash:
        raise FileExistsError(f"{clash[0]} exists; choose another output directory or "
                              "pass --overwrite (overwrite=True)")


def _plan_from_headers(dirty_path, psf_path, params):
    """Refuse a run that cannot fit in memory from the headers alone, before any read."""
    scales = params["scales"]
    if scales == "auto" or params["scale_unit"] != "pixel":
        return                       # scales not known in pixels yet: planned after reading
    shapes = read_shape(dirty_path, name="dirty"), read_shape(psf_path, name="psf")
    if None in shapes:
        return
    from .cost import check_fits_memory, plan_run
    from .scales import ScaleSet
    try:
        ScaleSet(scales)
    except InputError:
        return                       # refused with its own message after reading
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            plan = plan_run(shapes[0], shapes[1], [float(s) for s in scales],
                            max_components=params["max_components"],
                            threads=params["threads"], psf_patch=params["psf_patch"])
        except InputError:
            return                   # refused with the option's own name after reading
    check_fits_memory(plan)


def resume_inputs(directory):
    """Dirty and PSF paths and the parameters of the run whose outputs are in ``directory``.

    Returns
    -------
    dirty_path, psf_path : str or None
        From the run's report (None when it has no report).
    params : dict
        The run's parameters (scales in pixels), without ``overwrite``.
    """
    import json
    path = os.path.join(directory, OUTPUT_NAMES["report"])
    if not os.path.isfile(os.path.join(directory, OUTPUT_NAMES["model"])):
        raise InputError(f"--resume {directory} holds no {OUTPUT_NAMES['model']}; give the "
                         "output folder of an earlier run")
    if not os.path.isfile(path):
        return None, None, {}
    try:
        with open(path, encoding="utf-8") as fh:
            rep = json.load(fh)
        params = {k: v for k, v in rep["parameters"].items()
                  if k in RUN_DEFAULTS and k != "overwrite" and v is not None}
        params["scale_unit"] = "pixel"            # the report records pixels
        return rep["inputs"]["dirty"]["path"], rep["inputs"]["psf"]["path"], params
    except (OSError, ValueError, KeyError, TypeError) as exc:
        raise InputError(f"--resume {directory}: {OUTPUT_NAMES['report']} cannot be read "
                         f"({exc}); give the dirty image and PSF on the command line") from None


def _initial_model(directory, dirty):
    model = read_image(os.path.join(directory, OUTPUT_NAMES["model"]), name="resumed model")
    if model.data.shape != dirty.data.shape:
        raise InputError(f"--resume {directory}: its model has shape {model.data.shape} but "
                         f"the dirty image {dirty.data.shape}; resume with the same dirty image")
    check_same_grid(dirty, model)
    return model.data


def run_files(dirty_path, psf_path, out_dir, params=None, *, callback=None, inputs_extra=None,
              sources=None, resume_from=None):
    """Deconvolve FITS files and write model, residual, restored, table, report, figures.

    Parameters
    ----------
    dirty_path, psf_path : str
        FITS files: dirty image (Jy/beam) and PSF on the same grid.
    out_dir : str
        Output directory (created if missing).  It is checked before any work: a file,
        or a folder that cannot be written, is refused, and so are existing outputs
        unless ``params['overwrite']``.  While outputs are written the folder holds
        `~skyscale._atomic.INCOMPLETE_MARKER`; it is removed after the last one.
    params : dict, optional
        Any of `RUN_DEFAULTS`; missing keys take the defaults.  Values may be given as
        text as a user would write them (``"0.1"``, ``"false"``, ``"0 4 8"``,
        ``"0.1mJy"``); see `skyscale.options`.
    callback : callable, optional
        Progress callback passed to `deconvolve`.
    sources : dict, optional
        Where each parameter came from (``'cli'`` or a configuration file name), so
        that messages name the option as the user wrote it.
    resume_from : str, optional
        Output folder of an earlier run: cleaning continues from its ``model.fits``.
        Budgets (components, major cycles) count this run only.

    Returns
    -------
    result : DeconvolutionResult
        ``result.stop_reason`` is ``'interrupted'`` when Ctrl-C (or SIGTERM, from the
        command line) stopped the run: the outputs then hold the last complete major
        cycle.
    written : dict
        Output kind -> path.
    report : dict
        The JSON report as written.

    Raises
    ------
    InputError, FileExistsError
        Bad input, found before the deconvolution starts.
    """
    sources = sources or {}
    labels = {k: option_label(k, sources.get(k)) for k in RUN_DEFAULTS}
    merged = dict(RUN_DEFAULTS)
    merged.update(coerce_params({k: v for k, v in (params or {}).items() if v is not None},
                                sources))
    start = _dt.datetime.now(_dt.timezone.utc)
    names = {k: os.path.join(out_dir, v) for k, v in OUTPUT_NAMES.items()}
    ow = merged["overwrite"]
    _prepare_out(out_dir, names, ow, "--out" if sources else "out_dir")   # creates nothing
    _plan_from_headers(dirty_path, psf_path, merged)
    dirty = read_image(dirty_path, name="dirty")
    psf = read_image(psf_path, name="psf")
    check_same_grid(dirty, psf)
    notes = []
    _check_units(dirty, notes)
    cell = cell_size_arcsec(dirty.wcs) if dirty.wcs is not None else None
    data, blank = dirty.data, None
    if merged["nonfinite"] == "mask":
        data, nan_mask, blank = mask_nonfinite(dirty.data)
        if blank.any():
            notes.append(f"{int(blank.sum())} non-finite dirty pixels treated as masked "
                         "and left blank (NaN) in the residual and restored images")
        else:
            blank = None
    initial = _initial_model(resume_from, dirty) if resume_from else None
    reasons = []
    scales_px = _scales_in_pixels(merged, cell, data, psf.data, reasons, labels["scales"])
    scale_warnings = []
    if not reasons:   # the user's own set: check it against the rules of thumb
        from .advisor import check_scales
        from .scales import ScaleSet
        try:                                            # refuse bad sets before the advice
            ScaleSet(scales_px, image_shape=data.shape)
        except InputError as exc:
            raise InputError(f"{labels['scales']}: {exc}") from None
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            from .cost import max_affordable_scales
            afford = max_affordable_scales(data.shape, psf.data, scales_px,
                                           max_components=merged["max_components"],
                                           threads=merged["threads"],
                                           psf_patch=merged["psf_patch"])
            scale_warnings = check_scales(scales_px, data, psf.data, cell_arcsec=cell,
                                          max_affordable_scales=len(afford.scales))
    mask = _build_mask(merged, dirty, data.shape, labels)
    if blank is not None:
        mask = ~blank if mask is None else (mask & ~blank)
    auto = None
    if merged["auto_mask"]:
        from .beam import fit_beam
        from .masks import AutoMask
        kw = {} if merged["auto_mask_sigma"] is None else {"sigma": merged["auto_mask_sigma"]}
        auto = AutoMask(scales_px, fit_beam(psf.data).major, **kw)
    beam = None if merged["beam"] is None else _restoring_beam(merged, cell, labels["beam"])
    from .cost import check_fits_memory, plan_run
    plan = plan_run(data.shape, psf.data, scales_px,
                    max_components=merged["max_components"], threads=merged["threads"],
                    psf_patch=merged["psf_patch"])
    check_fits_memory(plan)
    extra_kw = {} if initial is None else {"model": initial}
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        result = deconvolve(
            data, psf.data, scales=scales_px, loop_gain=merged["loop_gain"],
            threshold=merged["threshold"], noise_threshold=merged["noise_threshold"],
            max_components=merged["max_components"], max_major_cycles=merged["max_major_cycles"],
            cycle_depth=merged["cycle_depth"], mask=mask, size_penalty=merged["size_penalty"],
            extended_depth=merged["extended_depth"],
            scale_shape=merged["scale_shape"], psf_patch=merged["psf_patch"],
            threads=merged["threads"], cell_arcsec=cell, beam=beam, auto_mask=auto,
            callback=callback, **extra_kw)
    result.warnings.extend(notes + scale_warnings)
    result.warnings.extend(str(w.message) for w in caught)
    if blank is not None:
        for img in (result.residual, result.restored):
            if img is not None:
                img[blank] = np.nan
    end = _dt.datetime.now(_dt.timezone.utc)
    record = dict(merged, scales=scales_px, psf_patch=result.parameters.get("psf_patch"))
    if resume_from:
        inputs_extra = dict(inputs_extra or {}, resumed_from={"path": os.path.abspath(
            os.path.join(resume_from, OUTPUT_NAMES["model"]))})
    with incomplete_marker(out_dir):
        written, report = _write_outputs(result, dirty, psf, names, record, start, end, plan,
                                         reasons, inputs_extra, cell, ow,
                                         (dirty_path, psf_path))
    return result, written, report


def _write_outputs(result, dirty, psf, names, record, start, end, plan, reasons,
                   inputs_extra, cell, ow, paths):
    history = provenance_history(record, start, end)
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
    if record["plots"]:
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
              for name, p, img in (("dirty", paths[0], dirty), ("psf", paths[1], psf))}
    inputs.update(inputs_extra or {})
    extra = {"start": start.isoformat(), "end": end.isoformat(), "outputs": written,
             "plan": plan.as_dict() if hasattr(plan, "as_dict") else dict(plan)}
    if reasons:
        extra["scale_reasons"] = reasons
    report = build_report(result, inputs=inputs, parameters=record, cell_arcsec=cell,
                          threads=record["threads"], extra=extra)
    written["report"] = write_report(names["report"], report, overwrite=ow)
    return written, report
