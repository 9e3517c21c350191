"""A plain numpy multi-scale CLEAN: the baseline the compiled engine is compared with.

The same method as `skyscale.deconvolve` (same scale kernels, size-penalty weights and
PSF patch, whose definitions are taken from skyscale), but every step is whole-array
numpy: cross-term patches and smoothing by ``numpy.fft``, the minor-cycle iteration
by ``tests/naive.py::clean_loop`` (a full search of every plane at every step, no
tiles, no sub-region), the model by ``tests/naive.py::stamp_components`` and the
residual ``dirty - PSF (*) model`` by ``numpy.fft``.  Single-threaded, as numpy is.
"""

import time

import numpy as np
from scipy.fft import next_fast_len

from tests.naive import clean_loop, stamp_components
from skyscale.precompute import patch_half_widths
from skyscale.psf import check_psf, describe_psf
from skyscale.scales import ScaleSet

__all__ = ["convolve_same", "NumpyBeams", "numpy_deconvolve"]


def convolve_same(image, kernel):
    """Linear convolution with a kernel centred at ``shape // 2``, cut to the image."""
    ny, nx = image.shape
    ky, kx = kernel.shape
    s = (next_fast_len(ny + ky - 1, real=True), next_fast_len(nx + kx - 1, real=True))
    full = np.fft.irfft2(np.fft.rfft2(image, s) * np.fft.rfft2(kernel, s), s)
    return full[ky // 2:ky // 2 + ny, kx // 2:kx // 2 + nx]


class NumpyBeams:
    """Cross-term patches and per-scale constants, computed with numpy.fft."""

    def __init__(self, psf, scales, image_shape, *, size_penalty=0.6, psf_patch=None,
                 dtype=np.float32):
        t0 = time.perf_counter()
        self.dtype = np.dtype(dtype)
        self.psf = check_psf(psf, image_shape, dtype=np.float64)
        self.scales = ScaleSet(scales, image_shape=image_shape)
        self.kernels = self.scales.kernels(np.float64)
        self.info = describe_psf(self.psf, image_shape, patch_half=psf_patch)
        radii = self.scales.support_radii
        n = len(radii)
        self.patch_half = patch_half_widths(radii, self.info.patch_half, image_shape)
        self.patch_offset = np.zeros((n, n), dtype=np.int64)
        py, px = self.psf.shape
        pieces, pos, peaks = [], 0, np.zeros(n)
        for k in range(n):
            for l in range(k, n):
                h = int(self.patch_half[k, l])
                need = h + radii[k] + radii[l]
                region = np.zeros((2 * need + 1, 2 * need + 1))
                ya, yb = max(py // 2 - need, 0), min(py // 2 + need + 1, py)
                xa, xb = max(px // 2 - need, 0), min(px // 2 + need + 1, px)
                region[ya - py // 2 + need:yb - py // 2 + need,
                       xa - px // 2 + need:xb - px // 2 + need] = self.psf[ya:yb, xa:xb]
                both = convolve_same(convolve_same(region, self.kernels[k]), self.kernels[l])
                patch = both[need - h:need + h + 1, need - h:need + h + 1]
                pieces.append(patch.ravel())
                self.patch_offset[k, l] = self.patch_offset[l, k] = pos
                pos += patch.size
                if k == l:
                    peaks[k] = patch[h, h]
        self.patches = np.concatenate(pieces).astype(self.dtype)
        self.amp_scale = 1.0 / peaks
        self.response_scale = self.scales.weights(size_penalty) / np.sqrt(peaks)
        self.seconds = time.perf_counter() - t0

    def limits(self, shape):
        lim = np.empty((len(self.kernels), 4), dtype=np.int64)
        for k, r in enumerate(self.scales.support_radii):
            lim[k] = (r, shape[0] - r, r, shape[1] - r)
        return lim


def numpy_deconvolve(dirty, psf, scales, *, threshold, loop_gain=0.1, cycle_depth=0.2,
                     max_components=20000, max_major_cycles=20, psf_patch=None,
                     dtype=np.float32):
    """Major and minor cycles in plain numpy, stopping at ``threshold`` (Jy/beam).

    Returns a dict with the model, the residual, the peak per major cycle, the number
    of components and the seconds of the precompute, the minor and the major cycles.
    """
    t_start = time.perf_counter()
    dt = np.dtype(dtype)
    dirty = np.asarray(dirty, dtype=dt)
    beams = NumpyBeams(psf, scales, dirty.shape, psf_patch=psf_patch, dtype=dt)
    lim = beams.limits(dirty.shape)
    mask = np.ones(dirty.shape, dtype=np.uint8)
    model = np.zeros(dirty.shape, dtype=dt)
    residual = dirty.copy()
    peaks = [float(np.abs(residual).max())]
    n_comp, t_minor, t_major = 0, 0.0, 0.0
    delta = 0 if beams.scales.has_delta else -1
    for _ in range(max_major_cycles):
        if peaks[-1] <= threshold or n_comp >= max_components:
            break
        t0 = time.perf_counter()
        planes = np.stack([convolve_same(residual.astype(np.float64), k) for k in beams.kernels]
                          ).astype(dt)
        start = float(np.abs(planes[0]).max())
        floor = max(threshold, cycle_depth * start, beams.info.outside_level * start)
        comps, *_ = clean_loop(planes, mask, lim, beams.response_scale, beams.amp_scale,
                               beams.patches, beams.patch_offset, beams.patch_half,
                               gain=loop_gain, floor=floor, peak_limit=1.1 * start, ref=0,
                               delta=delta, max_iter=max_components - n_comp)
        stamp_components(model, beams.kernels, *comps)
        n_comp += comps[0].size
        t1 = time.perf_counter()
        residual = (dirty - convolve_same(model.astype(np.float64), beams.psf)).astype(dt)
        t_major += time.perf_counter() - t1
        t_minor += t1 - t0
        peaks.append(float(np.abs(residual).max()))
        if comps[0].size == 0:
            break
    return {"model": model, "residual": residual, "peaks": peaks, "components": n_comp,
            "timings": {"precompute": beams.seconds, "minor": t_minor, "major": t_major},
            "seconds": time.perf_counter() - t_start}
