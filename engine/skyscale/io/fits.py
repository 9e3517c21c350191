"""FITS images in and out: WCS, restoring-beam keywords, provenance and atomic writes.

Restoring-beam keywords follow common practice: ``BMAJ`` and ``BMIN`` are FWHMs in
degrees and ``BPA`` is the position angle in degrees east of north.  Inside skyscale
a `~skyscale.core.beam.Beam` is in pixels with its angle measured on the pixel grid; the
conversion uses the image's cell size and the orientation of its celestial axes, so
rotated or flipped grids keep the beam pointing the same way on the sky.

An output written ``like`` an image read from FITS keeps the input's axis structure
(degenerate frequency or Stokes axes come back with NAXISn = 1), its world-coordinate
cards and its observation cards; `skyscale.io.fits_cards` says which.

Every output is written to a temporary file in the target's directory and then
renamed over the target, so a reader never sees half a file, and an existing file is
only replaced when asked.

References
----------
.. [1] FITS Standard 4.0 (IAU FITS Working Group 2018): keywords and data layout.
.. [2] Greisen & Calabretta 2002, A&A 395, 1061; Calabretta & Greisen 2002, A&A 395,
   1077: world coordinates.
"""

import csv
import datetime as _dt
import importlib.metadata
import math
import os
import warnings
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
from astropy.io import fits
from astropy.utils.exceptions import AstropyWarning
from astropy.wcs import WCS

from skyscale.core.memory import available_memory
from skyscale.core.validate import InputError, MissingFileError, as_image
from skyscale.io.atomic import atomic_output as _atomic_output
from skyscale.core.beam import Beam
from skyscale.io.fits_cards import HISTORY_WIDTH, is_axis_card, kept_cards, wrap_history
from skyscale.io.grid import (SQUARE_RTOL, cell_size_arcsec, orientation, pixel_position_angle,
                              sky_position_angle)

__all__ = ["FitsImage", "HISTORY_WIDTH", "SQUARE_RTOL", "GRID_RTOL", "RESERVED_KEYWORDS",
           "read_image", "read_shape", "cell_size_arcsec", "check_same_grid", "write_image",
           "provenance_history", "write_table_csv", "sky_position_angle",
           "pixel_position_angle"]

#: Largest relative difference in cell size (and in the orientation matrix) between
#: an image and its PSF.
GRID_RTOL = 1e-5
#: Keywords that ``extra`` may not set: structure, checksums, and what has its own argument.
RESERVED_KEYWORDS = frozenset({"SIMPLE", "BITPIX", "NAXIS", "EXTEND", "BSCALE", "BZERO",
                               "CHECKSUM", "DATASUM", "END", "HISTORY", "COMMENT",
                               "BUNIT", "BMAJ", "BMIN", "BPA"})


@dataclass
class FitsImage:
    """A 2-D image read from FITS.

    Attributes
    ----------
    data : (ny, nx) ndarray of float32
        The pixels, degenerate extra axes removed.
    header : astropy.io.fits.Header
        The primary header as read (all axes); `write_image` with ``like=`` this image
        writes the axis structure and the cards that still apply back out.
    wcs : astropy.wcs.WCS or None
        The 2-D celestial WCS, or None when the header has none.
    path : str or None
        Where it was read from.
    beam : Beam or None
        Restoring beam (pixels) from BMAJ/BMIN/BPA, if present.
    bunit : str or None
        The BUNIT keyword.
    """

    data: np.ndarray
    header: fits.Header
    wcs: object = None
    path: str = None
    beam: Beam = None
    bunit: str = None


def _header_beam(header, wcs, label):
    if "BMAJ" not in header or "BMIN" not in header:
        return None
    if wcs is None:
        warnings.warn(f"{label} has BMAJ/BMIN but no celestial WCS to turn degrees into "
                      "pixels; its beam is ignored", stacklevel=3)
        return None
    if "BPA" not in header:
        warnings.warn(f"{label} has BMAJ/BMIN but no BPA; taking BPA = 0", stacklevel=3)
    try:
        cell = cell_size_arcsec(wcs)
        return Beam(float(header["BMAJ"]) * 3600.0 / cell, float(header["BMIN"]) * 3600.0 / cell,
                    pixel_position_angle(float(header.get("BPA", 0.0)), wcs))
    except (ValueError, TypeError) as exc:
        warnings.warn(f"{label} beam keywords are not usable ({exc}); its beam is ignored",
                      stacklevel=3)
        return None


#: Bytes per pixel of each FITS BITPIX value (FITS Standard 4.0, Table 8).
_BITPIX_BYTES = {8: 1, 16: 2, 32: 4, 64: 8, -32: 4, -64: 8}


def _one_line(exc, limit=160):
    """An exception's message on one line, without hints about library keywords."""
    text = " ".join(str(exc).split())
    text = text.split(" If this is really a FITS file")[0]
    return text if len(text) <= limit else text[:limit - 3] + "..."


def _declared_shape(header, label):
    """(shape, bytes) the primary header declares, refusing nonsense before any read."""
    bitpix = header.get("BITPIX")
    naxis = header.get("NAXIS")
    if bitpix not in _BITPIX_BYTES or isinstance(bitpix, bool):
        raise InputError(f"{label} has BITPIX = {bitpix!r}, which FITS does not allow "
                         f"({', '.join(map(str, _BITPIX_BYTES))}); the header is corrupt")
    if not isinstance(naxis, int) or isinstance(naxis, bool) or not 0 <= naxis <= 999:
        raise InputError(f"{label} has NAXIS = {naxis!r}; the header is corrupt (FITS "
                         "needs a whole number from 0 to 999)")
    dims = []
    for k in range(1, naxis + 1):
        n = header.get(f"NAXIS{k}")
        if not isinstance(n, int) or isinstance(n, bool) or n < 0:
            raise InputError(f"{label} has NAXIS{k} = {n!r}; the header is corrupt (FITS "
                             "needs a whole number >= 0)")
        dims.append(n)
    count = math.prod(dims) if dims else 0
    return tuple(reversed(dims)), count * _BITPIX_BYTES[bitpix]


def _header_checked(path, label):
    """The primary header alone, checked against the file's length: (header, shape, bytes).

    Returns None for a compressed file (its length says nothing about the data).
    """
    with open(path, "rb") as fh:
        head = fh.read(80)
    if head[:2] == b"\x1f\x8b":
        return None
    if not head.startswith(b"SIMPLE  ="):
        raise InputError(f"{label} is not a FITS file (a FITS file starts with the SIMPLE "
                         "card); give the FITS image itself")
    size = os.path.getsize(path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", AstropyWarning)
        with open(path, "rb") as fh:
            header = fits.Header.fromfile(fh)
            start = fh.tell()
    shape, nbytes = _declared_shape(header, label)
    if start + nbytes > size:
        raise InputError(
            f"{label} is truncated: its header declares {nbytes} bytes of data (shape "
            f"{shape}) but the file holds {max(size - start, 0)}; write the file again (was "
            "a copy or download interrupted?)")
    return header, shape, nbytes


def _open_checked(path, label):
    """Header and data of the primary HDU, after checking the file can hold them."""
    _header_checked(path, label)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", AstropyWarning)
        with fits.open(path, memmap=False, lazy_load_hdus=True) as hdul:
            header = hdul[0].header.copy()
            shape, nbytes = _declared_shape(header, label)
            need = nbytes + 4 * (nbytes // _BITPIX_BYTES[header["BITPIX"]])
            avail = available_memory()
            if avail is not None and need > avail:
                raise InputError(
                    f"{label} declares shape {shape}: reading it needs about "
                    f"{need / 2**30:.1f} GiB but {avail / 2**30:.1f} GiB is available; "
                    "cut out a smaller image or use a machine with more memory")
            data = hdul[0].data
            data = None if data is None else np.array(data)
    return header, data


def _guarded(call, path, label):
    try:
        return call(path, label)
    except InputError:
        raise
    except MemoryError:
        raise InputError(f"{label} does not fit in memory; cut out a smaller image") from None
    except Exception as exc:  # noqa: BLE001 - astropy raises many types for broken files
        raise InputError(f"{label} could not be read as FITS, its header or data is corrupt "
                         f"({type(exc).__name__}: {_one_line(exc)}); write the file "
                         "again") from None


def _label(path, name):
    path = os.fspath(path)
    label = f"{name} file {path}" if name else path
    if os.path.isdir(path):
        raise InputError(f"{label} is a folder; give the FITS file inside it")
    if not os.path.isfile(path):
        raise MissingFileError(f"{label} does not exist; check the path")
    return path, label


def read_shape(path, *, name=None):
    """The 2-D image shape a FITS file declares, from its header alone (no data read).

    Leading axes of length 1 are dropped; None for a compressed file or one that is not
    a single 2-D plane.  Raises as `read_image` does for files that are missing, not
    FITS, truncated or corrupt.
    """
    path, label = _label(path, name)
    checked = _guarded(_header_checked, path, label)
    if checked is None:
        return None
    shape = tuple(n for n in checked[1][:-2] if n != 1) + tuple(checked[1][-2:])
    return shape if len(shape) == 2 else None


def read_image(path, *, name=None):
    """Read a 2-D image (or one plane with degenerate extra axes) from a FITS file.

    Parameters
    ----------
    path : str or os.PathLike
        The FITS file; the image is the primary HDU.
    name : str, optional
        What the image is (for example ``'psf'``), used in messages.

    Returns
    -------
    FitsImage

    Raises
    ------
    MissingFileError
        If ``path`` does not exist (also a `FileNotFoundError`).
    InputError
        If the file is not FITS, is truncated, has a corrupt header or WCS, declares
        more data than memory holds (checked before reading), the primary HDU holds no
        image or fewer than 2 axes, its celestial axes are not the first two, or an
        extra axis has more than one plane.

    Examples
    --------
    >>> import os, tempfile, numpy as np
    >>> with tempfile.TemporaryDirectory() as d:
    ...     p = write_image(os.path.join(d, "a.fits"), np.ones((3, 4)), bunit="Jy/beam")
    ...     img = read_image(p)
    >>> img.data.shape, img.data.dtype, img.bunit
    ((3, 4), dtype('float32'), 'Jy/beam')
    """
    path, label = _label(path, name)
    header, data = _guarded(_open_checked, path, label)
    if data is None or data.ndim < 2:
        raise InputError(f"{label}: the primary HDU holds no 2-D image (NAXIS="
                         f"{header.get('NAXIS', 0)}); write the image into the primary HDU")
    full = _header_wcs(header, label)
    if full is not None and full.has_celestial:
        if {full.wcs.lng, full.wcs.lat} != {0, 1}:
            raise InputError(f"{label}: the celestial axes are FITS axes {full.wcs.lng + 1} "
                             f"and {full.wcs.lat + 1}; skyscale needs them as axes 1 and 2 "
                             "(reorder the cube)")
    extra = data.shape[:-2]
    if any(n != 1 for n in extra):
        def axis(k):
            ctype = str(header.get(f"CTYPE{k}", "")).strip()
            return f"axis {k}" + (f" ({ctype})" if ctype else "")
        axes = ", ".join(f"{axis(data.ndim - i)} has {n} planes"
                         for i, n in enumerate(extra) if n != 1)
        raise InputError(f"{label} has shape {data.shape}: {axes}; skyscale run reads one "
                         f"2-D plane: cut one plane out{_cube_hint()}")
    data = np.ascontiguousarray(data.reshape(data.shape[-2:]), dtype=np.float32)
    wcs = full.celestial if full is not None and full.has_celestial else None
    bunit = header.get("BUNIT")
    return FitsImage(data=data, header=header, wcs=wcs, path=path,
                     beam=_header_beam(header, wcs, label),
                     bunit=None if bunit is None else str(bunit).strip())


def _cube_hint():
    import importlib.util
    if importlib.util.find_spec("skyscale.cube") is not None:
        return ", or deconvolve every plane with skyscale cube"
    return ""


def _header_wcs(header, label):
    if not any(k in header for k in ("CTYPE1", "CTYPE2")):
        return None
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", AstropyWarning)
            wcs = WCS(header, fix=True)
            wcs.has_celestial  # noqa: B018 - parses the axis types now, inside the guard
            return wcs
    except Exception as exc:  # noqa: BLE001 - astropy.wcs raises many types
        raise InputError(f"{label} has world-coordinate keywords that cannot be used "
                         f"({type(exc).__name__}: {_one_line(exc)}); fix CTYPE, CRPIX, "
                         "CRVAL, CDELT/CD or remove them") from None


def check_same_grid(image, psf, *, name="psf"):
    """Check that the PSF was made on the image's grid: same cell size and orientation.

    Parameters
    ----------
    image, psf : FitsImage, astropy.wcs.WCS or None
        The PSF may be larger than the image.  When either has no celestial WCS the
        check is skipped.

    Raises
    ------
    InputError
        If the cell sizes differ by more than `GRID_RTOL` (relative) or one grid is
        rotated or flipped relative to the other.  Messages call the second image
        ``name`` (for example ``'mask'``).

    Examples
    --------
    >>> from astropy.wcs import WCS
    >>> w = WCS(naxis=2); w.wcs.ctype = ["RA---SIN", "DEC--SIN"]
    >>> w.wcs.cdelt = [-1 / 3600, 1 / 3600]
    >>> check_same_grid(w, None) is None
    True
    """
    wcs = [x.wcs if isinstance(x, FitsImage) else x for x in (image, psf)]
    if any(w is None or not w.has_celestial for w in wcs):
        return None
    cel_i, cel_p = (w.celestial for w in wcs)
    ci, cp = cell_size_arcsec(cel_i), cell_size_arcsec(cel_p)
    if abs(ci - cp) > GRID_RTOL * ci:
        raise InputError(f"{name} cell size is {cp:.9g} arcsec but the image's is {ci:.9g} "
                         f"arcsec; make the {name} on the image's grid (same cell size)")
    oi, op = orientation(cel_i), orientation(cel_p)
    if np.max(np.abs(oi - op)) > GRID_RTOL:
        def describe(o):
            dx, dy = np.linalg.solve(o, [0.0, 1.0])
            side = "-x" if np.linalg.det(o) < 0 else "+x"
            return f"north {math.degrees(math.atan2(-dx, dy)):.4f} deg from +y, east to {side}"
        raise InputError(f"{name} grid orientation ({describe(op)}) differs from the "
                         f"image's ({describe(oi)}); make the {name} on the image's grid")
    return None


def _like_wcs(like):
    """Return ``(celestial WCS or None, (ny, nx) or None)`` from ``like``."""
    if like is None:
        return None, None
    if isinstance(like, FitsImage):
        return like.wcs, like.data.shape
    if isinstance(like, fits.Header):
        w = WCS(like, fix=True)
        shape = (like["NAXIS2"], like["NAXIS1"]) if "NAXIS2" in like else None
        return (w.celestial if w.has_celestial else None), shape
    if isinstance(like, WCS):
        return (like.celestial if like.has_celestial else None), None
    raise TypeError(f"like is {type(like).__name__}; pass a FitsImage, an astropy "
                    "Header or an astropy WCS (or None)")


#: Cards of the time reference, which `astropy.wcs.WCS.to_header` writes (MJDREF = 0.0)
#: even for a WCS that never had one.
_TIME_REFERENCE = ("MJDREF", "MJDREFI", "MJDREFF", "DATEREF", "JDREF", "JDREFI", "JDREFF")


def _has_time_reference(wcs):
    return bool(np.any(np.nan_to_num(wcs.wcs.mjdref) != 0.0))


def _base_header(like, wcs, shape):
    """Cards from ``like`` for an output of ``shape``: ``(header, shape to write)``.

    An image or header read from FITS gives its own cards (`kept_cards`), with its axis
    structure; the celestial WCS (``to_header``) fills in only where it gives none.
    """
    source = like.header if isinstance(like, FitsImage) else like
    header, out_shape, axes = fits.Header(), tuple(shape), False
    if isinstance(source, fits.Header):
        header, out_shape, axes = kept_cards(source, shape)
        if not any(str(source.get(f"CTYPE{k}", "")).strip() for k in (1, 2)):
            # no WCS on the image axes: written as a plain 2-D image, as it is read
            for key in [k for k in header if is_axis_card(k)]:
                del header[key]
            out_shape, axes = tuple(shape), False
    if wcs is not None and not axes:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", AstropyWarning)
            cards = wcs.to_header()
        unset = () if _has_time_reference(wcs) else _TIME_REFERENCE
        for card in cards.cards:
            if card.keyword not in header and card.keyword not in unset:
                header.append(card)
    return header, out_shape


def _skyscale_version():
    try:
        return importlib.metadata.version("skyscale")
    except importlib.metadata.PackageNotFoundError:
        return "unknown"


def _timestamp(value):
    if isinstance(value, _dt.datetime):
        return value.isoformat(timespec="seconds")
    if isinstance(value, (int, float)):
        return _dt.datetime.fromtimestamp(value, _dt.timezone.utc).isoformat(timespec="seconds")
    return str(value)


def provenance_history(parameters, start=None, end=None):
    """HISTORY lines recording the skyscale version, the parameters and the run times.

    Parameters
    ----------
    parameters : dict
        Parameter name -> value, in the order to record them.
    start, end : datetime, float (Unix time), str or None
        When the run started and ended; None leaves the line out.

    Returns
    -------
    list of str
        ASCII lines of at most `HISTORY_WIDTH` characters.  A long entry continues on
        lines starting with two spaces (`skyscale.io.fits_cards.HISTORY_INDENT`), broken
        before a space or after a separator, so no value of a list is cut;
        `skyscale.io.fits_cards.join_history` joins them back to the exact entry.

    Examples
    --------
    >>> lines = provenance_history({"loop_gain": 0.1}, None, None)
    >>> lines[0].startswith("skyscale version "), lines[1]
    (True, 'skyscale parameter loop_gain = 0.1')
    """
    if parameters is None:
        parameters = {}
    if not isinstance(parameters, Mapping):
        raise TypeError(f"parameters is {type(parameters).__name__}; pass a dict of "
                        "parameter name -> value")
    entries = [f"skyscale version {_skyscale_version()}"]
    entries += [f"skyscale parameter {key} = {value}" for key, value in parameters.items()]
    if start is not None:
        entries.append(f"skyscale start {_timestamp(start)}")
    if end is not None:
        entries.append(f"skyscale end {_timestamp(end)}")
    return [line for entry in entries for line in wrap_history(entry)]


def write_image(path, data, *, like=None, bunit, beam=None, history=(), extra=None,
                overwrite=False):
    """Write a 2-D image to FITS atomically, with WCS, beam keywords and HISTORY.

    Parameters
    ----------
    path : str or os.PathLike
        Output file.
    data : (ny, nx) ndarray
        Pixels; float64 is written as float64, anything else as float32.
    like : FitsImage, astropy Header or astropy WCS, optional
        The input image on the same grid as ``data``.  From an image or header read
        from FITS the output keeps the axis structure (degenerate axes such as a
        frequency or Stokes axis are written back with NAXISn = 1, in their order), the
        world-coordinate cards as written and the observation cards (OBJECT, TELESCOP,
        DATE-OBS, ...; `skyscale.io.fits_cards.KEPT_KEYWORDS`); the input's pixel
        description (BUNIT, beam, BSCALE/BZERO/BLANK, DATAMIN/DATAMAX, checksums), its
        HISTORY, COMMENT and other cards are not copied.  From a WCS the output gets
        its celestial axes.
    bunit : str
        The BUNIT keyword, for example ``'Jy/beam'`` or ``'Jy/pixel'``.
    beam : Beam, optional
        Restoring beam in pixels, written as BMAJ/BMIN (degrees, FWHM) and BPA (degrees
        east of north); needs a celestial WCS from ``like``.
    history : sequence of str, optional
        HISTORY lines, for example from `provenance_history`; a line longer than a card
        is continued over several (`skyscale.io.fits_cards.wrap_history`), never cut.
    extra : dict, optional
        More keywords: ``{key: value}`` or ``{key: (value, comment)}``; not those in
        `RESERVED_KEYWORDS`.
    overwrite : bool, optional
        Replace an existing file (default False).

    Returns
    -------
    str
        The path written.

    Raises
    ------
    FileExistsError
        If ``path`` exists and ``overwrite`` is False.
    ValueError
        If ``data``'s shape differs from ``like``'s, ``beam`` is given without a
        celestial WCS, or ``extra`` sets a reserved keyword.

    Notes
    -----
    The file gets CHECKSUM and DATASUM cards and a DATE card (UTC).  It is written
    to a temporary file next to ``path`` and renamed over it, so a failure leaves
    neither a partial output nor a temporary file.

    Examples
    --------
    >>> import os, tempfile, numpy as np
    >>> with tempfile.TemporaryDirectory() as d:
    ...     p = write_image(os.path.join(d, "b.fits"), np.zeros((2, 2)), bunit="Jy/pixel",
    ...                     history=["made in a doctest"])
    ...     str(fits.getheader(p)["HISTORY"])
    'made in a doctest'
    """
    path = os.fspath(path)
    arr = np.asarray(data)
    arr = as_image(arr, "data", dtype=np.float64 if arr.dtype == np.float64 else np.float32,
                   allow_nan=True)
    if not isinstance(bunit, str):
        raise TypeError(f"bunit is {bunit!r}; pass a unit string such as 'Jy/beam'")
    wcs, shape = _like_wcs(like)
    if shape is not None and tuple(shape) != arr.shape:
        raise ValueError(f"data has shape {arr.shape} but like has {tuple(shape)}; its WCS "
                         "would not fit, pass like for an image on the same grid")
    header, out_shape = _base_header(like, wcs, arr.shape)
    header["BUNIT"] = (bunit, "pixel unit")
    if beam is not None:
        if not isinstance(beam, Beam):
            raise TypeError(f"beam is {beam!r}; pass a skyscale Beam in pixels")
        if wcs is None:
            raise ValueError("beam is given but there is no celestial WCS to turn pixels "
                             "into degrees; pass like= with the image's header or WCS")
        cell = cell_size_arcsec(wcs)
        header["BMAJ"] = (beam.major * cell / 3600.0, "[deg] restoring beam FWHM, major axis")
        header["BMIN"] = (beam.minor * cell / 3600.0, "[deg] restoring beam FWHM, minor axis")
        header["BPA"] = (sky_position_angle(beam.pa, wcs), "[deg] restoring beam angle, east of north")
    for key, value in (extra or {}).items():
        if str(key).upper() in RESERVED_KEYWORDS or str(key).upper().startswith("NAXIS"):
            raise ValueError(f"extra sets the reserved keyword {key!r}; use the bunit=, "
                             "beam= or history= arguments, structural keywords are automatic")
        header[key] = value
    header["DATE"] = (_dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%S"),
                      "file written (UTC)")
    for line in [history] if isinstance(history, str) else history:
        for text in wrap_history(line):
            header.add_history(text)
    hdul = fits.HDUList([fits.PrimaryHDU(data=arr.reshape(out_shape), header=header)])
    with _atomic_output(path, overwrite) as fh:
        hdul.writeto(fh, checksum=True)
    return path


def write_table_csv(path, rows, fieldnames, *, overwrite=False):
    """Write rows to a CSV file atomically, with a header line.

    Parameters
    ----------
    path : str or os.PathLike
    rows : iterable
        Each row a dict keyed by ``fieldnames``, a sequence in ``fieldnames`` order,
        or a record of a numpy structured array.
    fieldnames : sequence of str
        Column names, written as the first line.
    overwrite : bool, optional
        Replace an existing file (default False).

    Returns
    -------
    str
        The path written.

    Raises
    ------
    FileExistsError
        If ``path`` exists and ``overwrite`` is False.
    ValueError
        If a row lacks a field or has the wrong length; nothing is written then.

    Examples
    --------
    >>> import os, tempfile
    >>> with tempfile.TemporaryDirectory() as d:
    ...     p = write_table_csv(os.path.join(d, "t.csv"), [{"x": 1, "flux": 0.5}], ["x", "flux"])
    ...     with open(p) as fh:
    ...         fh.read().splitlines()
    ['x,flux', '1,0.5']
    """
    path = os.fspath(path)
    fieldnames = [str(f) for f in fieldnames]
    if not fieldnames:
        raise ValueError("fieldnames is empty; pass the column names")
    with _atomic_output(path, overwrite, text=True) as fh:
        writer = csv.writer(fh, lineterminator="\n")
        writer.writerow(fieldnames)
        for i, row in enumerate(rows):
            if isinstance(row, Mapping):
                missing = [f for f in fieldnames if f not in row]
                if missing:
                    raise ValueError(f"rows[{i}] lacks the fields {missing}; give every "
                                     "row all of fieldnames")
                values = [row[f] for f in fieldnames]
            else:
                values = list(row.tolist() if isinstance(row, np.void) else row)
                if len(values) != len(fieldnames):
                    raise ValueError(f"rows[{i}] has {len(values)} values but there are "
                                     f"{len(fieldnames)} fieldnames; make them match")
            writer.writerow(values)
    return path
