"""Deconvolution with the automatic mask, against the known truth of a synthetic field."""

import numpy as np
import pytest

from skyscale import EmissionMask, deconvolve
from skyscale.core.beam import fit_beam
from tests.conftest import NOISE, extended_field, gaussian_psf, observe


@pytest.fixture(scope="module")
def field_with_edge_artefacts():
    n = 128
    psf = gaussian_psf(n, sigma=2.0, ring=0.05, bowl=0.02)
    sky = extended_field(n)
    dirty = observe(sky, psf, noise=NOISE, seed=7)
    # Artefacts near the image edge that no sky explains (for example pixel glitches of
    # a faulty gridding edge): isolated positive spikes, not PSF-shaped, in two columns.
    dirty = dirty.copy()
    dirty[::3, 2] += 6 * NOISE
    dirty[1::3, n - 3] += 6 * NOISE
    return sky, psf, dirty


def test_emission_mask_is_no_worse_and_recovers_more_flux(field_with_edge_artefacts):
    sky, psf, dirty = field_with_edge_artefacts
    scales = [0, 4, 8, 16, 32]
    kw = dict(scales=scales, threshold=3 * NOISE, max_components=30000, max_major_cycles=40,
              restore=False)
    plain = deconvolve(dirty, psf, **kw)
    auto = EmissionMask(scales, fit_beam(psf).major)
    masked = deconvolve(dirty, psf, emission_mask=auto, **kw)
    emission = observe(sky, psf) > 0.02 * observe(sky, psf).max()
    peak_plain = np.abs(plain.residual[emission]).max()
    peak_masked = np.abs(masked.residual[emission]).max()
    assert peak_masked <= peak_plain * 1.05
    # The model's flux where the sky has emission, and what it puts where it has none.
    from scipy import ndimage
    region = ndimage.gaussian_filter(sky, 2.0) > 1e-7   # where the true sky holds flux
    true_flux = sky.sum()
    inside = [abs(r.model[region].sum() - true_flux) for r in (plain, masked)]
    spurious = [np.abs(r.model[~region]).sum() for r in (plain, masked)]
    # flux error: what is missing where the sky is, plus what was put where it is not
    assert inside[1] + spurious[1] < inside[0] + spurious[0]
    # The multi-scale detection finds the artefact columns once smoothed (they are a
    # coherent structure at 8-16 px), so some of their flux stays; still far below the
    # unmasked run's.
    assert spurious[1] < 0.3 * spurious[0]
    assert masked.mask is not None and 0 < masked.mask.mean() < 0.9
