"""Input checks shared by the public functions: one dtype rule, one error style."""

import numpy as np

__all__ = ["as_image", "resolve_dtype", "check_choice"]


def resolve_dtype(dtype):
    """Return the working dtype: float32 stays float32, everything else is float64.

    Parameters
    ----------
    dtype : numpy dtype-like or None
        None means float32, the default working precision.
    """
    if dtype is None:
        return np.dtype(np.float32)
    dtype = np.dtype(dtype)
    if dtype == np.float32:
        return dtype
    if dtype == np.float64:
        return dtype
    raise ValueError(f"dtype is {dtype}, expected float32 or float64; pass one of those")


def as_image(array, name, *, dtype=np.float32, ndim=2, allow_nan=False):
    """Return ``array`` as a C-contiguous image of ``dtype``, or raise one clear error.

    Parameters
    ----------
    array : array_like
        The input image.
    name : str
        The argument's name, used in the error message.
    dtype : numpy dtype
        The working dtype.
    ndim : int
        Required number of dimensions.
    allow_nan : bool
        If False (default) non-finite values are refused.
    """
    arr = np.asarray(array)
    if arr.dtype.kind not in "fiub":
        raise TypeError(f"{name} has dtype {arr.dtype}, expected a real numeric array")
    # Squeeze leading degenerate axes (FITS cubes with one frequency and one Stokes plane).
    while arr.ndim > ndim and arr.shape[0] == 1:
        arr = arr[0]
    if arr.ndim != ndim:
        raise ValueError(f"{name} has shape {arr.shape}, expected a {ndim}-D image; "
                         "pass one plane (index the extra axes)")
    if min(arr.shape) < 1:
        raise ValueError(f"{name} has shape {arr.shape}; it must not be empty")
    arr = np.ascontiguousarray(arr, dtype=dtype)
    if not allow_nan and not np.all(np.isfinite(arr)):
        bad = int(np.count_nonzero(~np.isfinite(arr)))
        raise ValueError(f"{name} has {bad} non-finite pixels; replace NaN/inf "
                         "(for example with 0) or mask them out")
    return arr


def check_choice(value, name, choices):
    """Raise a ValueError listing ``choices`` if ``value`` is not one of them."""
    if value not in choices:
        raise ValueError(f"{name} is {value!r}; valid values are {', '.join(map(repr, choices))}")
    return value
