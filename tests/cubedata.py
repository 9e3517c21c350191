"""Small synthetic FITS cubes for the cube tests and the cube benchmark.

Each plane holds a point source and a Gaussian blob whose fluxes change from plane to
plane, observed through a round Gaussian PSF whose width changes too; the planes
sit on a frequency axis, with a degenerate Stokes axis in front (4-D, as imaging
programs commonly write cubes).
"""

import numpy as np
from astropy.io import fits

from conftest import gaussian_psf, observe

#: Cell size of the test cubes, arcsec.
CELL = 2.0
#: Frequency of plane 0 and channel width, Hz (an invented band).
FREQ0, DFREQ = 3.1e9, 2.0e6


def plane_sigmas(nplanes):
    """PSF Gaussian sigma (pixels) of each plane: 1.6 to 2.6."""
    return np.linspace(1.6, 2.6, nplanes)


def header(n, nplanes, *, freq0=FREQ0, dfreq=DFREQ):
    h = fits.Header()
    h["CTYPE1"], h["CRPIX1"], h["CRVAL1"], h["CDELT1"], h["CUNIT1"] = \
        "RA---SIN", n / 2 + 1, 150.0, -CELL / 3600, "deg"
    h["CTYPE2"], h["CRPIX2"], h["CRVAL2"], h["CDELT2"], h["CUNIT2"] = \
        "DEC--SIN", n / 2 + 1, -30.0, CELL / 3600, "deg"
    h["CTYPE3"], h["CRPIX3"], h["CRVAL3"], h["CDELT3"], h["CUNIT3"] = \
        "FREQ", 1.0, freq0, dfreq, "Hz"
    h["CTYPE4"], h["CRPIX4"], h["CRVAL4"], h["CDELT4"] = "STOKES", 1.0, 1.0, 1.0
    h["BUNIT"] = "Jy/beam"
    return h


def sky_plane(n, k, nplanes):
    yy, xx = np.mgrid[:n, :n].astype(np.float64)
    sky = 0.02 * (1 + k / nplanes) * np.exp(-((yy - 0.4 * n) ** 2 + (xx - 0.55 * n) ** 2)
                                            / (2 * (0.06 * n) ** 2))
    sky[int(0.7 * n), int(0.3 * n)] += 0.8 - 0.05 * k
    return sky


def write_cube(folder, *, n=64, nplanes=6, nan_planes=(), psf_planes=None, freq0=FREQ0,
               dfreq=DFREQ):
    """Write ``cube.fits`` and ``psf.fits`` into ``folder``; return their paths and the planes.

    ``psf_planes`` (default ``nplanes``) PSF planes of twice the image size.
    """
    sig = plane_sigmas(nplanes)
    dirty = np.empty((1, nplanes, n, n), np.float32)
    psfs = []
    for k in range(nplanes):
        psf = gaussian_psf(n, sigma=sig[k])
        psfs.append(psf)
        dirty[0, k] = observe(sky_plane(n, k, nplanes), psf, noise=1e-3, seed=k)
    for k in nan_planes:
        dirty[0, k] = np.nan
    npsf = nplanes if psf_planes is None else psf_planes
    psf_cube = np.stack([psfs[min(k, nplanes - 1)] for k in range(npsf)])[None]
    cube_path, psf_path = folder / "cube.fits", folder / "psf.fits"
    fits.PrimaryHDU(dirty, header(n, nplanes)).writeto(cube_path)
    hp = header(2 * n, npsf, freq0=freq0, dfreq=dfreq)
    del hp["BUNIT"]
    fits.PrimaryHDU(psf_cube, hp).writeto(psf_path)
    return cube_path, psf_path, dirty[0], np.stack(psfs)
