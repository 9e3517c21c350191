"""Region text: clean masks drawn as circles and boxes, in pixels or on the sky.

A mask is a boolean image on the image's grid, ``[y, x]``: True where the minor cycle
may place components.

Syntax
------
One shape per line, or several on a line separated by ``;``.  Words are separated by
spaces; ``#`` starts a comment; shape names are case-insensitive.  Shapes are applied
in order, starting from an empty mask: a shape adds its pixels, the same shape with a
leading ``-`` removes them.

=============================  ==========================================
``circle X Y R``               pixels whose centre is within ``R`` of (X, Y)
``box X1 Y1 X2 Y2``            pixels whose centre is in the rectangle with
                               opposite corners (X1, Y1) and (X2, Y2)
``all``                        every pixel (useful before exclusions)
=============================  ==========================================

Positions are pixels or sky coordinates:

- pixels: plain numbers, optionally ending in ``px``; 0-based, X = column, Y = row
  (the numpy index is ``[Y, X]``; the centre of the first pixel is 0 0);
- sky: longitude then latitude in the image's own celestial frame (RA, Dec for an
  equatorial WCS), as ``09h41m17.0s`` / ``+25d18m00s`` or in decimal with a unit,
  ``145.32deg`` / ``25.3deg``.  Both numbers of a position must be of the same kind.
- sizes (``R``): plain numbers or ``px`` are pixels; ``arcsec``, ``arcmin`` or ``deg``
  are angles on the sky.

Anything on the sky needs the image's WCS.  A sky circle holds the pixels whose sky
position is within ``R`` of the centre (great-circle distance); a sky box is the
rectangle of pixel axes spanned by its two corners.

Numbers without a unit are pixels, so a position in degrees written without ``deg`` is
refused where it cannot be meant as pixels: when, read in degrees, it
falls on the image, and either as pixels the shape selects no pixel of the image, or
it has a fractional part and the whole image spans less than one degree in each sky
coordinate (then the pixel positions that could be misread lie within one pixel, and
whole-number pixels are never refused).  Writing ``px`` on a number always reads it as
pixels.

Example::

    all; -box 0 0 255 20          # everything but the bottom 21 rows
    circle 09h41m13.8s +25d17m40s 60arcsec
    circle 205 205 6              # the isolated source

References
----------
.. [1] Greisen, E. W. & Calabretta, M. R. 2002, A&A 395, 1061 (world coordinates).
"""

import logging
import os
import re
import warnings
from dataclasses import dataclass

import numpy as np
from astropy import units as u
from astropy.coordinates import Angle, SkyCoord
from astropy.wcs.utils import proj_plane_pixel_scales, wcs_to_celestial_frame

from skyscale.masks.loading import check_shape
from skyscale.masks.region_grid import SHAPE_POSITIONS, pixel_window, region_wcs
from skyscale.masks.region_units import degree_like

__all__ = ["REGION_SHAPES", "ANGLE_UNITS", "REGION_EXAMPLE", "parse_regions",
           "regions_to_mask"]

logger = logging.getLogger(__name__)

#: Shape names of the region text, with the number of values each takes.
REGION_SHAPES = {"circle": 3, "box": 4, "all": 0}
#: Angle units accepted in region text.
ANGLE_UNITS = ("arcsec", "arcmin", "deg")
#: Shown in every region error.
REGION_EXAMPLE = ("write e.g. 'circle 120 130 15', 'box 10 20 50 60', "
                  "'-circle 09h41m17s +25d18m00s 20arcsec' (see skyscale.masks.regions)")

_NUM = r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?"
_PIXEL_RE = re.compile(rf"^({_NUM})(?:px)?$")
_BARE_RE = re.compile(rf"^{_NUM}$")
_UNIT_RE = re.compile(rf"^({_NUM})({'|'.join(ANGLE_UNITS)})$")
_HMS_RE = re.compile(r"^\d+h\d+m(?:\d+\.?\d*|\.\d+)s$")
_DMS_RE = re.compile(r"^[+-]?\d+d\d+m(?:\d+\.?\d*|\.\d+)s$")


@dataclass(frozen=True)
class _Shape:
    kind: str
    include: bool
    values: tuple          # each value: ("px", float) or ("sky", Angle)
    text: str
    entry: int
    bare: tuple = ()       # per value: True for a number written without any unit


# ------------------------------------------------------------------ region text
def _token(tok, where):
    m = _PIXEL_RE.match(tok)
    if m:
        return ("px", float(m.group(1)))
    m = _UNIT_RE.match(tok)
    if m:
        return ("sky", Angle(float(m.group(1)), m.group(2)))
    if _HMS_RE.match(tok):
        return ("sky", Angle(tok, unit=u.hourangle))
    if _DMS_RE.match(tok):
        return ("sky", Angle(tok, unit=u.deg))
    raise ValueError(f"{where}: cannot read {tok!r} as a pixel value (120, 12.5px), an "
                     f"angle ({', '.join('1' + x for x in ANGLE_UNITS)}) or a sky "
                     f"coordinate (09h41m17s, +25d18m00s); {REGION_EXAMPLE}")


def parse_regions(regions):
    """Parse region text into shapes, checking the syntax only.

    Parameters
    ----------
    regions : str, os.PathLike or sequence of str
        Region text (see the module docstring), a path to a text file holding it, or
        a list of lines.

    Returns
    -------
    shapes : list of _Shape
        In order of appearance.

    Raises
    ------
    ValueError
        Naming the entry, its text and the problem, for an unknown shape, a wrong
        number of values, an unreadable value, a position mixing pixels and sky, or a
        negative size.
    """
    if isinstance(regions, os.PathLike):
        regions = open(regions, encoding="utf-8").read()
    elif not isinstance(regions, str):
        if not all(isinstance(r, str) for r in regions):
            raise TypeError(f"regions is a {type(regions).__name__} holding non-text "
                            "items; pass a str, a pathlib.Path or a list of str")
        regions = "\n".join(regions)
    shapes = []
    entries = [e.strip() for line in regions.splitlines()
               for e in line.split("#", 1)[0].split(";")]
    for k, text in enumerate((e for e in entries if e), start=1):
        where = f"regions entry {k} {text!r}"
        words = text.split()
        name = words[0].lower()
        include = not name.startswith("-")
        name = name.lstrip("-+")
        if not name and len(words) > 1:          # "- circle ..."
            name, words = words[1].lower(), words[1:]
        if name not in REGION_SHAPES:
            raise ValueError(f"{where}: unknown shape {name!r}; valid shapes are "
                             f"{', '.join(map(repr, REGION_SHAPES))}; {REGION_EXAMPLE}")
        args = words[1:]
        if len(args) != REGION_SHAPES[name]:
            raise ValueError(f"{where}: {name} takes {REGION_SHAPES[name]} values, got "
                             f"{len(args)}; {REGION_EXAMPLE}")
        values = tuple(_token(t, where) for t in args)
        for i in SHAPE_POSITIONS[name]:
            if values[i][0] != values[i + 1][0]:
                raise ValueError(f"{where}: the position {args[i]} {args[i + 1]} mixes a "
                                 "pixel value with a sky coordinate; give both in pixels "
                                 f"or both on the sky; {REGION_EXAMPLE}")
        if name == "circle" and float(getattr(values[2][1], "value", values[2][1])) < 0:
            raise ValueError(f"{where}: the radius {args[2]} is negative; give a size >= 0; "
                             f"{REGION_EXAMPLE}")
        bare = tuple(bool(_BARE_RE.match(t)) for t in args)
        shapes.append(_Shape(name, include, values, text, k, bare))
    return shapes


def _pixel_scale_deg(cel):
    scales = proj_plane_pixel_scales(cel)
    return np.array([s * u.Unit(cu or "deg").to(u.deg) for s, cu in zip(scales, cel.wcs.cunit)])


def _to_pixel(cel, lon, lat):
    frame = wcs_to_celestial_frame(cel)
    x, y = cel.world_to_pixel(SkyCoord(lon, lat, frame=frame))
    return float(x), float(y)


def _rasterise(shape_, shape, wcs):
    """Boolean image of one shape."""
    out = np.zeros(shape, dtype=bool)
    where = f"regions entry {shape_.entry} {shape_.text!r}"
    if shape_.kind == "all":
        out[:] = True
        return out
    vals = shape_.values
    if shape_.kind == "box":
        corners = []
        for (kind, a), (_, b) in (vals[0:2], vals[2:4]):
            if kind == "px":
                corners.append((a, b))
            else:
                corners.append(_to_pixel(region_wcs(wcs, where), a, b))
        (ax, ay), (bx, by) = corners
        win = pixel_window(min(ax, bx), max(ax, bx), min(ay, by), max(ay, by), shape)
        if win is not None:
            out[win] = True
        return out
    (cx_kind, cx), (_, cy), (r_kind, r) = vals
    if cx_kind == "px" and r_kind == "px":               # circle in pixels
        win = pixel_window(cx - r, cx + r, cy - r, cy + r, shape)
        if win is not None:
            yy, xx = np.ogrid[win[0], win[1]]
            out[win] = (xx - cx) ** 2 + (yy - cy) ** 2 <= r * r * (1 + 1e-12)
        return out
    cel = region_wcs(wcs, where)
    if cx_kind == "sky":
        centre = SkyCoord(cx, cy, frame=wcs_to_celestial_frame(cel))
        px, py = (float(c) for c in cel.world_to_pixel(centre))
    else:
        px, py = cx, cy
        centre = cel.pixel_to_world(cx, cy)
    if r_kind == "px":                                      # sky centre, pixel radius
        return _rasterise(_Shape("circle", True, (("px", px), ("px", py), ("px", r)),
                                 shape_.text, shape_.entry), shape, wcs)
    r_px = r.to_value(u.deg) / _pixel_scale_deg(cel).min() + 1.0
    win = pixel_window(px - r_px, px + r_px, py - r_px, py + r_px, shape)
    if win is not None:
        yy, xx = np.mgrid[win[0], win[1]]
        sep = cel.pixel_to_world(xx.ravel(), yy.ravel()).separation(centre)
        out[win] = (sep <= r).reshape(xx.shape)
    return out


def regions_to_mask(regions, shape, wcs=None):
    """Turn region text into a boolean mask.

    Parameters
    ----------
    regions : str, os.PathLike or sequence of str
        Region text in the syntax of the module docstring, a path to a text file
        holding it (a `pathlib.Path`; a plain str is always read as the text itself),
        or a list of lines.
    shape : (int, int)
        Image shape ``(ny, nx)``.
    wcs : astropy.wcs.WCS, astropy.io.fits.Header or object with a ``.wcs``, optional
        The image's world coordinates; needed for sky coordinates and angular sizes.

    Returns
    -------
    mask : (ny, nx) ndarray of bool
        True where cleaning is allowed.

    Raises
    ------
    ValueError
        For bad region text (see `parse_regions`), a bad ``shape``, sky coordinates
        without a celestial ``wcs``, or a position in plain numbers that can only be
        degrees on this image (see the module docstring; the message gives it with a
        unit, and in pixels with ``px``).

    Warns
    -----
    UserWarning
        When a shape selects no pixel of the image, or the result is empty.

    Notes
    -----
    Sky positions are converted with ``astropy.wcs.WCS.world_to_pixel`` in the WCS's
    own celestial frame [1]_.  A pixel belongs to a circle when its centre does.

    Examples
    --------
    >>> m = regions_to_mask("circle 10 10 3; -box 10 0 20 20", (32, 32))
    >>> int(m.sum()), bool(m[10, 9]), bool(m[10, 10])
    (11, True, False)
    """
    shape = check_shape(shape)
    mask = np.zeros(shape, dtype=bool)
    for s in parse_regions(regions):
        pixels = _rasterise(s, shape, wcs)
        why = degree_like(s, shape, wcs, bool(pixels.any()))
        if why:
            raise ValueError(why)
        if not pixels.any():
            warnings.warn(f"regions entry {s.entry} {s.text!r} selects no pixel of the "
                          f"{shape[0]} x {shape[1]} image; check its position and size",
                          stacklevel=2)
        mask[pixels] = s.include
    if not mask.any():
        warnings.warn("the regions select no pixel at all: nothing would be cleaned",
                      stacklevel=2)
    return mask
