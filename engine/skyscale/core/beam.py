"""The restoring beam: an elliptical Gaussian fitted to the PSF, its area, and restoring.

Conventions
-----------
A `Beam` holds the full widths at half maximum (FWHM) of the major and minor axes in
pixels and the position angle in degrees.  The position angle is measured from the
image's +y axis (north) towards -x (east, with the usual sky orientation where right
ascension increases to -x), so ``pa = 0`` puts the major axis along y and ``pa = 90``
puts it along x.  Position angles are kept in ``(-90, 90]``.

References
----------
.. [1] Gaussian FWHM = 2 sqrt(2 ln 2) sigma; beam area pi FWHM_maj FWHM_min / (4 ln 2)
   (analytic).
.. [2] Convolving two Gaussians adds their covariance matrices (analytic).
"""

import math
import warnings
from dataclasses import dataclass

import numpy as np
from scipy import ndimage, optimize, signal

from skyscale.core.fft import convolve_centred
from skyscale.core.validate import as_image

__all__ = ["FWHM_PER_SIGMA", "FWHM_TO_SIGMA", "FIT_THRESHOLD", "KERNEL_SIGMAS", "Beam", "fit_beam",
           "beam_area", "gaussian_area", "beam_kernel", "jy_per_pixel_to_jy_per_beam",
           "jy_per_beam_to_jy_per_pixel", "restore", "wrap_pa"]

#: FWHM = FWHM_PER_SIGMA * sigma for a Gaussian, 2 sqrt(2 ln 2) [1]_: the one home of
#: the constant (`FWHM_TO_SIGMA` is its inverse).
FWHM_PER_SIGMA = 2.0 * math.sqrt(2.0 * math.log(2.0))

#: sigma = FWHM * FWHM_TO_SIGMA for a Gaussian [1]_.
FWHM_TO_SIGMA = 1.0 / FWHM_PER_SIGMA


def gaussian_area(major, minor):
    """Integral of a 2-D Gaussian of unit peak and FWHMs ``major``, ``minor``: the beam
    area ``pi * major * minor / (4 ln 2)`` [1]_, in the squared unit of the widths.

    Examples
    --------
    >>> round(gaussian_area(3.0, 3.0), 3)
    10.198
    """
    return math.pi * major * minor / (4.0 * math.log(2.0))

#: Default fraction of the PSF's central value that bounds the fitted main lobe.
FIT_THRESHOLD = 0.35

#: The restoring kernel is cut at this many major-axis sigmas (exp(-18) ~ 1.5e-8).
KERNEL_SIGMAS = 6.0

#: Below this many pixels across the fitted minor axis the fit is warned about.
UNDERSAMPLED_PIXELS = 2.0

_MIN_FIT_PIXELS = 6  # six free parameters


def _plain(value, name, unit):
    """Strip an astropy Quantity to a float in ``unit``; plain numbers pass through."""
    if hasattr(value, "unit"):
        try:
            return float(value.to_value(unit))
        except Exception as exc:  # astropy UnitConversionError and friends
            raise ValueError(f"{name} is {value!r}; expected a value in {unit} "
                             f"(or a plain number in {unit})") from exc
    try:
        return float(value)
    except (TypeError, ValueError) as exc:
        raise TypeError(f"{name} is {value!r}; expected a number in {unit}") from exc


def _pixels(value, name):
    if hasattr(value, "unit"):
        import astropy.units as u
        if value.unit.physical_type == "angle":
            raise ValueError(f"{name} is {value!r}, an angle; Beam takes pixels, "
                             "use Beam.from_sky(...) with the cell size for angles")
        return _plain(value, name, u.pix if value.unit == u.pix else u.dimensionless_unscaled)
    return _plain(value, name, "pixels")


def wrap_pa(pa):
    """Return the position angle in degrees folded into (-90, 90] (an axis: modulo 180).

    Examples
    --------
    >>> wrap_pa(135.0), wrap_pa(-90.0), wrap_pa(270.0)
    (-45.0, 90.0, 90.0)
    """
    pa = math.fmod(float(pa), 180.0)
    if pa <= -90.0:
        pa += 180.0
    elif pa > 90.0:
        pa -= 180.0
    return pa + 0.0  # turns -0.0 into 0.0




@dataclass(frozen=True)
class Beam:
    """An elliptical Gaussian beam in pixel units.

    Parameters
    ----------
    major : float
        FWHM of the major axis, pixels (an astropy Quantity in pixels is accepted).
    minor : float
        FWHM of the minor axis, pixels; ``0 < minor <= major``.
    pa : float
        Position angle of the major axis, degrees from +y towards -x (east of north);
        a Quantity in any angle unit is accepted.  Stored folded into ``(-90, 90]``.

    Raises
    ------
    ValueError
        If an axis is not finite and positive, or ``minor > major``.

    Examples
    --------
    >>> b = Beam(4.0, 2.0, 120.0)
    >>> b.pa
    -60.0
    >>> round(b.area, 4)
    9.0647
    """

    major: float
    minor: float
    pa: float = 0.0

    def __post_init__(self):
        major = _pixels(self.major, "major")
        minor = _pixels(self.minor, "minor")
        pa = _plain(self.pa, "pa", "deg")
        for name, value in (("major", major), ("minor", minor)):
            if not (math.isfinite(value) and value > 0):
                raise ValueError(f"Beam {name} is {value} pixels; it must be a finite "
                                 "FWHM greater than 0")
        if minor > major:
            raise ValueError(f"Beam minor ({minor}) is larger than major ({major}); "
                             "swap them and add 90 degrees to pa")
        if not math.isfinite(pa):
            raise ValueError(f"Beam pa is {pa}; pass a finite angle in degrees")
        object.__setattr__(self, "major", major)
        object.__setattr__(self, "minor", minor)
        object.__setattr__(self, "pa", wrap_pa(pa))

    @property
    def area(self):
        """Beam solid angle in pixels: `gaussian_area` of its FWHMs [1]_."""
        return gaussian_area(self.major, self.minor)

    def to_sky(self, cell_arcsec):
        """Return ``(major_arcsec, minor_arcsec, pa_deg)`` for a square cell of ``cell_arcsec``."""
        import astropy.units as u
        cell = _plain(cell_arcsec, "cell_arcsec", u.arcsec)
        _check_cell(cell)
        return self.major * cell, self.minor * cell, self.pa

    @classmethod
    def from_sky(cls, major_arcsec, minor_arcsec, pa_deg, cell_arcsec):
        """Build a Beam from FWHMs in arcsec (or Quantities) and a cell size in arcsec.

        Examples
        --------
        >>> Beam.from_sky(6.0, 3.0, 30.0, 1.5)
        Beam(major=4.0, minor=2.0, pa=30.0)
        """
        import astropy.units as u
        cell = _plain(cell_arcsec, "cell_arcsec", u.arcsec)
        _check_cell(cell)
        return cls(_plain(major_arcsec, "major_arcsec", u.arcsec) / cell,
                   _plain(minor_arcsec, "minor_arcsec", u.arcsec) / cell,
                   _plain(pa_deg, "pa_deg", u.deg))

    def as_dict(self):
        """Return ``{"major": ..., "minor": ..., "pa": ...}``; ``Beam(**d)`` rebuilds it."""
        return {"major": self.major, "minor": self.minor, "pa": self.pa}


def _check_cell(cell):
    if not (math.isfinite(cell) and cell > 0):
        raise ValueError(f"cell_arcsec is {cell}; pass the pixel size in arcsec (> 0)")


def _check_beam(beam):
    if not isinstance(beam, Beam):
        raise TypeError(f"beam is {beam!r}; pass a skyscale Beam(major, minor, pa) in pixels")
    return beam


def _inverse_covariance(beam):
    """Return the inverse covariance ``[[a, b], [b, c]]`` in (x, y) pixel coordinates."""
    smaj = beam.major * FWHM_TO_SIGMA
    smin = beam.minor * FWHM_TO_SIGMA
    t = math.radians(beam.pa)
    ux, uy = -math.sin(t), math.cos(t)      # major-axis direction
    vx, vy = math.cos(t), math.sin(t)       # minor-axis direction
    a = ux * ux / smaj ** 2 + vx * vx / smin ** 2
    b = ux * uy / smaj ** 2 + vx * vy / smin ** 2
    c = uy * uy / smaj ** 2 + vy * vy / smin ** 2
    return a, b, c


def beam_area(beam):
    """Return the beam solid angle in pixels, ``pi * major * minor / (4 ln 2)``.

    Examples
    --------
    >>> round(beam_area(Beam(3.0, 3.0)), 3)
    10.198
    """
    return _check_beam(beam).area


def _working(array, name):
    dtype = np.float64 if np.asarray(array).dtype == np.float64 else np.float32
    return as_image(array, name, dtype=dtype, allow_nan=True)


def jy_per_pixel_to_jy_per_beam(image, beam):
    """Multiply a Jy/pixel image by the beam area in pixels to give Jy/beam.

    Parameters
    ----------
    image : (ny, nx) ndarray
        Surface brightness in Jy/pixel.  float64 stays float64, anything else is float32.
    beam : Beam

    Returns
    -------
    (ny, nx) ndarray
        The same image in Jy/beam.

    Examples
    --------
    >>> import numpy as np
    >>> out = jy_per_pixel_to_jy_per_beam(np.ones((2, 2), np.float32), Beam(2.0, 2.0))
    >>> out.dtype, round(float(out[0, 0]), 4)
    (dtype('float32'), 4.5324)
    """
    img = _working(image, "image")
    return (img * img.dtype.type(_check_beam(beam).area)).astype(img.dtype, copy=False)


def jy_per_beam_to_jy_per_pixel(image, beam):
    """Divide a Jy/beam image by the beam area in pixels to give Jy/pixel.

    Examples
    --------
    >>> import numpy as np
    >>> b = Beam(2.0, 2.0)
    >>> back = jy_per_beam_to_jy_per_pixel(jy_per_pixel_to_jy_per_beam(np.ones((1, 1)), b), b)
    >>> float(back[0, 0])
    1.0
    """
    img = _working(image, "image")
    return (img / img.dtype.type(_check_beam(beam).area)).astype(img.dtype, copy=False)


def _gaussian_on_grid(beam, ny, nx, cy, cx, dtype):
    a, b, c = _inverse_covariance(beam)
    y = np.arange(ny, dtype=np.float64)[:, None] - cy
    x = np.arange(nx, dtype=np.float64)[None, :] - cx
    return np.exp(-0.5 * (a * x * x + 2.0 * b * x * y + c * y * y)).astype(dtype)


def beam_kernel(beam, shape, *, dtype=np.float32):
    """Image of the Gaussian beam with peak 1 at pixel ``(ny // 2, nx // 2)``.

    Parameters
    ----------
    beam : Beam
    shape : (int, int)
        ``(ny, nx)`` of the output.
    dtype : numpy dtype, optional
        float32 (default) or float64.

    Returns
    -------
    kernel : (ny, nx) ndarray
        ``exp(-0.5 d^T C^-1 d)`` sampled at pixel centres, ``d`` the offset from centre.

    Examples
    --------
    >>> k = beam_kernel(Beam(3.0, 3.0), (5, 4))
    >>> k.shape, float(k[2, 2]), round(float(k[2, 2 + 1]), 4)
    ((5, 4), 1.0, 0.7349)
    """
    _check_beam(beam)
    try:
        ny, nx = (int(n) for n in shape)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"shape is {shape!r}; pass (ny, nx), two positive integers") from exc
    if ny < 1 or nx < 1:
        raise ValueError(f"shape is {shape!r}; both sizes must be at least 1")
    return _gaussian_on_grid(beam, ny, nx, ny // 2, nx // 2, np.dtype(dtype))


def _lobe_pixels(psf, threshold):
    ny, nx = psf.shape
    cy, cx = ny // 2, nx // 2
    centre = psf[cy, cx]
    if not centre > 0:
        raise ValueError(f"psf has value {centre} at its centre pixel ({cy}, {cx}); the "
                         "PSF peak must be positive and at (ny // 2, nx // 2)")
    peak = np.unravel_index(int(np.argmax(psf)), psf.shape)
    if psf[peak] > centre * (1 + 1e-6):
        warnings.warn(f"psf peak is at pixel {tuple(map(int, peak))}, not at the centre "
                      f"({cy}, {cx}); the main lobe is fitted around the centre", stacklevel=3)
    labels, _ = ndimage.label(psf >= threshold * centre)
    ys, xs = np.nonzero(labels == labels[cy, cx])
    if ys.size < _MIN_FIT_PIXELS:
        raise ValueError(f"psf main lobe has only {ys.size} pixels above threshold="
                         f"{threshold} of the peak; a fit needs {_MIN_FIT_PIXELS}. Lower "
                         "threshold, use a finer cell size, or give the beam explicitly")
    return ys, xs, psf[ys, xs] / centre, cy, cx


def _initial_guess(x, y, v):
    """Weighted linear fit of ln v to a quadratic; falls back to moments."""
    design = np.stack([np.ones_like(x), x, y, x * x, x * y, y * y], axis=1)
    w = v  # weight ~ v turns errors in ln v into errors in v
    coef, *_ = np.linalg.lstsq(design * w[:, None], np.log(v) * w, rcond=None)
    amat = -2.0 * np.array([[coef[3], coef[4] / 2], [coef[4] / 2, coef[5]]])
    if np.all(np.linalg.eigvalsh(amat) > 0):
        x0, y0 = np.linalg.solve(amat, coef[1:3])
    else:
        x0, y0 = np.average(x, weights=v), np.average(y, weights=v)
        cov = np.cov(np.stack([x - x0, y - y0]), aweights=v) + np.eye(2) * 1e-3
        amat = np.linalg.inv(cov)
    chol = np.linalg.cholesky(amat)
    return np.array([1.0, x0, y0, chol[0, 0], chol[1, 0], chol[1, 1]])


def _model(p, x, y):
    amp, x0, y0, l11, l21, l22 = p
    dx, dy = x - x0, y - y0
    # quadratic form |L^T d|^2 with L lower triangular: always positive semi-definite
    q = (l11 * dx + l21 * dy) ** 2 + (l22 * dy) ** 2
    return amp * np.exp(-0.5 * q)


def fit_beam(psf, *, threshold=FIT_THRESHOLD, circular_tol=1e-3):
    """Fit an elliptical Gaussian to the PSF's main lobe and return it as a `Beam`.

    Parameters
    ----------
    psf : (ny, nx) ndarray
        The PSF, peak at ``(ny // 2, nx // 2)`` (its scale does not matter).
    threshold : float, optional
        The main lobe is the 4-connected region around the centre pixel where the PSF
        is at least ``threshold`` times the centre value; only those pixels are fitted.
    circular_tol : float, optional
        If ``(major - minor) / major`` is below this, the beam is made exactly
        circular (both axes the geometric mean, so the area is kept) with ``pa = 0``.

    Returns
    -------
    Beam
        FWHMs in pixels, position angle in degrees east of north, in ``(-90, 90]``.

    Raises
    ------
    ValueError
        If ``threshold`` is not in (0, 1), the centre value is not positive, or the
        main lobe has fewer than 6 pixels.

    Notes
    -----
    A weighted linear fit of ``ln psf`` to a quadratic in (x, y) gives the start; an
    unweighted nonlinear least-squares fit (`scipy.optimize.least_squares`) of
    ``A exp(-0.5 |L^T (r - r0)|^2)`` with free amplitude, centre and a Cholesky factor
    ``L`` of the inverse covariance refines it.  Axes and angle come from the
    eigenvectors of the covariance.  A warning is given when the minor axis spans
    fewer than 2 pixels (common practice is 3 to 5 pixels across the beam).

    Examples
    --------
    >>> b = fit_beam(beam_kernel(Beam(6.0, 3.0, 30.0), (33, 33)))
    >>> round(b.major, 3), round(b.minor, 3), round(b.pa, 2)
    (6.0, 3.0, 30.0)
    """
    threshold = float(threshold)
    if not 0.0 < threshold < 1.0:
        raise ValueError(f"threshold is {threshold}; pass a fraction of the peak "
                         f"between 0 and 1 (default {FIT_THRESHOLD})")
    data = as_image(psf, "psf", dtype=np.float64)
    ys, xs, v, cy, cx = _lobe_pixels(data, threshold)
    x = xs - float(cx)
    y = ys - float(cy)
    start = _initial_guess(x, y, v)
    fit = optimize.least_squares(lambda p: _model(p, x, y) - v, start, method="lm",
                                 xtol=1e-12, ftol=1e-12, gtol=1e-12)
    _, _, _, l11, l21, l22 = fit.x
    lmat = np.array([[l11, 0.0], [l21, l22]])
    cov = np.linalg.inv(lmat @ lmat.T)                   # (x, y) covariance, pixels^2
    var, vec = np.linalg.eigh(cov)                        # ascending
    major = math.sqrt(var[1]) / FWHM_TO_SIGMA
    minor = math.sqrt(var[0]) / FWHM_TO_SIGMA
    ux, uy = vec[:, 1]
    pa = math.degrees(math.atan2(-ux, uy))
    if (major - minor) / major < circular_tol:
        major = minor = math.sqrt(major * minor)
        pa = 0.0
    if minor < UNDERSAMPLED_PIXELS:
        warnings.warn(f"fitted beam minor axis is {minor:.2f} pixels; fewer than "
                      f"{UNDERSAMPLED_PIXELS:g} pixels across the beam make the fit poorly "
                      "constrained (common practice is 3 to 5)", stacklevel=2)
    return Beam(major, minor, pa)


def restore(model, residual, beam, *, fft=None):
    """Return the restored image ``model (*) beam + residual`` in Jy/beam.

    Parameters
    ----------
    model : (ny, nx) ndarray
        CLEAN model, Jy/pixel.
    residual : (ny, nx) ndarray or None
        Residual, Jy/beam; None restores the model alone.
    beam : Beam
        Restoring beam in pixels; convolved with peak 1, so a point component of flux
        S becomes a peak of S Jy/beam.
    fft : str or FFT backend, optional
        None (default) convolves with `scipy.signal.fftconvolve`; a backend name or
        object accepted by `skyscale.core.fft.get_backend` (for example ``'numpy'``) uses
        that backend instead.

    Returns
    -------
    restored : (ny, nx) ndarray
        float64 if model or residual is float64, else float32.

    Raises
    ------
    ValueError
        If the shapes differ, or ``fft`` is not a known backend.

    Notes
    -----
    The kernel is cut at `KERNEL_SIGMAS` major-axis sigmas (and at the image size), is
    centred on its middle pixel, and the full convolution is sliced so that a component
    at pixel (y, x) is restored centred on (y, x) for odd and even sizes alike.

    Examples
    --------
    >>> import numpy as np
    >>> m = np.zeros((16, 16), np.float32); m[8, 5] = 2.0
    >>> r = restore(m, None, Beam(3.0, 3.0))
    >>> r.dtype, round(float(r[8, 5]), 5), tuple(map(int, np.unravel_index(r.argmax(), r.shape)))
    (dtype('float32'), 2.0, (8, 5))
    """
    _check_beam(beam)
    mod = _working(model, "model")
    dtype = mod.dtype
    if residual is not None:
        res = _working(residual, "residual")
        if res.shape != mod.shape:
            raise ValueError(f"residual has shape {res.shape} but model has {mod.shape}; "
                             "pass images on the same grid")
        if res.dtype == np.float64:
            dtype = np.dtype(np.float64)
    ny, nx = mod.shape
    half = int(math.ceil(KERNEL_SIGMAS * beam.major * FWHM_TO_SIGMA))
    hy, hx = min(half, ny - 1), min(half, nx - 1)
    kernel = _gaussian_on_grid(beam, 2 * hy + 1, 2 * hx + 1, hy, hx, dtype)
    mod = mod.astype(dtype, copy=False)
    if fft is None:
        full = signal.fftconvolve(mod, kernel, mode="full")
        out = np.ascontiguousarray(full[hy:hy + ny, hx:hx + nx], dtype=dtype)
    else:
        out = np.ascontiguousarray(convolve_centred(mod, kernel, backend=fft), dtype=dtype)
    if residual is not None:
        out += res
    return out
