"""The residual-operator protocol and the built-in image-plane operator.

A residual operator turns a model image into the residual image of the data: the
major cycle.  skyscale's own is the image-plane one, ``dirty - PSF (*) model``;
pipelines pass theirs (a degridder, the visibility residual, a gridder), as in the
Cotton-Schwab major cycle.

References
----------
.. [1] Schwab, F. R. 1984, AJ 89, 1076.
.. [2] Clark, B. G. 1980, A&A 89, 377.
"""

import logging
import warnings
from typing import Protocol, runtime_checkable

import numpy as np

from skyscale.core.validate import InputError, as_image, resolve_dtype
from skyscale.core.box_convolve import BoxConvolver
from skyscale.core.fft import Convolver, get_backend
from skyscale.core.psf import check_psf

__all__ = ["ResidualOperator", "ImagePlaneOperator", "FunctionOperator", "as_operator",
           "describe_operator", "exact_box", "exact_region"]

logger = logging.getLogger(__name__)


@runtime_checkable
class ResidualOperator(Protocol):
    """Anything that maps a model image (Jy/pixel) to a residual image (Jy/beam).

    ``operator(model) -> residual`` with both of the image's shape.
    """

    def __call__(self, model):  # pragma: no cover - protocol
        ...


class ImagePlaneOperator:
    """``residual = dirty - PSF (*) model`` by FFT, the PSF's transform kept.

    Parameters
    ----------
    dirty : (ny, nx) ndarray
        Dirty image, Jy/beam.
    psf : (py, px) ndarray
        PSF centred at ``(py // 2, px // 2)``, at least the image's size.
    fft : backend name or object, optional
    dtype : numpy dtype, optional
        Default float32.

    Notes
    -----
    With a PSF twice the image's size (``py >= 2 ny - 1``) every offset between two
    image pixels is covered and the residual is exact.  With a smaller PSF, the PSF
    is taken as zero beyond its edge: the residual at a pixel farther than
    ``exact_offsets`` from a component misses those sidelobes; `approximation` says
    by how much at most, per unit of model flux.
    """

    def __init__(self, dirty, psf, *, fft="auto", dtype=None, threads=None):
        self.dtype = resolve_dtype(dtype)
        self.dirty = as_image(dirty, "dirty", dtype=self.dtype)
        self.psf = check_psf(psf, self.dirty.shape, dtype=self.dtype)
        backend = get_backend(fft, threads)
        self._conv = Convolver(self.psf, self.dirty.shape, backend=backend,
                               precision=self.dtype)
        self._box_conv = BoxConvolver(self.psf, self.dirty.shape, backend=backend,
                                      precision=self.dtype)
        ny, nx = self.dirty.shape
        py, px = self.psf.shape
        cy, cx = py // 2, px // 2
        self.exact_offsets = (min(cy, py - 1 - cy), min(cx, px - 1 - cx))
        self.exact = self.exact_offsets[0] >= ny - 1 and self.exact_offsets[1] >= nx - 1
        edge = np.concatenate([self.psf[0], self.psf[-1], self.psf[:, 0], self.psf[:, -1]])
        #: Largest |PSF| on the PSF's border: bounds the sidelobe omitted beyond it.
        self.edge_level = float(np.abs(edge).max())
        if not self.exact:
            dy, dx = self.exact_offsets
            warnings.warn(
                f"the PSF ({py} x {px} pixels) is smaller than twice the image ({ny} x {nx}): "
                f"residuals are exact only within {dy} pixels in y and {dx} in x of each "
                f"component; farther away the PSF sidelobes beyond its edge (|PSF| up to "
                f"{self.edge_level:.3g} at its border) are taken as zero. Give a PSF of "
                f"{2 * ny} x {2 * nx} pixels for an exact residual", stacklevel=2)

    @property
    def approximation(self):
        """None when exact; otherwise a dict describing the approximate region."""
        if self.exact:
            return None
        return {"exact_offsets": self.exact_offsets, "psf_edge_level": self.edge_level}

    def describe(self):
        """What this operator is, for reports."""
        out = {"operator": "ImagePlaneOperator", "residual": "dirty - PSF (*) model by FFT",
               "exact": bool(self.exact)}
        if not self.exact:
            out.update(exact_within_px=[int(v) for v in self.exact_offsets],
                       psf_shape=[int(v) for v in self.psf.shape],
                       psf_edge_level=self.edge_level)
        return out

    def __call__(self, model):
        model = np.asarray(model, dtype=self.dtype)
        box = self._box_conv.box_for(model)       # a compact model: a smaller grid
        if box is not None:
            return self.dirty - self._box_conv(model, box, out_dtype=self.dtype)
        return self.dirty - self._conv(model, out_dtype=self.dtype)


class FunctionOperator:
    """Wrap a plain function ``f(model) -> residual`` and check what it returns.

    Parameters
    ----------
    function : callable
        ``function(model) -> residual``, both ``shape``.
    shape : (int, int)
        The image's shape: the model handed in and the residual returned must have it.
    dtype : numpy dtype
        Dtype of the residual returned; default float32.

    Notes
    -----
    Non-finite values are passed on: the driver stops the run as 'diverging' on them
    and keeps the last good model.
    """

    def __init__(self, function, shape, dtype=np.float32):
        self.function = function
        self.shape = tuple(int(v) for v in shape)
        self.dtype = dtype

    def __call__(self, model):
        if np.shape(model) != self.shape:
            raise InputError(f"the operator was given a model of shape {np.shape(model)}, "
                             f"but it was built for images of shape {self.shape}; build it "
                             "with the image's shape")
        out = self.function(model)
        out = as_image(out, "residual returned by the operator", dtype=self.dtype,
                       allow_nan=True)
        if out.shape != self.shape:
            raise InputError(f"the operator returned a residual of shape {out.shape}, "
                             f"expected the image's {self.shape}; return one image per model")
        return out


def describe_operator(operator):
    """What ran the major cycles: the operator's own ``describe()`` dict, else its class."""
    describe = getattr(operator, "describe", None)
    return describe() if callable(describe) else {"operator": type(operator).__name__}


def as_operator(operator, shape, dtype=np.float32):
    """Return ``operator`` as a residual operator, wrapping a plain callable.

    A `FunctionOperator` built for another image shape is refused here, before the run.
    """
    if isinstance(operator, FunctionOperator):
        if operator.shape != tuple(int(v) for v in shape):
            raise InputError(f"operator was built for images of shape {operator.shape}, "
                             f"but the dirty image is {tuple(shape)}; build it with the "
                             "dirty image's shape")
        return operator
    if isinstance(operator, ImagePlaneOperator):
        return operator
    if not callable(operator):
        raise TypeError(f"operator is {type(operator).__name__}, expected a callable "
                        "model -> residual")
    return FunctionOperator(operator, shape, dtype)


def exact_box(shape, offsets):
    """The central box in which every two pixels are within ``offsets`` of each other.

    A model confined to it has an exact residual on it when the PSF covers ``offsets``
    (``(dy, dx)``, see `ImagePlaneOperator.exact_offsets`).  Returns ``((y0, y1),
    (x0, x1))``, half-open.
    """
    box = []
    for n, e in zip(shape, offsets):
        h = min(int(e) + 1, n)
        lo = (n - h) // 2
        box.append((lo, lo + h))
    return tuple(box)


def exact_region(shape, model, offsets):
    """Where the residual is exact for a model's extent: a bool image, or None for all.

    The residual at ``q`` is exact when every model pixel ``p`` has
    ``|q - p| <= offsets`` per axis, that is inside the model's bounding box grown by
    ``offsets`` and shrunk from the far side.
    """
    ys = np.nonzero(np.any(model != 0, axis=1))[0]
    if ys.size == 0:
        return None
    xs = np.nonzero(np.any(model != 0, axis=0))[0]
    ey, ex = offsets
    ny, nx = shape
    out = np.zeros(shape, dtype=bool)
    ya, yb = max(int(ys[-1]) - ey, 0), min(int(ys[0]) + ey + 1, ny)
    xa, xb = max(int(xs[-1]) - ex, 0), min(int(xs[0]) + ex + 1, nx)
    out[ya:yb, xa:xb] = True
    return out
