"""A whole run from a visibility file: image, deconvolve against the data, write outputs.

The API behind ``skyscale run --visibilities FILE --size N --cell ARCSEC``: the dirty
image and the PSF are made from the visibilities (`VisibilityOperator`), every major
cycle subtracts the model from the visibilities themselves, and the outputs are those
of `run_files` plus the dirty image and PSF that were made.
"""

import datetime as _dt
import logging
import os

from astropy.io import fits
from astropy.wcs import WCS

from skyscale.io.fits import FitsImage
from skyscale.job.files import merge_params, run_images
from skyscale.io.report import file_sha256
from skyscale.visibility.file import read_visibilities
from skyscale.visibility.operator import VisibilityOperator

__all__ = ["VIS_OUTPUT_NAMES", "run_visibilities", "image_header"]

logger = logging.getLogger(__name__)

#: Extra outputs of a visibility run: the images made from the data.
VIS_OUTPUT_NAMES = {"dirty": "dirty.fits", "psf": "psf.fits"}


def image_header(shape, cell_arcsec, phase_centre_deg=None):
    """FITS header of an image grid: SIN projection about the phase centre, RA to the left.

    Without a phase centre the header has no celestial WCS.
    """
    ny, nx = shape
    hdr = fits.Header()
    if phase_centre_deg is not None:
        hdr["CTYPE1"], hdr["CTYPE2"] = "RA---SIN", "DEC--SIN"
        hdr["CRPIX1"], hdr["CRPIX2"] = nx // 2 + 1.0, ny // 2 + 1.0   # 1-based
        hdr["CRVAL1"], hdr["CRVAL2"] = (float(c) for c in phase_centre_deg)
        hdr["CDELT1"], hdr["CDELT2"] = -cell_arcsec / 3600.0, cell_arcsec / 3600.0
        hdr["CUNIT1"] = hdr["CUNIT2"] = "deg"
        hdr["RADESYS"] = "ICRS"
    return hdr


def _image(data, header, bunit):
    wcs = WCS(header) if "CTYPE1" in header else None
    return FitsImage(data=data, header=header, wcs=wcs, path=None, bunit=bunit)


def run_visibilities(vis_path, out_dir, params=None, *, size, cell_arcsec, weighting="natural",
                     robust=0.0, epsilon=None, callback=None):
    """Deconvolve a skyscale visibility file with major cycles against the data.

    Parameters
    ----------
    vis_path : str
        A skyscale visibility file (`skyscale.visibility.file`).
    out_dir : str
        Output directory; as `run_files`, plus ``dirty.fits`` and ``psf.fits``.
    params : dict, optional
        Run parameters, as `run_files`; ``threads`` also sets the gridder's threads.
    size : int or (ny, nx)
        Image size in pixels (even, at least 32).
    cell_arcsec : float
        Cell size, arcsec.
    weighting : {'natural', 'uniform', 'briggs'}
    robust : float
        Briggs robustness.
    epsilon : float, optional
        Gridder accuracy; default that of `VisibilityOperator`.
    callback : callable, optional

    Returns
    -------
    result, written, report
        As `run_files`; the report's ``major_cycle`` describes the operator.
    """
    merged = merge_params(params)
    start = _dt.datetime.now(_dt.timezone.utc)
    data = read_visibilities(vis_path)
    op = VisibilityOperator(data.uvw, data.freqs, data.vis, data.weights, flags=data.flags,
                            npix=size, cell_arcsec=cell_arcsec, weighting=weighting,
                            robust=robust, epsilon=epsilon, threads=merged["threads"])
    dirty_data, psf_data = op.dirty_image(), op.psf_image()
    dirty = _image(dirty_data, image_header(dirty_data.shape, op.cell_arcsec,
                                            data.phase_centre_deg), "Jy/beam")
    psf = _image(psf_data, image_header(psf_data.shape, op.cell_arcsec,
                                        data.phase_centre_deg), "")
    inputs = {"visibilities": {"path": os.path.abspath(vis_path), "rows": data.nrow,
                               "channels": int(data.freqs.size),
                               "sha256": file_sha256(vis_path)}}
    extra_images = {"dirty": (VIS_OUTPUT_NAMES["dirty"], dirty),
                    "psf": (VIS_OUTPUT_NAMES["psf"], psf)}
    logger.info("imaging %s: %d rows, %s pixels of %g arcsec, %s weighting", vis_path,
                data.nrow, op.shape, op.cell_arcsec, weighting)
    return run_images(dirty, psf, out_dir, merged, start=start, inputs=inputs,
                      callback=callback, operator=op, cell_arcsec=op.cell_arcsec,
                      extra_images=extra_images)
