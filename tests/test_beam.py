"""Tests of skyscale.core.beam: the Beam type, the main-lobe fit, unit conversion, restoring."""

import doctest
import math
import warnings

import astropy.units as u
import numpy as np
import pytest
from astropy.convolution import Gaussian2DKernel, convolve_fft
from astropy.modeling import fitting, models
from scipy import ndimage, optimize, special

import skyscale.core.beam as beam_module
from skyscale.core.beam import (FWHM_PER_SIGMA, FWHM_TO_SIGMA, Beam, beam_area, beam_kernel,
                                fit_beam, gaussian_area, jy_per_beam_to_jy_per_pixel,
                                jy_per_pixel_to_jy_per_beam, restore)

GAUSS_FWHM = 2.0 * math.sqrt(2.0 * math.log(2.0))  # analytic: FWHM = 2 sqrt(2 ln 2) sigma


def pa_diff(a, b):
    """Difference of two axis angles in degrees, modulo 180."""
    return abs((a - b + 90.0) % 180.0 - 90.0)


def astropy_gaussian(shape, major, minor, pa, centre=None):
    """PSF sampled from astropy's Gaussian2D (reference library).

    Gaussian2D's theta turns its x axis counter-clockwise from +x; our pa turns the
    major axis from +y towards -x, so theta = pa + 90 deg with x_stddev the major sigma.
    """
    ny, nx = shape
    cy, cx = centre if centre is not None else (ny // 2, nx // 2)
    y, x = np.mgrid[:ny, :nx]
    g = models.Gaussian2D(1.0, cx, cy, major / GAUSS_FWHM, minor / GAUSS_FWHM,
                          math.radians(pa + 90.0))
    return g(x, y)


def astropy_fit(psf, threshold=0.35):
    """Fit the same main-lobe pixels with astropy.modeling (reference library)."""
    ny, nx = psf.shape
    cy, cx = ny // 2, nx // 2
    labels, _ = ndimage.label(psf >= threshold * psf[cy, cx])
    sel = labels == labels[cy, cx]
    y, x = np.mgrid[:ny, :nx]
    start = models.Gaussian2D(psf[cy, cx], cx, cy, 2.0, 1.5, 0.3)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = fitting.LevMarLSQFitter()(start, x[sel], y[sel], psf[sel], maxiter=1000)
    sx, sy, theta = res.x_stddev.value, res.y_stddev.value, math.degrees(res.theta.value)
    if abs(sx) < abs(sy):
        sx, sy, theta = sy, sx, theta + 90.0
    return abs(sx) * GAUSS_FWHM, abs(sy) * GAUSS_FWHM, theta - 90.0


# ---------------------------------------------------------------- Beam

def test_fwhm_constant_matches_handbook_value():
    # analytic: FWHM = 2 sqrt(2 ln 2) sigma = 2.354820045 sigma (REFERENCES.md)
    assert 1.0 / FWHM_TO_SIGMA == pytest.approx(2.354820045, rel=1e-9)
    assert FWHM_PER_SIGMA == pytest.approx(2.354820045, rel=1e-9)
    assert FWHM_PER_SIGMA * FWHM_TO_SIGMA == pytest.approx(1.0, rel=1e-15)


def test_gaussian_area_is_the_integral_of_astropys_gaussian():
    # Reference library: astropy's Gaussian2D sampled finely and summed (the integral
    # of a unit-peak Gaussian is 2 pi sigma_x sigma_y, its FWHM 2 sqrt(2 ln 2) sigma).
    step = 0.05
    y, x = np.mgrid[-40:40:step, -40:40:step]
    g = models.Gaussian2D(1.0, 0.0, 0.0, 5.0 / GAUSS_FWHM, 3.0 / GAUSS_FWHM, theta=0.4)
    assert gaussian_area(5.0, 3.0) == pytest.approx(float(g(x, y).sum()) * step ** 2,
                                                    rel=1e-6)


def test_area_formula():
    b = Beam(5.0, 3.0, 10.0)
    # analytic: Omega = pi maj min / (4 ln 2) = 1.133 maj min
    assert b.area == pytest.approx(math.pi * 15.0 / (4.0 * math.log(2.0)), rel=1e-12)
    assert b.area == pytest.approx(1.133 * 15.0, rel=1e-3)
    assert beam_area(b) == b.area


@pytest.mark.parametrize("given, folded", [(120.0, -60.0), (-90.0, 90.0), (90.0, 90.0),
                                           (270.0, 90.0), (-135.0, 45.0), (0.0, 0.0),
                                           (-0.0, 0.0), (179.0, -1.0)])
def test_pa_folded_into_half_open_range(given, folded):
    assert Beam(4.0, 2.0, given).pa == pytest.approx(folded, abs=1e-12)


def test_quantities_are_stripped():
    b = Beam(4.0 * u.pix, 2.0 * u.pix, (math.pi / 4) * u.rad)
    assert (b.major, b.minor, b.pa) == pytest.approx((4.0, 2.0, 45.0))
    s = Beam.from_sky(0.1 * u.arcmin, 3.0 * u.arcsec, 20 * u.deg, 1.5 * u.arcsec)
    assert (s.major, s.minor, s.pa) == pytest.approx((4.0, 2.0, 20.0))


def test_to_sky_from_sky_round_trip_and_dict():
    b = Beam(4.5, 3.25, -30.0)
    assert b.to_sky(2.0) == pytest.approx((9.0, 6.5, -30.0))
    assert Beam.from_sky(*b.to_sky(2.0), 2.0) == b
    assert Beam(**b.as_dict()) == b


@pytest.mark.parametrize("args, word", [((2.0, 3.0, 0.0), "swap"), ((0.0, 0.0, 0.0), "greater"),
                                        ((np.nan, 1.0, 0.0), "finite"),
                                        ((2.0, 1.0, np.inf), "pa")])
def test_bad_beam_refused(args, word):
    with pytest.raises(ValueError, match=word):
        Beam(*args)


def test_angle_given_as_beam_axis_refused():
    with pytest.raises(ValueError, match="from_sky"):
        Beam(3.0 * u.arcsec, 2.0)


# ---------------------------------------------------------------- kernel

@pytest.mark.parametrize("shape", [(32, 32), (31, 33), (20, 25)])
def test_kernel_peak_one_at_centre(shape):
    k = beam_kernel(Beam(4.0, 3.0, 25.0), shape)
    assert k.dtype == np.float32 and k.shape == shape
    # common practice (DESIGN.md): peak 1 at (ny // 2, nx // 2)
    assert np.unravel_index(np.argmax(k), shape) == (shape[0] // 2, shape[1] // 2)
    assert k[shape[0] // 2, shape[1] // 2] == 1.0


def test_kernel_half_maximum_at_half_fwhm():
    # analytic: a Gaussian falls to 1/2 at FWHM / 2 from its peak
    k = beam_kernel(Beam(8.0, 4.0, 0.0), (33, 33), dtype=np.float64)
    assert k[16 + 4, 16] == pytest.approx(0.5, rel=1e-12)   # major axis along y
    assert k[16, 16 + 2] == pytest.approx(0.5, rel=1e-12)   # minor axis along x
    k90 = beam_kernel(Beam(8.0, 4.0, 90.0), (33, 33), dtype=np.float64)
    assert k90[16, 16 - 4] == pytest.approx(0.5, rel=1e-12)


def test_kernel_position_angle_is_east_of_north():
    # common practice: PA from north (+y) through east, east at -x on the usual sky grid
    k = beam_kernel(Beam(10.0, 3.0, 45.0), (41, 41))
    assert k[20 + 3, 20 - 3] > 0.5 > k[20 + 3, 20 + 3]


def test_kernel_sum_is_beam_area():
    # analytic: the integral of a peak-1 Gaussian is 2 pi sig_maj sig_min = beam area
    b = Beam(6.0, 4.0, 33.0)
    assert beam_kernel(b, (64, 64), dtype=np.float64).sum() == pytest.approx(b.area, rel=1e-9)


# ---------------------------------------------------------------- fit

@pytest.mark.parametrize("major, minor, pa", [(6.0, 3.0, 0.0), (7.0, 4.0, 30.0),
                                              (5.0, 2.5, 90.0), (8.0, 3.0, -45.0),
                                              (8.0, 3.0, 135.0), (6.0, 5.0, 75.0),
                                              (9.0, 3.5, -89.0)])
def test_fit_recovers_analytic_gaussian(major, minor, pa):
    psf = astropy_gaussian((48, 47), major, minor, pa)
    b = fit_beam(psf)
    assert b.major == pytest.approx(major, rel=1e-6)
    assert b.minor == pytest.approx(minor, rel=1e-6)
    assert pa_diff(b.pa, pa) < 1e-4
    assert -90.0 < b.pa <= 90.0


def test_fit_pa_wraps_to_ninety():
    b = fit_beam(astropy_gaussian((40, 40), 6.0, 3.0, -90.0))
    assert pa_diff(b.pa, 90.0) < 1e-4 and -90.0 < b.pa <= 90.0


def test_fit_circular_beam_has_zero_pa():
    b = fit_beam(astropy_gaussian((32, 32), 5.0, 5.0, 0.0).astype(np.float32))
    assert b.major == b.minor and b.pa == 0.0
    assert b.major == pytest.approx(5.0, rel=1e-5)


def airy(shape, a, b, pa):
    """Elliptical Airy pattern (2 J1(r)/r)^2 with r = hypot(a u, b v), u along pa."""
    ny, nx = shape
    y, x = np.mgrid[:ny, :nx].astype(float)
    y -= ny // 2
    x -= nx // 2
    t = math.radians(pa)
    uu = -x * math.sin(t) + y * math.cos(t)
    vv = x * math.cos(t) + y * math.sin(t)
    r = np.hypot(a * uu, b * vv)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(r == 0, 1.0, (2.0 * special.j1(r) / np.where(r == 0, 1, r)) ** 2)


def test_fit_airy_main_lobe_matches_astropy_and_analytic_width():
    psf = airy((65, 65), 0.5, 0.9, 30.0)
    b = fit_beam(psf)
    maj, mnr, pa = astropy_fit(psf)
    # reference library: astropy.modeling Gaussian2D + LevMarLSQFitter on the same pixels
    assert b.major == pytest.approx(maj, rel=0.01)
    assert b.minor == pytest.approx(mnr, rel=0.01)
    assert pa_diff(b.pa, pa) < 0.1
    # analytic: Airy intensity halves where (2 J1(x)/x)^2 = 1/2 (root found with scipy)
    xh = optimize.brentq(lambda t: (2 * special.j1(t) / t) ** 2 - 0.5, 0.5, 3.0)
    assert b.major == pytest.approx(2 * xh / 0.5, rel=0.02)
    assert b.minor == pytest.approx(2 * xh / 0.9, rel=0.02)
    assert pa_diff(b.pa, 30.0) < 1.0


def test_fit_ignores_bright_ring_not_connected_to_main_lobe():
    # A Gaussian main lobe plus a ring above the threshold and a negative ring: only the
    # connected main lobe is fitted, so the Gaussian's widths come back (analytic).
    shape = (81, 81)
    y, x = np.mgrid[:81, :81] - 40.0
    r = np.hypot(x, y)
    psf = astropy_gaussian(shape, 6.0, 4.0, 60.0)
    psf = psf + 0.5 * np.exp(-0.5 * ((r - 22.0) / 1.5) ** 2) \
        - 0.2 * np.exp(-0.5 * ((r - 14.0) / 1.5) ** 2)
    b = fit_beam(psf)
    assert b.major == pytest.approx(6.0, rel=0.01)
    assert b.minor == pytest.approx(4.0, rel=0.01)
    assert pa_diff(b.pa, 60.0) < 0.5
    maj, mnr, pa = astropy_fit(psf)   # reference library, same main-lobe pixels
    assert b.major == pytest.approx(maj, rel=0.01) and b.minor == pytest.approx(mnr, rel=0.01)


def test_fit_dtype_independent():
    psf = astropy_gaussian((40, 40), 6.0, 3.0, 20.0)
    b64 = fit_beam(psf)
    b32 = fit_beam(psf.astype(np.float32))
    assert b32.major == pytest.approx(b64.major, rel=1e-5)
    assert isinstance(b32.major, float)


@pytest.mark.parametrize("threshold", [0.0, 1.0, -0.2, 1.5])
def test_fit_bad_threshold(threshold):
    with pytest.raises(ValueError, match="threshold"):
        fit_beam(astropy_gaussian((20, 20), 4.0, 3.0, 0.0), threshold=threshold)


def test_fit_delta_psf_refused_with_fix():
    psf = np.zeros((16, 16))
    psf[8, 8] = 1.0
    with pytest.raises(ValueError, match="Lower threshold"):
        fit_beam(psf)


def test_fit_nonpositive_centre_refused():
    psf = -astropy_gaussian((20, 20), 4.0, 3.0, 0.0)
    with pytest.raises(ValueError, match="centre"):
        fit_beam(psf)


def test_fit_warns_off_centre_peak_and_undersampling():
    with pytest.warns(UserWarning, match="not at the centre"):
        fit_beam(astropy_gaussian((32, 32), 6.0, 4.0, 0.0, centre=(17.0, 16.0)))
    with pytest.warns(UserWarning, match="pixels across the beam"):
        fit_beam(astropy_gaussian((32, 32), 5.0, 1.8, 0.0))


# ---------------------------------------------------------------- units

def test_jy_conversions_scale_by_area_and_keep_dtype():
    b = Beam(4.0, 3.0, 0.0)
    img32 = np.full((4, 5), 2.0, np.float32)
    out = jy_per_pixel_to_jy_per_beam(img32, b)
    assert out.dtype == np.float32
    # analytic: Jy/pixel -> Jy/beam multiplies by Omega / pixel area
    np.testing.assert_allclose(out, 2.0 * math.pi * 12.0 / (4 * math.log(2)), rtol=1e-6)
    img64 = np.full((4, 5), 2.0)
    back = jy_per_beam_to_jy_per_pixel(jy_per_pixel_to_jy_per_beam(img64, b), b)
    assert back.dtype == np.float64
    np.testing.assert_allclose(back, img64, rtol=1e-15)


# ---------------------------------------------------------------- restore

@pytest.mark.parametrize("shape, pos", [((32, 32), (5, 20)), ((31, 33), (16, 16)),
                                        ((30, 41), (29, 0))])
def test_point_source_restores_to_peak_flux(shape, pos):
    model = np.zeros(shape, np.float32)
    model[pos] = 3.5
    out = restore(model, np.zeros(shape, np.float32), Beam(4.0, 2.5, 40.0))
    assert out.dtype == np.float32 and out.shape == shape
    # analytic: a delta of flux S convolved with a peak-1 beam peaks at S Jy/beam
    assert np.unravel_index(np.argmax(out), shape) == pos
    assert out[pos] == pytest.approx(3.5, rel=1e-5)


def test_restored_flux_over_beam_area_is_model_flux():
    model = np.zeros((64, 64), np.float32)
    model[20, 30], model[40, 25], model[33, 44] = 1.0, 0.25, 2.0
    b = Beam(5.0, 3.0, -20.0)
    out = restore(model, None, b)
    # analytic: integral of model (*) beam = flux * beam area
    assert out.sum(dtype=np.float64) / b.area == pytest.approx(3.25, rel=1e-5)


def gaussian_covariance(major, minor, pa):
    """(x, y) covariance of an elliptical Gaussian, major axis along (-sin pa, cos pa)."""
    t = math.radians(pa)
    rot = np.array([[-math.sin(t), math.cos(t)], [math.cos(t), math.sin(t)]]).T
    return rot @ np.diag([(major / GAUSS_FWHM) ** 2, (minor / GAUSS_FWHM) ** 2]) @ rot.T


def test_restored_gaussian_adds_covariances():
    n = 96
    flux = 2.0
    model = astropy_gaussian((n, n), 9.0, 5.0, 20.0)
    model *= flux / model.sum()              # Jy/pixel with the given integrated flux
    b = Beam(6.0, 3.0, -50.0)
    out = restore(model, None, b).astype(np.float64)
    y, x = np.mgrid[:n, :n] - n // 2
    total = out.sum()
    cxx, cyy, cxy = ((out * x * x).sum() / total, (out * y * y).sum() / total,
                     (out * x * y).sum() / total)
    # analytic: convolving Gaussians adds their covariance matrices
    want = gaussian_covariance(9.0, 5.0, 20.0) + gaussian_covariance(6.0, 3.0, -50.0)
    np.testing.assert_allclose([[cxx, cxy], [cxy, cyy]], want, rtol=1e-4, atol=1e-4)
    assert total == pytest.approx(flux * b.area, rel=1e-5)


def test_restore_matches_astropy_convolution():
    rng = np.random.default_rng(7)
    model = np.zeros((40, 44))
    model[rng.integers(8, 32, 12), rng.integers(8, 36, 12)] = rng.uniform(0.1, 1.0, 12)
    b = Beam(5.0, 2.5, 70.0)
    kern = Gaussian2DKernel(b.major / GAUSS_FWHM, b.minor / GAUSS_FWHM,
                            theta=math.radians(b.pa + 90.0), x_size=41, y_size=41)
    # reference library: astropy.convolution.convolve_fft, kernel rescaled to peak 1
    want = convolve_fft(model, kern.array / kern.array.max(), normalize_kernel=False,
                        boundary="fill", fill_value=0.0)
    got = restore(model, None, b)
    assert got.dtype == np.float64
    np.testing.assert_allclose(got, want, atol=1e-9 * model.max())


def test_restore_adds_residual():
    rng = np.random.default_rng(3)
    model = np.zeros((24, 24), np.float32)
    model[12, 12] = 1.0
    residual = rng.normal(size=(24, 24)).astype(np.float32)
    b = Beam(3.0, 3.0, 0.0)
    np.testing.assert_allclose(restore(model, residual, b) - restore(model, None, b),
                               residual, atol=1e-6)
    assert restore(model, residual.astype(np.float64), b).dtype == np.float64


def test_restore_with_project_fft_backend_matches_default():
    pytest.importorskip("skyscale.core.fft")
    model = np.zeros((30, 31), np.float32)
    model[10, 7], model[22, 25] = 1.0, -0.5
    b = Beam(4.0, 3.0, 15.0)
    np.testing.assert_allclose(restore(model, None, b, fft="numpy"),
                               restore(model, None, b), atol=1e-6)


def test_restore_refuses_mismatched_shapes_and_non_beam():
    with pytest.raises(ValueError, match="same grid"):
        restore(np.zeros((8, 8)), np.zeros((8, 9)), Beam(2.0, 2.0))
    with pytest.raises(TypeError, match="Beam"):
        restore(np.zeros((8, 8)), None, (2.0, 2.0, 0.0))


def test_doctests():
    assert doctest.testmod(beam_module).failed == 0
