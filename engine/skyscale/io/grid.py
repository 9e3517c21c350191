"""The image grid on the sky: cell size, orientation and position angles.

Inside skyscale an angle is measured on the pixel grid, from +y towards -x (east on a
grid with RA increasing to the left); on the sky it is east of north (BPA, a user's
beam).  The conversion uses the orientation of the celestial axes, so rotated or
flipped grids keep a beam pointing the same way on the sky.

References
----------
.. [1] Calabretta & Greisen 2002, A&A 395, 1077: the CD and PC matrices.
"""

import math

import numpy as np
from astropy import units as u

from skyscale.core.beam import wrap_pa
from skyscale.core.validate import InputError

__all__ = ["SQUARE_RTOL", "celestial_wcs", "sky_matrix", "cell_size_arcsec", "orientation",
           "sky_position_angle", "pixel_position_angle"]

#: Largest relative difference between the x and y pixel steps of a "square" grid.
SQUARE_RTOL = 1e-6


def celestial_wcs(wcs, name):
    """The celestial part of ``wcs`` (an astropy WCS, or an image with a ``wcs``)."""
    if hasattr(wcs, "data") and hasattr(wcs, "header"):     # a FitsImage
        wcs = wcs.wcs
    if wcs is None or not getattr(wcs, "has_celestial", False):
        raise InputError(f"{name} has no celestial WCS; give an image whose header "
                         "has RA/Dec-like CTYPE, CRPIX, CRVAL and CDELT or CD keywords")
    return wcs.celestial


def sky_matrix(cel):
    """Pixel (x, y) -> (east, north) intermediate offsets in arcsec, rows lng then lat."""
    mat = np.array(cel.pixel_scale_matrix, dtype=np.float64)
    for i, unit in enumerate(cel.wcs.cunit):
        mat[i] *= (u.Unit(unit) if str(unit) else u.deg).to(u.arcsec)
    return mat[[cel.wcs.lng, cel.wcs.lat]]


def cell_size_arcsec(wcs):
    """Return the pixel size in arcsec of a square celestial grid.

    Parameters
    ----------
    wcs : astropy.wcs.WCS or skyscale.io.fits.FitsImage
        Any WCS with celestial axes (CDELT, CD or PC with CDELT).

    Returns
    -------
    float
        The length of one pixel step, arcsec.

    Raises
    ------
    ValueError
        If there is no celestial WCS, or the x and y steps differ by more than
        `SQUARE_RTOL` (relative), or the pixel axes are not perpendicular.

    Examples
    --------
    >>> from astropy.wcs import WCS
    >>> w = WCS(naxis=2); w.wcs.ctype = ["RA---SIN", "DEC--SIN"]
    >>> w.wcs.cdelt = [-1.5 / 3600, 1.5 / 3600]
    >>> round(cell_size_arcsec(w), 9)
    1.5
    """
    mat = sky_matrix(celestial_wcs(wcs, "wcs"))
    sx, sy = np.sqrt((mat ** 2).sum(axis=0))
    if abs(sx - sy) > SQUARE_RTOL * max(sx, sy):
        raise InputError(f"wcs pixel grid is not square: the x step is {sx:.9g} arcsec and "
                         f"the y step {sy:.9g} arcsec; regrid the images to square pixels")
    skew = abs(float(mat[:, 0] @ mat[:, 1])) / (sx * sy)
    if skew > SQUARE_RTOL:
        raise InputError(f"wcs pixel axes are not perpendicular (skew "
                         f"{math.degrees(math.asin(min(skew, 1.0))):.6g} deg); regrid "
                         "the images to a square, unskewed grid")
    return float(0.5 * (sx + sy))


def orientation(cel):
    """(east, north) per pixel step, normalised: a rotation, possibly with a flip."""
    return sky_matrix(cel) / cell_size_arcsec(cel)


def sky_position_angle(pa_pixel, cel):
    """Position angle east of north (degrees) of a pixel-frame angle on grid ``cel``.

    The pixel frame measures from +y towards -x (east on a grid with RA increasing to
    the left); `pixel_position_angle` is the inverse.
    """
    t = math.radians(pa_pixel)
    east, north = orientation(cel) @ np.array([-math.sin(t), math.cos(t)])
    return wrap_pa(math.degrees(math.atan2(east, north)))


def pixel_position_angle(pa_sky, cel):
    """Pixel-frame angle (degrees, from +y towards -x) of a sky position angle.

    ``pa_sky`` is east of north (BPA, a user's beam); the inverse of
    `sky_position_angle` on the celestial WCS ``cel``.
    """
    t = math.radians(pa_sky)
    dx, dy = np.linalg.solve(orientation(cel), np.array([math.sin(t), math.cos(t)]))
    return wrap_pa(math.degrees(math.atan2(-dx, dy)))
