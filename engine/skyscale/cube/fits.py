"""FITS cubes plane by plane: read one plane at a time, write planes into output cubes.

A cube is a primary-HDU image of 3 axes, or 4 with a degenerate one (a Stokes axis of
length 1); its celestial axes are FITS axes 1 and 2 and the one other axis longer than
1 holds the planes (usually frequency or velocity).  Nothing here reads a whole cube:
`CubeFile.read_plane` reads one plane through astropy's section access, and
`CubeOutput` writes one plane at a time into a file whose header and size are fixed
when it is created, so that a run of thousands of planes needs memory for a few.

References
----------
.. [1] FITS Standard 4.0 (IAU FITS Working Group 2018): data layout (the first axis
   varies fastest, 2880-byte blocks, big-endian IEEE floats for BITPIX -32).
.. [2] Greisen & Calabretta 2002, A&A 395, 1061: world coordinates; Greisen et al.
   2006, A&A 446, 747: spectral coordinates.
"""

import contextlib
import datetime as _dt
import hashlib
import os
import warnings
from dataclasses import dataclass

import numpy as np
from astropy.io import fits
from astropy.wcs import WCS, FITSFixedWarning

from skyscale.io.fits import check_same_grid
from skyscale.io.grid import cell_size_arcsec, sky_position_angle
from skyscale.io.fits_cards import is_axis_card, is_observation_card

__all__ = ["PLANE_DTYPE", "SPECTRAL_TOLERANCE", "CubeFile", "open_cube", "check_psf_cube",
           "CubeOutput"]

#: How output planes are stored: big-endian 32-bit IEEE floats (BITPIX = -32) [1]_.
PLANE_DTYPE = np.dtype(">f4")

#: A PSF plane matches a cube plane when their spectral world values differ by at
#: most this fraction of the cube's channel width.
SPECTRAL_TOLERANCE = 1e-3

_BLOCK = 2880
#: Structural cards of the primary header, kept with the axis lengths.
_STRUCTURE = ("SIMPLE", "BITPIX", "NAXIS", "EXTEND")


@dataclass
class CubeFile:
    """A FITS cube opened for reading one plane at a time.

    Attributes
    ----------
    path : str
    header : astropy.io.fits.Header
    shape : tuple of int
        The numpy shape of the data, degenerate axes included.
    nplanes : int
    plane_axis : int or None
        numpy index of the axis holding the planes (None for a single plane).
    wcs : astropy.wcs.WCS or None
        The celestial WCS.
    spectral : ndarray or None
        World value of each plane along the plane axis, when it has a WCS.
    spectral_type : str or None
        That axis's CTYPE (for example ``'FREQ'``) with its unit.
    """

    path: str
    header: fits.Header
    shape: tuple
    nplanes: int
    plane_axis: int = None
    wcs: object = None
    spectral: np.ndarray = None
    spectral_type: str = None
    _hdul: object = None

    @property
    def plane_shape(self):
        """``(ny, nx)`` of one plane."""
        return tuple(self.shape[-2:])

    @property
    def cell_arcsec(self):
        """Pixel size in arcsec, or None without a celestial WCS."""
        return cell_size_arcsec(self.wcs) if self.wcs is not None else None

    def read_plane(self, index):
        """Plane ``index`` as a C-contiguous float32 ``(ny, nx)`` array (NaN kept)."""
        if not 0 <= index < self.nplanes:
            raise IndexError(f"plane {index} is outside the cube's {self.nplanes} planes")
        if self._hdul is None:
            # Without memmap a section reads only its own bytes; a memory map would keep
            # every plane read so far resident (file pages, but counted against us).
            self._hdul = fits.open(self.path, memmap=False, lazy_load_hdus=True)
        key = [0] * (len(self.shape) - 2)
        if self.plane_axis is not None:
            key[self.plane_axis] = index
        data = self._hdul[0].section[tuple(key) + (slice(None), slice(None))]
        return np.ascontiguousarray(data, dtype=np.float32)

    def close(self):
        """Close the file handle (reopened on the next read)."""
        if self._hdul is not None:
            self._hdul.close()
            self._hdul = None

    def identity(self):
        """What a resumed run compares: absolute path, size, modification time, shape."""
        st = os.stat(self.path)
        return {"path": os.path.abspath(self.path), "bytes": st.st_size,
                "mtime_ns": st.st_mtime_ns, "shape": list(self.shape)}


def _spectral_axis(header, fits_axis, n):
    ctype = str(header.get(f"CTYPE{fits_axis}", "")).strip()
    if not ctype:
        return None, None
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FITSFixedWarning)
        try:
            sub = WCS(header, fix=True).sub([fits_axis])
            values = np.asarray(sub.pixel_to_world_values(np.arange(n, dtype=np.float64)),
                                dtype=np.float64).ravel()
            unit = str(sub.wcs.cunit[0])
        except Exception:  # noqa: BLE001 - an axis astropy cannot read is not compared
            return None, ctype
    return values, f"{ctype} [{unit}]" if unit else ctype


def open_cube(path, *, name="cube"):
    """Open a FITS cube (or a single image) for plane-by-plane reading.

    Parameters
    ----------
    path : str or os.PathLike
    name : str
        What the file is (``'cube'``, ``'psf'``), used in messages.

    Returns
    -------
    CubeFile

    Raises
    ------
    FileNotFoundError
        If ``path`` does not exist.
    ValueError
        If the primary HDU holds no image of 2 to 4 axes, the celestial axes are not
        FITS axes 1 and 2, or more than one other axis is longer than 1.
    """
    path = os.fspath(path)
    label = f"{name} file {path}"
    if not os.path.isfile(path):
        raise FileNotFoundError(f"{label} does not exist; check the path")
    header = fits.getheader(path, 0)
    ndim = int(header.get("NAXIS", 0))
    if not 2 <= ndim <= 4:
        raise ValueError(f"{label} has NAXIS={ndim}; give a cube of 3 axes (or 4 with a "
                         "degenerate Stokes axis) in the primary HDU")
    shape = tuple(int(header[f"NAXIS{ndim - i}"]) for i in range(ndim))
    long_axes = [i for i, n in enumerate(shape[:-2]) if n > 1]
    if len(long_axes) > 1:
        desc = ", ".join(f"FITS axis {ndim - i} ({header.get(f'CTYPE{ndim - i}', '?')}) has "
                         f"{shape[i]}" for i in long_axes)
        raise ValueError(f"{label} has shape {shape}: {desc}; skyscale deconvolves one plane "
                         "axis, cut out one plane of the other (for example one Stokes)")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FITSFixedWarning)
        full = WCS(header, fix=True) if "CTYPE1" in header else None
    wcs = None
    if full is not None and full.has_celestial:
        if {full.wcs.lng, full.wcs.lat} != {0, 1}:
            raise ValueError(f"{label}: the celestial axes are FITS axes {full.wcs.lng + 1} "
                             f"and {full.wcs.lat + 1}; skyscale needs them as axes 1 and 2 "
                             "(reorder the cube)")
        wcs = full.celestial
    plane_axis = long_axes[0] if long_axes else None
    nplanes = shape[plane_axis] if plane_axis is not None else 1
    spectral = stype = None
    if plane_axis is not None:
        spectral, stype = _spectral_axis(header, ndim - plane_axis, nplanes)
    return CubeFile(path=path, header=header, shape=shape, nplanes=nplanes,
                    plane_axis=plane_axis, wcs=wcs, spectral=spectral, spectral_type=stype)


def check_psf_cube(cube, psf):
    """Check that ``psf`` serves ``cube``: one PSF per plane on the same axis, or one for all.

    Raises
    ------
    ValueError
        If the plane counts differ (and the PSF is not a single plane), the spectral
        axes differ in type or in any plane's world value by more than
        `SPECTRAL_TOLERANCE` of a channel, the PSF planes are smaller than the cube's,
        or the celestial grids differ (`~skyscale.io.fits.check_same_grid`).
    """
    if psf.nplanes not in (1, cube.nplanes):
        raise ValueError(f"psf {psf.path} has {psf.nplanes} planes but the cube has "
                         f"{cube.nplanes}; give one PSF per cube plane on the same spectral "
                         "axis, or a single PSF for all planes")
    py, px = psf.plane_shape
    ny, nx = cube.plane_shape
    if py < ny or px < nx:
        raise ValueError(f"psf planes are {py} x {px} pixels but the cube's are {ny} x {nx}; "
                         "make the PSF at least the image's size (twice makes residuals exact)")
    check_same_grid(cube.wcs, psf.wcs)
    if psf.nplanes == 1 or cube.spectral is None or psf.spectral is None:
        return
    if cube.spectral_type != psf.spectral_type:
        raise ValueError(f"psf spectral axis is {psf.spectral_type} but the cube's is "
                         f"{cube.spectral_type}; make the PSF cube on the cube's spectral axis")
    width = np.abs(np.diff(cube.spectral)).min() if cube.nplanes > 1 else 0.0
    tol = SPECTRAL_TOLERANCE * width if width > 0 else 1e-9 * abs(cube.spectral[0])
    diff = np.abs(cube.spectral - psf.spectral)
    worst = int(np.argmax(diff))
    if diff[worst] > tol:
        raise ValueError(f"psf plane {worst} is at {psf.spectral[worst]:.10g} but cube plane "
                         f"{worst} at {cube.spectral[worst]:.10g} ({cube.spectral_type}); "
                         "make the PSF cube on the cube's spectral axis (same reference, "
                         "increment and channel count)")


def _output_header(like, bunit, beam, history):
    """The input cube's structure, axis and observation cards, and this output's own.

    The same rule as `skyscale.io.fits.write_image` (`skyscale.io.fits_cards`): the
    input's world-coordinate and observation cards are kept as written; its BUNIT,
    beam, scaling, data range, checksums, HISTORY, COMMENT and unknown cards are not.
    """
    header = fits.Header()
    for card in like.header.cards:
        key = card.keyword.upper()
        if key in _STRUCTURE or key.startswith("NAXIS") or is_axis_card(key) \
                or is_observation_card(key):
            header.append((card.keyword, card.value, card.comment))
    header["BITPIX"] = -32
    header["BUNIT"] = (bunit, "pixel unit")
    if beam is not None:
        if like.wcs is None:
            raise ValueError("a restoring beam needs a celestial WCS to be written; give the "
                             "cube RA/Dec-like axes 1 and 2")
        cell = cell_size_arcsec(like.wcs)
        header["BMAJ"] = (beam.major * cell / 3600.0, "[deg] restoring beam FWHM, major axis")
        header["BMIN"] = (beam.minor * cell / 3600.0, "[deg] restoring beam FWHM, minor axis")
        header["BPA"] = (sky_position_angle(beam.pa, like.wcs), "[deg] restoring beam angle, east of north")
    header["DATE"] = (_dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%S"),
                      "file created (UTC)")
    for line in history:
        header.add_history(str(line))
    return header


class CubeOutput:
    """An output cube on the input's grid, filled one plane at a time.

    While the run goes on the cube is ``PATH.partial``; `finish` renames it to
    ``PATH``.  Planes not yet written read as zeros.

    Parameters
    ----------
    path : str
        The final path.
    like : CubeFile
        The input cube: shape and every WCS keyword are copied.
    bunit : str
    beam : Beam, optional
        Written as BMAJ/BMIN/BPA (degrees, east of north).
    history : sequence of str
        HISTORY lines.
    """

    def __init__(self, path, like, *, bunit, beam=None, history=()):
        self.path = os.fspath(path)
        self.partial = self.path + ".partial"
        self.nplanes = like.nplanes
        ny, nx = like.plane_shape
        self.plane_bytes = ny * nx * PLANE_DTYPE.itemsize
        self._shape = (ny, nx)
        self._header = _output_header(like, bunit, beam, history)
        self._header_bytes = None
        self._fh = None

    @property
    def header_bytes(self):
        """Length of the header block in the file."""
        if self._header_bytes is None:
            self._header_bytes = len(self._header.tostring())
        return self._header_bytes

    def _file_size(self):
        data = self.nplanes * self.plane_bytes
        return self.header_bytes + -(-data // _BLOCK) * _BLOCK

    def create(self):
        """Write the header and reserve the data (a sparse file of zeros)."""
        with open(self.partial, "wb") as fh:
            fh.write(self._header.tostring().encode("ascii"))
            fh.truncate(self._file_size())
        return self.partial

    def usable(self):
        """True when ``PATH.partial`` exists with the size this cube needs."""
        return os.path.isfile(self.partial) and os.path.getsize(self.partial) == self._file_size()

    def _handle(self):
        if self._fh is None:
            self._fh = open(self.partial, "r+b")
        return self._fh

    def write_plane(self, index, data):
        """Write plane ``index`` (flushed to disk); return its SHA-256 (hex)."""
        arr = np.ascontiguousarray(data, dtype=PLANE_DTYPE)
        if arr.shape != self._shape:
            raise ValueError(f"plane {index} has shape {arr.shape}, expected {self._shape}")
        raw = arr.tobytes()
        fh = self._handle()
        fh.seek(self.header_bytes + index * self.plane_bytes)
        fh.write(raw)
        fh.flush()
        os.fsync(fh.fileno())
        return hashlib.sha256(raw).hexdigest()

    def read_digest(self, index):
        """SHA-256 of plane ``index`` as it is on disk now."""
        fh = self._handle()
        fh.seek(self.header_bytes + index * self.plane_bytes)
        return hashlib.sha256(fh.read(self.plane_bytes)).hexdigest()

    def close(self):
        if self._fh is not None:
            self._fh.close()
            self._fh = None

    def finish(self, overwrite=False):
        """Rename ``PATH.partial`` to ``PATH`` (refused if it exists, unless ``overwrite``)."""
        self.close()
        if overwrite:
            os.replace(self.partial, self.path)
            return self.path
        try:
            os.link(self.partial, self.path)
        except FileExistsError:
            raise FileExistsError(f"{self.path} already exists; pass overwrite=True "
                                  "(--overwrite) to replace it") from None
        os.unlink(self.partial)
        return self.path

    def discard(self):
        """Remove ``PATH.partial``."""
        self.close()
        with contextlib.suppress(FileNotFoundError):
            os.unlink(self.partial)
