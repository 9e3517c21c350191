"""Robust noise estimates for stop rules and masks.

References
----------
.. [1] Rousseeuw, P. J. & Croux, C. 1993, "Alternatives to the median absolute
   deviation", JASA 88, 1273.
"""

import numpy as np

__all__ = ["MAD_TO_SIGMA", "robust_noise"]

#: Factor turning the median absolute deviation into a Gaussian sigma [1]_.
MAD_TO_SIGMA = 1.4826


def robust_noise(image, mask=None):
    """Gaussian-equivalent noise of ``image`` from the median absolute deviation.

    Parameters
    ----------
    image : (ny, nx) ndarray
        Residual or dirty image (Jy/beam).
    mask : (ny, nx) ndarray of bool, optional
        Pixels that hold emission; they are left out of the estimate.  When the mask
        covers every pixel the whole image is used.

    Returns
    -------
    sigma : float
        ``1.4826 * median(|x - median(x)|)`` over the finite pixels outside the mask.

    References
    ----------
    .. [1] Rousseeuw & Croux 1993, JASA 88, 1273.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(1)
    >>> round(robust_noise(rng.normal(0, 2.0, (256, 256))), 1)
    2.0
    """
    data = np.asarray(image, dtype=np.float64)
    if mask is not None:
        outside = ~np.asarray(mask, dtype=bool)
        if outside.any():
            data = data[outside]
    data = data[np.isfinite(data)]
    if data.size == 0:
        return 0.0
    med = np.median(data)
    return float(MAD_TO_SIGMA * np.median(np.abs(data - med)))
