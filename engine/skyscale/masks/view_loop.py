"""The minor cycle of `skyscale.masks.sky_view`: multi-scale Högbom steps on candidates.

One compiled kernel (`_view_loop`) and the function that checks and hands it its
arrays (`view_loop`); its plain numpy twin is ``tests/naive.py``'s ``view_loop``.

References
----------
.. [1] Högbom, J. A. 1974, A&AS 15, 417.
.. [2] Cornwell, T. J. 2008, IEEE J. Sel. Topics Signal Process. 2(5), 793.
"""

import numba
import numpy as np

from skyscale.core.kernels.config import JIT_OPTIONS

__all__ = ["view_loop"]


@numba.njit(**JIT_OPTIONS)
def _view_loop(values, ys, xs, scale, levels, weights, patches, pair, gain, budget, out_k,
               out_f):
    n = values.shape[0]
    half = (patches.shape[1] - 1) // 2
    count = 0
    while count < budget:
        best = 0.0
        k = -1
        for i in range(n):
            r = values[i] / levels[scale[i]]
            if r > 1.0 and r * weights[scale[i]] > best:
                best = r * weights[scale[i]]
                k = i
        if k < 0:
            break
        j = scale[k]
        y0 = ys[k]
        x0 = xs[k]
        f = gain * values[k] / float(patches[pair[j, j], half, half])
        for i in range(n):
            dy = ys[i] - y0
            dx = xs[i] - x0
            if -half <= dy <= half and -half <= dx <= half:
                values[i] = values[i] - f * float(patches[pair[j, scale[i]], dy + half,
                                                          dx + half])
        out_k[count] = k
        out_f[count] = f
        count += 1
    return count


def view_loop(values, ys, xs, scale, levels, patches, pair, *, gain, budget, weights=None):
    """Högbom steps over candidate pixels of several scales, until each is under its level.

    Parameters
    ----------
    values : (n,) ndarray of float64
        The candidates' values, each on its scale's smoothed residual; updated in place.
    ys, xs : (n,) ndarray of int
        Their pixels.
    scale : (n,) ndarray of int
        Their scale, an index into ``levels`` and ``pair``.
    levels : (s,) ndarray of float
        Each scale's level (> 0): a candidate counts by its value over its level.
    patches : (u, 2h + 1, 2h + 1) ndarray of float32
        What a unit component of scale ``j`` at the centre does to scale ``t``'s
        smoothed residual is ``patches[pair[j, t]]``; offsets beyond ``h`` are left
        for the major cycle.
    pair : (s, s) ndarray of int
    weights : (s,) ndarray of float, optional
        Each scale's weight in the choice (Cornwell 2008's bias toward small scales);
        default 1 for all.
    gain : float
        Loop gain.
    budget : int
        At most this many components.

    Returns
    -------
    index : (m,) ndarray of int
        The candidate each component was taken at, in order.
    flux : (m,) ndarray of float64
        Its flux: ``gain`` times the value over its own scale's patch peak.

    Notes
    -----
    At each step, of the candidates above their scale's level, the one whose value
    over its level times its scale's weight is highest is taken (the first on ties),
    as in the multi-scale CLEAN of Cornwell 2008 [2]_ with the level as each scale's
    noise normalisation and ``weights`` as its bias; and every candidate is updated exactly within
    the patch (Högbom 1974 [1]_).  The order of the arithmetic is fixed, so the result
    does not depend on the thread count.
    """
    values = np.ascontiguousarray(values, dtype=np.float64)
    out_k = np.empty(max(int(budget), 0), dtype=np.int64)
    out_f = np.empty(max(int(budget), 0), dtype=np.float64)
    count = _view_loop(values, np.ascontiguousarray(ys, dtype=np.int64),
                       np.ascontiguousarray(xs, dtype=np.int64),
                       np.ascontiguousarray(scale, dtype=np.int64),
                       np.ascontiguousarray(levels, dtype=np.float64),
                       np.ones(len(levels)) if weights is None
                       else np.ascontiguousarray(weights, dtype=np.float64),
                       np.ascontiguousarray(patches, dtype=np.float32),
                       np.ascontiguousarray(pair, dtype=np.int64), float(gain),
                       int(budget), out_k, out_f)
    return out_k[:count], out_f[:count]
