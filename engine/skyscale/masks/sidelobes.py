"""Islands that a brighter island's sidelobes can explain are not emission (yet).

A dirty image or a residual holds, around every bright island, the PSF's sidelobes of
it: rings and shelves of either sign that a detection level in units of the noise
takes for islands of their own.  No sidelobe of a source of peak ``p`` reaches above
``p`` times the PSF's largest absolute value at that distance or farther (bounded by
the PSF's *envelope*, `sidelobe_envelope`), and sidelobes of several sources add, so an
island whose own peak is under the sum of those bounds for the brighter islands may be
a sidelobe; it is left out until the brighter ones are cleaned and the bound falls (a rule of our own, from the convolution's linearity:
``dirty = sky (*) psf``, Högbom [1]_).

References
----------
.. [1] Högbom, J. A. 1974, A&AS 15, 417.
"""

import math

import numpy as np
from scipy import ndimage

__all__ = ["sidelobe_envelope", "under_sidelobes"]


def sidelobe_envelope(psf, shape):
    """The PSF's envelope: ``env[r]`` bounds ``|psf|`` at ``r`` pixels or farther from its
    peak (at ``(py // 2, px // 2)``), relative to the peak, for every whole ``r`` an
    offset between two pixels of an image of ``shape`` can take.

    It is the largest ``|psf|`` outside the square of half-width ``ceil(r / sqrt 2) - 1``
    around the peak (every pixel at distance ``r`` or more lies outside it): a bound a
    little above the largest value on the circle, read from the rows' and the
    columns' maxima in two passes over the PSF.

    Examples
    --------
    >>> import numpy as np
    >>> psf = np.zeros((9, 9)); psf[4, 4] = 1.0; psf[4, 7] = -0.2
    >>> env = sidelobe_envelope(psf, (5, 5))
    >>> env[:6].round(2).tolist()
    [1.0, 0.2, 0.2, 0.2, 0.2, 0.0]
    """
    py, px = psf.shape
    cy, cx = py // 2, px // 2
    ny, nx = shape
    y0, x0 = max(0, cy - ny + 1), max(0, cx - nx + 1)
    cut = np.abs(np.asarray(psf[y0:cy + ny, x0:cx + nx], dtype=np.float32))
    oy, ox = cy - y0, cx - x0
    rows, cols = cut.max(axis=1), cut.max(axis=0)
    top = int(math.ceil(math.hypot(ny, nx))) + 1
    half = max(cut.shape) + 1
    outside = np.zeros(half + 1)           # largest |psf| with Chebyshev distance >= k
    for line, at in ((rows, oy), (cols, ox)):
        dist = np.abs(np.arange(line.size) - at)
        most = np.zeros(half + 1)
        np.maximum.at(most, dist, line.astype(np.float64))
        outside = np.maximum(outside, np.maximum.accumulate(most[::-1])[::-1])
    k = np.minimum(np.ceil(np.arange(top + 1) / math.sqrt(2.0)).astype(np.int64), half)
    env = outside[k]
    peak = float(abs(psf[cy, cx]))
    return env / peak if peak > 0 else env


def under_sidelobes(image, islands, envelope, *, margin_px=0.0):
    """Which islands a brighter island's sidelobes could make.

    Parameters
    ----------
    image : (ny, nx) ndarray
        The residual the islands were found on.
    islands : (ny, nx) ndarray of int
        Island labels ``1..n`` (0: none), as `scipy.ndimage.label` gives.
    envelope : (m,) ndarray
        `sidelobe_envelope` of the PSF.
    margin_px : float
        The distance between two islands' peaks is shortened by this much (an island
        reaches beyond its peak): a conservative reading.

    Returns
    -------
    (n + 1,) ndarray of bool
        True for island ``k`` when its own peak is at most ``sum_j p_j envelope[d_j]``
        over the islands ``j`` of larger peak ``p_j``, ``d_j`` the distance between
        their peaks less ``margin_px`` (sidelobes add, the convolution being linear);
        index 0 is False.

    Notes
    -----
    An island's peak stands for a point source of that flux; a broad island's
    sidelobes follow its flux, which is more than its peak, so the rule is a lower
    bound for those and catches only the sidelobes of compact emission for sure.
    """
    n = int(islands.max()) if islands.size else 0
    out = np.zeros(n + 1, dtype=bool)
    if n < 2:
        return out
    index = np.arange(1, n + 1)
    peaks = np.asarray(ndimage.maximum(image, labels=islands, index=index), dtype=np.float64)
    where = np.asarray(ndimage.maximum_position(image, labels=islands, index=index),
                       dtype=np.float64).reshape(n, 2)
    order = np.argsort(-peaks, kind="stable")
    last = len(envelope) - 1
    for rank, k in enumerate(order[1:], start=1):
        brighter = order[:rank]
        d = np.hypot(*(where[brighter] - where[k]).T) - margin_px
        at = np.clip(np.floor(d), 0, last).astype(np.int64)
        if peaks[k] <= float(np.sum(peaks[brighter] * envelope[at])):
            out[k + 1] = True
    return out

