"""PSF checks and normalisation: shape, centre, sign and peak, each refused with its fix."""

import warnings
import weakref

import numpy as np

from skyscale.core.validate import InputError, as_image

__all__ = ["check_psf", "PSF_PEAK_TOLERANCE"]

#: A PSF whose peak differs from 1 by up to this much is normalised (with a warning);
#: beyond it the file is probably not a PSF and is refused.
PSF_PEAK_TOLERANCE = 0.1

#: The PSFs `check_psf` has returned (by id, weakly held): one handed back to it again
#: is returned as it is instead of being analysed again.
_CHECKED = weakref.WeakValueDictionary()


def check_psf(psf, image_shape, *, dtype=np.float32, name="psf"):
    """Validate a PSF against the image and return it normalised to a peak of 1.

    Parameters
    ----------
    psf : (py, px) ndarray
        Point spread function; peak at ``(py // 2, px // 2)``.
    image_shape : (int, int)
        Shape of the dirty image; the PSF must be at least as large.
    dtype : numpy dtype
        Working dtype.

    Returns
    -------
    psf : (py, px) ndarray
        Contiguous, read-only copy with peak exactly 1.  Handing it back to
        `check_psf` returns it as it is (no second analysis), so the driver, the
        engine and the image-plane operator of one run share one checked PSF.

    Raises
    ------
    InputError
        If the PSF has non-finite pixels, is all zeros, is smaller than the image, its
        peak is off centre or negative, or its peak differs from 1 by more than
        `PSF_PEAK_TOLERANCE` (a peak off by less is normalised, with a warning).
    """
    ny, nx = image_shape
    known = _CHECKED.get(id(psf))
    if known is psf and psf.dtype == np.dtype(dtype) and psf.shape[0] >= ny \
            and psf.shape[1] >= nx:
        return psf                     # this function's own output: already checked
    psf = as_image(psf, name, dtype=dtype)
    if not np.any(psf):
        raise InputError(f"{name} is all zeros; give the PSF (dirty beam) image, peak 1 at "
                         "its centre")
    if psf.shape[0] < ny or psf.shape[1] < nx:
        raise InputError(f"{name} has shape {psf.shape}, smaller than the image "
                         f"{tuple(image_shape)}; were the dirty image and the PSF given the "
                         "other way round (the dirty image comes first)? Otherwise make "
                         "the PSF at least the image's size (twice the size is exact)")
    centre = (psf.shape[0] // 2, psf.shape[1] // 2)
    absolute = np.abs(psf)
    peak = tuple(int(p) for p in np.unravel_index(int(np.argmax(absolute)), psf.shape))
    value = float(psf[centre])
    if value < 0 and float(absolute[peak]) <= -value * (1 + 1e-4):
        raise InputError(f"{name} has a negative peak ({value:.4g} at the centre {centre}); "
                         "the PSF's peak must be positive (was the image negated?)")
    if value <= 0 or float(absolute[peak]) > value * (1 + 1e-4):
        raise InputError(f"{name} peak is at [y, x] {peak} (value {float(psf[peak]):.4g}), "
                         f"expected the centre {centre}; " + _likely_cause(psf, peak))
    if abs(value - 1.0) > PSF_PEAK_TOLERANCE:
        raise InputError(f"{name} peak is {value:.4g}, not 1 (more than "
                         f"{PSF_PEAK_TOLERANCE:g} off); check that this is the PSF and not "
                         "another image (the dirty image comes first, the PSF second), and "
                         "divide it by its peak if it is")
    if abs(value - 1.0) > 1e-3:
        warnings.warn(f"{name} peak is {value:.4g}, not 1; it has been normalised to 1",
                      stacklevel=3)
    checked = np.ascontiguousarray(psf / psf.dtype.type(value), dtype=dtype)
    checked.flags.writeable = False    # shared by the engine and the operator, never changed
    _CHECKED[id(checked)] = checked
    return checked


def _likely_cause(psf, peak):
    """The likely cause of a PSF whose peak is off centre, and its fix, in words."""
    py, px = psf.shape
    near = lambda v, n: min(v, n - 1 - v) <= 1          # noqa: E731
    if near(peak[0], py) and near(peak[1], px):
        return ("its peak sits in a corner, as an FFT leaves it: centre it with "
                "numpy.fft.fftshift(psf) so the peak is at (ny // 2, nx // 2)")
    return ("is this the dirty image? Check that the dirty image comes first and the PSF "
            "second; if it is the PSF, re-centre it so its maximum is at (ny // 2, nx // 2)")
