"""A whole run on FITS files: read, check, deconvolve, restore, write every output.

This is the API behind ``skyscale run`` and ``skyscale demo``; pipelines that hold
FITS files can call `run_files` directly.
"""

import datetime as _dt
import logging
import os
import warnings

import numpy as np

from skyscale.advisor.suggest import check_scales, resolve_scales
from skyscale.core.beam import fit_beam
from skyscale.core.driver import deconvolve
from skyscale.core.operators import exact_region
from skyscale.core.option_table import algorithm_options
from skyscale.core.psf import check_psf
from skyscale.core.scales import ScaleSet
from skyscale.core.validate import InputError, mask_nonfinite
from skyscale.cost.planner import check_fits_memory, max_affordable_scales, plan_run
from skyscale.io.atomic import incomplete_marker
from skyscale.io.components import component_fields, component_rows
from skyscale.io.fits import (check_same_grid, provenance_history, read_image, write_image,
                              write_table_csv)
from skyscale.io.grid import cell_size_arcsec
from skyscale.io.interrupts import finish_on_first_interrupt
from skyscale.io.report import build_report, write_report
from skyscale.io.report import file_sha256
from skyscale.job.options import RUN_DEFAULTS, coerce_params, option_label
from skyscale.job.preflight import (OUTPUT_NAMES, check_units, initial_model,
                                    plan_from_headers, prepare_out, previous_outputs)
from skyscale.job.preflight import build_mask as _build_mask
from skyscale.job.preflight import restoring_beam as _restoring_beam
from skyscale.job.preflight import resume_inputs
from skyscale.masks.emission import EmissionMask

__all__ = ["OUTPUT_NAMES", "run_files", "run_images", "merge_params",
           "stop_rule", "exact_residual_cards", "scales_in_pixels", "restoring_beam",
           "build_mask", "deconvolve_options", "resume_inputs"]

logger = logging.getLogger(__name__)



def merge_params(params, sources=None):
    """`RUN_DEFAULTS` updated with ``params``, read as a user would write them
    (`skyscale.job.options.coerce_params`); unknown keys are refused.

    A ``threshold`` given without ``noise_threshold`` (None counts as not given) is a
    fixed level: the default noise stop is then off.  ``noise_threshold`` ``"off"``
    turns the noise stop off; a merged dict merged again gives the same dict.
    """
    given = {k: v for k, v in (params or {}).items() if v is not None}
    merged = dict(RUN_DEFAULTS)
    merged.update(coerce_params(given, sources or {}))
    if "threshold" in given and "noise_threshold" not in given:
        merged["noise_threshold"] = None
    return merged


def stop_rule(params):
    """The stop level of merged run parameters, in words (for the report and the console)."""
    threshold, nu = float(params["threshold"]), params["noise_threshold"]
    if nu is None and threshold > 0:
        return (f"every scale stops at the fixed threshold {threshold:g} Jy/beam, no noise "
                "stop (a threshold given without a noise threshold)")
    if nu is None:
        return ("no stop level (threshold 0, noise stop off): cleans until a budget is spent "
                "or cleaning stalls")
    deeper = "; inside a mask larger scales go deeper (extended_depth " \
             f"{params['extended_depth']:g})"
    if threshold > 0:
        return (f"each scale stops at the larger of {threshold:g} Jy/beam and {nu:g} x its "
                "own measured noise" + deeper)
    return f"each scale stops at {nu:g} x its own measured noise" + deeper


def scales_in_pixels(params, cell, dirty, psf, reasons, label="scales", beam=None):
    """Scale diameters in pixels from merged run parameters (``'auto'`` asks the advisor,
    with the run's restoring ``beam`` when it is known, and appends its reasons to
    ``reasons``; arcsec scales are divided by ``cell``)."""
    scales = params["scales"]
    if isinstance(scales, str):     # 'auto': the same advisor call as deconvolve's
        options = {} if beam is None else {"beam": beam}
        pixels, why = resolve_scales(scales, dirty, psf, cell_arcsec=cell, **options)
        reasons.extend(why)
        return list(pixels)
    values = [float(v) for v in scales]
    if params["scale_unit"] == "arcsec":
        if cell is None:
            raise InputError(f"{label} are in arcsec but the dirty image has no celestial "
                             "WCS to convert them; give scales in pixels")
        return [v / cell for v in values]
    return values


def restoring_beam(params, cell, label="beam", wcs=None):
    """The user's restoring beam (``params['beam']``, arcsec and degrees east of north)
    in the pixel frame of ``wcs``, or None."""
    return None if params["beam"] is None else _restoring_beam(params, cell, label, wcs)


def build_mask(params, image, shape, labels=None):
    """The user mask from ``params['mask']`` and ``params['mask_regions']`` (their
    overlap), or None; refused when it allows no pixel."""
    labels = labels or {k: option_label(k, None) for k in RUN_DEFAULTS}
    return _build_mask(params, image, shape, labels)


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
        Everything but the image, the PSF, the operator, the model and the callback.
    """
    auto = None
    if params["emission_mask"]:
        kw = {} if params["emission_mask_sigma"] is None else {"sigma": params["emission_mask_sigma"]}
        auto = EmissionMask.for_beam(scales_px, beam if beam is not None else fit_beam(psf),
                                     **kw)
    algorithm = {o.name: params[o.name] for o in algorithm_options()}
    return dict(algorithm, scales=scales_px, mask=mask, threads=params["threads"],
                cell_arcsec=cell, beam=beam, emission_mask=auto)


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
        `~skyscale.io.atomic.INCOMPLETE_MARKER`; it is removed after the last one.
    params : dict, optional
        Any of `RUN_DEFAULTS`; missing keys take the defaults.  Values may be given as
        text as a user would write them (``"0.1"``, ``"false"``, ``"0 4 8"``,
        ``"0.1mJy"``); see `skyscale.job.options`.
    callback : callable, optional
        Progress callback passed to `deconvolve`.
    sources : dict, optional
        Where each parameter came from (``'cli'`` or a configuration file name), so
        that messages name the option as the user wrote it.  The command line always
        passes one (maybe empty), and messages then speak of options (``--overwrite``);
        None, the default, is a Python caller (``overwrite=True``).
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
    cli = sources is not None          # the command line passes its (maybe empty) sources
    sources = sources or {}
    merged = merge_params(params, sources)
    start = _dt.datetime.now(_dt.timezone.utc)
    names = {k: os.path.join(out_dir, v) for k, v in OUTPUT_NAMES.items()}
    prepare_out(out_dir, names, merged["overwrite"], "--out" if cli else "out_dir")
    plan_from_headers(dirty_path, psf_path, merged)
    dirty = read_image(dirty_path, name="dirty")
    psf = read_image(psf_path, name="psf")
    check_same_grid(dirty, psf)
    inputs = {name: {"path": os.path.abspath(p), "shape": list(img.data.shape),
                     "sha256": file_sha256(p)}
              for name, p, img in (("dirty", dirty_path, dirty), ("psf", psf_path, psf))}
    inputs.update(inputs_extra or {})
    return run_images(dirty, psf, out_dir, merged, start=start, inputs=inputs,
                      callback=callback, sources=sources if cli else None,
                      resume_from=resume_from)


def run_images(dirty, psf, out_dir, params, *, start=None, inputs=None, callback=None,
               operator=None, cell_arcsec=None, extra_images=None, sources=None,
               resume_from=None):
    """Deconvolve images in memory and write every output (the body of `run_files`).

    Parameters
    ----------
    dirty, psf : FitsImage
        Dirty image (Jy/beam) and PSF; the dirty image's WCS goes into the outputs.
    out_dir : str
        Output directory; see `run_files`.
    params : dict
        Run parameters (merged with `RUN_DEFAULTS`).
    start : datetime, optional
        When the run started (default now).
    inputs : dict, optional
        Input records for the report.
    callback : callable, optional
    operator : callable, optional
        Residual operator for the major cycles (default image plane); its
        ``describe()`` dict, if it has one, goes into the report.
    cell_arcsec : float, optional
        Cell size when the dirty image has no celestial WCS.
    extra_images : dict, optional
        ``kind -> (file name, FitsImage)`` written beside the outputs (and refused like
        them when they exist).
    sources, resume_from
        See `run_files`.

    Returns
    -------
    result, written, report
        As `run_files`.
    """
    cli = sources is not None          # the command line passes its (maybe empty) sources
    sources = sources or {}
    labels = {k: option_label(k, sources.get(k)) for k in RUN_DEFAULTS}
    merged = merge_params(params, sources)
    start = start or _dt.datetime.now(_dt.timezone.utc)
    extra_images = extra_images or {}
    names = {k: os.path.join(out_dir, v) for k, v in OUTPUT_NAMES.items()}
    names.update({k: os.path.join(out_dir, v[0]) for k, v in extra_images.items()})
    ow = merged["overwrite"]
    prepare_out(out_dir, names, ow, "--out" if cli else "out_dir")
    previous = previous_outputs(out_dir) if ow else []     # read before report.json is replaced
    notes = []
    check_units(dirty, notes)
    with warnings.catch_warnings():      # the one real error first, before any advice
        warnings.simplefilter("ignore")
        check_psf(np.nan_to_num(psf.data) if merged["nonfinite"] == "mask" else psf.data,
                  dirty.data.shape)
    cell = cell_size_arcsec(dirty.wcs) if dirty.wcs is not None else cell_arcsec
    data, blank = dirty.data, None
    if merged["nonfinite"] != "mask" and not np.all(np.isfinite(data)):
        bad = int(np.count_nonzero(~np.isfinite(data)))
        how = "--nonfinite mask" if cli else "nonfinite='mask'"
        raise InputError(f"the dirty image has {bad} non-finite pixels (NaN or inf) of "
                         f"{data.size}; give {how} to leave them out of cleaning and blank "
                         "in the outputs, or replace them")
    if merged["nonfinite"] == "mask":
        data, nan_mask, blank = mask_nonfinite(dirty.data)
        if blank.any():
            notes.append(f"{int(blank.sum())} non-finite dirty pixels treated as masked "
                         "and left blank (NaN) in the residual and restored images")
        else:
            blank = None
    initial = initial_model(resume_from, dirty) if resume_from else None
    beam = restoring_beam(merged, cell, labels["beam"], dirty.wcs)
    fitted = beam if beam is not None else fit_beam(psf.data)   # the run's one beam fit
    if beam is not None:
        notes.extend(beam_size_notes(beam, fit_beam(psf.data), cell, labels["beam"]))
    reasons = []
    scales_px = scales_in_pixels(merged, cell, data, psf.data, reasons, labels["scales"],
                                 beam=fitted)
    scale_warnings = []
    if not reasons:   # the user's own set: check it against the rules of thumb
        try:                                            # refuse bad sets before the advice
            ScaleSet(scales_px, image_shape=data.shape)
        except InputError as exc:
            raise InputError(f"{labels['scales']}: {exc}") from None
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            afford = max_affordable_scales(data.shape, psf.data, scales_px,
                                           max_components=merged["max_components"],
                                           threads=merged["threads"])
            scale_warnings = check_scales(scales_px, data, psf.data, cell_arcsec=cell,
                                          beam=fitted,
                                          max_affordable_scales=len(afford.scales))
    mask = build_mask(merged, dirty, data.shape, labels)
    plan = plan_run(data.shape, psf.data, scales_px,
                    max_components=merged["max_components"], threads=merged["threads"],
                    max_major_cycles=merged["max_major_cycles"], dirty=data,
                    threshold=merged["threshold"], noise_threshold=merged["noise_threshold"])
    check_fits_memory(plan)
    for note in notes + scale_warnings:      # said before the run, as the engine's own
        logger.warning(note)
    extra_kw = {} if initial is None else {"model": initial}
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        result = deconvolve(data, psf.data, operator=operator, callback=callback, **extra_kw,
                            blank=blank,
                            **deconvolve_options(merged, psf.data, cell, scales_px, mask, fitted))
    for text in notes + scale_warnings + [str(w.message) for w in caught]:
        if text not in result.warnings:      # the engine logs and warns the same words
            result.warnings.append(text)
    if blank is not None:
        for img in (result.residual, result.restored):
            if img is not None:
                img[blank] = np.nan
    end = _dt.datetime.now(_dt.timezone.utc)
    record = dict(merged, scales=scales_px, stop_rule=stop_rule(merged))
    inputs = dict(inputs or {})
    if resume_from:
        inputs["resumed_from"] = {"path": os.path.abspath(
            os.path.join(resume_from, OUTPUT_NAMES["model"]))}
    major = result.parameters["operator"]
    keep = [v["path"] for v in inputs.values() if isinstance(v, dict) and "path" in v]
    keep += [merged["mask"]] if merged["mask"] else []
    with finish_on_first_interrupt(already=result.stop_reason == "interrupted") as writing, \
            incomplete_marker(out_dir):
        written, report = _write_outputs(result, dirty, psf, names, record, start, end, plan,
                                         reasons, inputs, cell, ow, extra_images, major,
                                         stale=(previous, keep))
    result.interrupted_while_writing = writing.interrupted
    return result, written, report


#: A restoring beam given more than this many times wider (or narrower) than the beam
#: fitted to the PSF is said to be unusual (a beam given in pixels where arcsec are
#: expected is several times too wide for 3 to 5 pixels across the beam).
BEAM_RATIO_WARN = 3.0


def beam_size_notes(beam, fitted, cell, label="beam"):
    """Words for a restoring beam far from the one fitted to the PSF (likely the wrong
    unit), or nothing."""
    ratio = float(beam.major) / max(float(fitted.major), 1e-12)
    if 1.0 / BEAM_RATIO_WARN <= ratio <= BEAM_RATIO_WARN:
        return []
    unit = "" if cell is None else (
        f"; {label} takes arcsec: {beam.major * cell:.4g} arcsec is {beam.major:.3g} pixels "
        f"of {cell:.4g} arcsec, and the fitted beam is {fitted.major * cell:.4g} arcsec "
        "(was the beam given in pixels?)")
    return [f"the restoring beam given ({beam.major:.3g} x {beam.minor:.3g} pixels) is "
            f"{ratio:.3g} times the beam fitted to the PSF ({fitted.major:.3g} x "
            f"{fitted.minor:.3g} pixels)" + unit + "; the restored image is smoothed "
            "accordingly"]


def exact_residual_cards(result):
    """FITS keywords and HISTORY lines saying how far ``result.residual`` is exact.

    Only for the image-plane operator (its ``describe()`` says ``exact``); other
    operators give nothing.  ``EXACTRES`` is T when the residual is exact everywhere;
    otherwise ``EXACTDY`` and ``EXACTDX`` give how many pixels from each component (in
    y and x) it is exact, and ``EXACTREG`` the 0-based rows and columns where it is
    exact for this model (`skyscale.core.operators.exact_region`).

    Returns
    -------
    cards : dict
        ``key -> (value, comment)`` for `write_image`'s ``extra``.
    history : list of str
    """
    import textwrap
    op = (getattr(result, "parameters", None) or {}).get("operator") or {}
    if "exact" not in op:
        return {}, []
    if op["exact"]:
        return ({"EXACTRES": (True, "residual exact everywhere (PSF 2x image)")},
                ["skyscale residual exact everywhere: the PSF covers every offset between "
                 "two image pixels"])
    dy, dx = (int(v) for v in op["exact_within_px"])
    region = exact_region(result.model.shape, result.model, (dy, dx))
    if region is None:
        return ({"EXACTRES": (True, "no components: residual = dirty image")},
                ["skyscale residual exact everywhere: there are no components"])
    rows, cols = np.nonzero(region.any(axis=1))[0], np.nonzero(region.any(axis=0))[0]
    where = f"rows {rows[0]}..{rows[-1]}, columns {cols[0]}..{cols[-1]}"
    cards = {"EXACTRES": (False, "residual exact only near comps, see EXACTDY"),
             "EXACTDY": (dy, "[pixel] exact this far from comps in y"),
             "EXACTDX": (dx, "[pixel] exact this far from comps in x"),
             "EXACTREG": (where, "0-based pixels, residual exact")}
    words = (f"skyscale residual exact only within {dy} pixels in y and {dx} in x of "
             f"every component (the PSF, {' x '.join(str(v) for v in op['psf_shape'])} "
             f"pixels, is smaller than twice the image): for this model on {where} "
             "(0-based); farther out it misses the PSF sidelobes beyond the PSF's edge")
    return cards, textwrap.wrap(words, width=72, subsequent_indent="  ")


def _remove_stale(previous, keep, written, out_dir):
    """Remove the earlier run's outputs that this run did not write; return their names."""
    mine = {os.path.realpath(p) for p in written.values()}
    keep = {os.path.realpath(p) for p in keep}
    removed = []
    for path in previous:
        real = os.path.realpath(path)
        if real in mine or real in keep or not os.path.isfile(path):
            continue
        os.unlink(path)
        removed.append(os.path.relpath(path, out_dir))
    if removed:
        logger.info("--overwrite: removed the earlier run's %s", ", ".join(removed))
    return removed


def _values_in_effect(record, result, inputs):
    """The run's parameters for FITS HISTORY with the values in effect where the user left
    them unset (the automatic mask's sigma, the threads), and the input file names."""
    shown = dict(record)
    auto = getattr(result, "emission_mask", None)
    if shown.get("emission_mask") and shown.get("emission_mask_sigma") is None and \
            getattr(auto, "sigma", None) is not None:
        shown["emission_mask_sigma"] = auto.sigma
    threads = getattr(result, "threads", None) or {}
    if shown.get("threads") is None and threads.get("numba") is not None:
        shown["threads"] = threads["numba"]
    for name, rec in (inputs or {}).items():
        if isinstance(rec, dict) and rec.get("path"):
            shown[f"input_{name}"] = os.path.basename(rec["path"])
    return shown


def _write_outputs(result, dirty, psf, names, record, start, end, plan, reasons,
                   inputs, cell, ow, extra_images, major, stale=((), ())):
    history = provenance_history(_values_in_effect(record, result, inputs), start, end)
    exact_cards, exact_history = exact_residual_cards(result)
    written = {kind: write_image(names[kind], image.data, like=image, bunit=image.bunit,
                                 history=history, overwrite=ow)
               for kind, (_, image) in extra_images.items()}
    written.update({
        "model": write_image(names["model"], result.model, like=dirty, bunit="Jy/pixel",
                             history=history, overwrite=ow),
        "residual": write_image(names["residual"], result.residual, like=dirty,
                                bunit="Jy/beam", beam=result.beam if dirty.wcs else None,
                                history=history + exact_history, extra=exact_cards,
                                overwrite=ow),
        "restored": write_image(names["restored"], result.restored, like=dirty,
                                bunit="Jy/beam", beam=result.beam if dirty.wcs else None,
                                history=history + exact_history, extra=exact_cards,
                                overwrite=ow),   # restored = model (*) beam + residual
    })
    if result.mask is not None:
        written["mask"] = write_image(names["mask"], result.mask.astype(np.float32), like=dirty,
                                      bunit="", history=history, overwrite=ow)
    rows = component_rows(result.components, dirty.wcs, cell)
    written["components"] = write_table_csv(names["components"], rows,
                                            component_fields(dirty.wcs, cell), overwrite=ow)
    if record["plots"]:
        try:
            from skyscale.io.figures.convergence import plot_convergence
            from skyscale.io.figures.panels import plot_panels
            written["convergence"] = plot_convergence(result, names["convergence"], overwrite=ow)
            written["panels"] = plot_panels(dirty.data, result, names["panels"], wcs=dirty.wcs,
                                            mask=result.mask, overwrite=ow)
        except ImportError as exc:
            result.warnings.append(f"figures skipped: {exc}")
    out_dir = os.path.dirname(names["report"]) or "."
    removed = _remove_stale(stale[0], stale[1], dict(written, report=names["report"]), out_dir)
    extra = {"outputs": dict(written, report=names["report"]),
             "plan": plan.as_dict() if hasattr(plan, "as_dict") else dict(plan)}
    if removed:
        extra["removed_earlier_outputs"] = removed
    if reasons:
        extra["scale_reasons"] = reasons
    report = build_report(result, inputs=inputs, parameters=record, cell_arcsec=cell,
                          threads=record["threads"], extra=extra, major_cycle=major,
                          started=start, deconvolved=end,
                          finished=_dt.datetime.now(_dt.timezone.utc))
    written["report"] = write_report(names["report"], report, overwrite=ow)
    return written, report
