"""The smoothing ladder of emission detection: unit-sum Gaussians of growing width.

Smoothing lowers the noise (white noise of rms ``n`` smoothed by a unit-sum kernel
``k`` has rms ``n sqrt(sum k^2)``, analytic), so broad emission that is faint per pixel
stands out once smoothed (`skyscale.masks.detect.detect_emission`).

References
----------
.. [1] Cornwell, T. J. 2008, IEEE J. Sel. Topics Signal Process. 2(5), 793
   (multi-scale: structure is detected at the scale that matches it).
"""

import math

import numpy as np
from scipy import fft as sfft

from skyscale.core.beam import FWHM_PER_SIGMA

__all__ = ["LADDER_RATIO", "smoothing_ladder", "smoothed_images"]


#: Successive smoothing widths of the ladder grow by this factor.
LADDER_RATIO = 2.0


def smoothing_ladder(beam_fwhm_px, shape, *, ratio=LADDER_RATIO, image_fraction=0.25):
    """Smoothing FWHMs in pixels: 0, the beam, then growing by ``ratio`` while at most
    ``image_fraction`` of the image's smaller side.

    Examples
    --------
    >>> smoothing_ladder(4.0, (256, 256))
    (0.0, 4.0, 8.0, 16.0, 32.0, 64.0)
    """
    top = image_fraction * min(shape)
    ladder = [0.0]
    width = float(beam_fwhm_px)
    while width <= top * (1 + 1e-9):
        ladder.append(width)
        width *= ratio
    return tuple(ladder)


def smoothed_images(image, smoothing_px):
    """Yield ``(fwhm, smoothed image)`` for each FWHM, one forward FFT for all.

    The kernels are unit-sum round Gaussians; FWHMs below half a pixel give the image
    itself.  The image is zero-padded by four sigmas of the widest kernel (at most
    its own size), so emission does not wrap around the edges.  The transforms are
    single precision (float32 in and out), ample for finding emission.
    """
    sigmas = [w / FWHM_PER_SIGMA if w >= 0.5 else 0.0 for w in smoothing_px]
    widest = max(sigmas) if sigmas else 0.0
    ny, nx = image.shape
    spec = fy = fx = shape = None
    if widest > 0:
        pad = min(int(math.ceil(4 * widest)), max(ny, nx))
        shape = (sfft.next_fast_len(ny + 2 * pad, real=True),
                 sfft.next_fast_len(nx + 2 * pad, real=True))
        spec = sfft.rfft2(image.astype(np.float32, copy=False), s=shape)
        fy = sfft.fftfreq(shape[0])[:, None] ** 2
        fx = sfft.rfftfreq(shape[1])[None, :] ** 2
    done = {}
    for width, sig in zip(smoothing_px, sigmas):
        if sig not in done:
            if sig == 0:
                done[sig] = image
            else:
                # Fourier transform of a unit-sum Gaussian (analytic).
                transfer = np.exp(-2 * np.pi ** 2 * sig ** 2 * (fy + fx))
                done[sig] = sfft.irfft2(spec * transfer.astype(spec.real.dtype),
                                        s=shape)[:ny, :nx]
        yield float(width), done[sig]
