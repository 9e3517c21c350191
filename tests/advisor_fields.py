"""Invented fields of known extent for the scale advisor: disks, Gaussians, points, noise.

Every field is a sky convolved with a round Gaussian PSF of peak 1 (the dirty beam),
plus noise: white (independent pixels) or correlated by the beam like a dirty image's.
Sizes are the truth we build: a disk's diameter, a Gaussian's FWHM.  The per-pixel
signal-to-noise is the peak of the beam-convolved source over the per-pixel noise rms.

Used by tests/test_advisor.py and benchmarks/advisor_sizes.py.
"""

import math

import numpy as np
from scipy import ndimage

__all__ = ["FWHM_PER_SIGMA", "BEAM", "gaussian_psf", "bowl_psf", "make_field",
           "point_field", "noise_field", "smoothed_snr", "source_with_compact",
           "group_sky", "group_field"]

#: Gaussian FWHM = 2 sqrt(2 ln 2) sigma (analytic).
FWHM_PER_SIGMA = 2.0 * math.sqrt(2.0 * math.log(2.0))
#: Beam FWHM in pixels: 4 pixels across the beam (common practice: 3 to 5).
BEAM = 4.0


def gaussian_psf(n, fwhm=BEAM):
    """(n + 1, n + 1) round Gaussian PSF (odd size), peak 1 at the centre."""
    r = np.arange(n + 1) - (n + 1) // 2
    s = fwhm / FWHM_PER_SIGMA
    return np.exp(-(r[:, None] ** 2 + r[None, :] ** 2) / (2.0 * s * s))


def bowl_psf(n, fwhm=BEAM, bowl_fwhm=60.0):
    """(n + 1, n + 1) PSF of peak 1 whose sum is 0, as an array without its shortest
    spacings makes (common practice: the zero spacing is not measured): a Gaussian
    main lobe of ``fwhm`` less a broad Gaussian of ``bowl_fwhm`` with the same sum
    (the sum of a peak-1 Gaussian is proportional to its FWHM squared, analytic), so a
    broad source sits in a negative bowl and a disk is domed."""
    shallow = (fwhm / bowl_fwhm) ** 2
    return (gaussian_psf(n, fwhm) - shallow * gaussian_psf(n, bowl_fwhm)) / (1.0 - shallow)


def source_with_compact(kind, size, compact, n, *, snr=20.0, offset=(-8, -6), seed=0,
                        psf=None, beam=BEAM):
    """A disk (diameter ``size``) or Gaussian (FWHM ``size``) at the image centre with
    an unresolved source ``compact`` times the structure's own peak on it, ``offset``
    pixels from the centre, seen through the peak-1 Gaussian beam (by
    ``astropy.convolution.convolve_fft`` with a unit-sum ``Gaussian2DKernel`` times
    its sum 2 pi sigma^2, analytic) or through ``psf`` (``scipy.signal.fftconvolve``),
    plus white noise of rms the structure's peak seen through the Gaussian beam over
    ``snr`` (the same reference sets the compact source's flux).

    Returns
    -------
    dirty : (n, n) ndarray
    """
    from astropy.convolution import Gaussian2DKernel, convolve_fft
    from scipy.signal import fftconvolve

    c = n // 2
    yy, xx = np.mgrid[:n, :n]
    r2 = (yy - c) ** 2 + (xx - c) ** 2
    if kind == "disk":
        sky = (r2 <= (size / 2.0) ** 2).astype(np.float64)
    else:
        sky = np.exp(-r2 / (2.0 * (size / FWHM_PER_SIGMA) ** 2))
    s = beam / FWHM_PER_SIGMA
    area = 2.0 * math.pi * s * s                      # sum of the peak-1 beam
    kernel = Gaussian2DKernel(s, x_size=int(8 * s) | 1, y_size=int(8 * s) | 1)

    def seen(image):
        if psf is None:
            return convolve_fft(image, kernel, boundary="fill", fill_value=0.0) * area
        return fftconvolve(image, psf, mode="same")

    structure = seen(sky)
    peak = convolve_fft(sky, kernel, boundary="fill", fill_value=0.0).max() * area
    point = np.zeros((n, n))
    point[c + offset[0], c + offset[1]] = compact * peak    # flux = seen peak (peak-1 beam)
    rng = np.random.default_rng(seed)
    return structure + seen(point) + rng.standard_normal((n, n)) * peak / snr


def _noise(rng, n, correlated, fwhm):
    white = rng.standard_normal((n, n))
    if not correlated:
        return white
    smooth = ndimage.gaussian_filter(white, fwhm / FWHM_PER_SIGMA, mode="wrap")
    return smooth / smooth.std()


def _beam_blur(sky, fwhm):
    """``sky`` convolved with the peak-1 Gaussian PSF: a unit-sum Gaussian filter
    (scipy.ndimage) times the PSF's sum 2 pi sigma^2 (analytic)."""
    s = fwhm / FWHM_PER_SIGMA
    return ndimage.gaussian_filter(sky, s, mode="constant") * 2.0 * math.pi * s * s


def make_field(kind, size, snr, n, *, seed=0, correlated=False, beam=BEAM, centre=None):
    """One extended source in noise of rms 1.

    Parameters
    ----------
    kind : {'disk', 'gaussian'}
    size : float
        Disk diameter or Gaussian FWHM, pixels.
    snr : float
        Peak of the beam-convolved source in units of the per-pixel noise.
    n : int
        Image side.

    Returns
    -------
    dirty : (n, n) ndarray
    seen : (n, n) ndarray
        The noiseless beam-convolved source.
    """
    cy, cx = (n / 2.0, n / 2.0) if centre is None else centre
    yy, xx = np.mgrid[:n, :n]
    r2 = (yy - cy) ** 2 + (xx - cx) ** 2
    if kind == "disk":
        sky = (r2 <= (size / 2.0) ** 2).astype(np.float64)
        if not sky.any():
            sky[int(cy), int(cx)] = 1.0
    elif kind == "gaussian":
        sky = np.exp(-r2 / (2.0 * (size / FWHM_PER_SIGMA) ** 2))
    else:
        raise ValueError(f"kind is {kind!r}; use 'disk' or 'gaussian'")
    seen = _beam_blur(sky, beam)
    seen *= snr / seen.max()
    rng = np.random.default_rng(seed)
    return seen + _noise(rng, n, correlated, beam), seen


def point_field(n, count, snr, *, seed=0, correlated=False, beam=BEAM):
    """``count`` unresolved sources, peak ``snr`` times the noise, at least eight beams
    apart and from the edge."""
    rng = np.random.default_rng(seed)
    sky = np.zeros((n, n))
    placed = []
    margin = int(8 * beam)
    while len(placed) < count:
        y, x = rng.integers(margin, n - margin, 2)
        if all(math.hypot(y - a, x - b) >= 8 * beam for a, b in placed):
            placed.append((y, x))
            sky[y, x] = 1.0
    seen = _beam_blur(sky, beam)
    seen *= snr / seen.max()
    return seen + _noise(rng, n, correlated, beam), placed


def noise_field(n, *, seed=0, correlated=False, beam=BEAM):
    """Noise of rms 1 and nothing else."""
    return _noise(np.random.default_rng(seed), n, correlated, beam)


def smoothed_snr(seen, fwhm, correlated=False, beam=BEAM):
    """Peak signal-to-noise of the noiseless source after smoothing by a unit-sum
    Gaussian of ``fwhm`` pixels: the smoothed peak over the smoothed noise.  White noise
    of rms 1 smoothed by a unit-sum kernel k has rms sqrt(sum k^2) = 1 / (2 sqrt(pi) s)
    for a Gaussian of sigma s (analytic); noise correlated by a Gaussian of sigma c
    keeps rms c / sqrt(c^2 + s^2) (covariances add, analytic)."""
    s = fwhm / FWHM_PER_SIGMA
    if s > 0:       # scipy.ndimage.fourier_gaussian: the same filter, applied by FFT
        spec = ndimage.fourier_gaussian(np.fft.rfft2(seen), s, n=seen.shape[1])
        peak = np.fft.irfft2(spec, s=seen.shape).max()
    else:
        peak = seen.max()
    if correlated:
        c = beam / FWHM_PER_SIGMA
        rms = c / math.sqrt(c * c + s * s)
    else:
        rms = 1.0 if s == 0 else 1.0 / (2.0 * math.sqrt(math.pi) * s)
    return float(peak / rms)


def group_sky(n, k=1.0, *, sigma=1e-4, dynamic_range=1e4, seed=3):
    """Separate objects of known extent at the centre of an ``n x n`` sky (Jy/pixel).

    An ellipse 72 k x 102 k px (a uniform disk squashed; smaller extent 72 k), a
    Gaussian of FWHM 46 k px, an arc 12 k px wide (a ring of radius 60 k cut to 137
    degrees) and eight points, the brightest ``dynamic_range * sigma`` Jy, all within
    the central ``512 k`` px: the same sky at every ``n >= 512 k``.

    Returns
    -------
    sky : (n, n) ndarray
    truth : list of (kind, smaller extent px, y, x)
    """
    sky = np.zeros((n, n))
    yy, xx = np.mgrid[:n, :n].astype(np.float64)
    c = n / 2.0

    def at(dy, dx):
        return c + dy * k, c + dx * k

    truth = []
    cy, cx = at(-90, -100)
    a, b = 51 * k, 36 * k
    sky += 0.6 * sigma * (((yy - cy) / a) ** 2 + ((xx - cx) / b) ** 2 <= 1)
    truth.append(("ellipse", 2 * b, cy, cx))
    cy, cx = at(100, -80)
    s = 46 * k / FWHM_PER_SIGMA
    sky += sigma * np.exp(-((yy - cy) ** 2 + (xx - cx) ** 2) / (2 * s * s))
    truth.append(("gaussian", 46 * k, cy, cx))
    cy, cx = at(0, 110)
    r, th = np.hypot(yy - cy, xx - cx), np.arctan2(yy - cy, xx - cx)
    sky += 0.8 * sigma * ((np.abs(r - 60 * k) <= 6 * k) & (np.abs(th) < 1.2))
    truth.append(("arc", 12 * k, cy, cx))
    rng = np.random.default_rng(seed)
    for i in range(8):
        dy, dx = rng.uniform(-220, 220, 2)
        y, x = int(c + dy * k), int(c + dx * k)
        flux = dynamic_range if i == 0 else math.exp(rng.uniform(math.log(30),
                                                                 math.log(dynamic_range / 3)))
        sky[y, x] += sigma * flux
        truth.append(("point", 0.0, y, x))
    return sky, truth


def group_field(n, k=1.0, *, sigma=1e-4, dynamic_range=1e4, seed=0):
    """`group_sky` observed by the invented array of ``benchmarks/fields.py`` (natural
    weighting, beam about 5.6 x 3.5 px at every ``n``): ``(dirty, psf, sky, truth)``,
    the PSF ``(2n, 2n)``, the noise of deviation ``sigma`` with the PSF as covariance."""
    from scipy.signal import fftconvolve

    from benchmarks.fields import correlated_noise, invented_array, natural_psf, uv_tracks

    sky, truth = group_sky(n, k, sigma=sigma, dynamic_range=dynamic_range)
    u, v = uv_tracks(invented_array(27, seed=seed))
    psf, weights = natural_psf(u, v, n, fill=0.6)
    dirty = fftconvolve(sky, psf, mode="full")[n:2 * n, n:2 * n]
    dirty += correlated_noise(weights, n, sigma, np.random.default_rng(seed + 1000))
    return dirty.astype(np.float32), psf.astype(np.float32), sky, truth
