"""Tests of skyscale.masks.detect and skyscale.masks.profiles: the smoothing ladder, each rung's
emission-free noise, the islands measured on it and the profiles they are fitted by,
against analytic values and scipy/astropy."""

import math

import numpy as np
import pytest
from astropy.convolution import Gaussian2DKernel
from scipy import ndimage
from scipy.stats import ncx2

from skyscale import EmissionMask
from skyscale.core.noise import detection_noise, robust_noise
from skyscale.masks.detect import (FWHM_PER_SIGMA, detect_emission, smoothed_images,
                                   smoothing_ladder)
from skyscale.masks.profiles import seen_profile, transfer_of_beam, transfer_of_psf
from tests.advisor_fields import (BEAM, gaussian_psf, make_field, noise_field, point_field,
                                  source_with_compact)


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
    assert detection_noise(image, 5.0, margin_px=2.0) == pytest.approx(
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
    found = detect_emission(dirty.astype(np.float32), BEAM, [0, 4, 8, 16],
                            guard_negative=True)        # the mask's guard (default on)
    assert list(am.noise.values()) == pytest.approx(list(found.noise))
    assert list(am.levels.values()) == pytest.approx(list(found.levels))
    assert (mask | ~found.mask).all()            # grown from the same detections


# ------------------------------------------------------------- the seen profiles

def test_seen_disk_profile_matches_scipy_noncentral_chi2():
    # A uniform disk of radius R convolved with a unit-sum round Gaussian of sigma s
    # is, at distance r from its centre, the probability that a 2-D normal of mean r
    # falls in the disk: the noncentral chi-square CDF with 2 degrees of freedom,
    # scipy.stats.ncx2.cdf((R/s)^2, 2, (r/s)^2) (reference library).  Seen through a
    # peak-1 beam b (sum pi b^2 / (4 ln 2), analytic) and smoothed by w, s is that of
    # the FWHM sqrt(b^2 + w^2) (Gaussian widths add in quadrature, analytic).
    b, w, diameter = 4.0, 6.0, 40.0
    s = math.hypot(b, w) / FWHM_PER_SIGMA
    r = np.linspace(0.0, 60.0, 121)
    got = seen_profile("disk", diameter, transfer_of_beam(b), w, r)
    beam_sum = math.pi * b * b / (4.0 * math.log(2.0))
    expected = beam_sum * ncx2.cdf((0.5 * diameter / s) ** 2, 2, (r / s) ** 2)
    np.testing.assert_allclose(got, expected, atol=1e-3 * expected.max())


def test_seen_gaussian_profile_is_the_analytic_gaussian():
    # A peak-1 Gaussian of FWHM f seen through a peak-1 beam b and a unit-sum
    # smoothing w is a Gaussian of FWHM G = sqrt(f^2 + b^2 + w^2) holding the product
    # of the two sums, so of peak pi f^2 b^2 / (4 ln 2 G^2) (analytic).
    f, b, w = 24.0, 4.0, 8.0
    g2 = f * f + b * b + w * w
    r = np.linspace(0.0, 50.0, 101)
    expected = math.pi * f * f * b * b / (4.0 * math.log(2.0) * g2) * np.exp2(-4 * r * r / g2)
    got = seen_profile("gaussian", f, transfer_of_beam(b), w, r)
    # 1e-3 of the peak: the beam's transfer is tabulated and interpolated linearly.
    np.testing.assert_allclose(got, expected, atol=1e-3 * expected.max())


def test_psf_transfer_is_the_gaussian_beam_transfer():
    # The Fourier transform of a peak-1 Gaussian of FWHM b is
    # pi b^2 / (4 ln 2) exp(-pi^2 b^2 q^2 / (4 ln 2)) (analytic); the sampled PSF's,
    # averaged in rings one frequency step wide, agrees to 0.5 % of its sum (the
    # rings average the transform over their width).
    t = transfer_of_psf(gaussian_psf(256, BEAM))
    beam = transfer_of_beam(BEAM)
    expected = np.interp(t.q, beam.q, beam.t)
    np.testing.assert_allclose(t.t, expected, atol=5e-3 * expected[0])


def test_compact_source_on_a_disk_is_set_apart():
    # A disk of 50 px with a point 40 times its peak on it: the island's brightest
    # pixel is the point's, but the size read is the disk's diameter and the point is
    # fitted apart (its seen peak near 40 times the disk's at the unsmoothed rung).
    dirty = source_with_compact("disk", 50.0, 40.0, 256, seed=11)
    found = detect_emission(dirty, BEAM, [0.0], measure=True)
    disk = max(found.islands, key=lambda i: i.area)
    assert disk.shape == "disk" and disk.measured
    assert disk.intrinsic_px == pytest.approx(50.0, rel=0.05)
    assert disk.compact / disk.peak == pytest.approx(40.0, rel=0.1)


def test_label_max_matches_scipy_ndimage_maximum():
    # Reference library: scipy.ndimage.maximum over labels 1..n.
    from scipy import ndimage

    from skyscale.masks.islands import label_max as _label_max
    rng = np.random.default_rng(11)
    image = rng.normal(size=(60, 70)).astype(np.float32)
    labels, n = ndimage.label(rng.random((60, 70)) < 0.3)
    np.testing.assert_array_equal(_label_max(image, labels, n),
                                  ndimage.maximum(image, labels, np.arange(1, n + 1)))
