"""Small FITS inputs for the bad-input, fuzz and interrupt tests (fast to read and run)."""

import os

import numpy as np
from astropy.io import fits
from astropy.wcs import WCS

from conftest import gaussian_psf, observe

#: Image side of the small test field, pixels; the PSF is twice that.
N = 64
#: Cell size, arcsec.
CELL = 2.0


def sky_header(n, cell=CELL):
    """A celestial header (SIN projection) for an n x n image of ``cell`` arcsec pixels."""
    w = WCS(naxis=2)
    w.wcs.ctype = ["RA---SIN", "DEC--SIN"]
    w.wcs.crval = [150.0, -30.0]
    w.wcs.crpix = [n / 2 + 1, n / 2 + 1]
    w.wcs.cdelt = [-cell / 3600.0, cell / 3600.0]
    w.wcs.cunit = ["deg", "deg"]
    return w.to_header()


def small_field(n=N):
    """Dirty image and PSF of a field with two point sources and a blob (Jy/beam)."""
    psf = gaussian_psf(n, sigma=1.8, ring=0.04)
    yy, xx = np.mgrid[:n, :n].astype(np.float64)
    sky = 0.01 * np.exp(-((yy - 0.6 * n) ** 2 + (xx - 0.4 * n) ** 2) / (2 * 4.0 ** 2))
    sky[n // 4, n // 4] += 1.0
    sky[3 * n // 4, 2 * n // 3] += 0.4
    return observe(sky, psf, noise=1e-3), psf


def write_fits(path, data, header=None, bunit="Jy/beam"):
    hdr = fits.Header() if header is None else header.copy()
    if bunit is not None:
        hdr["BUNIT"] = bunit
    fits.PrimaryHDU(np.asarray(data, np.float32), header=hdr).writeto(path, overwrite=True)
    return str(path)


def write_small_pair(folder, n=N, dirty_header=None, psf_header=None, bunit="Jy/beam"):
    """Write dirty.fits and psf.fits of `small_field` into ``folder``; return both paths."""
    dirty, psf = small_field(n)
    d = write_fits(os.path.join(folder, "dirty.fits"), dirty,
                   sky_header(n) if dirty_header is None else dirty_header, bunit=bunit)
    p = write_fits(os.path.join(folder, "psf.fits"), psf,
                   sky_header(2 * n) if psf_header is None else psf_header)
    return d, p
