"""Invented multi-channel observations for the wideband tests and benchmarks.

An invented array samples random uv cells in an annulus (fixed seed); at frequency
``nu`` the cells scale by ``nu / nu_ref``, so the PSF shrinks as ``1 / nu``.  Each
channel's dirty image is the sky convolved with its PSF by `scipy.signal.fftconvolve`
(a reference library, not skyscale's own FFTs) plus noise made from the same uv cells
(so the noise is correlated like the PSF, as natural weighting makes it).  Expected
values in the tests come from formulas, not from these fields.
"""

import numpy as np
from scipy.signal import fftconvolve

__all__ = ["band", "uv_cells", "psf_cube", "noise_cube", "observe", "power_law",
           "gaussian_blob", "disk"]


def band(nchan=16, lo=1.0e9, hi=2.0e9):
    """Channel centre frequencies (Hz) evenly across ``[lo, hi]``."""
    return np.linspace(lo, hi, nchan)


def uv_cells(n_points=2000, r_min=0.7, r_max=28.0, seed=5):
    """Random uv points (cells of the PSF grid at the reference frequency)."""
    rng = np.random.default_rng(seed)
    r = np.sqrt(rng.uniform(r_min ** 2, r_max ** 2, n_points))
    phi = rng.uniform(0, np.pi, n_points)
    return r * np.cos(phi), r * np.sin(phi)


def _grid(u, v, n, values):
    grid = np.zeros((n, n), dtype=np.complex128)
    iu = np.round(u).astype(int) % n
    iv = np.round(v).astype(int) % n
    np.add.at(grid, (iv, iu), values)
    np.add.at(grid, ((-iv) % n, (-iu) % n), np.conj(values))
    return grid


def psf_cube(freqs, n=256, nu_ref=1.5e9, seed=5):
    """``(nchan, n, n)`` PSFs, peak 1 at ``(n // 2, n // 2)``."""
    u, v = uv_cells(seed=seed)
    out = np.empty((len(freqs), n, n))
    for c, nu in enumerate(freqs):
        g = _grid(u * nu / nu_ref, v * nu / nu_ref, n, np.ones(u.size))
        img = np.fft.fftshift(np.fft.ifft2(g).real)
        out[c] = img / img[n // 2, n // 2]
    return out


def noise_cube(freqs, shape, sigma, n=256, nu_ref=1.5e9, seed=5, noise_seed=11):
    """``(nchan, ny, nx)`` noise correlated like each channel's PSF, rms ``sigma``."""
    u, v = uv_cells(seed=seed)
    rng = np.random.default_rng(noise_seed)
    out = np.empty((len(freqs),) + tuple(shape))
    for c, nu in enumerate(freqs):
        vals = rng.normal(size=u.size) + 1j * rng.normal(size=u.size)
        img = np.fft.ifft2(_grid(u * nu / nu_ref, v * nu / nu_ref, n, vals)).real
        img = img[:shape[0], :shape[1]]
        out[c] = img * (sigma / img.std())
    return out


def observe(sky, psfs, sigma, freqs, seed=11):
    """Dirty images of a sky cube ``(nchan, ny, nx)`` (Jy/pixel) through ``psfs``."""
    ny, nx = sky.shape[1:]
    py, px = psfs.shape[1:]
    dirty = np.empty(sky.shape)
    for c in range(sky.shape[0]):
        full = fftconvolve(sky[c], psfs[c], mode="full")
        dirty[c] = full[py // 2:py // 2 + ny, px // 2:px // 2 + nx]
    if sigma > 0:
        dirty += noise_cube(freqs, (ny, nx), sigma, n=py, noise_seed=seed)
    return dirty.astype(np.float32)


def power_law(freqs, s0, alpha, nu0=1.5e9):
    """``s0 (nu / nu0)^alpha`` for each frequency."""
    return s0 * (np.asarray(freqs) / nu0) ** alpha


def gaussian_blob(shape, cy, cx, sigma):
    """Unit-sum round Gaussian image."""
    y, x = np.mgrid[:shape[0], :shape[1]]
    g = np.exp(-((y - cy) ** 2 + (x - cx) ** 2) / (2 * sigma ** 2))
    return g / g.sum()


def disk(shape, cy, cx, radius):
    """Unit-sum flat disk image."""
    y, x = np.mgrid[:shape[0], :shape[1]]
    d = (((y - cy) ** 2 + (x - cx) ** 2) <= radius ** 2).astype(float)
    return d / d.sum()
