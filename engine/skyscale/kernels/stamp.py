"""Kernel that adds scale components to a model image."""

import numba
import numpy as np

from .._config import JIT_OPTIONS

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
    model : (ny, nx) ndarray
        Model image (Jy/pixel), modified in place and returned.
    kernels : list of (2h+1, 2h+1) ndarray
        Unit-sum scale kernels.
    ys, xs, ks : (n,) int arrays
        Component positions and scale indices.
    fs : (n,) float array
        Integrated fluxes.

    Notes
    -----
    Components are added serially in the given order, so the result does not depend
    on the thread count.  Parts of a kernel beyond the image edge are dropped.
    """
    if not model.flags.c_contiguous:
        raise ValueError("model must be C-contiguous; pass np.ascontiguousarray(model)")
    flat = np.concatenate([np.ravel(k) for k in kernels]).astype(model.dtype)
    sizes = np.array([k.size for k in kernels], dtype=np.int64)
    koff = np.concatenate([[0], np.cumsum(sizes)[:-1]]).astype(np.int64)
    khalf = np.array([k.shape[0] // 2 for k in kernels], dtype=np.int64)
    return _stamp_components(model, flat, koff, khalf,
                             np.ascontiguousarray(ys, dtype=np.int64),
                             np.ascontiguousarray(xs, dtype=np.int64),
                             np.ascontiguousarray(ks, dtype=np.int64),
                             np.ascontiguousarray(fs, dtype=np.float64))
