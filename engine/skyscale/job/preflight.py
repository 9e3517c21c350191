"""Checks a file-level run makes before any work: output folder, memory, masks, units,
restoring beam and the run to resume.

Each refuses bad input with one `InputError` naming the option as the user wrote it
(``labels`` maps a run parameter to that name), so `skyscale.job.files.run_files` and the
command line fail before anything is computed or written.
"""

import os
import warnings

import numpy as np

from skyscale.core.scales import ScaleSet
from skyscale.cost.planner import check_fits_memory, plan_run
from skyscale.masks.loading import load_mask
from skyscale.masks.regions import regions_to_mask
from skyscale.io.atomic import INCOMPLETE_MARKER, check_output_dir, remove_stale_temps
from skyscale.core.validate import InputError
from skyscale.core.beam import Beam
from skyscale.io.fits import check_same_grid, read_image, read_shape
from skyscale.io.grid import pixel_position_angle
from skyscale.job.options import RUN_OPTION_KINDS

__all__ = ["BEAM_MIN_PIXELS", "OUTPUT_NAMES", "prepare_out", "previous_outputs",
           "plan_from_headers",
           "build_mask", "check_mask_grid", "check_units", "restoring_beam",
           "resume_inputs", "initial_model"]

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


def build_mask(params, image, shape, labels):
    """The user mask from ``--mask`` and ``--mask-regions`` (intersected), or None.

    Refuses an all-zero mask, bad region text (also plain numbers that can only be
    degrees on this image), a region entry that selects no pixel, and a mask and
    regions that do not overlap.
    """
    mask = None
    if params.get("mask"):
        check_mask_grid(image, params["mask"], labels["mask"])
        mask = load_mask(params["mask"], shape)
        if not mask.any():
            raise InputError(f"{labels['mask']} {params['mask']} allows no pixel (it is all "
                             "0); give a mask that covers the emission")
    if params.get("mask_regions"):
        text = params["mask_regions"]
        if isinstance(text, str) and not text.split()[1:] and os.path.isfile(text):
            import pathlib
            text = pathlib.Path(text)       # a file holding the regions, one per line
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            try:
                region = regions_to_mask(text, shape, wcs=image.wcs)
            except ValueError as exc:
                raise InputError(f"{labels['mask_regions']}: {exc}") from None
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


def check_mask_grid(image, path, label):
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


def check_units(image, warn_list):
    """Refuse a dirty image in Jy/pixel; note other units that are not Jy/beam."""
    unit = (image.bunit or "").lower().replace(" ", "")
    if unit in _PER_PIXEL_UNITS:
        raise InputError(f"dirty file {image.path} has BUNIT {image.bunit!r}: that is a model "
                         "image (Jy per pixel), not a dirty image (Jy/beam); give the dirty "
                         "image, or correct BUNIT if its pixels are in fact Jy/beam")
    if unit and unit not in ("jy/beam", "jy/bm", "jybeam", "jy/beam^-1"):
        warn_list.append(f"dirty BUNIT is {image.bunit!r}, not Jy/beam; thresholds and "
                         "fluxes are read in the image's own unit")


def restoring_beam(params, cell, label, wcs=None):
    """The user's restoring beam (arcsec, degrees east of north) as a pixel `Beam`.

    The position angle is turned from the sky (east of north) into the pixel frame
    through ``wcs`` (`skyscale.io.fits.pixel_position_angle`), as a header's BPA is, so a
    beam given on a rotated or flipped grid points the same way on the sky.  Refuses a
    beam without a celestial WCS, and a beam under `BEAM_MIN_PIXELS` (saying how to
    write it when it looks like degrees read as arcsec).
    """
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
    beam = Beam.from_sky(maj, mnr, pa, cell)
    if wcs is not None and wcs.has_celestial:
        beam = Beam(beam.major, beam.minor, pixel_position_angle(beam.pa, wcs.celestial))
    return beam


def prepare_out(out_dir, names, overwrite, label):
    """Check the output folder before any work; remove a dead writer's temporary files.

    Refuses a file, an unwritable folder, and (without ``overwrite``) existing outputs
    or the marker of an incomplete earlier run.  Creates nothing.
    """
    check_output_dir(out_dir, label)
    remove_stale_temps(out_dir)
    if overwrite:
        return
    marker = os.path.join(out_dir, INCOMPLETE_MARKER)
    clash = [p for p in names.values() if os.path.exists(p)]
    again = "--overwrite" if label.startswith("--") else "overwrite=True"
    if os.path.exists(marker):
        raise FileExistsError(f"{out_dir} holds the incomplete outputs of an earlier run "
                              f"({INCOMPLETE_MARKER}); pass {again} to replace them, or "
                              "choose another output directory")
    if clash:
        raise FileExistsError(f"{clash[0]} exists; choose another output directory or "
                              f"pass {again}")


def previous_outputs(out_dir):
    """skyscale's own outputs already in ``out_dir``: candidates for removal on overwrite.

    The files of `OUTPUT_NAMES` that exist, and those the folder's ``report.json`` lists
    as its run's outputs (for example the ``dirty.fits`` of a visibility run) when they
    lie in the folder itself.  Nothing else: a user's own files are never listed.
    """
    import json
    found = [os.path.join(out_dir, n) for n in OUTPUT_NAMES.values()
             if os.path.isfile(os.path.join(out_dir, n))]
    try:
        with open(os.path.join(out_dir, OUTPUT_NAMES["report"]), encoding="utf-8") as fh:
            listed = json.load(fh)["extra"]["outputs"].values()
    except (OSError, ValueError, KeyError, TypeError, AttributeError):
        listed = ()
    here = os.path.realpath(out_dir)
    for path in listed:
        if not isinstance(path, str):
            continue
        name = os.path.basename(path)
        local = os.path.join(out_dir, name)
        if os.path.realpath(os.path.dirname(os.path.abspath(path))) == here and \
                os.path.isfile(local) and local not in found:
            found.append(local)
    return found


def plan_from_headers(dirty_path, psf_path, params):
    """Refuse a run that cannot fit in memory from the headers alone, before any read."""
    scales = params["scales"]
    if scales == "auto" or params["scale_unit"] != "pixel":
        return                       # scales not known in pixels yet: planned after reading
    shapes = read_shape(dirty_path, name="dirty"), read_shape(psf_path, name="psf")
    if None in shapes:
        return
    try:
        ScaleSet(scales)
    except InputError:
        return                       # refused with its own message after reading
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            plan = plan_run(shapes[0], shapes[1], [float(s) for s in scales],
                            max_components=params["max_components"],
                            threads=params["threads"])
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
                  if k in RUN_OPTION_KINDS and k != "overwrite" and v is not None}
        params["scale_unit"] = "pixel"            # the report records pixels
        return rep["inputs"]["dirty"]["path"], rep["inputs"]["psf"]["path"], params
    except (OSError, ValueError, KeyError, TypeError) as exc:
        raise InputError(f"--resume {directory}: {OUTPUT_NAMES['report']} cannot be read "
                         f"({exc}); give the dirty image and PSF on the command line") from None


def initial_model(directory, dirty):
    """The model written in ``directory``, checked against the dirty image's grid."""
    model = read_image(os.path.join(directory, OUTPUT_NAMES["model"]), name="resumed model")
    if model.data.shape != dirty.data.shape:
        raise InputError(f"--resume {directory}: its model has shape {model.data.shape} but "
                         f"the dirty image {dirty.data.shape}; resume with the same dirty image")
    check_same_grid(dirty, model)
    return model.data
