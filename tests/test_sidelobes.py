"""The PSF's sidelobe envelope and the islands a brighter island's sidelobes explain.

Check values: the envelope is a bound on |psf| at a distance or farther, checked
against the direct reading of every pixel (numpy); a point seen through the PSF
(``dirty = sky (*) psf``, Högbom 1974) has sidelobes no higher than its flux times the
envelope, so an island on one is flagged while an island brighter than that is not.
"""

import math

import numpy as np
from scipy import ndimage
from scipy.signal import fftconvolve

from skyscale.masks.sidelobes import sidelobe_envelope, under_sidelobes


def direct_envelope(psf, shape):
    """Largest |psf| at each whole distance or farther, by reading every offset."""
    py, px = psf.shape
    cy, cx = py // 2, px // 2
    ny, nx = shape
    yy, xx = np.mgrid[-cy:py - cy, -cx:px - cx]
    inside = (np.abs(yy) < ny) & (np.abs(xx) < nx)
    d = np.hypot(yy, xx)[inside]
    a = np.abs(psf)[inside]
    top = int(math.ceil(math.hypot(ny, nx))) + 1
    return np.array([a[d >= r].max(initial=0.0) for r in range(top + 1)]) / psf[cy, cx]


def test_the_envelope_bounds_the_psf_at_every_distance():
    rng = np.random.default_rng(0)
    psf = rng.normal(0, 0.02, (64, 64))
    psf[32, 32] = 1.0
    env = sidelobe_envelope(psf, (32, 32))
    exact = direct_envelope(psf, (32, 32))
    assert np.all(env >= exact - 1e-7)
    # and no looser than the direct reading at distance r / sqrt(2)
    for r in range(len(env)):
        assert env[r] <= exact[int(math.floor(r / math.sqrt(2)))] + 1e-7
    assert env[0] == 1.0


def test_an_island_on_a_brighter_point_s_sidelobe_is_flagged():
    n = 128
    y, x = np.mgrid[-n:n, -n:n].astype(float)
    psf = np.exp(-(x ** 2 + y ** 2) / 4.0) + 0.1 * np.exp(-((np.hypot(x, y) - 20) ** 2) / 4)
    psf /= psf[n, n]
    sky = np.zeros((n, n))
    sky[64, 64] = 100.0                     # its ring at 20 px reaches 10
    sky[64, 110] = 30.0                     # 46 px away, brighter than any sidelobe there
    dirty = fftconvolve(sky, psf, mode="full")[n:2 * n, n:2 * n]
    labels, count = ndimage.label(dirty > 5.0, structure=np.ones((3, 3)))
    flags = under_sidelobes(dirty, labels, sidelobe_envelope(psf, dirty.shape))
    # (sidelobes add: the ring of the fainter point adds 4e-4 to the brighter one's)
    assert not flags[labels[64, 64]] and not flags[labels[64, 110]]
    ring = [k for k in range(1, count + 1) if k not in (labels[64, 64], labels[64, 110])]
    assert ring and all(flags[k] for k in ring)
