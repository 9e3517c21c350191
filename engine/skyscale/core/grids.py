"""FFT grids and the sizes a run's cost and memory follow, from shapes alone.

`fft_grid` is the FFT length `skyscale.core.fft.Convolver` chooses for a centred
convolution; `run_geometry` gives every grid of a run (`Geometry`), which the memory
account (`skyscale.core.memory`) and the cost model (`skyscale.cost.model`) count;
`fft_work` is the unit of FFT work (``S log2 S``).
"""

import math
from dataclasses import dataclass

from scipy.fft import next_fast_len

__all__ = ["fft_work", "fft_grid", "Geometry", "run_geometry"]


def fft_work(shape):
    """``S log2 S`` for an FFT of ``shape``: the unit of FFT work."""
    s = float(shape[0]) * float(shape[1])
    return s * math.log2(max(s, 2.0))


def fft_grid(n, below, above):
    """FFT length of a centred circular convolution without wrap-around on ``n`` pixels
    (as `skyscale.core.fft.Convolver` chooses it)."""
    return next_fast_len(int(n + max(min(below, n - 1), min(above, n - 1))), real=True)


@dataclass(frozen=True)
class Geometry:
    """Sizes a run's cost depends on, from shapes alone.

    The cycle's box is taken as the whole image (its largest: a run without a mask, or
    with one that spans the image), so the grids, the beams' extent and the tracked
    pixels are upper bounds for a compact mask.
    """

    image_shape: tuple
    psf_shape: tuple
    radii: tuple                 #: support half-width of each scale kernel
    itemsize: int
    precompute_grid: tuple       #: FFT grid of the beams (`skyscale.core.precompute.pair_beams`)
    smooth_grid: tuple           #: FFT grid of the smoothing (None: delta scales only)
    major_grid: tuple            #: FFT grid of the PSF convolution

    @property
    def n_scales(self):
        return len(self.radii)

    @property
    def n_finite(self):
        return sum(1 for r in self.radii if r > 0)

    @property
    def pixels(self):
        return self.image_shape[0] * self.image_shape[1]

    @property
    def n_pairs(self):
        """Pair beams direct updates use (`skyscale.Engine._pair_keys`): every pair of
        scales, and each scale's response in the unsmoothed residual unless a delta
        scale (radius 0, the kernel ``[[1]]``) stands for it."""
        n = self.n_scales
        return n * (n - 1) // 2 + (0 if 0 in self.radii else n)

    @property
    def beam_pixels(self):
        """Pixels of one beam at the image's extent: ``(2 ny - 1) (2 nx - 1)``."""
        return (2 * self.image_shape[0] - 1) * (2 * self.image_shape[1] - 1)

    def transforms(self):
        """FFTs per step, as ``{step: [(grid, count), ...]}``: ``precompute`` (the
        engine's smoothing kernels), ``beams`` (each making of beams transforms the PSF
        and each finite kernel: once for the scales' beams, once per scale for its pair
        beams at its first direct update; then one inverse per beam), ``setup`` (the residual operator's PSF and the cycle's
        convolvers), ``round`` (one FFT update), ``major`` and ``stats``."""
        nf = self.n_finite
        smooth = [(self.smooth_grid, nf)] if nf else []
        step_s = [(self.smooth_grid, 1 + nf)] if nf else []
        beams = [(self.precompute_grid, (1 + self.n_scales) * (1 + nf) + self.n_scales
                  + self.n_pairs)]
        return {"precompute": smooth, "beams": beams,
                "setup": [(self.major_grid, 2)] + smooth,
                "round": [(self.major_grid, 2)] + step_s, "major": [(self.major_grid, 2)],
                "stats": step_s}

    def fft_update_work(self):
        """Work units (``S log2 S``) of one FFT update: the engine's
        ``Engine._fft_update_cost`` for a box of the image's shape."""
        return sum(n * fft_work(g) for g, n in self.transforms()["round"])


def run_geometry(image_shape, psf_shape, radii, *, itemsize=4):
    """The `Geometry` of a run (no large array is made)."""
    ny, nx = (int(v) for v in image_shape)
    py, px = (int(v) for v in psf_shape)
    r = tuple(int(v) for v in radii)
    rmax = max(r) if r else 0
    major = (fft_grid(ny, py // 2, py - 1 - py // 2), fft_grid(nx, px // 2, px - 1 - px // 2))
    region = (2 * (ny - 1 + 2 * rmax) + 1, 2 * (nx - 1 + 2 * rmax) + 1)
    pre = tuple(next_fast_len(int(v + 4 * rmax), real=True) for v in region)
    smooth = None
    if rmax > 0:
        smooth = (fft_grid(ny, rmax, rmax), fft_grid(nx, rmax, rmax))
    return Geometry((ny, nx), (py, px), r, int(itemsize), pre, smooth, major)
