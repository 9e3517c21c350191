"""Precompute of the multi-scale beams (their memory is counted in `skyscale.cost`).

For each scale ``k`` the minor cycle needs the scale beam
``B_kk = PSF (*) scale_k (*) scale_k``: the response of scale ``k``'s smoothed residual
to a component of scale ``k``.  It is kept at every offset between two pixels of the
image, so that a sub-loop subtracts it exactly however far apart its components are.

References
----------
.. [1] Cornwell, T. J. 2008, IEEE J. Sel. Topics Signal Process. 2(5), 793 (scale
   beams PSF (*) scale_k (*) scale_l).
.. [2] Offringa, A. R. & Smirnov, O. 2017, MNRAS 471, 301.
"""

import numpy as np

from skyscale.core.fft import fast_shape

__all__ = ["scale_beams", "plan_memory"]


def _psf_offsets(psf, half_y, half_x):
    """The PSF at offsets ``[-half, half]`` per axis, zero beyond its edge (float64)."""
    py, px = psf.shape
    cy, cx = py // 2, px // 2
    out = np.zeros((2 * half_y + 1, 2 * half_x + 1), dtype=np.float64)
    ya, yb = max(cy - half_y, 0), min(cy + half_y + 1, py)
    xa, xb = max(cx - half_x, 0), min(cx + half_x + 1, px)
    out[ya - cy + half_y:yb - cy + half_y, xa - cx + half_x:xb - cx + half_x] = psf[ya:yb, xa:xb]
    return out


def scale_beams(psf, kernels, image_shape, backend, dtype=np.float32):
    """Scale beams ``PSF (*) scale_k (*) scale_k`` at every offset within the image.

    Parameters
    ----------
    psf : (py, px) ndarray
        Normalised PSF, peak 1 at ``(py // 2, px // 2)``.
    kernels : list of (2r+1, 2r+1) ndarray
        Unit-sum scale kernels.
    image_shape : (int, int)
        ``(ny, nx)``: beams cover offsets ``|dy| <= ny - 1``, ``|dx| <= nx - 1``.
    backend : FFT backend
    dtype : numpy dtype
        Dtype of the returned beams.

    Returns
    -------
    beams : list of (2 ny - 1, 2 nx - 1) ndarray
        Zero offset at ``(ny - 1, nx - 1)``.  The delta scale's beam is the PSF itself.
    peaks : (n_scales,) float64 ndarray
        ``B_kk(0)``.

    Notes
    -----
    Beyond the PSF's own edge it is taken as zero, as the image-plane residual does.
    The PSF's transform is taken once; each finite scale costs one forward transform of
    its kernel and one inverse ([1]_).
    """
    ny, nx = image_shape
    radii = [k.shape[0] // 2 for k in kernels]
    rmax = max(radii)
    hy, hx = ny - 1 + 2 * rmax, nx - 1 + 2 * rmax
    region = _psf_offsets(np.asarray(psf, dtype=np.float64), hy, hx)
    beams, peaks = [], np.zeros(len(kernels))
    psf_f = None
    fshape = fast_shape(region.shape, (4 * rmax + 1, 4 * rmax + 1))
    for k, (kern, r) in enumerate(zip(kernels, radii)):
        if r == 0:
            beam = region[2 * rmax:2 * rmax + 2 * ny - 1, 2 * rmax:2 * rmax + 2 * nx - 1]
            beam = beam * float(np.asarray(kern, dtype=np.float64).ravel()[0]) ** 2
        else:
            if psf_f is None:
                psf_f = backend.rfft2(region, fshape)
            kern_f = backend.rfft2(np.asarray(kern, dtype=np.float64), fshape)
            full = backend.irfft2(psf_f * kern_f * kern_f, fshape)
            # full[i] holds offset i - hy - 2 r (linear convolution of region and kernel^2).
            s = 2 * rmax + 2 * r
            beam = full[s:s + 2 * ny - 1, s:s + 2 * nx - 1]
        beam = np.ascontiguousarray(beam, dtype=dtype)
        peaks[k] = float(beam[ny - 1, nx - 1])
        beams.append(beam)
    return beams, peaks


def plan_memory(image_shape, psf_shape, radii, itemsize=4):
    """Deprecated: the memory account is `skyscale.cost.engine_memory`.

    Returns what `skyscale.cost.engine_memory` returns (its ``total`` is the full
    predicted peak, about three times this function's old figure at 2048^2).
    """
    import warnings
    from skyscale.cost.model import engine_memory
    warnings.warn("skyscale.core.precompute.plan_memory is deprecated: the one memory account "
                  "is skyscale.cost.engine_memory (what Engine.memory holds)",
                  DeprecationWarning, stacklevel=2)
    return engine_memory(image_shape, psf_shape, radii, itemsize)
