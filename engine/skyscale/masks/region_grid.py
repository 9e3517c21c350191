"""Where region text lands on the image: the celestial WCS a shape needs, the pixels
whose centres lie in a window, and which values of a shape are positions.

Shared by the reader of region text (`skyscale.masks.regions`) and the check for
positions that can only be degrees (`skyscale.masks.region_units`).
"""

import numpy as np
from astropy.io import fits
from astropy.wcs import WCS

__all__ = ["SHAPE_POSITIONS", "region_wcs", "pixel_window"]

#: Where each shape's (x, y) position pairs start among its numbers.
SHAPE_POSITIONS = {"circle": (0,), "box": (0, 2), "all": ()}
_EDGE_TOL = 1e-6          # pixels: corners computed through a WCS may miss by rounding


def region_wcs(wcs, where):
    """The celestial WCS of ``wcs`` (a WCS, a FITS header or an image carrying one), for
    the region entry ``where`` that needs it; ValueError naming it when there is none."""
    if wcs is None:
        raise ValueError(f"{where} uses sky coordinates or angles but wcs is None; pass "
                         "the image's WCS (astropy.wcs.WCS or its FITS header), or give "
                         "the shape in pixels")
    if isinstance(wcs, fits.Header):
        wcs = WCS(wcs)
    if not isinstance(wcs, WCS):
        wcs = getattr(wcs, "wcs", wcs)            # an image object carrying its WCS
    if not isinstance(wcs, WCS) or not wcs.has_celestial:
        raise ValueError(f"wcs ({type(wcs).__name__}) has no celestial axes, needed by "
                         f"{where}; pass a WCS with RA/Dec-like axes or use pixels")
    return wcs.celestial


def pixel_window(lo_x, hi_x, lo_y, hi_y, shape):
    """``(rows, columns)`` slices of the pixels whose centres lie in the given x and y
    ranges, clipped to the image; None when no pixel does."""
    ny, nx = shape
    if not np.all(np.isfinite([lo_x, hi_x, lo_y, hi_y])):
        return None                               # off the projection: no pixel
    x0, x1 = max(int(np.ceil(lo_x - _EDGE_TOL)), 0), min(int(np.floor(hi_x + _EDGE_TOL)), nx - 1)
    y0, y1 = max(int(np.ceil(lo_y - _EDGE_TOL)), 0), min(int(np.floor(hi_y + _EDGE_TOL)), ny - 1)
    if x0 > x1 or y0 > y1:
        return None
    return slice(y0, y1 + 1), slice(x0, x1 + 1)
