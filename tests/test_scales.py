"""Scale kernels, scale sets and size-penalty weights."""

import numpy as np
import pytest
from astropy import units as u

from skyscale.core.scales import (ScaleSet, scale_kernel, size_penalty_weights, spheroidal,
                                  support_radius)


@pytest.mark.parametrize("shape", ["paraboloid", "gaussian"])
@pytest.mark.parametrize("scale", [0, 3, 4, 9, 16, 33])
def test_kernels_have_unit_sum_and_are_centred(scale, shape):
    k = scale_kernel(scale, shape)
    assert k.dtype == np.float32
    assert k.shape[0] == k.shape[1] == 2 * support_radius(scale, shape) + 1
    assert k.sum() == pytest.approx(1.0, abs=1e-6)
    h = k.shape[0] // 2
    assert np.unravel_index(np.argmax(k), k.shape) == (h, h)
    assert np.allclose(k, k[::-1, ::-1])  # point symmetric


def test_paraboloid_is_zero_beyond_half_the_diameter():
    # Cornwell 2008: the tapered paraboloid vanishes outside radius a = scale / 2.
    scale = 12
    k = scale_kernel(scale, "paraboloid", dtype=np.float64)
    h = k.shape[0] // 2
    y, x = np.mgrid[-h:h + 1, -h:h + 1]
    assert np.all(k[np.hypot(y, x) >= scale / 2] == 0)
    assert np.all(k[np.hypot(y, x) < scale / 2 - 0.5] > 0)


def test_gaussian_scale_has_fwhm_half_the_diameter():
    # analytic: second moment of a round Gaussian, FWHM = 2 sqrt(2 ln 2) sigma.
    scale = 20
    k = scale_kernel(scale, "gaussian", dtype=np.float64)
    h = k.shape[0] // 2
    y, x = np.mgrid[-h:h + 1, -h:h + 1]
    sigma = np.sqrt((k * x ** 2).sum())
    assert 2 * np.sqrt(2 * np.log(2)) * sigma == pytest.approx(scale / 2, rel=5e-3)


def test_spheroidal_taper_is_one_at_centre_and_falls_to_zero():
    # Schwab 1984 rational approximation (coefficients from memory): psi(0) = 1 after
    # normalisation, decreasing, and (nearly) zero at the support edge.
    nu = np.linspace(0, 1, 101)
    psi = spheroidal(nu)
    assert psi[0] == pytest.approx(1.0)
    assert np.all(np.diff(psi) <= 1e-12)
    assert psi[-1] < 0.01
    assert np.all(spheroidal([1.2, 3.0]) == 0)


def test_size_penalty_weights_follow_the_published_form():
    # Cornwell 2008: weight 1 - p s / s_max (p about 0.6, from memory).
    s = [0, 4, 8, 16]
    w = size_penalty_weights(s, 0.6)
    assert np.allclose(w, [1.0, 1 - 0.6 * 4 / 16, 1 - 0.6 * 8 / 16, 0.4])
    assert np.allclose(size_penalty_weights(s, 0.0), 1.0)
    with pytest.raises(ValueError, match="size_penalty"):
        size_penalty_weights(s, 1.0)


def test_scale_set_sorts_and_converts_angles():
    ss = ScaleSet([16, 0, 4])
    assert ss.pixels == (0.0, 4.0, 16.0) and ss.has_delta
    ang = ScaleSet([0, 10, 20] * u.arcsec, cell_arcsec=2.0)
    assert ang.pixels == (0.0, 5.0, 10.0)
    assert ang.arcsec == (0.0, 10.0, 20.0)
    assert ScaleSet([0, 1] * u.arcmin, cell_arcsec=3.0).pixels == (0.0, 20.0)


@pytest.mark.parametrize("bad, match", [([0, -4], "negative"), ([0, 4, 4], "duplicates"),
                                        ([], "empty"), ([0, 300], "larger than the image")])
def test_scale_set_refuses_bad_input_with_a_clear_message(bad, match):
    with pytest.raises(ValueError, match=match):
        ScaleSet(bad, image_shape=(256, 256))


def test_angles_need_a_cell_size():
    with pytest.raises(ValueError, match="cell_arcsec"):
        ScaleSet([0, 10] * u.arcsec)


def test_unknown_shape_lists_the_valid_ones():
    with pytest.raises(ValueError, match="paraboloid"):
        ScaleSet([0, 4], shape="box")


def test_the_kernel_profile_is_profile_and_shape_is_a_deprecated_alias():
    # ``shape`` means an array's shape everywhere else; the profile has its own name.
    s = ScaleSet([0, 4, 8], shape="gaussian")
    assert s.profile == "gaussian"
    with pytest.warns(DeprecationWarning, match="ScaleSet.profile"):
        assert s.shape == "gaussian"
    assert s.support_radii == (0, 4, 8)       # Gaussian kernels are cut at r = scale
