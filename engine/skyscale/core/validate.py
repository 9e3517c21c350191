"""Input checks shared by the public functions: one dtype rule, one error type, one style.

Every refusal of bad input raises `InputError` (a `ValueError`) with one sentence that
names the argument, the value received and the fix.  These are the checks every other
module uses, so this one imports nothing of skyscale; the checks of a whole run, which
need the PSF, scale and noise modules, are `skyscale.core.run_checks`.
"""

import math
import numbers

import numpy as np

from skyscale.core.option_table import number_rules

__all__ = ["InputError", "MissingFileError", "as_image", "resolve_dtype", "check_choice",
           "check_number", "mask_nonfinite", "FFT_BACKENDS", "NUMBER_RULES"]

#: Bounds of every numeric run option, with the fix a message suggests (from the option
#: table, `skyscale.core.option_table`).
NUMBER_RULES = number_rules()

#: FFT back ends `deconvolve` accepts.
FFT_BACKENDS = ("auto", "scipy", "numpy", "pyfftw")


class InputError(ValueError):
    """Bad input to skyscale: the message names the argument, the value and the fix.

    A subclass of `ValueError`, so code that catches ``ValueError`` keeps working.
    The command line turns it into one line on stderr and exit code 2.
    """


class MissingFileError(InputError, FileNotFoundError):
    """An input file that does not exist (also a `FileNotFoundError`)."""


def resolve_dtype(dtype):
    """Return the working dtype: float32 stays float32, float64 stays float64.

    Parameters
    ----------
    dtype : numpy dtype-like or None
        None means float32, the default working precision.

    Raises
    ------
    InputError
        For any other dtype.
    """
    if dtype is None:
        return np.dtype(np.float32)
    try:
        dtype = np.dtype(dtype)
    except TypeError:
        raise InputError(f"dtype is {dtype!r}, expected float32 or float64") from None
    if dtype in (np.float32, np.float64):
        return dtype
    raise InputError(f"dtype is {dtype}, expected float32 or float64; pass one of those")


def _where(bad, limit=3):
    idx = np.argwhere(bad)[:limit]
    text = ", ".join(str(tuple(int(i) for i in p)) for p in idx)
    return text + (", ..." if np.count_nonzero(bad) > limit else "")


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
        Required number of dimensions (leading axes of length 1 are dropped).
    allow_nan : bool
        If False (default) non-finite values are refused, saying how many and where.

    Raises
    ------
    InputError
        For a non-numeric array, the wrong number of non-degenerate axes, an empty
        array, or non-finite pixels.
    """
    try:
        arr = np.asarray(array)
    except (TypeError, ValueError) as exc:
        raise InputError(f"{name} could not be read as an array ({exc}); pass a 2-D "
                         "numpy array of numbers") from None
    if arr.dtype.kind not in "fiub":
        raise InputError(f"{name} has dtype {arr.dtype}, expected a real numeric array; "
                         "pass a 2-D array of floats")
    # Squeeze leading degenerate axes (FITS cubes with one frequency and one Stokes plane).
    while arr.ndim > ndim and arr.shape[0] == 1:
        arr = arr[0]
    if arr.ndim != ndim:
        raise InputError(f"{name} has shape {arr.shape}, expected a {ndim}-D image; "
                         "pass one plane (index the extra axes)")
    if min(arr.shape) < 1:
        raise InputError(f"{name} has shape {arr.shape}; it must not be empty")
    arr = np.ascontiguousarray(arr, dtype=dtype)
    if not allow_nan:
        bad = ~np.isfinite(arr)
        if bad.any():
            fix = ("replace them, or treat them as masked with skyscale.mask_nonfinite "
                   "(--nonfinite mask on the command line)" if name == "dirty" else
                   "replace them with finite values")
            raise InputError(
                f"{name} has {int(np.count_nonzero(bad))} non-finite pixels (NaN or inf) of "
                f"{arr.size}, at [y, x] {_where(bad)}; {fix}")
    return arr


def mask_nonfinite(dirty, mask=None):
    """Treat the non-finite pixels of a dirty image as masked out.

    Parameters
    ----------
    dirty : (ny, nx) array_like
        Dirty image that may hold NaN or inf (for example blanked edges).
    mask : (ny, nx) bool array_like, optional
        Where components may go; default everywhere.

    Returns
    -------
    filled : (ny, nx) ndarray
        ``dirty`` with its non-finite pixels set to 0 (same dtype, a copy).
    mask : (ny, nx) bool ndarray or None
        ``mask`` without the non-finite pixels (None when every pixel is finite and no
        mask was given).
    blank : (ny, nx) bool ndarray
        The non-finite pixels, to blank the outputs again afterwards.
    """
    arr = np.array(dirty, dtype=np.result_type(np.asarray(dirty).dtype, np.float32), copy=True)
    blank = ~np.isfinite(arr)
    if blank.all():
        raise InputError("dirty has no finite pixel at all; check that the right file "
                         "was given")
    arr[blank] = 0
    if mask is None and not blank.any():
        return arr, None, blank
    keep = np.ones(arr.shape, bool) if mask is None else np.array(mask, dtype=bool)
    if keep.shape != arr.shape:
        raise InputError(f"mask has shape {keep.shape}, expected the image's {arr.shape}; "
                         "regrid or rebuild the mask")
    return arr, keep & ~blank, blank


def check_choice(value, name, choices):
    """Raise `InputError` listing ``choices`` if ``value`` is not one of them."""
    try:
        ok = value in choices
    except TypeError:
        ok = False
    if not ok:
        raise InputError(f"{name} is {value!r}; valid values are "
                         f"{', '.join(map(repr, choices))}")
    return value


def check_number(value, name, *, low=None, high=None, low_open=False, high_open=False,
                 integer=False, allow_none=False, hint="", given=None):
    """Return ``value`` as a float (or int) inside the stated bounds, or raise `InputError`.

    Parameters
    ----------
    value : object
        What the caller passed.
    name : str
        The argument's name.
    low, high : float, optional
        Bounds; ``low_open``/``high_open`` exclude them.
    integer : bool
        Require a whole number (``3.0`` is accepted as 3).
    allow_none : bool
        Let None through (an option that is off).
    hint : str
        The fix, appended to the message (for example "0.1 is the usual choice").
    given : object, optional
        The value as the user wrote it, quoted in messages (default ``value``).
    """
    shown = value if given is None else given
    if value is None and allow_none:
        return None
    tail = f"; {hint}" if hint else ""
    if isinstance(value, (bool, np.bool_)) or not isinstance(value, numbers.Real):
        raise InputError(f"{name} is {shown!r} (a {type(value).__name__}); give a "
                         f"{'whole ' if integer else ''}number{tail}")
    v = float(value)
    if not math.isfinite(v):
        raise InputError(f"{name} is {shown!r}; give a finite number{tail}")
    if integer:
        if v != int(v):
            raise InputError(f"{name} is {shown!r}; give a whole number{tail}")
        v = int(v)
    below = low is not None and (v <= low if low_open else v < low)
    above = high is not None and (v >= high if high_open else v > high)
    if below or above:
        if high is None:
            want = f"{name} {'>' if low_open else '>='} {low:g}"
        elif low is None:
            want = f"{name} {'<' if high_open else '<='} {high:g}"
        else:
            want = (f"{low:g} {'<' if low_open else '<='} {name} "
                    f"{'<' if high_open else '<='} {high:g}")
        raise InputError(f"{name} is {shown!r}, expected {want}{tail}")
    return v
