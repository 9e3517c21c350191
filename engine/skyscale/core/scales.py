"""Scale shapes, the `ScaleSet`, pixel/angle conversion and size-penalty weights.

A scale is a diameter in pixels; 0 is a delta function.  Every scale kernel has unit
sum, so the amplitude of a component is its integrated flux.

References
----------
.. [1] Cornwell, T. J. 2008, "Multiscale CLEAN deconvolution of radio synthesis
   images", IEEE J. Sel. Topics Signal Process. 2(5), 793.
.. [2] Schwab, F. R. 1984, "Optimal gridding of visibility data in radio
   interferometry", in Indirect Imaging (ed. J. A. Roberts), 333.
"""

import warnings

import numpy as np

from skyscale.core.validate import InputError, check_choice
from skyscale.core.beam import FWHM_PER_SIGMA
from skyscale.core.defaults import DEFAULTS

__all__ = ["SCALE_SHAPES", "ScaleSet", "spheroidal", "scale_kernel", "size_penalty_weights",
           "angle_to_pixels"]

#: Scale shapes: the tapered, truncated paraboloid of [1]_ (default) and a Gaussian.
SCALE_SHAPES = ("paraboloid", "gaussian")

# Rational approximation of the prolate spheroidal wave function, support m = 6,
# alpha = 1 (Schwab 1984 [2]_; coefficients from memory).  Two pieces: |nu| < 0.75
# and 0.75 <= |nu| <= 1.
_SPH_P = np.array([[8.203343e-2, -3.644705e-1, 6.278660e-1, -5.335581e-1, 2.312756e-1],
                   [4.028559e-3, -3.697768e-2, 1.021332e-1, -1.201436e-1, 6.412774e-2]])
_SPH_Q = np.array([[1.0, 8.212018e-1, 2.078043e-1],
                   [1.0, 9.599102e-1, 2.918724e-1]])


def spheroidal(nu):
    """Prolate spheroidal taper psi(nu) for ``|nu| <= 1``, zero beyond.

    Parameters
    ----------
    nu : array_like
        Radius in units of the support half-width.

    Returns
    -------
    psi : ndarray
        The taper, normalised to 1 at ``nu = 0``.

    References
    ----------
    .. [1] Schwab 1984, in Indirect Imaging, 333 (rational approximation, m = 6).
    """
    nu = np.abs(np.asarray(nu, dtype=np.float64))
    out = np.zeros_like(nu)
    for part, (lo, hi) in enumerate(((0.0, 0.75), (0.75, 1.0))):
        sel = (nu >= lo) & ((nu < hi) if part == 0 else (nu <= hi))
        d = nu[sel] ** 2 - hi ** 2
        top = np.polyval(_SPH_P[part][::-1], d)
        bot = np.polyval(_SPH_Q[part][::-1], d)
        out[sel] = top / bot
    norm = np.polyval(_SPH_P[0][::-1], -0.75 ** 2) / np.polyval(_SPH_Q[0][::-1], -0.75 ** 2)
    return np.clip(out / norm, 0.0, None)


def support_radius(scale, shape="paraboloid"):
    """Half-width in pixels of the stored kernel of ``scale`` of profile ``shape``."""
    if scale == 0:
        return 0
    if shape == "paraboloid":
        return int(np.ceil(scale / 2.0))
    return int(np.ceil(scale))  # Gaussian: FWHM = scale / 2, cut at radius = scale


def scale_kernel(scale, shape="paraboloid", dtype=np.float32):
    """Unit-sum kernel of one scale, square, odd-sized, centred.

    Parameters
    ----------
    scale : float
        Diameter in pixels; 0 gives a single-pixel delta.
    shape : {'paraboloid', 'gaussian'}
        The kernel's profile (not an array shape).  ``'paraboloid'``: ``(1 - (r/a)^2) psi(r/a)`` for ``r < a = scale/2``, zero
        beyond ([1]_ eq. 10).  ``'gaussian'``: FWHM ``scale / 2``, cut at ``r = scale``.
    dtype : numpy dtype
        Output dtype.

    Returns
    -------
    kernel : (2h+1, 2h+1) ndarray
        ``h = support_radius(scale, shape)``; ``kernel.sum() == 1``.

    References
    ----------
    .. [1] Cornwell 2008, IEEE J. Sel. Topics Signal Process. 2(5), 793.

    Examples
    --------
    >>> k = scale_kernel(8)
    >>> k.shape, round(float(k.sum()), 6)
    ((9, 9), 1.0)
    """
    check_choice(shape, "shape", SCALE_SHAPES)
    h = support_radius(scale, shape)
    if h == 0:
        return np.ones((1, 1), dtype=dtype)
    y, x = np.mgrid[-h:h + 1, -h:h + 1].astype(np.float64)
    r = np.hypot(y, x)
    if shape == "paraboloid":
        a = scale / 2.0
        nu = r / a
        k = np.where(nu < 1.0, (1.0 - nu ** 2) * spheroidal(np.minimum(nu, 1.0)), 0.0)
        if k.sum() <= 0:  # a scale under about two pixels: nothing but the centre survives
            k[h, h] = 1.0
    else:
        sigma = (scale / 2.0) / FWHM_PER_SIGMA
        k = np.where(r <= scale, np.exp(-0.5 * (r / sigma) ** 2), 0.0)
    return (k / k.sum()).astype(dtype)


def size_penalty_weights(scales, size_penalty=DEFAULTS.size_penalty):
    """Weights ``1 - p * s / s_max`` that favour small scales ([1]_).

    Parameters
    ----------
    scales : sequence of float
        Diameters in pixels.
    size_penalty : float
        ``p`` in [0, 1).  0 treats every scale alike.  Default
        ``skyscale.core.defaults.DEFAULTS.size_penalty`` (0.3), the engine's: it multiplies the
        response normalised by ``sqrt(B_kk(0))`` (see `skyscale.Engine`); about 0.6 is
        the value for a flux-normalised response ([1]_).

    Returns
    -------
    weights : ndarray of float64
        One weight per scale, 1 for the delta scale.

    References
    ----------
    .. [1] Cornwell 2008 (bias toward small scales; the value 0.6 from memory).
    """
    if not 0.0 <= size_penalty < 1.0:
        raise InputError(f"size_penalty is {size_penalty}, expected a value in [0, 1); "
                         f"{DEFAULTS.size_penalty} is the default")
    s = np.asarray(scales, dtype=np.float64)
    smax = s.max() if s.size and s.max() > 0 else 1.0
    return 1.0 - size_penalty * s / smax


def angle_to_pixels(values, cell_arcsec):
    """Turn angles (Quantity, or floats in arcsec) into pixels with the cell size."""
    from astropy import units as u
    if isinstance(values, u.Quantity):
        return np.atleast_1d(values.to_value(u.arcsec)) / float(cell_arcsec)
    return np.atleast_1d(np.asarray(values, dtype=np.float64)) / float(cell_arcsec)


def _as_given(scales):
    """The scale list as the caller wrote it, for messages."""
    if isinstance(scales, (str, bytes)):
        return repr(scales)
    try:
        items = list(scales) if isinstance(scales, (list, tuple)) else \
            list(np.atleast_1d(getattr(scales, "value", scales)))
    except Exception:  # noqa: BLE001 - only used to quote the input back
        return repr(scales)
    unit = f" {scales.unit}" if hasattr(scales, "unit") else ""
    text = ", ".join(f"{float(v):g}" if isinstance(v, (int, float, np.number)) and
                     not isinstance(v, bool) else repr(v) for v in items)
    return f"[{text}]{unit}"


class ScaleSet:
    """Sorted scale diameters in pixels with their kernels and size-penalty weights.

    Parameters
    ----------
    scales : sequence of float, or Quantity ['angle']
        Diameters.  Plain numbers are pixels; an angle Quantity needs ``cell_arcsec``.
    shape : {'paraboloid', 'gaussian'}
        The kernels' profile (kept as `profile`); default the tapered paraboloid.
    cell_arcsec : float, optional
        Cell size, used to convert angles.
    image_shape : (int, int), optional
        When given, scales wider than the image are refused.

    Raises
    ------
    ValueError
        For negative or duplicate scales, a scale larger than the image, or an empty set.

    Examples
    --------
    >>> ScaleSet([8, 0, 4]).pixels
    (0.0, 4.0, 8.0)
    """

    def __init__(self, scales, *, shape="paraboloid", cell_arcsec=None, image_shape=None):
        check_choice(shape, "shape", SCALE_SHAPES)
        #: The kernels' profile, a value of `SCALE_SHAPES` (the ``shape`` argument).
        self.profile = shape
        from astropy import units as u
        is_angle = isinstance(scales, u.Quantity)
        given = _as_given(scales)
        if isinstance(scales, (str, bytes)):
            raise InputError(f"scales is {scales!r} (text); give a list of diameters such as "
                             "[0, 4, 8] (on the command line: --scales 0,4,8)")
        if is_angle:
            if cell_arcsec is None:
                raise InputError(f"scales {given} are angles but there is no cell size to turn "
                                 "them into pixels (cell_arcsec is None, or the image has no "
                                 "celestial WCS); pass cell_arcsec or give scales in pixels")
            try:
                px = angle_to_pixels(scales, cell_arcsec)
            except Exception:  # noqa: BLE001 - astropy raises several types for bad units
                raise InputError(f"scales {given} are not angles; give them in arcsec, "
                                 "arcmin or deg, or as plain pixels") from None
        else:
            try:
                px = np.atleast_1d(np.asarray(scales, dtype=np.float64))
            except (TypeError, ValueError):
                raise InputError(f"scales {given} are not all numbers; give diameters in "
                                 "pixels such as [0, 4, 8]") from None
        if px.ndim != 1:
            raise InputError(f"scales {given} is not a flat list; give diameters such as "
                             "[0, 4, 8]")
        if px.size == 0:
            raise InputError("scales is empty; give at least one diameter, e.g. [0, 4, 8]")
        if not np.all(np.isfinite(px)):
            raise InputError(f"scales {given} contain non-finite values; scale diameters "
                             "are finite numbers >= 0 pixels")
        if np.any(px < 0):
            raise InputError(f"scales {given} contain negative values; scale diameters are "
                             ">= 0 pixels (0 is the delta scale)")
        px = np.round(px, 3)
        uniq, counts = np.unique(px, return_counts=True)
        if np.any(counts > 1):
            dup = ", ".join(f"{v:g}" for v in uniq[counts > 1])
            raise InputError(f"scales {given} contain duplicates ({dup} px); give each "
                             "scale once")
        px = np.sort(px)
        if image_shape is not None and px[-1] > min(image_shape):
            raise InputError(f"scale {px[-1]:g} px is larger than the image "
                             f"{tuple(image_shape)}; drop it or use a larger image")
        self.pixels = tuple(float(p) for p in px)
        self.cell_arcsec = cell_arcsec

    def __len__(self):
        return len(self.pixels)

    def __iter__(self):
        return iter(self.pixels)

    def __repr__(self):
        return f"ScaleSet({list(self.pixels)}, shape={self.profile!r})"

    @property
    def shape(self):
        """Deprecated: the kernel profile is `profile` (``shape`` is an array's shape
        everywhere else)."""
        warnings.warn("ScaleSet.shape is deprecated: the kernel profile is ScaleSet.profile",
                      DeprecationWarning, stacklevel=2)
        return self.profile

    @property
    def has_delta(self):
        """True when the delta scale (0) is in the set."""
        return self.pixels[0] == 0.0

    @property
    def arcsec(self):
        """Diameters in arcsec, or None without a cell size."""
        if self.cell_arcsec is None:
            return None
        return tuple(p * self.cell_arcsec for p in self.pixels)

    @property
    def support_radii(self):
        """Half-width in pixels of each stored kernel."""
        return tuple(support_radius(s, self.profile) for s in self.pixels)

    def kernels(self, dtype=np.float32):
        """List of unit-sum kernels, one per scale."""
        return [scale_kernel(s, self.profile, dtype) for s in self.pixels]

    def weights(self, size_penalty=DEFAULTS.size_penalty):
        """Size-penalty weights, one per scale (see `size_penalty_weights`)."""
        return size_penalty_weights(self.pixels, size_penalty)
