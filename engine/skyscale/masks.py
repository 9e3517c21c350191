"""Clean masks: from a FITS file, from region text, or found automatically.

A mask is a boolean image on the image's grid, ``[y, x]``: True where the minor cycle
may place components.

Region text
-----------
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
  (the numpy index is ``[Y, X]``);
- sky: longitude then latitude in the image's own celestial frame (RA, Dec for an
  equatorial WCS), as ``09h41m17.0s`` / ``+25d18m00s`` or in decimal with a unit,
  ``145.32deg`` / ``25.3deg``.  Both numbers of a position must be of the same kind.
- sizes (``R``): plain numbers or ``px`` are pixels; ``arcsec``, ``arcmin`` or ``deg``
  are angles on the sky.

Anything on the sky needs the image's WCS.  A sky circle holds the pixels whose sky
position is within ``R`` of the centre (great-circle distance); a sky box is the
rectangle of pixel axes spanned by its two corners.

Example::

    all; -box 0 0 255 20          # everything but the bottom 21 rows
    circle 09h41m13.8s +25d17m40s 60arcsec
    circle 205 205 6              # the isolated source

References
----------
.. [1] Greisen, E. W. & Calabretta, M. R. 2002, A&A 395, 1061 (world coordinates).
.. [2] Rousseeuw, P. J. & Croux, C. 1993, JASA 88, 1273 (robust noise).
"""

import logging
import os
import re
import warnings
from dataclasses import dataclass

import numpy as np
from astropy import units as u
from astropy.coordinates import Angle, SkyCoord
from astropy.io import fits
from astropy.wcs import WCS
from astropy.wcs.utils import proj_plane_pixel_scales, wcs_to_celestial_frame
from scipy import fft as sfft
from scipy import ndimage

from ._validate import as_image
from .noise import MAD_TO_SIGMA

__all__ = ["REGION_SHAPES", "ANGLE_UNITS", "REGION_EXAMPLE", "load_mask", "parse_regions",
           "regions_to_mask", "AutoMask", "auto_mask"]

logger = logging.getLogger(__name__)

#: Shape names of the region text, with the number of values each takes.
REGION_SHAPES = {"circle": 3, "box": 4, "all": 0}
#: Angle units accepted in region text.
ANGLE_UNITS = ("arcsec", "arcmin", "deg")
#: Shown in every region error.
REGION_EXAMPLE = ("write e.g. 'circle 120 130 15', 'box 10 20 50 60', "
                  "'-circle 09h41m17s +25d18m00s 20arcsec' (see skyscale.masks)")

_NUM = r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?"
_PIXEL_RE = re.compile(rf"^({_NUM})(?:px)?$")
_UNIT_RE = re.compile(rf"^({_NUM})({'|'.join(ANGLE_UNITS)})$")
_HMS_RE = re.compile(r"^\d+h\d+m(?:\d+\.?\d*|\.\d+)s$")
_DMS_RE = re.compile(r"^[+-]?\d+d\d+m(?:\d+\.?\d*|\.\d+)s$")
_POSITIONS = {"circle": (0,), "box": (0, 2), "all": ()}   # where (x, y) pairs start
_EDGE_TOL = 1e-6          # pixels: corners computed through a WCS may miss by rounding


@dataclass(frozen=True)
class _Shape:
    kind: str
    include: bool
    values: tuple          # each value: ("px", float) or ("sky", Angle)
    text: str
    entry: int


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
        for i in _POSITIONS[name]:
            if values[i][0] != values[i + 1][0]:
                raise ValueError(f"{where}: the position {args[i]} {args[i + 1]} mixes a "
                                 "pixel value with a sky coordinate; give both in pixels "
                                 f"or both on the sky; {REGION_EXAMPLE}")
        if name == "circle" and float(getattr(values[2][1], "value", values[2][1])) < 0:
            raise ValueError(f"{where}: the radius {args[2]} is negative; give a size >= 0; "
                             f"{REGION_EXAMPLE}")
        shapes.append(_Shape(name, include, values, text, k))
    return shapes


def _celestial_wcs(wcs, where):
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


def _pixel_scale_deg(cel):
    scales = proj_plane_pixel_scales(cel)
    return np.array([s * u.Unit(cu or "deg").to(u.deg) for s, cu in zip(scales, cel.wcs.cunit)])


def _to_pixel(cel, lon, lat):
    frame = wcs_to_celestial_frame(cel)
    x, y = cel.world_to_pixel(SkyCoord(lon, lat, frame=frame))
    return float(x), float(y)


def _window(lo_x, hi_x, lo_y, hi_y, shape):
    ny, nx = shape
    if not np.all(np.isfinite([lo_x, hi_x, lo_y, hi_y])):
        return None                               # off the projection: no pixel
    x0, x1 = max(int(np.ceil(lo_x - _EDGE_TOL)), 0), min(int(np.floor(hi_x + _EDGE_TOL)), nx - 1)
    y0, y1 = max(int(np.ceil(lo_y - _EDGE_TOL)), 0), min(int(np.floor(hi_y + _EDGE_TOL)), ny - 1)
    if x0 > x1 or y0 > y1:
        return None
    return slice(y0, y1 + 1), slice(x0, x1 + 1)


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
                corners.append(_to_pixel(_celestial_wcs(wcs, where), a, b))
        (ax, ay), (bx, by) = corners
        win = _window(min(ax, bx), max(ax, bx), min(ay, by), max(ay, by), shape)
        if win is not None:
            out[win] = True
        return out
    (cx_kind, cx), (_, cy), (r_kind, r) = vals
    if cx_kind == "px" and r_kind == "px":               # circle in pixels
        win = _window(cx - r, cx + r, cy - r, cy + r, shape)
        if win is not None:
            yy, xx = np.ogrid[win[0], win[1]]
            out[win] = (xx - cx) ** 2 + (yy - cy) ** 2 <= r * r * (1 + 1e-12)
        return out
    cel = _celestial_wcs(wcs, where)
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
    win = _window(px - r_px, px + r_px, py - r_px, py + r_px, shape)
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
        For bad region text (see `parse_regions`), a bad ``shape``, or sky coordinates
        without a celestial ``wcs``.

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
    shape = _check_shape(shape)
    mask = np.zeros(shape, dtype=bool)
    for s in parse_regions(regions):
        pixels = _rasterise(s, shape, wcs)
        if not pixels.any():
            warnings.warn(f"regions entry {s.entry} {s.text!r} selects no pixel of the "
                          f"{shape[0]} x {shape[1]} image; check its position and size",
                          stacklevel=2)
        mask[pixels] = s.include
    if not mask.any():
        warnings.warn("the regions select no pixel at all: nothing would be cleaned",
                      stacklevel=2)
    return mask


def _check_shape(shape):
    try:
        ny, nx = (int(n) for n in shape)
        ok = ny > 0 and nx > 0 and (ny, nx) == tuple(shape)
    except (TypeError, ValueError):
        ok = False
    if not ok:
        raise ValueError(f"shape is {shape!r}; give the image shape as two positive "
                         "integers (ny, nx), e.g. image.shape")
    return ny, nx


# ------------------------------------------------------------------ FITS masks
def load_mask(path_or_array, shape):
    """Read a user mask from a FITS file or an array on the image's grid.

    Parameters
    ----------
    path_or_array : str, os.PathLike or array_like
        A FITS file whose first image HDU holds the mask, or the mask itself.
        Leading axes of length 1 (frequency, Stokes) are dropped.
    shape : (int, int)
        The image shape ``(ny, nx)`` the mask must have.

    Returns
    -------
    mask : (ny, nx) ndarray of bool
        True where the value is finite and non-zero (may clean).

    Raises
    ------
    FileNotFoundError
        If the file does not exist.
    ValueError
        If the file holds no image, or the mask's shape differs from ``shape``.

    Warns
    -----
    UserWarning
        For NaN or infinite values (read as "do not clean"), or an empty mask.

    Examples
    --------
    >>> load_mask([[0, 1], [2, 0]], (2, 2)).tolist()
    [[False, True], [True, False]]
    """
    shape = _check_shape(shape)
    source = "mask"
    if isinstance(path_or_array, (str, os.PathLike)):
        source = f"mask file {os.fspath(path_or_array)!r}"
        if not os.path.isfile(path_or_array):
            raise FileNotFoundError(f"{source} does not exist; give the path of a FITS "
                                    "mask on the image's grid")
        try:
            with fits.open(path_or_array) as hdul:
                data = next((h.data for h in hdul
                             if h.is_image and h.data is not None and h.data.ndim >= 2), None)
                data = None if data is None else np.array(data)
        except OSError as exc:
            raise ValueError(f"{source} could not be read as FITS ({exc}); give a FITS "
                             "image, or turn region text into a mask with "
                             "regions_to_mask") from None
        if data is None:
            raise ValueError(f"{source} holds no 2-D image; write the mask as a FITS "
                             "image on the image's grid")
    else:
        data = np.asarray(path_or_array)
    data = as_image(data.astype(np.float64) if data.dtype.kind != "b" else data,
                    source, dtype=np.float64, allow_nan=True)
    if data.shape != shape:
        raise ValueError(f"{source} has shape {data.shape} but the image is {shape}; "
                         "make the mask on the image's grid (same pixels and size)")
    bad = ~np.isfinite(data)
    if bad.any():
        warnings.warn(f"{source} has {int(bad.sum())} NaN/inf pixels; they are read as "
                      "'do not clean'", stacklevel=2)
    mask = np.isfinite(data) & (data != 0)
    if not mask.any():
        warnings.warn(f"{source} selects no pixel: nothing would be cleaned", stacklevel=2)
    return mask


# ------------------------------------------------------------------ automatic mask
_FWHM_PER_SIGMA = 2.0 * np.sqrt(2.0 * np.log(2.0))
_NOISE_SAMPLES = 1 << 18      # robust noise from at most this many pixels per scale


def _positive(value, name, *, allow_zero=False, cell_arcsec=None):
    if isinstance(value, u.Quantity):
        if value.unit.physical_type == "angle":
            if cell_arcsec is None:
                raise ValueError(f"{name} is an angle ({value}) but cell_arcsec is None; "
                                 "pass cell_arcsec or give the value in pixels")
            value = value.to_value(u.arcsec) / float(cell_arcsec)
        else:
            value = value.to_value(u.pix)
    try:
        value = float(value)
    except (TypeError, ValueError):
        raise TypeError(f"{name} is {value!r}; give a number") from None
    if not np.isfinite(value) or value < 0 or (value == 0 and not allow_zero):
        raise ValueError(f"{name} is {value}; it must be a finite number "
                         f"{'>= 0' if allow_zero else '> 0'}")
    return value


def _robust_sigma(image, exclude):
    """1.4826 * MAD of ``image`` outside ``exclude``, from an even subsample [2]_."""
    keep = ~exclude if exclude is not None and exclude.mean() < 0.9 else None
    step = max(1, int(np.sqrt(image.size / _NOISE_SAMPLES)))
    data = image[::step, ::step]
    if keep is not None:
        data = data[keep[::step, ::step]]
    data = data.ravel()
    med = np.median(data)
    return float(MAD_TO_SIGMA * np.median(np.abs(data - med)))


class AutoMask:
    """A mask that follows the significant emission in the residual, scale by scale.

    Parameters
    ----------
    scales : sequence of float or ScaleSet, or Quantity ['angle']
        Scale diameters in pixels (0 = delta) whose smoothed residuals are searched.
    beam_fwhm_px : float, Quantity or Beam
        Restoring-beam FWHM in pixels (an object with ``major`` and ``minor`` uses
        their geometric mean).  Sets the island size and the growth.
    sigma : float
        Detection threshold in units of the robust noise of each smoothed image.
    grow_beams : float
        Islands are grown by this many beam FWHMs (dilation by a disk).
    min_island_beams : float
        Islands with fewer pixels than this many beam areas are dropped, unless they
        touch protected pixels.
    smooth_fraction : float
        The Gaussian used for scale ``s`` has FWHM ``smooth_fraction * s`` pixels.
    include_negative : bool
        Also follow significant negative residuals.
    cell_arcsec : float, optional
        Cell size, to accept angles for ``scales`` and ``beam_fwhm_px``.

    Raises
    ------
    ValueError, TypeError
        For an empty or negative scale list, or a non-positive beam, sigma or fraction.

    Notes
    -----
    At every `update` the residual is smoothed by a unit-sum Gaussian per scale (one
    FFT of the zero-padded residual, then one inverse FFT per distinct kernel); scale
    0 and kernels narrower than half a pixel use the residual itself.  Each smoothed
    image is thresholded at ``sigma`` times its own robust noise, 1.4826 * MAD [2]_
    (smoothing lowers the noise, so broad faint emission stands out at large scales),
    the detections are united, small islands dropped (``scipy.ndimage.label``,
    8-connected) and the rest grown.  Pixels holding model flux and pixels of the
    previous mask are always kept, so the mask only grows over major cycles.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> residual = rng.normal(0, 1, (128, 128)).astype(np.float32)
    >>> residual[60:68, 60:68] += 20
    >>> m = AutoMask([0, 8], beam_fwhm_px=4).update(residual)
    >>> bool(m[64, 64]), bool(m[5, 5])
    (True, False)
    """

    def __init__(self, scales, beam_fwhm_px, *, sigma=5.0, grow_beams=1.0,
                 min_island_beams=1.0, smooth_fraction=0.5, include_negative=False,
                 cell_arcsec=None):
        if isinstance(scales, u.Quantity):
            scales = [_positive(s, "scales", allow_zero=True, cell_arcsec=cell_arcsec)
                      for s in np.atleast_1d(scales)]
        try:
            px = np.array([float(s) for s in scales], dtype=np.float64)
        except (TypeError, ValueError):
            raise TypeError(f"scales is {scales!r}; give diameters in pixels, e.g. "
                            "[0, 4, 8, 16]") from None
        if px.size == 0 or not np.all(np.isfinite(px)) or np.any(px < 0):
            raise ValueError(f"scales is {px.tolist()}; give at least one finite "
                             "diameter >= 0 pixels, e.g. [0, 4, 8, 16]")
        if hasattr(beam_fwhm_px, "major") and hasattr(beam_fwhm_px, "minor"):
            beam_fwhm_px = np.sqrt(float(beam_fwhm_px.major) * float(beam_fwhm_px.minor))
        self.scales = tuple(float(s) for s in np.unique(px))
        self.beam_fwhm_px = _positive(beam_fwhm_px, "beam_fwhm_px", cell_arcsec=cell_arcsec)
        self.sigma = _positive(sigma, "sigma")
        if self.sigma < 3:
            warnings.warn(f"sigma is {self.sigma}; below 3 the mask picks up noise "
                          "peaks", stacklevel=2)
        self.grow_beams = _positive(grow_beams, "grow_beams", allow_zero=True)
        self.min_island_beams = _positive(min_island_beams, "min_island_beams",
                                          allow_zero=True)
        self.smooth_fraction = _positive(smooth_fraction, "smooth_fraction")
        self.include_negative = bool(include_negative)
        #: Beam area in pixels, pi FWHM^2 / (4 ln 2) (analytic).
        self.beam_area_px = np.pi * self.beam_fwhm_px ** 2 / (4 * np.log(2))
        #: The mask of the last `update`, or None.
        self.mask = None
        #: Robust noise of each smoothed image at the last update, by scale.
        self.noise = {}

    def reset(self):
        """Forget the previous mask (start over on a new image)."""
        self.mask = None
        self.noise = {}

    def _kernel_sigmas(self):
        """Gaussian sigma (pixels) per scale; 0 means no smoothing."""
        sig = {}
        for s in self.scales:
            fwhm = self.smooth_fraction * s
            sig[s] = fwhm / _FWHM_PER_SIGMA if fwhm >= 0.5 else 0.0
        return sig

    def _smoothed(self, image):
        """Yield (scale, smoothed image) with one forward FFT for all kernels."""
        sig = self._kernel_sigmas()
        widest = max(sig.values())
        ny, nx = image.shape
        spec = None
        if widest > 0:
            pad = int(np.ceil(4 * widest))
            shape = (sfft.next_fast_len(ny + 2 * pad, real=True),
                     sfft.next_fast_len(nx + 2 * pad, real=True))
            spec = sfft.rfft2(image, s=shape)
            fy = sfft.fftfreq(shape[0])[:, None] ** 2
            fx = sfft.rfftfreq(shape[1])[None, :] ** 2
        done = {}
        for s in self.scales:
            if sig[s] not in done:
                if sig[s] == 0:
                    done[sig[s]] = image
                else:
                    # Fourier transform of a unit-sum Gaussian (analytic).
                    transfer = np.exp(-2 * np.pi ** 2 * sig[s] ** 2 * (fy + fx))
                    done[sig[s]] = sfft.irfft2(spec * transfer.astype(spec.real.dtype),
                                               s=shape)[:ny, :nx]
            yield s, done[sig[s]]

    def _grow(self, mask):
        radius = self.grow_beams * self.beam_fwhm_px
        if radius < 1 or not mask.any():
            return mask
        r = int(np.floor(radius))
        yy, xx = np.mgrid[-r:r + 1, -r:r + 1]
        disk = (xx ** 2 + yy ** 2 <= radius ** 2).astype(np.float64)
        ny, nx = mask.shape
        shape = (sfft.next_fast_len(ny + 2 * r + 1, real=True),
                 sfft.next_fast_len(nx + 2 * r + 1, real=True))
        kern = np.zeros(shape)
        kern[:2 * r + 1, :2 * r + 1] = disk
        conv = sfft.irfft2(sfft.rfft2(mask.astype(np.float64), s=shape) * sfft.rfft2(kern),
                           s=shape)
        # Linear convolution with the disk centred: output offset by r.  Counts are
        # integers, so > 0.5 is exact dilation.
        return conv[r:r + ny, r:r + nx] > 0.5

    def update(self, residual, model=None, previous=None):
        """Compute the mask for this major cycle.

        Parameters
        ----------
        residual : (ny, nx) array_like
            Current residual (or dirty) image, Jy/beam.
        model : (ny, nx) array_like, optional
            Current model; its non-zero pixels are always in the mask.
        previous : (ny, nx) array_like of bool, optional
            Pixels that must stay in the mask.  Default: the mask of the last update.

        Returns
        -------
        mask : (ny, nx) ndarray of bool
            Also stored as ``self.mask``.

        Raises
        ------
        ValueError
            If ``model`` or ``previous`` is not on the residual's grid, or the residual
            differs in shape from the last update's (call `reset` first).
        """
        res = as_image(residual, "residual")
        shape = res.shape
        protected = np.zeros(shape, dtype=bool)
        if previous is None and self.mask is not None:
            if self.mask.shape != shape:
                raise ValueError(f"residual has shape {shape} but the last update's was "
                                 f"{self.mask.shape}; call reset() before masking a new image")
            previous = self.mask
        for name, extra in (("previous", previous), ("model", model)):
            if extra is None:
                continue
            extra = np.asarray(extra)
            if extra.shape != shape:
                raise ValueError(f"{name} has shape {extra.shape} but residual has {shape}; "
                                 f"pass a {name} on the residual's grid")
            protected |= np.nan_to_num(extra) != 0
        detected = np.zeros(shape, dtype=bool)
        self.noise = {}
        for s, img in self._smoothed(res):
            noise = _robust_sigma(img, protected)
            if noise == 0:
                noise = float(np.std(img))
            self.noise[s] = noise
            if noise == 0:
                continue
            level = self.sigma * noise
            detected |= (np.abs(img) if self.include_negative else img) > level
        labels, n = ndimage.label(detected, structure=np.ones((3, 3), dtype=bool))
        if n:
            sizes = np.bincount(labels.ravel())
            keep = sizes >= self.min_island_beams * self.beam_area_px
            keep[np.unique(labels[protected])] = True
            keep[0] = False
            detected = keep[labels]
        mask = self._grow(detected) | protected
        self.mask = mask
        logger.debug("auto mask: %d islands found, %d pixels (%.2f%%); noise by scale %s",
                     n, int(mask.sum()), 100.0 * mask.mean(),
                     {k: f"{v:.3g}" for k, v in self.noise.items()})
        return mask


def auto_mask(residual, scales, beam_fwhm_px, *, model=None, previous=None, **options):
    """One-shot automatic mask: ``AutoMask(scales, beam_fwhm_px, **options).update(...)``.

    Parameters
    ----------
    residual : (ny, nx) array_like
        Residual or dirty image, Jy/beam.
    scales : sequence of float
        Scale diameters in pixels.
    beam_fwhm_px : float, Quantity or Beam
        Beam FWHM in pixels.
    model, previous : (ny, nx) array_like, optional
        Pixels always kept (see `AutoMask.update`).
    **options
        Keyword options of `AutoMask` (sigma, grow_beams, min_island_beams, ...).

    Returns
    -------
    mask : (ny, nx) ndarray of bool

    Examples
    --------
    >>> import numpy as np
    >>> bool(auto_mask(np.zeros((64, 64)), [0, 4], 3.0).any())
    False
    """
    return AutoMask(scales, beam_fwhm_px, **options).update(residual, model=model,
                                                            previous=previous)
