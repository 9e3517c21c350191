"""Invented fields for the depth benchmarks: an invented array, its PSF, noise and sky.

Nothing here is a real telescope: the array is a random layout of antennas on a flat
site at an invented latitude, observing an invented field for a few hours.

* uv tracks: each baseline's (u, v) over the hour angles, from the baseline in local
  equatorial coordinates (Thompson, Moran & Swenson 2017, eq. 4.1; the east-north-up
  to equatorial rotation of their eq. 4.15 on a flat site);
* natural weighting: every sample (and its conjugate) adds weight 1 to the nearest cell
  of a ``2N x 2N`` grid; the PSF is the inverse FFT of the weights, normalised to a peak
  of 1 at ``(N, N)`` (twice the image's size, so the image-plane residual is exact);
* noise with the PSF as covariance: the inverse FFT of complex Gaussian noise of
  variance equal to the weight in each cell (the sum of independent sample noises),
  scaled to the wanted deviation; its autocorrelation is the PSF (Wiener-Khinchin);
* sky: points, Gaussians and uniform disks, sizes from one pixel up to ``4 x`` the
  largest scale, at a dynamic range ``peak / sigma`` set by the caller; the dirty image
  is the exact linear convolution of the sky with the PSF, plus the noise.

    PYTHONPATH=engine python benchmarks/fields.py 512     # prints a summary of one field
"""

import sys

import numpy as np
from scipy import ndimage
from scipy.signal import fftconvolve

from skyscale.core.beam import FWHM_PER_SIGMA

__all__ = ["invented_array", "uv_tracks", "natural_psf", "correlated_noise", "invented_sky",
           "invented_field"]


def invented_array(n_antennas=27, radius_m=3000.0, seed=0):
    """Random antenna positions (east, north) in metres: a dense core and a sparse halo."""
    rng = np.random.default_rng(seed)
    n_core = n_antennas // 3
    r = np.concatenate([rng.uniform(0, 0.15, n_core), np.sqrt(rng.uniform(0.02, 1.0,
                                                                          n_antennas - n_core))])
    phi = rng.uniform(0, 2 * np.pi, n_antennas)
    return np.column_stack([radius_m * r * np.cos(phi), radius_m * r * np.sin(phi)])


def uv_tracks(positions, *, latitude_deg=-30.0, declination_deg=-45.0, hours=6.0, steps=60,
              wavelength_m=0.2):
    """(u, v) in wavelengths of every baseline over ``hours`` of hour angle.

    References: Thompson, Moran & Swenson 2017, eqs. 4.1 and 4.15.
    """
    lat, dec = np.radians(latitude_deg), np.radians(declination_deg)
    e, n = positions[:, 0], positions[:, 1]
    # east-north-up (up = 0) to local equatorial X (meridian), Y (east), Z (pole)
    x, y, z = -np.sin(lat) * n, e, np.cos(lat) * n
    i, j = np.triu_indices(len(positions), 1)
    bx, by, bz = (x[j] - x[i]) / wavelength_m, (y[j] - y[i]) / wavelength_m, \
        (z[j] - z[i]) / wavelength_m
    h = np.radians(15.0 * np.linspace(-hours / 2, hours / 2, steps))[:, None]
    u = np.sin(h) * bx + np.cos(h) * by
    v = -np.sin(dec) * np.cos(h) * bx + np.sin(dec) * np.sin(h) * by + np.cos(dec) * bz
    return u.ravel(), v.ravel()


def _grid_weights(u, v, n, fill):
    """Natural weights on a ``2n x 2n`` grid, the longest baseline at ``fill * n`` cells."""
    m = 2 * n
    scale = fill * n / np.max(np.hypot(u, v))
    w = np.zeros((m, m))
    for s in (1, -1):                              # each sample and its conjugate
        iu = np.rint(s * u * scale).astype(int) % m
        iv = np.rint(s * v * scale).astype(int) % m
        np.add.at(w, (iv, iu), 1.0)
    return w


def natural_psf(u, v, n, *, fill=0.7):
    """The naturally weighted PSF, ``(2n, 2n)``, peak 1 at ``(n, n)``, and the weights."""
    w = _grid_weights(u, v, n, fill)
    psf = np.fft.fftshift(np.fft.ifft2(w).real)
    return psf / psf[n, n], w


def correlated_noise(weights, n, sigma, rng):
    """Image-plane noise ``(n, n)`` of deviation ``sigma`` whose covariance is the PSF."""
    m = weights.shape[0]
    xi = (rng.standard_normal((m, m)) + 1j * rng.standard_normal((m, m))) * np.sqrt(weights / 2)
    img = np.fft.ifft2(xi).real[:n, :n]
    return img * (sigma / img.std())


def invented_sky(n, *, largest_scale=16, dynamic_range=1e3, sigma=1e-4, n_points=12,
                 n_gauss=6, n_disks=3, seed=0):
    """Points, Gaussians and disks (Jy/pixel), sizes from 1 px to ``4 * largest_scale``.

    The brightest point has ``dynamic_range * sigma`` Jy; extended sources have peak
    surface brightness per beam between about 3 and 100 sigma, so part of their
    emission sits close to the noise.
    """
    rng = np.random.default_rng(seed)
    sky = np.zeros((n, n))
    yy, xx = np.mgrid[:n, :n].astype(np.float64)
    big = 4.0 * largest_scale
    margin = min(int(big / 2) + 8, n // 4)
    pos = lambda: rng.uniform(margin, n - margin, 2)   # noqa: E731
    for k in range(n_gauss):
        cy, cx = pos()
        fwhm = float(np.exp(rng.uniform(np.log(3.0), np.log(big))))
        s = fwhm / FWHM_PER_SIGMA
        peak = sigma * float(np.exp(rng.uniform(np.log(0.5), np.log(10.0))))
        sky += peak * np.exp(-((yy - cy) ** 2 + (xx - cx) ** 2) / (2 * s * s))
    for k in range(n_disks):
        cy, cx = pos()
        rad = float(rng.uniform(0.5, 1.0)) * big / 2
        sky += sigma * float(rng.uniform(0.3, 2.0)) * ((yy - cy) ** 2 + (xx - cx) ** 2 <= rad ** 2)
    pts = rng.integers(margin, n - margin, (n_points, 2))
    fl = sigma * np.exp(rng.uniform(np.log(20.0), np.log(dynamic_range), n_points))
    fl[0] = sigma * dynamic_range
    np.add.at(sky, (pts[:, 0], pts[:, 1]), fl)
    return sky


def invented_field(n, *, largest_scale=16, dynamic_range=1e3, sigma=1e-4, seed=0,
                   n_antennas=27):
    """An invented observation: ``dict(dirty, psf, sky, mask, sigma)``.

    ``dirty`` (float32, ``(n, n)``) is ``sky (*) psf`` plus noise of deviation ``sigma``
    with the PSF as covariance; ``psf`` is ``(2n, 2n)``; ``mask`` is where the sky has
    emission above ``sigma / 100`` per pixel, grown by 3 pixels (the truth mask both
    loops of the depth benchmark share).
    """
    rng = np.random.default_rng(seed + 1000)
    u, v = uv_tracks(invented_array(n_antennas, seed=seed))
    psf, w = natural_psf(u, v, n)
    sky = invented_sky(n, largest_scale=largest_scale, dynamic_range=dynamic_range,
                       sigma=sigma, seed=seed)
    dirty = fftconvolve(sky, psf, mode="full")[n:2 * n, n:2 * n]
    dirty += correlated_noise(w, n, sigma, rng)
    mask = ndimage.binary_dilation(sky > sigma / 100, iterations=3)
    return {"dirty": dirty.astype(np.float32), "psf": psf.astype(np.float32), "sky": sky,
            "mask": mask, "sigma": float(sigma)}


if __name__ == "__main__":
    f = invented_field(int(sys.argv[1]) if len(sys.argv) > 1 else 256)
    d = f["dirty"]
    print(f"dirty {d.shape}, peak {np.abs(d).max():.4g}, noise sigma {f['sigma']:.3g}, "
          f"mask {f['mask'].mean():.3f} of the image, sky flux {f['sky'].sum():.4g} Jy, "
          f"PSF {f['psf'].shape}, PSF sidelobe min {f['psf'].min():.3f}")
