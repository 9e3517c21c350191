"""The window of a large image that one measurement of the residual needs.

Every major cycle smooths the residual by every scale, for each scale's peak in the mask
and its noise off the emission.  The peaks need the smoothing only around the mask, and
the noise needs only enough emission-free pixels for its estimate (a subsample of
`skyscale.core.noise.MAX_SAMPLES` pixels scatters by under 1 %): a compact mask in a
large image is measured in a window around it, so its cost follows the emission rather
than the image.
"""

import numpy as np

__all__ = ["MIN_WINDOW", "WINDOW_STEP", "measurement_window"]

#: A window is at least this many pixels per side (a million pixels hold some 40,000
#: beams of 5 pixels: far more independent noise samples than an estimate needs).
MIN_WINDOW = 1024

#: Window sides are rounded up to a multiple of this, so that a mask that changes a
#: little between major cycles keeps the window's shape (and its kernels' transforms).
WINDOW_STEP = 256


def measurement_window(mask, image_shape, margin):
    """``(y0, y1, x0, x1)``: the part of the image a measurement smooths, or None.

    Parameters
    ----------
    mask : (ny, nx) bool ndarray or None
        Where components may go.
    image_shape : (int, int)
    margin : int
        Pixels kept beyond the mask on every side: twice the largest kernel radius
        makes the smoothed residual exact over the mask's box grown by that radius,
        the box a minor cycle works in.

    Returns
    -------
    tuple or None
        None (the whole image) without a mask, for an empty one, or when the window
        would cover half the image or more.  Otherwise the mask's bounding box grown by
        ``margin``, widened about its centre to at least `MIN_WINDOW` per side, rounded
        up to a multiple of `WINDOW_STEP` and moved inside the image.
    """
    if mask is None:
        return None
    mask = np.asarray(mask, dtype=bool)
    rows = np.flatnonzero(mask.any(axis=1))
    if rows.size == 0:
        return None
    cols = np.flatnonzero(mask.any(axis=0))
    out = []
    for idx, n in ((rows, image_shape[0]), (cols, image_shape[1])):
        lo, hi = int(idx[0]) - margin, int(idx[-1]) + 1 + margin
        side = max(hi - lo, MIN_WINDOW)
        side = min(-(-side // WINDOW_STEP) * WINDOW_STEP, n)
        start = min(max((lo + hi - side) // 2, 0), n - side)
        out += [start, start + side]
    y0, y1, x0, x1 = out
    if 2 * (y1 - y0) * (x1 - x0) >= image_shape[0] * image_shape[1]:
        return None
    return y0, y1, x0, x1
