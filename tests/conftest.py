"""Shared fixtures: synthetic PSFs and fields whose truth is known by construction."""

import os
import sys

import numpy as np
import pytest
from scipy.signal import fftconvolve

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
if ROOT not in sys.path:
    sys.path.insert(0, ROOT)
if os.path.join(ROOT, "engine") not in sys.path:
    sys.path.insert(0, os.path.join(ROOT, "engine"))


def gaussian_psf(n, sigma=2.0, ring=0.0, bowl=0.0):
    """(2n, 2n) PSF, peak 1 at (n, n): a round Gaussian, optionally with a ring sidelobe
    and a broad negative bowl (the missing short spacings of an interferometer)."""
    y, x = np.mgrid[-n:n, -n:n].astype(np.float64)
    r = np.hypot(x, y)
    psf = np.exp(-r ** 2 / (2 * sigma ** 2))
    if bowl:
        psf -= bowl * np.exp(-r ** 2 / (2 * (6 * sigma) ** 2))
    if ring:
        psf -= ring * np.exp(-(r - 4.5 * sigma) ** 2 / (2 * (1.25 * sigma) ** 2)) * np.cos(0.6 * x / sigma)
    return (psf / psf[n, n]).astype(np.float32)


def observe(sky, psf, noise=0.0, seed=0):
    """Dirty image: exact linear convolution of ``sky`` with the (2n) PSF, plus noise."""
    n = sky.shape[0]
    dirty = fftconvolve(sky, psf.astype(np.float64), mode="full")[n:2 * n, n:2 * n]
    if noise:
        rng = np.random.default_rng(seed)
        core = psf[n - 12:n + 13, n - 12:n + 13].astype(np.float64)
        white = fftconvolve(rng.normal(0.0, 1.0, sky.shape), core, mode="same")
        dirty = dirty + noise * white / white.std()
    return dirty.astype(np.float32)


def extended_field(n=128):
    """A Gaussian blob, a uniform disk and one point source (Jy/pixel)."""
    yy, xx = np.mgrid[:n, :n].astype(np.float64)
    sky = 0.002 * np.exp(-((yy - 0.33 * n) ** 2 + (xx - 0.36 * n) ** 2) / (2 * (0.09 * n) ** 2))
    sky[np.hypot(yy - 0.7 * n, xx - 0.64 * n) < 0.15 * n] += 0.0008
    sky[int(0.15 * n), int(0.85 * n)] += 0.5
    return sky


#: Noise (Jy/beam) of the extended test field.
NOISE = 2e-5


@pytest.fixture(scope="session")
def ring_psf_128():
    return gaussian_psf(128, sigma=2.0, ring=0.05, bowl=0.02)


@pytest.fixture(scope="session")
def extended_case(ring_psf_128):
    sky = extended_field(128)
    return sky, ring_psf_128, observe(sky, ring_psf_128, noise=NOISE)


@pytest.fixture(autouse=True, scope="session")
def _private_caches(tmp_path_factory):
    """Tests never read or write the user's caches: results must not depend on them."""
    root = tmp_path_factory.mktemp("caches")
    patch = pytest.MonkeyPatch()
    patch.setenv("XDG_CACHE_HOME", str(root))
    patch.setenv("MPLCONFIGDIR", str(root / "matplotlib"))
    yield root
    patch.undo()
