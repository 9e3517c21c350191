"""User masks from FITS files or arrays on the image's grid.

A mask is a boolean image on the image's grid, ``[y, x]``: True where the minor cycle
may place components.

References
----------
.. [1] FITS Standard 4.0 (IAU FITS Working Group, 2018).
"""

import os
import warnings

import numpy as np
from astropy.io import fits

from skyscale.core.validate import as_image

__all__ = ["load_mask", "check_shape"]


def check_shape(shape):
    """``(ny, nx)`` from an image shape, or one clear error."""
    try:
        ny, nx = (int(n) for n in shape)
        ok = ny > 0 and nx > 0 and (ny, nx) == tuple(shape)
    except (TypeError, ValueError):
        ok = False
    if not ok:
        raise ValueError(f"shape is {shape!r}; give the image shape as two positive "
                         "integers (ny, nx), e.g. image.shape")
    return ny, nx


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
    shape = check_shape(shape)
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
