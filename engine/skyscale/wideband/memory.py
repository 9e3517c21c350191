"""Memory of a wideband run, predicted before anything is allocated.

The account follows what `skyscale.deconvolve_wideband` holds, array by array: the
checked PSF cube and the spectral PSFs, the transforms of the ``2 n - 1`` spectral PSFs
and of the scale kernels, the cross-term beams (``2 n - 1`` spectral PSFs x scales, at
the extent of the mask's box), the Taylor residuals and their smoothings, and the
channels' residuals at the end.  The FFT grids are those of `skyscale.core.fft` and
`skyscale.core.precompute`.  `benchmarks/wideband_terms.py` compares it with the peak
that tracemalloc measures.
"""


from skyscale.core.fft import convolution_grid, fast_shape

__all__ = ["wideband_memory"]


def _half_spectrum(shape):
    """Points of a real FFT's half spectrum on ``shape``."""
    return shape[0] * (shape[1] // 2 + 1)


def _convolver_grid(image_shape, kernel_shape):
    """The grid `skyscale.core.fft.Convolver` uses for a kernel of ``kernel_shape``."""
    return convolution_grid(kernel_shape, image_shape)


def wideband_memory(image_shape, psf_shape, nchan, terms, radii, *, box_shape=None,
                    itemsize=4):
    """Predicted bytes of a wideband run, by item, and their ``total`` (the peak).

    Parameters
    ----------
    image_shape, psf_shape : (int, int)
    nchan : int
        Channels.
    terms : int
        Taylor terms (2 or 3; 1 runs the single-term engine, `skyscale.plan_run`).
    radii : sequence of int
        The scale kernels' support radii (0 for the delta scale).
    box_shape : (int, int), optional
        The mask's bounding box grown by the largest radius (beams cover its offsets);
        default the whole image.
    itemsize : int
        Bytes of the cross-term beams (4 for float32, the default working precision).

    Returns
    -------
    dict
        Bytes of each item and ``total``.
    """
    ny, nx = image_shape
    pix = ny * nx
    n_scales = len(radii)
    n_finite = sum(1 for r in radii if r > 0)
    moments = 2 * terms - 1
    rmax = max(radii)
    extent = box_shape or image_shape
    ext = [min(n, -(-int(b) // 64) * 64) for b, n in zip(extent, image_shape)]   # BeamBank
    conv = _half_spectrum(_convolver_grid(image_shape, psf_shape))
    smooth = _half_spectrum(_convolver_grid(image_shape, (2 * rmax + 1,) * 2))
    hy, hx = ext[0] - 1 + 2 * rmax, ext[1] - 1 + 2 * rmax
    bank_grid = _half_spectrum(fast_shape((2 * hy + 1, 2 * hx + 1),
                                          (4 * rmax + 1, 4 * rmax + 1)))
    psf_px = psf_shape[0] * psf_shape[1]
    items = {
        # the checked PSF cube (float64) and its Taylor sums, kept for the run
        "psf_cube": nchan * psf_px * 8,
        "spectral_psfs": moments * psf_px * 8,
        "dirty_terms": terms * pix * 8,
        # transforms of the spectral PSFs (complex128 for the major cycles, and in the
        # working precision for the updates) and of the finite scale kernels
        "psf_transforms": moments * conv * (16 + 2 * itemsize),
        "kernel_transforms": n_finite * smooth * 2 * itemsize,
        # per spectral PSF: its transform and the kernels' on the beam grid (complex64
        # for float32 beams), and one beam per scale at the box's offsets
        "beam_transforms": moments * (1 + n_finite) * bank_grid * 2 * itemsize,
        "beams": moments * n_scales * (2 * ext[0] - 1) * (2 * ext[1] - 1) * itemsize,
        # the Taylor residuals (the cycle's, a trial update, the increments), every
        # scale's smoothing of them twice (before and after an update), the equivalent
        # peaks and the update's transforms
        "cycle": (4 * terms * pix * 8 + 2 * n_scales * terms * pix * 8
                  + 2 * n_scales * pix * 8 + n_scales * pix + (terms + 1) * conv * 16),
        # the channels' residuals at the end (float64 while made, float32 kept)
        "channel_residuals": nchan * pix * (8 + 4),
    }
    items["total"] = sum(items.values())
    return items
