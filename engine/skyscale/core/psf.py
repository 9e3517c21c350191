"""PSF checks and normalisation, main-lobe and sidelobe measures, patch support.

References
----------
.. [1] Clark, B. G. 1980, "An efficient implementation of the algorithm 'CLEAN'",
   A&A 89, 377.
"""

import logging
import warnings
import weakref
from dataclasses import dataclass

import numpy as np
from scipy import ndimage

from skyscale.core.validate import InputError, as_image

__all__ = ["PSFInfo", "check_psf", "describe_psf", "outside_level_profile", "PSF_PATCH_LEVEL",
           "PSF_PEAK_TOLERANCE"]

logger = logging.getLogger(__name__)

#: Default |PSF| level outside the minor-cycle patch: the patch is the smallest
#: centred square beyond which the PSF never exceeds this fraction of its peak.
PSF_PATCH_LEVEL = 0.1
#: A PSF whose peak differs from 1 by up to this much is normalised (with a warning);
#: beyond it the file is probably not a PSF and is refused.
PSF_PEAK_TOLERANCE = 0.1

#: The PSFs `check_psf` has returned (by id, weakly held): one handed back to it again
#: is returned as it is instead of being analysed again.
_CHECKED = weakref.WeakValueDictionary()


@dataclass(frozen=True)
class PSFInfo:
    """Measures of a PSF used to plan minor cycles."""

    shape: tuple            #: PSF shape (ny, nx)
    centre: tuple           #: (ny // 2, nx // 2)
    main_lobe_radius: int   #: radius in pixels that contains the main lobe
    patch_half: int         #: half-width of the minor-cycle PSF patch, pixels
    outside_level: float    #: peak |PSF| outside the patch (Clark's cycle floor factor)
    exact_offsets: tuple    #: largest |dy|, |dx| offsets the PSF covers on both sides


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


def outside_level_profile(psf):
    """Peak |PSF| outside the centred square of each half-width.

    Returns
    -------
    levels : (hmax + 1,) ndarray
        ``levels[h]`` is the largest ``|psf|`` at Chebyshev distance ``> h`` from the
        centre; ``hmax`` is the largest distance in the PSF.
    """
    py, px = psf.shape
    cy, cx = py // 2, px // 2
    yy = np.abs(np.arange(py) - cy)[:, None]
    xx = np.abs(np.arange(px) - cx)[None, :]
    dist = np.maximum(yy, xx)
    hmax = int(dist.max())
    ring_max = np.zeros(hmax + 2)
    np.maximum.at(ring_max, dist.ravel(), np.abs(psf).ravel().astype(np.float64))
    # levels[h] = max over rings d > h: reverse cumulative maximum
    rev = np.maximum.accumulate(ring_max[::-1])[::-1]
    return rev[1:hmax + 2]


def describe_psf(psf, image_shape, *, patch_half=None, patch_level=PSF_PATCH_LEVEL):
    """Measure main lobe, sidelobes and the minor-cycle patch of a normalised PSF.

    Parameters
    ----------
    psf : (py, px) ndarray
        Normalised PSF (see `check_psf`).
    image_shape : (int, int)
        Dirty image shape; patches need never be wider than the image.
    patch_half : int, optional
        Half-width of the minor-cycle PSF patch.  Default: the smallest half-width
        beyond which ``|psf| <= patch_level``, and at least twice the main-lobe
        radius, so that the first sidelobes are inside it.
    patch_level : float
        See above; default `PSF_PATCH_LEVEL`.

    Returns
    -------
    PSFInfo

    Notes
    -----
    The main lobe is the connected region around the centre where the PSF is
    positive, limited to 2.5 times the half-power radius.  A minor cycle that uses
    only the patch must stop at ``outside_level`` times its starting peak, where the
    neglected sidelobes could start to matter ([1]_).

    References
    ----------
    .. [1] Clark 1980, A&A 89, 377.
    """
    py, px = psf.shape
    cy, cx = py // 2, px // 2
    half = ndimage.label(psf > 0.5)[0]
    r_half = np.sqrt(np.count_nonzero(half == half[cy, cx]) / np.pi)
    positive, _ = ndimage.label(psf > 0)
    yy, xx = np.ogrid[:py, :px]
    r = np.hypot(yy - cy, xx - cx)
    lobe = (positive == positive[cy, cx]) & (r <= max(2.5 * r_half, 1.5))
    main_lobe_radius = int(np.ceil(r[lobe].max())) if lobe.any() else 1

    levels = outside_level_profile(psf)
    hcap = max(image_shape) - 1
    if patch_half is None:
        above = np.nonzero(levels > patch_level)[0]
        h = int(above[-1] + 1) if above.size else 0
        h = max(h, 2 * main_lobe_radius)   # main lobe and the first sidelobe ring
    else:
        h = int(patch_half)
        if h < 0:
            raise InputError(f"psf_patch is {patch_half}, expected a half-width >= 0 pixels")
    h = int(min(h, hcap, len(levels) - 1))
    outside_level = float(levels[h]) if h < len(levels) else 0.0
    exact = (min(cy, py - 1 - cy), min(cx, px - 1 - cx))
    info = PSFInfo(psf.shape, (cy, cx), main_lobe_radius, h, outside_level, exact)
    logger.debug("PSF: %s", info)
    return info
