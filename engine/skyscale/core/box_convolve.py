"""The PSF's response over the whole image to a model that lies in a box.

The image-plane major cycle convolves the model with a PSF twice the image's size, on a
grid of about twice the image per side.  A model confined to a box of ``b`` pixels
needs a grid of only ``n + b``: the PSF's offsets that reach from the box to the image
are cut out and the convolution is done by overlap-save (the outputs a circular
convolution leaves unwrapped are kept).  A compact source in a large image then pays a
quarter of the transforms' cost, with the same exact sum.

References
----------
.. [1] Oppenheim, A. V. & Schafer, R. W. 2010, Discrete-Time Signal Processing, 3rd ed.,
   section 8.7 (linear convolution by the DFT; overlap-save).
"""

import numpy as np
from scipy.fft import next_fast_len

from skyscale.core.fft import convolution_grid, get_backend

__all__ = ["BOX_STEP", "BoxConvolver"]

#: Box edges are moved out to multiples of this many pixels, so that a model that grows
#: a little between major cycles keeps its box (and the PSF part's transform).
BOX_STEP = 128

#: The box path is taken when its grid holds at most this fraction of the whole-image
#: convolution's grid.
MAX_GRID_FRACTION = 0.5


class BoxConvolver:
    """``PSF (*) model`` over the whole image for a model that lies in a box.

    Parameters
    ----------
    psf : (py, px) ndarray
        Centred at ``(py // 2, px // 2)``; zero beyond its edge.
    image_shape : (int, int)
    backend : FFT backend, optional
    precision : numpy dtype
        Precision of the transforms (float32 or float64).

    Notes
    -----
    ``out[q] = sum_p model[p] PSF[q - p + c]`` for every image pixel ``q``, the sum
    over the box: the same as `skyscale.core.fft.Convolver` on the whole image.
    """

    def __init__(self, psf, image_shape, *, backend=None, precision=np.float32):
        self.psf = np.asarray(psf)
        self.image_shape = tuple(int(v) for v in image_shape)
        self.backend = get_backend(backend or "auto")
        self.precision = np.dtype(precision)
        whole = convolution_grid(self.psf.shape, self.image_shape)
        self._whole_size = whole[0] * whole[1]
        self._parts = {}          # box -> (transform of the PSF part, grid shape)

    def box_for(self, model):
        """``(y0, y1, x0, x1)`` holding every non-zero of ``model``, its edges at
        multiples of `BOX_STEP`; None when the model is empty or the box's grid would
        not be much smaller than the whole image's."""
        rows = np.flatnonzero(np.any(model != 0, axis=1))
        if rows.size == 0:
            return None
        cols = np.flatnonzero(np.any(model != 0, axis=0))
        ny, nx = self.image_shape
        box = []
        for idx, n in ((rows, ny), (cols, nx)):
            lo = int(idx[0]) // BOX_STEP * BOX_STEP
            hi = min(-(-(int(idx[-1]) + 1) // BOX_STEP) * BOX_STEP, n)
            box += [lo, hi]
        grid = self._grid(box)
        if grid[0] * grid[1] > MAX_GRID_FRACTION * self._whole_size:
            return None
        return tuple(box)

    def _grid(self, box):
        y0, y1, x0, x1 = box
        ny, nx = self.image_shape
        return (next_fast_len(ny + (y1 - y0) - 1, real=True),
                next_fast_len(nx + (x1 - x0) - 1, real=True))

    def _part(self, box):
        """The PSF at every offset from the box to the image, on the box's grid."""
        if box not in self._parts:
            self._parts.clear()                    # one box at a time
            y0, y1, x0, x1 = box
            by, bx = y1 - y0, x1 - x0
            ny, nx = self.image_shape
            grid = self._grid(box)
            py, px = self.psf.shape
            part = np.zeros(grid, dtype=np.float64)
            # row t of the part is the PSF at offset t - (y0 + by - 1) from its centre
            oy, ox = py // 2 - (y0 + by - 1), px // 2 - (x0 + bx - 1)
            ty0, ty1 = max(0, -oy), min(ny + by - 1, py - oy)
            tx0, tx1 = max(0, -ox), min(nx + bx - 1, px - ox)
            if ty1 > ty0 and tx1 > tx0:
                part[ty0:ty1, tx0:tx1] = self.psf[oy + ty0:oy + ty1, ox + tx0:ox + tx1]
            complex_type = np.complex64 if self.precision == np.float32 else np.complex128
            self._parts[box] = (self.backend.rfft2(part, grid).astype(complex_type), grid)
        return self._parts[box]

    def __call__(self, model, box, out_dtype=None):
        """The response over the whole image to ``model`` (zero outside ``box``)."""
        spectrum_part, grid = self._part(tuple(box))
        y0, y1, x0, x1 = box
        ny, nx = self.image_shape
        sub = np.asarray(model)[y0:y1, x0:x1].astype(self.precision, copy=False)
        spectrum = self.backend.rfft2(sub, grid)
        spectrum *= spectrum_part
        full = self.backend.irfft2(spectrum, grid)
        by, bx = y1 - y0, x1 - x0
        return np.ascontiguousarray(full[by - 1:by - 1 + ny, bx - 1:bx - 1 + nx],
                                    dtype=out_dtype or np.asarray(model).dtype)
