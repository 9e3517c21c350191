"""Kernel that adds scale components to a model image."""

import numba
import numpy as np

from skyscale.core.kernels.config import JIT_OPTIONS

__all__ = ["stamp_components"]


@numba.njit(**JIT_OPTIONS)
def _stamp_components(model, kernels, koff, khalf, ys, xs, ks, fs):
    ny, nx = model.shape
    for c in range(ys.shape[0]):
        k = ks[c]
        h = khalf[k]
        w = 2 * h + 1
        base = koff[k]
        f = model.dtype.type(fs[c])
        for dy in range(-h, h + 1):
            yy = ys[c] + dy
            if yy < 0 or yy >= ny:
                continue
            row = base + (dy + h) * w + h
            for dx in range(-h, h + 1):
                xx = xs[c] + dx
                if xx < 0 or xx >= nx:
                    continue
                model[yy, xx] += f * kernels[row + dx]
    return model


def stamp_components(model, kernels, ys, xs, ks, fs):
    """Add ``fs[c] * kernels[ks[c]]`` centred at ``(ys[c], xs[c])`` to ``model`` in place.

    Parameters
    ----------
    model : (ny, nx) float32 or float64 ndarray
        Model image (Jy/pixel), modified in place and returned, so it must be a
        writeable C-contiguous 2-D float32 or float64 array (anything else is refused).
    kernels : sequence of (2h+1, 2h+1) array_like
        Unit-sum scale kernels (square, odd side); converted to ``model``'s dtype.
    ys, xs, ks : (n,) array_like of int
        Component positions and scale indices (``0 <= ks < len(kernels)``); converted
        to contiguous int64.
    fs : (n,) array_like of float
        Integrated fluxes; converted to contiguous float64.

    Raises
    ------
    ValueError
        For a ``model`` that cannot be updated in place, a kernel that is not square
        with an odd side, arrays of different lengths or a scale index out of range.

    Notes
    -----
    Components are added serially in the given order, so the result does not depend
    on the thread count.  Parts of a kernel beyond the image edge are dropped.
    """
    if not (isinstance(model, np.ndarray) and model.ndim == 2
            and model.dtype in (np.float32, np.float64) and model.flags.c_contiguous
            and model.flags.writeable):
        got = (f"{type(model).__name__} {getattr(model, 'dtype', '')} "
               f"{getattr(model, 'shape', '')}").strip()
        raise ValueError(f"model is {got}; it is updated in place, so pass a writeable "
                         "C-contiguous 2-D float32 or float64 array, e.g. "
                         "np.ascontiguousarray(model, dtype=np.float64)")
    kernels = [np.asarray(k) for k in kernels]
    for i, k in enumerate(kernels):
        if k.ndim != 2 or k.shape[0] != k.shape[1] or k.shape[0] % 2 == 0:
            raise ValueError(f"kernels[{i}] has shape {k.shape}; give square kernels with "
                             "an odd side (2h + 1, 2h + 1)")
    ys = np.ascontiguousarray(ys, dtype=np.int64).ravel()
    xs = np.ascontiguousarray(xs, dtype=np.int64).ravel()
    ks = np.ascontiguousarray(ks, dtype=np.int64).ravel()
    fs = np.ascontiguousarray(fs, dtype=np.float64).ravel()
    if not ys.size == xs.size == ks.size == fs.size:
        raise ValueError(f"ys, xs, ks and fs have {ys.size}, {xs.size}, {ks.size} and "
                         f"{fs.size} values; give one of each per component")
    if ks.size and (ks.min() < 0 or ks.max() >= len(kernels)):
        raise ValueError(f"ks spans {ks.min()}..{ks.max()} but there are {len(kernels)} "
                         "kernels; give scale indices in 0..len(kernels) - 1")
    if not kernels:
        return model
    flat = np.concatenate([np.ravel(k) for k in kernels]).astype(model.dtype)
    n_values = np.array([k.size for k in kernels], dtype=np.int64)
    koff = np.concatenate([[0], np.cumsum(n_values)[:-1]]).astype(np.int64)
    khalf = np.array([k.shape[0] // 2 for k in kernels], dtype=np.int64)
    return _stamp_components(model, flat, koff, khalf, ys, xs, ks, fs)
