"""Tests of skyscale.detect: the smoothing ladder, each rung's emission-free noise, and
the islands measured on it, against analytic values and scipy/astropy."""

import math

import numpy as np
import pytest
from astropy.convolution import Gaussian2DKernel
from scipy import ndimage

from skyscale import EmissionMask
from skyscale.detect import (FWHM_PER_SIGMA, detect_emission, emission_free_noise,
                             smoothed_images, smoothing_ladder)
from skyscale.noise import robust_noise
from tests.advisor_fields import BEAM, make_field, noise_field, point_field


def test_ladder_doubles_from_the_beam_to_a_quarter_of_the_image():
    assert smoothing_ladder(4.0, (512, 300)) == (0.0, 4.0, 8.0, 16.0, 32.0, 64.0)
    assert smoothing_ladder(4.5, (64, 64)) == (0.0, 4.5, 9.0)


def test_smoothing_matches_scipy_gaussian_filter():
    # reference library: scipy.ndimage.gaussian_filter (zero outside the image) is the
    # same unit-sum Gaussian, sampled; here its transfer function is the analytic one,
    # so for widths of a few pixels the two differ by up to ~0.1 % of the peak.
    image = np.random.default_rng(0).normal(0, 1, (96, 80))
    for width, sm in smoothed_images(image, [0.0, 3.0, 12.0]):
        ref = image if width == 0 else \
            ndimage.gaussian_filter(image, width / FWHM_PER_SIGMA, mode="constant",
                                    truncate=8.0)
        np.testing.assert_allclose(sm, ref, atol=1e-3 * np.abs(ref).max())


@pytest.mark.parametrize("width", [4.0, 8.0, 16.0, 32.0])
def test_white_noise_rung_noise_is_sigma_times_the_kernel_norm(width):
    # White noise of rms n smoothed by a unit-sum kernel k has rms n sqrt(sum k^2)
    # (analytic); the kernel from astropy.convolution.Gaussian2DKernel (reference
    # library), normalised to unit sum.
    image = noise_field(512, seed=int(width))
    kernel = Gaussian2DKernel(width / FWHM_PER_SIGMA, x_size=201, y_size=201).array
    kernel = kernel / kernel.sum()
    expected = math.sqrt((kernel ** 2).sum())
    found = detect_emission(image, BEAM, [width])
    # The number of independent samples falls as the width grows: allow 3 / sqrt(N).
    independent = image.size / (math.pi * (width / FWHM_PER_SIGMA) ** 2 * 4)
    assert found.noise[0] == pytest.approx(expected, rel=max(0.03, 3 / math.sqrt(independent)))


def test_noise_is_measured_off_the_emission():
    # A bright disk over a quarter of the image inflates the MAD of the whole image;
    # left out with its margin, the noise is the noise's own (robust_noise of the noise
    # alone, Rousseeuw & Croux 1993).
    noise = noise_field(256, seed=5)
    yy, xx = np.mgrid[:256, :256]
    image = noise + 8.0 * (np.hypot(yy - 128, xx - 128) < 75)
    assert robust_noise(image) > 1.3
    assert emission_free_noise(image, 5.0, margin_px=2.0) == pytest.approx(
        robust_noise(noise), rel=0.05)


def test_unresolved_sources_blurred_together_are_not_extended():
    # Twelve bright points: at wide smoothings their blur merges, but their peak
    # signal-to-noise falls and their island is mostly new blur.
    dirty, _ = point_field(512, 12, 3000, seed=1)
    found = detect_emission(dirty, BEAM, measure=True)
    wide = [i for i in found.islands if i.smoothing_px >= 32]
    assert wide and not any(i.resolved for i in wide)
    assert all(i.gain < 1 for i in wide)
    assert max(i.intrinsic_px for i in found.islands if i.resolved) < BEAM


def test_extended_source_gains_with_smoothing():
    # A Gaussian of FWHM f seen through the beam b, smoothed by s, in white noise:
    # peak S/N grows as s (f^2 + b^2) / (f^2 + b^2 + s^2) up to s = sqrt(f^2 + b^2)
    # (Gaussian widths add in quadrature; smoothed white noise as above; analytic).
    dirty, _ = make_field("gaussian", 40, 1.0, 256, seed=2)
    found = detect_emission(dirty, BEAM, measure=True)
    by = {i.smoothing_px: i for i in found.islands if i.area > 100}
    assert by[16.0].gain > 1 and by[16.0].resolved
    f2 = 40 ** 2 + BEAM ** 2
    predicted = (16 * f2 / (f2 + 16 ** 2)) / (8 * f2 / (f2 + 8 ** 2))
    assert by[16.0].gain == pytest.approx(predicted, rel=0.15)


def test_emission_mask_calls_the_one_detection_routine():
    dirty, _ = make_field("disk", 60, 2.0, 256, seed=3)
    am = EmissionMask([0, 8, 16, 32], BEAM)
    mask = am.update(dirty)
    found = detect_emission(dirty.astype(np.float32), BEAM, [0, 4, 8, 16])
    assert list(am.noise.values()) == pytest.approx(list(found.noise))
    assert (mask | ~found.mask).all()            # grown from the same detections
