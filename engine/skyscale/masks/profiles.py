"""The size of an island of emission from its brightness profile.

An island's pixels, sorted from the brightest, give its profile against the
equal-area radius ``r = sqrt(k / pi)`` of the ``k`` brightest pixels (for a source
whose brightness falls monotonically from its centre this is its radial profile,
round or not).  That profile is fitted, by non-negative least squares, with an
extended source seen through the PSF and the rung's smoothing plus an unresolved
source seen the same way (a compact source on the structure, which would otherwise
set the "peak" its size is read from).  Two extended shapes are tried: a Gaussian of
FWHM ``f`` and a uniform disk of diameter ``D``; the size of the one that fits is
the diameter at half its own peak, so a Gaussian reads as its FWHM and a disk as its
diameter, whatever the beam, the smoothing or the PSF's sidelobes make of them.

Each model is sorted like the island: by brightness against the equal-area radius
(the level sets of a dirty disk, domed or edge-brightened by the PSF's sidelobes,
are annuli), and as it would sort with the image's noise on it (a noisy plateau
sorts into a ramp).  Where the two shapes fit alike the smaller size is taken.

The profiles are computed as radial (Hankel) transforms,

.. math:: m(r) = 2\\pi \\int_0^{1/2} S(q)\\, T(q)\\, W(q)\\, J_0(2\\pi q r)\\, q\\, dq,

with the source's transform ``S`` (a disk of radius ``R``: ``R J_1(2 pi R q) / q``; a
Gaussian of peak 1 and FWHM ``f``: ``pi f^2 / (4 ln 2) exp(-pi^2 f^2 q^2 / (4 ln 2))``;
analytic [1]_), the azimuthal average ``T`` of the PSF's transform (or of a Gaussian
beam's, analytic) and the smoothing kernel's ``W`` (a unit-sum Gaussian).

References
----------
.. [1] Bracewell, R. N. 2000, The Fourier Transform and Its Applications, 3rd ed.,
   ch. 13 (two-dimensional transforms of the disk and the Gaussian; from memory).
"""

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import minimize_scalar, nnls
from scipy.special import j0, j1, ndtr

from skyscale.core.beam import gaussian_area
from skyscale.masks.smoothing import smoothed_images

__all__ = ["SHAPES", "SHAPE_TIE", "MIN_EXTENDED", "Transfer", "ProfileFit",
           "transfer_of_psf", "transfer_of_beam", "seen_profile", "seen_point",
           "subtract_point", "fit_profile"]

#: The extended shapes fitted to an island's profile.
SHAPES = ("gaussian", "disk")

#: When the two shapes' residuals are within this factor of each other the profile
#: cannot tell them apart (a source not much larger than the smoothed beam): the
#: smaller size is taken, since a largest scale too large is the costlier mistake.
SHAPE_TIE = 1.25

#: An extended part whose peak is under this fraction of the island's is no structure:
#: it is within the accuracy of the profiles (pixel sampling, the PSF's azimuthal
#: average; about 1 % of the peak of a bright point sampled on the pixel grid).
MIN_EXTENDED = 0.02

#: The profile is fitted at most at this many radii, evenly spaced in area (so every
#: part of the island weighs by its number of pixels, as in a fit to the pixels).
MAX_RADII = 200

#: Step of the fine radial grid the seen profiles are computed on, pixels.
FINE_STEP = 0.5

#: Levels at which a noisy profile's expected sorting is computed.
N_LEVELS = 128

#: Fixed-point passes for the amplitude of a noisy profile (the noise's effect on the
#: sorting depends on the amplitude, relative to the noise).
NOISE_PASSES = 2

#: Trial sizes of the coarse search, before a bounded refinement.
N_TRIAL = 24

_FOUR_LN2 = 4.0 * math.log(2.0)


@dataclass(frozen=True)
class Transfer:
    """Azimuthally averaged transform of the PSF, ``T(q)`` at ``q`` cycles per pixel
    (``T(0)`` is the PSF's sum; peak-1 PSF, so a 1 Jy point reads 1 Jy/beam)."""

    q: np.ndarray
    t: np.ndarray
    source: str


def transfer_of_psf(psf):
    """`Transfer` of a PSF image whose peak is at ``(ny // 2, nx // 2)``: the real part
    of its discrete Fourier transform, averaged in rings of width ``1 / max(ny, nx)``
    out to 1/2 cycle per pixel."""
    psf = np.asarray(psf, dtype=np.float64)
    ny, nx = psf.shape
    spec = np.fft.rfft2(np.fft.ifftshift(psf)).real
    q = np.hypot(np.fft.fftfreq(ny)[:, None], np.fft.rfftfreq(nx)[None, :])
    step = 1.0 / max(ny, nx)
    ring = np.rint(q / step).astype(np.int64).ravel()
    keep = ring <= int(round(0.5 / step))
    sums = np.bincount(ring[keep], spec.ravel()[keep])
    counts = np.bincount(ring[keep])
    used = counts > 0
    return Transfer(np.arange(len(sums))[used] * step, sums[used] / counts[used], "psf")


def transfer_of_beam(fwhm_px):
    """`Transfer` of a round Gaussian beam of peak 1 and FWHM ``fwhm_px`` (analytic)."""
    q = np.linspace(0.0, 0.5, 4097)
    return Transfer(q, _source("gaussian", fwhm_px, q), "gaussian beam")


def _source(shape, size, q):
    """Transform of a peak-1 source of diameter (disk) or FWHM (Gaussian) ``size``."""
    if shape == "point":
        return np.ones_like(q)
    if shape == "gaussian":
        return gaussian_area(size, size) * np.exp(
            -math.pi * math.pi * size * size * q * q / _FOUR_LN2)
    radius = 0.5 * size
    return radius * j1(2.0 * math.pi * radius * q) / q       # q > 0 on the grid


@dataclass(frozen=True)
class ProfileFit:
    """The shape fitted to an island's profile.

    Attributes
    ----------
    shape : str
        One of `SHAPES`, or ``"point"`` when an unresolved source alone fits.
    size_px : float
        Its diameter at half its own peak (disk: diameter; Gaussian: FWHM), pixels.
    sizes : dict
        The best size of each of `SHAPES`.
    residuals : dict
        The root of the sum of squared residuals of each shape's fit.
    peak : float
        The extended part's peak as seen on the smoothed image (its fitted profile
        at radius 0); 0 when no extended part fits.
    compact : float
        The fitted unresolved source's peak as seen.
    flux : float
        Its flux (the seen point's multiple).
    """

    shape: str
    size_px: float
    sizes: dict
    residuals: dict
    peak: float
    compact: float
    flux: float = 0.0


def _hankel(radii, transfer, width, outer):
    """``(q, K)``: the profile at ``radii`` of a source of transform ``S(q)`` is
    ``K @ S(q)`` (the radial transform of the module docstring, midpoint rule)."""
    # Out to where the smoothing's transfer falls under 1e-8 (or 1/2 cycle per pixel),
    # 16 samples per period of J0(2 pi q r) at the outer radius.
    top = 0.5 if width <= 0 else \
        min(0.5, math.sqrt(_FOUR_LN2 * math.log(1e8)) / (math.pi * width))
    nq = int(max(256, 16 * outer * top))
    q = (np.arange(nq) + 0.5) * (top / nq)
    t = np.interp(q, transfer.q, transfer.t)
    w = np.exp(-math.pi * math.pi * width * width * q * q / _FOUR_LN2)
    weight = 2.0 * math.pi * q * t * w * (top / nq)
    return q, j0(2.0 * math.pi * np.outer(radii, q)) * weight[None, :]


def seen_profile(shape, size_px, transfer, width_px, radii):
    """Radial profile of a source seen through ``transfer`` and the smoothing.

    Parameters
    ----------
    shape : {'disk', 'gaussian', 'point'}
        A uniform disk of surface brightness 1 per pixel and diameter ``size_px``; a
        Gaussian of peak 1 per pixel and FWHM ``size_px``; a point of flux 1.
    size_px : float
    transfer : Transfer
    width_px : float
        FWHM of the unit-sum Gaussian smoothing (0: none).
    radii : (n,) ndarray
        Distances from the source's centre, pixels.

    Returns
    -------
    profile : (n,) ndarray
        In the image's unit (for a peak-1 PSF: per beam).
    """
    radii = np.asarray(radii, dtype=np.float64)
    outer = float(radii.max(initial=0.0)) + 1.0
    q, kernel = _hankel(radii, transfer, float(width_px), outer)
    return kernel @ _source(shape, float(size_px), q)


class _Profiles:
    """Seen profiles, sorted like the island's pixels, at the island's radii.

    Each profile is computed on a fine radial grid by one Hankel matrix (reused for
    every trial size), then sorted from its brightest: the level set of a profile
    that is not monotonic (a dirty disk, domed or edge-brightened by the PSF's
    sidelobes) is an annulus, and its area, not its outer radius, is what the
    island's sorted pixels measure.
    """

    def __init__(self, transfer, width, radii, spread, point):
        self.radii = radii
        outer = 2.0 * float(radii.max()) + 2.0 * spread + 2.0
        step = max(FINE_STEP, spread / 16.0)      # the profiles are smooth on the spread
        self.fine = (np.arange(int(math.ceil(outer / step))) + 0.5) * step
        self.area = 2.0 * math.pi * self.fine * step
        # Out to where the smoothing's transfer falls under 1e-8 (or 1/2 cycle per
        # pixel), 16 samples per period of J0(2 pi q r) at the outer radius.
        self.q, self.kernel = _hankel(self.fine, transfer, width, outer)
        self.point = point

    def _sorted(self, profile, noise=0.0):
        """``profile`` (on the fine grid) sorted from its brightest against the
        equal-area radius, at the island's radii; with ``noise`` (rms, in the
        profile's unit), the expected sorting of the profile plus that noise: the
        expected number of pixels above ``v`` is ``sum a_j Phi((m_j - v) / noise)``
        over the grid's annuli, a noisy plateau sorting into a ramp."""
        if noise <= 0:
            order = np.argsort(-profile, kind="stable")
            cum = np.cumsum(self.area[order]) - 0.5 * self.area[order]
            return np.interp(self.radii, np.sqrt(cum / math.pi), profile[order])
        levels = np.linspace(profile.min() - 4 * noise, profile.max() + 4 * noise,
                             N_LEVELS)
        above = ndtr((profile[:, None] - levels[None, :]) / noise).T @ self.area
        return np.interp(math.pi * self.radii ** 2, above[::-1], levels[::-1])

    def _solve(self, model, values):
        if self.point is None:
            coef, norm = nnls(model[:, None], values)
            return np.array([coef[0], 0.0]), norm
        return nnls(np.column_stack([model, self.point]), values)

    def fit(self, shape, size, values, noise=0.0):
        profile = self.kernel @ _source(shape, size, self.q)
        coef, norm = self._solve(self._sorted(profile), values)
        for _ in range(NOISE_PASSES if noise > 0 else 0):
            if coef[0] <= 0:
                break
            coef, norm = self._solve(self._sorted(profile, noise / coef[0]), values)
        return norm, coef, float(profile.max())


def seen_point(psf, width_px, beam_px):
    """An unresolved source of flux 1 seen through the PSF (or, for ``psf`` None, the
    round Gaussian beam of ``beam_px``) and the rung's smoothing: an image with its
    peak at ``(ny // 2, nx // 2)``, sampled on the pixel grid as the island is."""
    if psf is None:
        spread = math.hypot(beam_px, width_px)
        half = int(math.ceil(3.0 * spread)) + 1
        yy, xx = np.mgrid[-half:half + 1, -half:half + 1]
        return (beam_px / spread) ** 2 * np.exp2(-4.0 * (yy * yy + xx * xx) / spread ** 2)
    return np.asarray(next(smoothed_images(np.asarray(psf, dtype=np.float64),
                                           [width_px]))[1], dtype=np.float64)


def subtract_point(box, point, at, flux):
    """``box`` less ``flux`` times the seen ``point`` centred on pixel ``at`` of it
    (the point image clipped to the box)."""
    out = np.array(box, dtype=np.float64)
    py, px = point.shape[0] // 2, point.shape[1] // 2
    y0, x0 = at[0] - py, at[1] - px
    ys = slice(max(y0, 0), min(y0 + point.shape[0], box.shape[0]))
    xs = slice(max(x0, 0), min(x0 + point.shape[1], box.shape[1]))
    out[ys, xs] -= flux * point[ys.start - y0:ys.stop - y0, xs.start - x0:xs.stop - x0]
    return out


def fit_profile(values, transfer, width_px, beam_px, point, noise=0.0, *, compact=True):
    """Fit an island's profile with a disk or a Gaussian and an unresolved source.

    Parameters
    ----------
    values : (n,) ndarray
        The island's pixel values on the smoothed image.
    transfer : Transfer
        The PSF's (`transfer_of_psf`) or a Gaussian beam's (`transfer_of_beam`).
    width_px : float
        FWHM of the rung's unit-sum Gaussian smoothing (0: none).
    beam_px : float
        Beam FWHM in pixels (sets the smallest trial size).
    point : (m,) ndarray
        The seen point's pixels (`seen_point`), sorted from the brightest.
    noise : float
        The smoothed image's noise rms per pixel: the models are sorted as they
        would be with that noise on them (a noisy plateau sorts into a ramp, which a
        Gaussian would otherwise fit better than a disk).  Default 0.
    compact : bool
        Fit an unresolved source with the structure (default); False fits the
        structure alone (where the two cannot be told apart).

    Returns
    -------
    ProfileFit

    Notes
    -----
    Each shape's size is found on a logarithmic grid from a twentieth of the smoothed
    beam to twice the island's equal-area diameter plus the smoothed beam, then
    refined by a bounded scalar search (`scipy.optimize.minimize_scalar`), with the
    two amplitudes (extended, unresolved) by `scipy.optimize.nnls` at every trial.
    The shape with the smaller residual is taken, unless the two are within
    `SHAPE_TIE` of each other, when the smaller size is.  An extended part under
    `MIN_EXTENDED` of the island's peak is none: the fit is then ``"point"``.  The
    sum of an off-centre compact source and a structure does not sort exactly into
    the sum of their sorted profiles (the compact term takes up what is left above the
    structure); `skyscale.masks.detect` therefore subtracts the compact source fitted,
    seen through the PSF at the island's brightest pixel, and fits again.
    """
    v = np.sort(np.asarray(values, dtype=np.float64))[::-1]
    n = v.size
    index = np.unique(np.linspace(0, n - 1, min(n, MAX_RADII)).astype(np.int64))
    radii = np.sqrt((index + 0.5) / math.pi)
    y = v[index]
    spread = math.hypot(beam_px, width_px)
    column = np.where(index < point.size, point[np.minimum(index, point.size - 1)], 0.0)
    if not compact:
        column = None
    profiles = _Profiles(transfer, float(width_px), radii, spread, column)
    across = 2.0 * math.sqrt(n / math.pi)
    grid = np.geomspace(0.05 * spread, 2.0 * across + spread, N_TRIAL)
    sizes, residuals, found = {}, {}, {}
    for shape in SHAPES:
        norms = [profiles.fit(shape, s, y, noise)[0] for s in grid]
        k = int(np.argmin(norms))
        lo, hi = grid[max(k - 1, 0)], grid[min(k + 1, N_TRIAL - 1)]
        best = minimize_scalar(lambda s: profiles.fit(shape, s, y, noise)[0],
                               bounds=(lo, hi), method="bounded",
                               options={"xatol": 1e-3 * lo})
        size = float(best.x) if best.fun <= norms[k] else float(grid[k])
        norm, coef, centre = profiles.fit(shape, size, y, noise)
        sizes[shape], residuals[shape] = size, float(norm)
        found[shape] = (coef, centre)
    a, b = SHAPES
    if max(residuals[a], residuals[b]) <= SHAPE_TIE * min(residuals[a], residuals[b]):
        shape = a if sizes[a] <= sizes[b] else b
    else:
        shape = a if residuals[a] < residuals[b] else b
    (amp, flux), centre = found[shape]
    peak = float(amp * centre)
    compact = float(flux * point[0])                # the point's peak, seen
    if amp <= 0 or peak < MIN_EXTENDED * v[0]:
        return ProfileFit("point", 0.0, sizes, residuals, 0.0, compact, float(flux))
    return ProfileFit(shape, sizes[shape], sizes, residuals, peak, compact, float(flux))
