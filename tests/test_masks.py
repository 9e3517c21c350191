"""User masks (FITS, region text) and the automatic mask, on synthetic fields of known truth."""

import math
import warnings

import numpy as np
import pytest
from astropy import units as u
from astropy.io import fits
from astropy.wcs import WCS
from scipy import ndimage
from scipy.signal import fftconvolve

import skyscale.masks
from skyscale.masks import (REGION_SHAPES, EmissionMask, emission_mask, load_mask,
                            parse_regions, regions_to_mask)

N = 128
CELL_ARCSEC = 2.0
FWHM = 4.5                                # beam FWHM, pixels
SIGMA_B = FWHM / 2.354820045              # FWHM = 2 sqrt(2 ln 2) sigma (analytic)


def make_wcs(n=N):
    w = WCS(naxis=2)
    w.wcs.ctype = ["RA---SIN", "DEC--SIN"]
    w.wcs.crpix = [n // 2 + 1, n // 2 + 1]
    w.wcs.crval = [211.25, -41.5]          # invented position
    w.wcs.cdelt = [-CELL_ARCSEC / 3600, CELL_ARCSEC / 3600]
    w.wcs.cunit = ["deg", "deg"]
    w.wcs.radesys = "ICRS"
    return w


def beam_kernel():
    y, x = np.mgrid[-20:21, -20:21]
    return np.exp(-(x * x + y * y) / (2 * SIGMA_B ** 2))     # peak 1: Jy/pixel -> Jy/beam


def correlated_noise(rng, n):
    """Unit-rms Gaussian noise with the beam's correlation, like a dirty image's."""
    noise = fftconvolve(rng.standard_normal((n, n)), beam_kernel(), mode="same")
    return noise / noise.std()


def synthetic_field(disk_snr, blob_snr, point_snr=30.0, seed=0, n=256):
    """True sky (Jy/pixel), its beam-convolved image and image + unit noise (Jy/beam).

    A uniform disk (radius 20 px), an elongated Gaussian blob (sigma 12 x 5 px) and a
    point source; ``*_snr`` are peak brightnesses per beam in units of the noise.
    """
    yy, xx = np.mgrid[0:n, 0:n].astype(float)
    area = beam_kernel().sum()
    sky = np.where(np.hypot(xx - 160, yy - 100) <= 20, disk_snr / area, 0.0)
    pa = np.deg2rad(30)
    dx, dy = xx - 80, yy - 170
    a, b = -dx * np.sin(pa) + dy * np.cos(pa), dx * np.cos(pa) + dy * np.sin(pa)
    sky += blob_snr / area * np.exp(-0.5 * ((a / 12) ** 2 + (b / 5) ** 2))
    sky[60, 200] += point_snr
    # reference library: scipy.signal.fftconvolve
    seen = fftconvolve(sky, beam_kernel(), mode="same")
    return sky, seen, seen + correlated_noise(np.random.default_rng(seed), n)


# ------------------------------------------------------------------ regions in pixels
def test_pixel_circle_matches_the_formula():
    m = regions_to_mask("circle 40.3 70.6 9.5", (N, N))
    yy, xx = np.indices((N, N))
    # analytic: pixel centres within the radius
    np.testing.assert_array_equal(m, (xx - 40.3) ** 2 + (yy - 70.6) ** 2 <= 9.5 ** 2)
    # analytic: the counted unit squares lie in the annulus r +- sqrt(2)/2
    assert abs(m.sum() - np.pi * 9.5 ** 2) <= np.pi * (np.sqrt(2) * 9.5 + 0.5)


def test_pixel_box_is_inclusive_and_corner_order_free():
    expect = np.zeros((N, N), bool)
    expect[20:61, 10:51] = True                   # rows y 20..60, columns x 10..50
    for text in ("box 10 20 50 60", "box 50 60 10 20", "BOX 10px 60 50px 20"):
        np.testing.assert_array_equal(regions_to_mask(text, (N, N)), expect)


def test_shapes_apply_in_order_with_exclusions_and_comments():
    text = """# everything except a stripe, with a hole put back
    all
    -box 0 0 127 9 ; circle 64 5 2   # back in
    - circle 100 100 3
    """
    m = regions_to_mask(text, (N, N))
    assert m[50, 50] and not m[0, 0] and not m[100, 100]
    assert m[5, 64] and not m[5, 67]
    hole = regions_to_mask("circle 100 100 3", (N, N))
    band = regions_to_mask("box 0 0 127 9", (N, N)) & ~regions_to_mask("circle 64 5 2", (N, N))
    assert m.sum() == N * N - hole.sum() - band.sum()
    # same as a list of lines
    np.testing.assert_array_equal(m, regions_to_mask(text.splitlines(), (N, N)))


def test_region_file_path(tmp_path):
    path = tmp_path / "field.txt"
    path.write_text("circle 30 30 5\nbox 80 80 90 100\n")
    np.testing.assert_array_equal(regions_to_mask(path, (N, N)),
                                  regions_to_mask("circle 30 30 5; box 80 80 90 100", (N, N)))


def test_shapes_are_clipped_and_outside_shapes_warn():
    m = regions_to_mask("circle 0 0 4", (N, N))
    yy, xx = np.indices((N, N))
    np.testing.assert_array_equal(m, xx ** 2 + yy ** 2 <= 16)
    with pytest.warns(UserWarning) as record:
        regions_to_mask("circle 300 300 5", (N, N))
    messages = [str(r.message) for r in record]
    assert any("entry 1 'circle 300 300 5' selects no pixel" in m for m in messages)
    assert any("select no pixel at all" in m for m in messages)


# ------------------------------------------------------------------ regions on the sky
def test_sky_circle_round_trip_through_astropy_wcs():
    wcs = make_wcs()
    cx, cy, radius = 50.3, 70.6, 12.0 * u.arcsec
    # reference library: astropy.wcs (pixel -> sky) and SkyCoord.to_string
    centre = wcs.pixel_to_world(cx, cy)
    text = f"circle {centre.to_string('hmsdms', precision=5)} {radius.value}arcsec"
    m = regions_to_mask(text, (N, N), wcs=wcs)
    yy, xx = np.indices((N, N))
    # reference library: astropy.coordinates.SkyCoord.separation
    sep = wcs.pixel_to_world(xx.ravel(), yy.ravel()).separation(centre).reshape(N, N)
    np.testing.assert_array_equal(m, sep <= radius)
    # Near the reference point the SIN grid is nearly flat: the same circle in pixels
    # (12 arcsec / 2 arcsec per pixel = 6 px) differs at most in a few edge pixels.
    flat = regions_to_mask(f"circle {cx} {cy} 6", (N, N))
    assert np.count_nonzero(m ^ flat) <= 4
    assert m[70, 50]


def test_sky_box_round_trip_and_ra_runs_right_to_left():
    wcs = make_wcs()
    a = wcs.pixel_to_world(19.5, 29.5)
    b = wcs.pixel_to_world(60.5, 45.5)
    text = f"box {a.ra.deg:.10f}deg {a.dec.deg:.10f}deg {b.ra.deg:.10f}deg {b.dec.deg:.10f}deg"
    m = regions_to_mask(text, (N, N), wcs=fits.Header(wcs.to_header()))
    expect = np.zeros((N, N), bool)
    expect[30:46, 20:61] = True
    np.testing.assert_array_equal(m, expect)
    assert a.ra.deg > b.ra.deg                   # larger x is further west


def test_mixed_pixel_centre_and_angular_radius():
    wcs = make_wcs()
    c = wcs.pixel_to_world(40, 60)
    by_pixel = regions_to_mask("circle 40 60 15arcsec", (N, N), wcs=wcs)
    by_sky = regions_to_mask(f"circle {c.ra.deg}deg {c.dec.deg}deg 0.25arcmin", (N, N), wcs=wcs)
    np.testing.assert_array_equal(by_pixel, by_sky)
    sky_centre_px_radius = regions_to_mask(f"circle {c.ra.deg}deg {c.dec.deg}deg 7.5", (N, N),
                                           wcs=wcs)
    np.testing.assert_array_equal(sky_centre_px_radius, regions_to_mask("circle 40 60 7.5", (N, N)))


def test_sky_coordinates_need_a_wcs():
    with pytest.raises(ValueError, match=r"wcs is None.*pass the image's WCS"):
        regions_to_mask("circle 14h05m00s -41d30m00s 10arcsec", (N, N))
    with pytest.raises(ValueError, match="no celestial axes"):
        w = WCS(naxis=2)
        w.wcs.ctype = ["LINEAR", "LINEAR"]
        regions_to_mask("circle 10 10 10arcsec", (N, N), wcs=w)


# ------------------------------------------------------------------ degrees without a unit
def field_wcs(crval, cell_arcsec=CELL_ARCSEC, n=N):
    """A SIN grid whose sky position (in degrees) is also a position inside the image."""
    w = make_wcs(n)
    w.wcs.crval = list(crval)                 # invented position
    w.wcs.cdelt = [-cell_arcsec / 3600, cell_arcsec / 3600]
    return w


def test_plain_numbers_equal_to_the_images_sky_position_are_refused():
    wcs = field_wcs([100.4, 60.2])            # 128 px of 2 arcsec: 0.07 x 0.14 deg of sky
    # reference library: astropy.wcs gives the sky position of pixel (50.3, 70.6)
    c = wcs.pixel_to_world(50.3, 70.6)
    ra, dec = f"{c.ra.deg:.6f}", f"{c.dec.deg:.6f}"
    assert 0 < float(ra) < N and 0 < float(dec) < N          # also a pixel of the image
    with pytest.raises(ValueError, match="looks like degrees") as err:
        regions_to_mask(f"circle {ra} {dec} 5", (N, N), wcs=wcs)
    msg = str(err.value)
    assert "entry 1" in msg and "0-based" in msg
    assert f"'{ra}deg {dec}deg'" in msg and f"'{ra}px {dec}px'" in msg
    assert "x 50.3, y 70.6" in msg                            # where it lies in degrees
    # as the message says: with the unit it is the sky position, with px the pixels
    sky = regions_to_mask(f"circle {ra}deg {dec}deg 5", (N, N), wcs=wcs)
    assert sky[71, 50] and sky.sum() == regions_to_mask("circle 50.3 70.6 5", (N, N)).sum()
    yy, xx = np.indices((N, N))
    np.testing.assert_array_equal(          # analytic: pixel centres within the radius
        regions_to_mask(f"circle {ra}px {dec}px 5", (N, N), wcs=wcs),
        (xx - float(ra)) ** 2 + (yy - float(dec)) ** 2 <= 25)
    # the hms/dms spelling offered in the message is the same sky position
    alt = msg.split(" or '")[1].split("'")[0]
    assert np.count_nonzero(regions_to_mask(f"circle {alt} 5", (N, N), wcs=wcs) ^ sky) <= 4
    # a box whose corners are the image's sky positions, in plain degrees
    a, b = wcs.pixel_to_world(20.2, 30.7), wcs.pixel_to_world(60.6, 45.1)
    with pytest.raises(ValueError, match="the corners .* have no unit"):
        regions_to_mask(f"box {a.ra.deg:.4f} {a.dec.deg:.4f} {b.ra.deg:.4f} {b.dec.deg:.4f}",
                        (N, N), wcs=wcs)


def test_degrees_that_select_no_pixel_are_refused_not_only_warned():
    wcs = make_wcs()                          # RA 211.25, Dec -41.5: as pixels off the image
    c = wcs.pixel_to_world(40, 60)
    with pytest.raises(ValueError, match="selects no pixel of the image; for the sky write"):
        regions_to_mask(f"circle {c.ra.deg:.5f} {c.dec.deg:.5f} 3", (N, N), wcs=wcs)
    with pytest.warns(UserWarning, match="selects no pixel"):   # no WCS: cannot tell
        regions_to_mask(f"circle {c.ra.deg:.5f} {c.dec.deg:.5f} 3", (N, N))


def test_plausible_pixel_positions_are_never_refused():
    yy, xx = np.indices((N, N))
    # whole numbers are pixels even where they equal the sky position exactly
    wcs = field_wcs([100.0, 60.0])
    np.testing.assert_array_equal(regions_to_mask("circle 100 60 5", (N, N), wcs=wcs),
                                  (xx - 100) ** 2 + (yy - 60) ** 2 <= 25)
    # on a field of over a degree (128 px of 1 arcmin) a fractional match may be pixels
    wide = field_wcs([100.4, 60.2], cell_arcsec=60.0)
    c = wide.pixel_to_world(50.3, 70.6)
    text = f"circle {c.ra.deg:.4f} {c.dec.deg:.4f} 5"
    assert regions_to_mask(text, (N, N), wcs=wide).any()
    # positions anywhere on the image that are not its own sky position, with or without
    # fractions, pass on the image whose sky position is inside its pixel range
    wcs = field_wcs([100.4, 60.2])
    rng = np.random.default_rng(5)
    for x, y in np.round(rng.uniform(0, N - 1, (40, 2)), 2):
        np.testing.assert_array_equal(regions_to_mask(f"circle {x} {y} 4", (N, N), wcs=wcs),
                                      (xx - x) ** 2 + (yy - y) ** 2 <= 16)
    for text in ("box 99 59 101 61", "box 10.5 20.5 50.5 60.5", "all; -circle 100.5 60.5 2"):
        assert regions_to_mask(text, (N, N), wcs=wcs).any()


@pytest.mark.parametrize("text, pattern", [
    ("circel 1 2 3", r"entry 1 'circel 1 2 3': unknown shape 'circel'; valid shapes are"),
    ("circle 1 2 3; box 1 2 3", r"entry 2 'box 1 2 3': box takes 4 values, got 3"),
    ("circle 1 2 three", r"cannot read 'three'"),
    ("circle 14h05m00s 12 3", r"mixes a pixel value with a sky coordinate"),
    ("circle 10 10 -3", r"radius -3 is negative"),
])
def test_region_errors_name_the_entry_and_the_fix(text, pattern):
    with pytest.raises(ValueError, match=pattern) as err:
        parse_regions(text)
    assert "e.g. 'circle 120 130 15'" in str(err.value)
    if "unknown shape" in str(err.value):
        assert all(repr(name) in str(err.value) for name in REGION_SHAPES)


def test_region_bad_arguments():
    with pytest.raises(TypeError, match="non-text items"):
        regions_to_mask(["circle 1 1 1", 5], (N, N))
    with pytest.raises(ValueError, match=r"shape is .*two positive integers"):
        regions_to_mask("all", (N, 0))


# ------------------------------------------------------------------ FITS masks
def test_load_mask_from_fits_and_arrays(tmp_path):
    rng = np.random.default_rng(3)
    data = (rng.uniform(size=(N, N)) > 0.7).astype(np.float32) * 2.5
    path = tmp_path / "mask.fits"
    fits.PrimaryHDU(data[None, None]).writeto(path)  # reference library: astropy.io.fits
    m = load_mask(path, (N, N))
    assert m.dtype == bool
    np.testing.assert_array_equal(m, data != 0)
    np.testing.assert_array_equal(load_mask(str(path), (N, N)), m)
    np.testing.assert_array_equal(load_mask(data != 0, (N, N)), m)


def test_load_mask_errors_and_warnings(tmp_path):
    path = tmp_path / "small.fits"
    fits.PrimaryHDU(np.ones((64, 32), np.int16)).writeto(path)
    with pytest.raises(ValueError, match=r"shape \(64, 32\) but the image is \(128, 128\); "
                                         r"make the mask on the image's grid"):
        load_mask(path, (N, N))
    with pytest.raises(FileNotFoundError, match="does not exist"):
        load_mask(tmp_path / "absent.fits", (N, N))
    text = tmp_path / "notes.fits"
    text.write_text("circle 1 2 3\n")
    with pytest.raises(ValueError, match="could not be read as FITS"):
        load_mask(text, (N, N))
    data = np.ones((N, N))
    data[0, :4] = np.nan
    with pytest.warns(UserWarning, match="4 NaN/inf pixels"):
        m = load_mask(data, (N, N))
    assert not m[0, :4].any() and m[1:].all()
    with pytest.warns(UserWarning, match="selects no pixel"):
        load_mask(np.zeros((N, N)), (N, N))


# ------------------------------------------------------------------ automatic mask
@pytest.mark.parametrize("disk_snr, blob_snr", [(10, 15), (40, 60)])
def test_emission_mask_captures_the_flux_without_bloating(disk_snr, blob_snr):
    sky, seen, image = synthetic_field(disk_snr, blob_snr)
    m = emission_mask(image, [0, 4, 8, 16, 32], FWHM)
    # Truth we built: the flux is the true sky's; the true area is where the
    # beam-convolved true sky exceeds 1% of its peak.
    true_area = np.count_nonzero(seen > 0.01 * seen.max())
    assert sky[m].sum() >= 0.95 * sky.sum()
    assert m.sum() <= 3 * true_area


@pytest.mark.parametrize("seed", [11, 12])
def test_emission_mask_stays_empty_on_noise(seed):
    rng = np.random.default_rng(seed)
    for noise in (rng.standard_normal((256, 256)), correlated_noise(rng, 256)):
        assert emission_mask(noise, [0, 4, 8, 16, 32], FWHM).mean() < 0.005
    # ... while a threshold far too low does fill with noise: the threshold is real
    # (without the guard, which would raise it to the deepest negative noise value).
    with pytest.warns(UserWarning, match="below 3"):
        assert emission_mask(noise, [0, 4, 8, 16, 32], FWHM, sigma=1.0,
                             guard_negative=False).mean() > 0.05


def test_large_scales_find_faint_broad_emission():
    sky, seen, image = synthetic_field(3.0, 3.0, point_snr=0.0, seed=4)
    delta_only = emission_mask(image, [0], FWHM)
    multi = emission_mask(image, [0, 8, 16, 32], FWHM)
    assert sky[delta_only].sum() < 0.3 * sky.sum()
    assert sky[multi].sum() > 0.7 * sky.sum()


def test_noise_is_measured_per_smoothed_scale():
    am = EmissionMask([0, 8, 16, 32], FWHM)
    am.update(correlated_noise(np.random.default_rng(8), 256))
    assert am.noise[0] == pytest.approx(1.0, rel=0.05)
    for s in (8, 16, 32):
        sigma_k = 0.5 * s / 2.354820045           # smooth_fraction 0.5 of the diameter
        # Gaussians add covariances (analytic): beam-correlated unit noise smoothed by
        # a unit-sum Gaussian has rms sigma_b / sqrt(sigma_b^2 + sigma_k^2).
        expect = SIGMA_B / np.sqrt(SIGMA_B ** 2 + sigma_k ** 2)
        assert am.noise[s] == pytest.approx(expect, rel=0.12)


def test_small_islands_dropped_and_growth_is_a_disk_dilation():
    rng = np.random.default_rng(5)
    image = 0.1 * rng.standard_normal((N, N))
    image[20, 20] = 50.0                              # one hot pixel: not beam-shaped
    yy, xx = np.mgrid[:N, :N]
    blob = ((yy - 90) ** 2 + (xx - 90) ** 2 <= 8 ** 2).astype(float)   # a disk 16 px across
    image += 3 * fftconvolve(blob, beam_kernel(), "same")
    bare = emission_mask(image, [0], FWHM, grow_beams=0.0)
    assert not bare[20, 20] and bare[90, 90]
    assert emission_mask(image, [0], FWHM, grow_beams=0.0, min_island_beams=0.0)[20, 20]
    grown = emission_mask(image, [0], FWHM, grow_beams=1.0)
    r = int(FWHM)
    yy, xx = np.mgrid[-r:r + 1, -r:r + 1]
    # reference library: scipy.ndimage.binary_dilation
    disk = xx ** 2 + yy ** 2 <= FWHM ** 2
    np.testing.assert_array_equal(grown, ndimage.binary_dilation(bare, disk))


def test_an_unresolved_source_is_masked_by_its_core_not_grown():
    rng = np.random.default_rng(5)
    image = 0.1 * rng.standard_normal((N, N))
    image += 30 * fftconvolve(np.pad([[1.0]], ((90, 37), (90, 37))), beam_kernel(), "same")
    grown = emission_mask(image, [0], FWHM, grow_beams=1.0)
    # its core: the pixels above a quarter of its peak, a disk of radius
    # FWHM / 2 * sqrt(log2(4)) = 0.71 FWHM for a Gaussian beam (analytic)
    assert grown[90, 90]
    assert grown.sum() <= math.pi * (0.71 * FWHM + 1) ** 2
    assert not grown[90, 90 + int(math.ceil(0.71 * FWHM)) + 1]


def test_model_pixels_and_their_islands_are_never_removed():
    _, _, image = synthetic_field(20, 30, n=256)
    am = EmissionMask([0, 8, 16], FWHM)
    first = am.update(image)
    assert first.any()
    # islands of the first mask (scipy.ndimage.label, 8-connected)
    labels, n = ndimage.label(first, structure=np.ones((3, 3)))
    assert n >= 2
    noise = np.random.default_rng(6).standard_normal(image.shape)
    model = np.zeros(image.shape)
    model[5, 250] = 0.1
    y, x = np.argwhere(labels == 1)[0]
    model[y, x] = 0.1                                 # model flux in the first island
    second = am.update(noise, model=model)            # the last mask's islands that
    assert second[labels == 1].all() and second[5, 250]   # hold model flux stay,
    assert not second[labels == 2].any()              # the others go when not found again
    explicit = emission_mask(noise, [0, 8, 16], FWHM, previous=first)
    np.testing.assert_array_equal(explicit, first)
    am.reset()
    assert not am.update(noise).any()


def test_negative_emission_only_on_request():
    image = -30 * fftconvolve(np.pad([[1.0]], ((64, 63), (64, 63))), beam_kernel(), "same")
    image += 0.5 * np.random.default_rng(7).standard_normal(image.shape)
    assert not emission_mask(image, [0, 8], FWHM).any()
    assert emission_mask(image, [0, 8], FWHM, include_negative=True)[64, 64]


def test_one_shot_equals_the_class_and_quantities_are_accepted():
    _, _, image = synthetic_field(10, 15)
    a = emission_mask(image, [0, 8, 16], FWHM, sigma=4.0)
    b = EmissionMask([16, 0, 8], FWHM, sigma=4.0).update(image)
    np.testing.assert_array_equal(a, b)
    am = EmissionMask([0, 16, 32] * u.arcsec, 9.0 * u.arcsec, cell_arcsec=CELL_ARCSEC)
    assert am.scales == (0.0, 8.0, 16.0) and am.beam_fwhm_px == pytest.approx(4.5)
    from skyscale.core.beam import Beam
    assert EmissionMask([0], Beam(5.0, 4.0, 10.0)).beam_fwhm_px == pytest.approx(np.sqrt(20.0))
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert not emission_mask(np.zeros((N, N)), [0, 4], FWHM).any()


def test_emission_mask_errors_are_clear():
    with pytest.raises(ValueError, match=r"scales is \[\]; give at least one"):
        EmissionMask([], FWHM)
    with pytest.raises(ValueError, match=r"scales is \[0.0, -4.0\]"):
        EmissionMask([0, -4], FWHM)
    with pytest.raises(ValueError, match=r"beam_fwhm_px is 0.0; it must be a finite number > 0"):
        EmissionMask([0], 0)
    with pytest.raises(ValueError, match=r"sigma is -1.0"):
        EmissionMask([0], FWHM, sigma=-1)
    with pytest.raises(ValueError, match="cell_arcsec is None"):
        EmissionMask([0], 9 * u.arcsec)
    am = EmissionMask([0, 4], FWHM)
    with pytest.raises(ValueError, match=r"model has shape \(4, 4\) but residual has \(128, 128\)"):
        am.update(np.zeros((N, N)), model=np.zeros((4, 4)))
    am.update(np.zeros((N, N)))
    with pytest.raises(ValueError, match=r"call reset\(\) before masking a new image"):
        am.update(np.zeros((64, 64)))
    with pytest.raises(ValueError, match="non-finite pixels"):
        am.update(np.full((N, N), np.nan))


def test_the_masks_and_advisor_packages_offer_their_modules_names():
    import skyscale
    from skyscale import advisor, masks
    from skyscale.advisor import extent
    from skyscale.advisor import rules as scale_rules
    from skyscale.masks import emission as mask_emission
    from skyscale.masks import loading as mask_file
    from skyscale.masks import regions
    assert masks.EmissionMask is mask_emission.EmissionMask is skyscale.EmissionMask
    assert masks.emission_mask is mask_emission.emission_mask
    assert masks.load_mask is mask_file.load_mask
    assert masks.regions_to_mask is regions.regions_to_mask
    assert masks.parse_regions is regions.parse_regions
    assert masks.REGION_SHAPES is regions.REGION_SHAPES
    assert advisor.measure_emission_extent is extent.measure_emission_extent
    assert advisor.check_scales is scale_rules.check_scales is skyscale.check_scales
    assert advisor.STRUCTURE_FRACTION == scale_rules.STRUCTURE_FRACTION == 2 / 3
    for module in (masks, advisor):
        assert all(hasattr(module, name) for name in module.__all__)
