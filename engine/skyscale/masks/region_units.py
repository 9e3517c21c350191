"""Plain numbers in region text that can only be degrees on the image.

Numbers without a unit are pixels in region text (`skyscale.masks.regions`); a position in
degrees written without ``deg`` would otherwise be read as pixels and silently put the
shape elsewhere.  `degree_like` tells such a position from a pixel position by the
image's own WCS [1]_.

References
----------
.. [1] Greisen, E. W. & Calabretta, M. R. 2002, A&A 395, 1061 (world coordinates).
"""

import warnings

import numpy as np
from astropy import units as u
from astropy.coordinates import Angle
from astropy.wcs.utils import wcs_to_celestial_frame

from skyscale.masks.region_grid import SHAPE_POSITIONS, pixel_window, region_wcs

__all__ = ["degree_like"]


def _sky_span_deg(cel, shape):
    """Extent of the image in its two sky coordinates, degrees (inf where unknown).

    Sampled along the border; longitudes are taken relative to the centre's, so a
    field across 0h is measured across it, and one holding a pole spans 360.
    """
    ny, nx = shape
    t = np.linspace(0.0, 1.0, 65)
    xs = np.concatenate([t * (nx - 1), np.full(65, nx - 1.0), t * (nx - 1), np.zeros(65),
                         [(nx - 1) / 2]])
    ys = np.concatenate([np.zeros(65), t * (ny - 1), np.full(65, ny - 1.0), t * (ny - 1),
                         [(ny - 1) / 2]])
    with warnings.catch_warnings(), np.errstate(invalid="ignore"):
        warnings.simplefilter("ignore")
        lon, lat = (np.asarray(v, float) for v in cel.pixel_to_world_values(xs, ys))
    if not (np.all(np.isfinite(lon)) and np.all(np.isfinite(lat))):
        return np.inf, np.inf                     # part of the image is off the sphere
    rel = (lon - lon[-1] + 180.0) % 360.0 - 180.0
    return float(np.ptp(rel)), float(np.ptp(lat))


def _frame_words(cel):
    names = list(wcs_to_celestial_frame(cel).representation_component_names)[:2]
    return [{"ra": "RA", "dec": "Dec"}.get(n, n) for n in names]


def _sky_text(cel, a, b, ta, tb):
    text = f"'{ta}deg {tb}deg'"
    if _frame_words(cel)[0] == "RA":
        text += (f" or '{Angle(a, u.deg).to_string(unit=u.hourangle, sep='hms', precision=2)} "
                 f"{Angle(b, u.deg).to_string(sep='dms', precision=1, alwayssign=True)}'")
    return text


def degree_like(shape_, shape, wcs, selected):
    """Why a position in plain numbers must be degrees, or None where it may be pixels.

    Parameters
    ----------
    shape_ : skyscale.masks.regions._Shape
        One parsed shape.
    shape : (int, int)
        The image's ``(ny, nx)``.
    wcs : astropy.wcs.WCS, astropy.io.fits.Header or None
    selected : bool
        Whether the shape read in pixels selects any pixel of the image.

    Returns
    -------
    str or None
        The message that refuses it (the position with a unit, in h/m/s and in ``px``).

    Notes
    -----
    The positions of a shape (a circle's centre, a box's corners), all written without
    units (pixels by the syntax), are refused when, read as degrees in the image's
    celestial frame, the shape falls on the image, and either read in pixels it selects
    no pixel of the image, or a number has a fractional part and the image spans under
    one degree in both sky coordinates (the pixel positions that could be misread then
    lie within one pixel).  Without a celestial WCS nothing can be told and nothing is
    refused.
    """
    starts = SHAPE_POSITIONS[shape_.kind]
    if wcs is None or not starts or not all(shape_.bare[i] and shape_.bare[i + 1]
                                            for i in starts):
        return None
    try:
        cel = region_wcs(wcs, "")
    except ValueError:
        return None
    pairs = [(shape_.values[i][1], shape_.values[i + 1][1]) for i in starts]
    if not all(-360.0 <= a <= 360.0 and -90.0 <= b <= 90.0 for a, b in pairs):
        return None                                # not longitudes and latitudes
    with warnings.catch_warnings(), np.errstate(invalid="ignore"):
        warnings.simplefilter("ignore")
        where = [tuple(float(v) for v in cel.world_to_pixel_values(a, b)) for a, b in pairs]
    xs, ys = [p[0] for p in where], [p[1] for p in where]
    if pixel_window(min(xs) - 0.5, max(xs) + 0.5, min(ys) - 0.5, max(ys) + 0.5, shape) is None:
        return None                                # in degrees it is not on this image
    lon_name, lat_name = _frame_words(cel)
    if selected:
        fractional = any(v != int(v) for pair in pairs for v in pair)
        span = _sky_span_deg(cel, shape)
        if not (fractional and span[0] < 1.0 and span[1] < 1.0):
            return None                            # may well be meant as pixels
        why = (f"the whole image spans less than a degree of {lon_name} and {lat_name}, so "
               "pixels that happen to equal its own sky position are unlikely")
    else:
        why = "read as pixels the shape selects no pixel of the image"
    words = shape_.text.split()[1:]
    toks = [(words[i], words[i + 1]) for i in starts]
    pos = (f"the position {toks[0][0]} {toks[0][1]} has" if len(toks) == 1 else
           "the corners " + " and ".join(f"{ta} {tb}" for ta, tb in toks) + " have")
    at = " and ".join(f"{lon_name} {a:g}, {lat_name} {b:g} (pixel x {x:.1f}, y {y:.1f})"
                      for (a, b), (x, y) in zip(pairs, where))
    sky = "; ".join(_sky_text(cel, a, b, ta, tb) for (a, b), (ta, tb) in zip(pairs, toks))
    px = "; ".join(f"'{ta}px {tb}px'" for ta, tb in toks)
    return (f"regions entry {shape_.entry} {shape_.text!r}: {pos} no unit, so it reads as "
            f"pixels (0-based x = column, y = row), but it looks like degrees: as {at} it "
            f"lies on this image, and {why}; for the sky write the unit, {sky}; for pixels "
            f"write {px}")
