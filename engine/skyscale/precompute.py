"""Precompute of the multi-scale beams: cross-term patches and their memory.

References
----------
.. [1] Cornwell, T. J. 2008, IEEE J. Sel. Topics Signal Process. 2(5), 793 (cross terms
   PSF (*) scale_k (*) scale_l).
"""

import numpy as np

from .fft import fast_shape

__all__ = ["patch_half_widths", "plan_memory", "cross_term_patches"]


def patch_half_widths(radii, psf_patch_half, image_shape):
    """Half-width of each cross-term patch: ``psf_patch + r_k + r_l``, capped by the image.

    An offset between two pixels of the image never exceeds ``max(image_shape) - 1``,
    so no patch need be wider than that.
    """
    r = np.asarray(radii, dtype=np.int64)
    cap = int(max(image_shape)) - 1
    return np.minimum(psf_patch_half + r[:, None] + r[None, :], cap).astype(np.int64)


def plan_memory(image_shape, psf_shape, radii, psf_patch_half, itemsize=4):
    """Bytes a run will hold, known before anything is allocated.

    Parameters
    ----------
    image_shape, psf_shape : (int, int)
    radii : sequence of int
        Support half-width of each scale kernel.
    psf_patch_half : int
        Half-width of the minor-cycle PSF patch.
    itemsize : int
        4 for float32, 8 for float64.

    Returns
    -------
    dict
        ``patches`` (cross terms, symmetric pairs stored once each way), ``planes``
        (one smoothed residual per scale), ``precompute_fft`` (transient FFT work
        space), ``major_fft`` (the image-plane major cycle), ``images`` (dirty,
        residual, model, mask) and ``total``.
    """
    n = len(radii)
    half = patch_half_widths(radii, psf_patch_half, image_shape)
    patches = int(((2 * half + 1) ** 2).sum()) * itemsize
    ny, nx = image_shape
    planes = n * ny * nx * itemsize
    rmax = int(max(radii)) if n else 0
    reg = 2 * min(psf_patch_half + 4 * rmax, max(psf_shape) // 2) + 1
    fy, fx = fast_shape((reg, reg), (4 * rmax + 1, 4 * rmax + 1))
    precompute_fft = (n + 3) * fy * (fx // 2 + 1) * 16
    my, mx = fast_shape(image_shape, psf_shape)
    major_fft = 3 * my * (mx // 2 + 1) * 16
    images = 4 * ny * nx * itemsize + ny * nx * 8
    total = patches + planes + max(precompute_fft, major_fft) + images
    return {"patches": patches, "planes": planes, "precompute_fft": precompute_fft,
            "major_fft": major_fft, "images": images, "total": total}


def cross_term_patches(psf, kernels, psf_patch_half, image_shape, backend):
    """Cross terms ``PSF (*) scale_k (*) scale_l`` cut to patches, by FFT.

    Parameters
    ----------
    psf : (py, px) ndarray
        Normalised PSF, centred at ``(py // 2, px // 2)``.
    kernels : list of (2r+1, 2r+1) ndarray
        Unit-sum scale kernels (float64).
    psf_patch_half : int
        PSF patch half-width; the (k, l) patch has half-width ``psf_patch + r_k + r_l``.
    image_shape : (int, int)
        Caps the patch size (see `patch_half_widths`).
    backend : FFT backend

    Returns
    -------
    patches : (n,) float64 ndarray
        All patches flattened and packed.
    offsets, halves : (n_scales, n_scales) int64 ndarrays
        Start of patch (k, l) in ``patches`` and its half-width; (k, l) and (l, k)
        share storage.
    beam_peaks : (n_scales,) ndarray
        ``B_kk(0)``, the peak of each doubly smoothed PSF.

    Notes
    -----
    The patch (k, l) at offsets up to ``h_kl`` needs the PSF out to
    ``h_kl + r_k + r_l``; the PSF is cut to that region (zero beyond the PSF itself)
    and every product is transformed once, so the cost is one forward FFT per scale
    and one inverse FFT per scale pair ([1]_).
    """
    radii = [k.shape[0] // 2 for k in kernels]
    n = len(kernels)
    halves = patch_half_widths(radii, psf_patch_half, image_shape)
    need = int(max(halves[k, l] + radii[k] + radii[l] for k in range(n) for l in range(n)))
    py, px = psf.shape
    cy, cx = py // 2, px // 2
    region = np.zeros((2 * need + 1, 2 * need + 1), dtype=np.float64)
    ya, yb = max(cy - need, 0), min(cy + need + 1, py)
    xa, xb = max(cx - need, 0), min(cx + need + 1, px)
    region[ya - cy + need:yb - cy + need, xa - cx + need:xb - cx + need] = psf[ya:yb, xa:xb]
    rmax = max(radii)
    fshape = fast_shape(region.shape, (4 * rmax + 1, 4 * rmax + 1))
    psf_f = backend.rfft2(region, fshape)
    kern_f = [backend.rfft2(k, fshape) for k in kernels]
    offsets = np.zeros((n, n), dtype=np.int64)
    pieces, beam_peaks, pos = [], np.zeros(n), 0
    for k in range(n):
        for l in range(k, n):
            full = backend.irfft2(psf_f * kern_f[k] * kern_f[l], fshape)
            c = need + radii[k] + radii[l]     # centre of the linear convolution
            h = int(halves[k, l])
            patch = np.ascontiguousarray(full[c - h:c + h + 1, c - h:c + h + 1])
            pieces.append(patch.ravel())
            offsets[k, l] = offsets[l, k] = pos
            pos += patch.size
            if k == l:
                beam_peaks[k] = patch[h, h]
    return np.concatenate(pieces), offsets, halves, beam_peaks
