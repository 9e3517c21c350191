"""skyscale's own visibility file: one compressed ``.npz`` with named arrays and units.

Layout (``numpy.savez_compressed``, read with ``allow_pickle=False``)
----------------------------------------------------------------------

=====================  ===================  =======================  =====================
name                   shape                dtype                    unit / meaning
=====================  ===================  =======================  =====================
``format``             ()                   str                      ``"skyscale-visibilities"``
``format_version``     ()                   int64                    1
``uvw_m``              (nrow, 3)            float64 or float32       metres; u east, v north,
                                                                     w towards the phase centre
``freq_hz``            (nchan,)             float64                  Hz
``vis_jy``             (nrow, nchan)        complex64 or complex128  Jy
``weight_per_jy2``     (nrow, nchan)        float32 or float64       Jy^-2 (1 / sigma^2)
``flag``               (nrow, nchan)        bool, optional           True = leave out
``phase_centre_deg``   (2,)                 float64, optional        RA, Dec (ICRS), degrees
``description``        ()                   str, optional            free text
=====================  ===================  =======================  =====================

Visibilities follow ``V = sum I exp(-2 pi i (u l + v m + w (n - 1)))`` with uvw in
wavelengths ``uvw_m * freq_hz / c`` (see `skyscale.visibility`).  Files are written
atomically and never overwrite without being asked.
"""

import dataclasses
import os

import numpy as np

from skyscale.io.atomic import atomic_output

__all__ = ["FORMAT_NAME", "FORMAT_VERSION", "VisibilityData", "read_visibilities",
           "write_visibilities"]

FORMAT_NAME = "skyscale-visibilities"
FORMAT_VERSION = 1
_REQUIRED = ("uvw_m", "freq_hz", "vis_jy", "weight_per_jy2")


@dataclasses.dataclass
class VisibilityData:
    """The arrays of a visibility file (units as in the module docstring)."""

    uvw: np.ndarray
    freqs: np.ndarray
    vis: np.ndarray
    weights: np.ndarray
    flags: np.ndarray = None
    phase_centre_deg: tuple = None
    description: str = ""
    path: str = None

    @property
    def nrow(self):
        return int(self.uvw.shape[0])


def write_visibilities(path, uvw, freqs, vis, weights, *, flags=None, phase_centre_deg=None,
                       description="", overwrite=False, uvw_dtype=np.float64):
    """Write a skyscale visibility file (compressed ``.npz``) atomically.

    Parameters
    ----------
    path : str or os.PathLike
        Output file; ``.npz`` is the usual suffix.
    uvw : (nrow, 3) array_like
        Metres.
    freqs : (nchan,) array_like
        Hz.
    vis : (nrow, nchan) array_like
        Jy, complex; complex64 stays complex64, anything else is complex128.
    weights : (nrow, nchan) array_like
        Jy^-2.
    flags : (nrow, nchan) bool array_like, optional
    phase_centre_deg : (ra, dec), optional
        ICRS degrees; gives the outputs of ``skyscale run --visibilities`` a WCS.
    description : str
    overwrite : bool
        Replace an existing file (default False).
    uvw_dtype : {float64, float32}
        Storage precision of uvw; float32 keeps about 0.1 mm on a 3 km baseline and
        halves the file.

    Returns
    -------
    str
        The path written.
    """
    vis = np.asarray(vis)
    vis = vis.astype(np.complex64 if vis.dtype == np.complex64 else np.complex128, copy=False)
    arrays = {
        "format": np.array(FORMAT_NAME),
        "format_version": np.array(FORMAT_VERSION, dtype=np.int64),
        "uvw_m": np.asarray(uvw, dtype=uvw_dtype),
        "freq_hz": np.atleast_1d(np.asarray(freqs, dtype=np.float64)),
        "vis_jy": vis,
        "weight_per_jy2": np.asarray(weights, dtype=np.float32 if vis.dtype == np.complex64
                                     else np.float64),
        "description": np.array(str(description)),
    }
    if flags is not None:
        arrays["flag"] = np.asarray(flags, dtype=bool)
    if phase_centre_deg is not None:
        arrays["phase_centre_deg"] = np.asarray(phase_centre_deg, dtype=np.float64).reshape(2)
    path = os.fspath(path)
    with atomic_output(path, overwrite) as fh:
        np.savez_compressed(fh, **arrays)
    return path


def read_visibilities(path):
    """Read a skyscale visibility file.

    Parameters
    ----------
    path : str or os.PathLike

    Returns
    -------
    VisibilityData
        uvw as float64 metres; the other arrays as stored.  Shapes are checked when an
        operator is built (`skyscale.visibility.check_visibilities`).

    Raises
    ------
    FileNotFoundError
        No such file.
    ValueError
        Not a skyscale visibility file, a newer format version, or arrays missing.
    """
    path = os.fspath(path)
    if not os.path.isfile(path):
        raise FileNotFoundError(f"visibilities file {path!r} does not exist")
    try:
        npz = np.load(path, allow_pickle=False)
    except (OSError, ValueError) as exc:
        raise ValueError(f"visibilities file {path!r} is not a readable .npz ({exc}); "
                         f"write one with skyscale.write_visibilities") from None
    with npz:
        names = set(npz.files)
        fmt = str(npz["format"]) if "format" in names else None
        if fmt != FORMAT_NAME:
            raise ValueError(f"visibilities file {path!r} has format {fmt!r}, expected "
                             f"{FORMAT_NAME!r}; write it with skyscale.write_visibilities")
        version = int(npz["format_version"]) if "format_version" in names else 0
        if version < 1 or version > FORMAT_VERSION:
            raise ValueError(f"visibilities file {path!r} has format_version {version}; this "
                             f"skyscale reads version 1 to {FORMAT_VERSION}: upgrade skyscale")
        missing = [n for n in _REQUIRED if n not in names]
        if missing:
            raise ValueError(f"visibilities file {path!r} lacks the arrays {missing}; it needs "
                             f"{list(_REQUIRED)}")
        centre = npz["phase_centre_deg"] if "phase_centre_deg" in names else None
        return VisibilityData(
            uvw=npz["uvw_m"].astype(np.float64), freqs=npz["freq_hz"].astype(np.float64),
            vis=npz["vis_jy"], weights=npz["weight_per_jy2"],
            flags=npz["flag"] if "flag" in names else None,
            phase_centre_deg=None if centre is None else tuple(float(c) for c in centre),
            description=str(npz["description"]) if "description" in names else "",
            path=path)
