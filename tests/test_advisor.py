"""Tests of skyscale.advisor: emission extent, scale suggestions and scale checks.

Every field is synthetic and built here: a Gaussian PSF of known FWHM, disks of known
diameter, Gaussian blobs of known FWHM and flux, point sources and white noise.
"""

import json
import math
import warnings

import numpy as np
import pytest
from astropy import units as u
from scipy.signal import fftconvolve
from scipy.special import erfcinv

from skyscale.advisor import (DIAMETER_MEASURES, ScaleChoiceWarning, ScaleSuggestion,
                              check_scales, measure_emission_extent, suggest_scales)
from skyscale.beam import Beam

N = 160                     # image side, pixels
BEAM = 4.0                  # PSF FWHM, pixels (4 pixels across the beam: common practice)
CELL = 2.0                  # arcsec per pixel
NOISE = 1e-3                # Jy/beam per pixel, white
#: Gaussian FWHM = 2 sqrt(2 ln 2) sigma (analytic).
FWHM_PER_SIGMA = 2.0 * math.sqrt(2.0 * math.log(2.0))
#: Arcseconds in a radian, 180 * 3600 / pi (definition of the arcsecond).
ARCSEC_PER_RAD = 180.0 * 3600.0 / math.pi


def gaussian_psf(fwhm, size=N + 1):
    """Round Gaussian PSF, peak 1 at (size // 2, size // 2).  Odd size, so that
    fftconvolve(mode='same') keeps sources where they are."""
    r = np.arange(size) - size // 2
    s = fwhm / FWHM_PER_SIGMA
    return np.exp(-(r[:, None] ** 2 + r[None, :] ** 2) / (2.0 * s * s))


YY, XX = np.mgrid[:N, :N]


def disk(diameter, per_pixel, centre=(80, 80)):
    return per_pixel * (((YY - centre[0]) ** 2 + (XX - centre[1]) ** 2) < (diameter / 2) ** 2)


def blob(fwhm, flux, centre=(80, 80)):
    """Gaussian of FWHM ``fwhm`` pixels holding ``flux`` Jy (Jy/pixel image)."""
    s = fwhm / FWHM_PER_SIGMA
    g = np.exp(-((YY - centre[0]) ** 2 + (XX - centre[1]) ** 2) / (2.0 * s * s))
    return flux * g / g.sum()


def observe(sky, seed, psf_fwhm=BEAM, noise=NOISE):
    """Dirty image in Jy/beam: sky (Jy/pixel) convolved with the peak-1 PSF, plus noise."""
    rng = np.random.default_rng(seed)
    return fftconvolve(sky, gaussian_psf(psf_fwhm), mode="same") + rng.normal(0, noise, sky.shape)


PSF = gaussian_psf(BEAM)


@pytest.fixture(scope="module")
def disk40():
    """A disk 40 pixels across, about 180 sigma bright per beam."""
    return observe(disk(40, 0.01), seed=1)


@pytest.fixture(scope="module")
def disk40_suggestion(disk40):
    return suggest_scales(disk40, PSF, cell_arcsec=CELL)


# --------------------------------------------------------------------- emission extent

def test_noise_of_smoothed_white_noise():
    # White noise of sigma n smoothed by a unit-sum Gaussian of width s (pixels) has
    # sigma n / (2 sqrt(pi) s): the kernel's squares sum to 1 / (4 pi s^2) (analytic).
    image = np.random.default_rng(2).normal(0.0, 1.0, (N, N))
    ext = measure_emission_extent(image, BEAM)
    expected = 1.0 / (2.0 * math.sqrt(math.pi) * (BEAM / FWHM_PER_SIGMA))
    assert ext.noise == pytest.approx(expected, rel=0.05)
    assert ext.threshold == pytest.approx(5.0 * ext.noise)
    assert ext.n_islands == 0 and ext.largest_px == 0.0


def test_gaussian_blob_island_matches_analytic_contour():
    # Gaussian widths add in quadrature (REFERENCES: covariances add, analytic): the
    # smoothed image of a blob of FWHM f and flux S is a Gaussian of FWHM
    # F = sqrt(f^2 + b^2 + s^2) and peak P = S b^2 / F^2; its contour at T is a circle
    # of diameter F sqrt(log2(P / T)) and area pi/4 of its square (analytic).
    f, flux = 10.0, 2.0
    ext = measure_emission_extent(observe(blob(f, flux), seed=3), BEAM)
    total = math.sqrt(f * f + 2.0 * BEAM * BEAM)
    peak = flux * BEAM * BEAM / total ** 2
    stretch = math.sqrt(math.log2(peak / ext.threshold))
    assert ext.n_islands == 1
    # An island's diameter counts whole pixels (centre to centre plus one), which reads
    # about a pixel wider than the contour, and the largest distance across a noisy
    # edge reads high: allow 1 px below and 3 px above.
    assert -1.0 <= ext.largest_px - total * stretch <= 3.0
    assert ext.areas[0] == pytest.approx(math.pi / 4 * (total * stretch) ** 2, rel=0.05)
    # Removing an unresolved source's island in quadrature leaves the blob's own
    # diameter at T / P of its peak, f sqrt(log2(P / T)).
    assert -1.5 <= ext.intrinsic_px - f * stretch <= 3.0


def test_disk_island_reaches_the_blurred_edge(disk40):
    # A straight edge blurred by a Gaussian of sigma e falls as P/2 erfc(d / (sqrt(2) e))
    # (analytic); it drops to T at d = sqrt(2) e erfcinv(2 T / P).  The disk (40 px) is
    # ten beams across, so its edge is nearly straight.  e combines the PSF and the
    # smoothing (both FWHM 4 px) in quadrature; P = 0.01 Jy/px times the beam area
    # pi b^2 / (4 ln 2) (REFERENCES, analytic).
    ext = measure_emission_extent(disk40, BEAM)
    e = math.sqrt(2.0) * BEAM / FWHM_PER_SIGMA
    plateau = 0.01 * math.pi * BEAM ** 2 / (4.0 * math.log(2.0))
    d = math.sqrt(2.0) * e * erfcinv(2.0 * ext.threshold / plateau)
    assert ext.n_islands == 1
    assert -1.0 <= ext.largest_px - (40 + 2 * d) <= 3.0       # pixel grid, as above
    assert 40 <= ext.intrinsic_px <= ext.largest_px


def test_rectangle_feret_and_equal_area_diameters():
    # No smoothing, so the island is the rectangle itself (20 x 60 px, 50 sigma).
    # Largest distance across: its diagonal, hypot(20, 60) (Pythagoras); the circle of
    # the same area has diameter 2 sqrt(A / pi) (analytic).
    image = np.random.default_rng(4).normal(0.0, 1.0, (N, N))
    image[50:70, 50:110] += 50.0
    feret = measure_emission_extent(image, BEAM, smoothing_px=0)
    area = measure_emission_extent(image, BEAM, smoothing_px=0, diameter="equal_area")
    assert feret.areas == area.areas and abs(feret.areas[0] - 1200) <= 2
    assert abs(feret.largest_px - math.hypot(20, 60)) <= 1.0
    assert area.largest_px == pytest.approx(2.0 * math.sqrt(area.areas[0] / math.pi))
    assert set(DIAMETER_MEASURES) == {"feret", "equal_area"}


def test_point_sources_are_unresolved_islands():
    sky = np.zeros((N, N))
    for y, x in ((30, 30), (90, 40), (120, 125)):
        sky[y, x] = 0.2
    ext = measure_emission_extent(observe(sky, seed=5), BEAM)
    assert ext.n_islands == 3
    assert len(ext.areas) == 3 and list(ext.areas) == sorted(ext.areas, reverse=True)
    # Each island is the smoothed PSF, FWHM F = hypot(b, s), peak P = S b^2 / F^2,
    # cut at T: a circle F sqrt(log2(P / T)) across (Gaussian widths add in
    # quadrature, analytic); pixel grid allowed for as above.
    spread = math.hypot(BEAM, BEAM)
    across = spread * math.sqrt(math.log2(0.2 * BEAM ** 2 / spread ** 2 / ext.threshold))
    assert all(-1.0 <= d - across <= 3.0 for d in ext.diameters)
    # An unresolved source has no size of its own.  A grid error of one pixel diagonal
    # on the island's diameter, removed in quadrature, leaves sqrt((D + 1.41)^2 - D^2).
    assert ext.intrinsic_px <= math.sqrt((across + math.sqrt(2.0)) ** 2 - across ** 2)


# --------------------------------------------------------------------- suggestions

def test_suggestion_follows_the_rules(disk40_suggestion):
    s = disk40_suggestion
    assert s.pixels[0] == 0
    assert all(isinstance(p, int) for p in s.pixels)
    assert list(s.pixels) == sorted(set(s.pixels))
    assert 3 <= len(s.pixels) <= 6
    # The fitted beam of a Gaussian PSF is its FWHM (REFERENCES: astropy-style
    # Gaussian fit; analytic for a Gaussian PSF); the first finite scale is it, rounded.
    assert s.beam_px == pytest.approx(BEAM, abs=0.05)
    assert s.pixels[1] == round(BEAM)
    # Largest scale at or below the largest structure: the disk is 40 px across.
    assert max(s.pixels) <= 40
    assert max(s.pixels) <= 2 / 3 * s.largest_structure_px
    assert max(s.pixels) <= N / 4
    ratios = [b / a for a, b in zip(s.pixels[1:-1], s.pixels[2:])]
    assert all(r == pytest.approx(2.0) for r in ratios)     # doubling (common practice)
    assert s.arcsec == tuple(p * CELL for p in s.pixels)
    assert s.recoverable_px is None


def test_reasons_state_the_numbers(disk40_suggestion):
    s = disk40_suggestion
    text = " | ".join(s.reasons)
    assert f"beam FWHM {s.beam_px:.1f} px ({s.beam_px * CELL:.3g} arcsec)" in text
    assert f"first finite scale {s.pixels[1]} px" in text
    assert f"{s.extent.largest_px:.1f} px across" in text
    assert f"{2 / 3 * s.largest_structure_px:.1f} px" in text
    nxt = 2 * max(s.pixels)
    assert f"scale {nxt} px dropped" in text            # the next doubling, and why
    assert f"{N / 4:.0f} px" in text


def test_max_count_is_respected(disk40):
    s = suggest_scales(disk40, PSF, max_count=3, min_count=2)
    assert s.pixels == (0, 4, 8)
    assert any("max_count = 3" in r for r in s.reasons)
    assert suggest_scales(disk40, PSF, max_count=2, min_count=2).pixels == (0, 4)
    with pytest.warns(ScaleChoiceWarning, match="max_count is 1"):
        assert suggest_scales(disk40, PSF, max_count=1, min_count=1).pixels == (0,)


def test_shortest_baseline_limits_the_scales(disk40):
    # Largest recoverable angle about 0.6 / B_min radians (common practice, from memory).
    b_min = 1500.0
    expected = 0.6 / b_min * ARCSEC_PER_RAD / CELL           # 41.3 px
    s = suggest_scales(disk40, PSF, cell_arcsec=CELL, shortest_baseline=b_min)
    assert s.recoverable_px == pytest.approx(expected, rel=1e-9)
    assert max(s.pixels) < 0.5 * expected
    free = suggest_scales(disk40, PSF, cell_arcsec=CELL)
    assert max(free.pixels) >= 0.5 * expected               # so the limit really binds
    assert any(f"{expected:.0f} px" in r and "1500" in r for r in s.reasons)
    assert any(f"scale {2 * max(s.pixels)} px dropped: above half the largest "
               "recoverable" in r for r in s.reasons)


def test_largest_size_as_quantity_or_arcsec(disk40):
    # 30 arcsec at 2 arcsec/pixel is 15 px; 2/3 of it is 10 px.
    a = suggest_scales(disk40, PSF, cell_arcsec=CELL, largest_size=30.0)
    b = suggest_scales(disk40, PSF, cell_arcsec=CELL * u.arcsec, largest_size=0.5 * u.arcmin)
    assert a.pixels == b.pixels == (0, 4, 8)
    assert a.largest_structure_px == pytest.approx(15.0)
    assert a.extent is None
    assert any("15.0 px" in r for r in a.reasons)
    # 80 arcsec is 40 px: 32 px fits inside it but not inside 2/3 of it (26.7 px).
    c = suggest_scales(disk40, PSF, cell_arcsec=CELL, largest_size=80.0)
    assert c.pixels == (0, 4, 8, 16)
    assert "scale 32 px dropped: above 2/3 of the largest structure (26.7 px)" in c.reasons


def test_compact_emission_gives_delta_and_beam_and_says_why():
    sky = np.zeros((N, N))
    sky[40, 40] = sky[100, 120] = 0.2
    s = suggest_scales(observe(sky, seed=6), PSF)
    assert s.pixels == (0, 4)
    assert any("compact emission" in r and "min_count = 3" in r and "8 px" in r
               for r in s.reasons)


def test_third_scale_added_when_within_the_structure():
    # A blob of FWHM 4 px (as wide as the beam): 2/3 of its extent keeps only 0 and
    # 4 px, but 8 px still fits inside it, so a third scale is added for min_count.
    s = suggest_scales(observe(blob(4.0, 0.08), seed=7), PSF)
    assert 2 / 3 * s.largest_structure_px < 8 <= s.largest_structure_px
    assert s.pixels == (0, 4, 8)
    assert any("scale 8 px added to reach min_count = 3" in r for r in s.reasons)


def test_beam_instead_of_psf(disk40):
    assert suggest_scales(disk40, beam=Beam(6.0, 6.0, 0.0)).pixels[1] == 6
    s = suggest_scales(disk40, beam=Beam(6.0, 4.0, 30.0))
    assert s.beam_px == pytest.approx(math.sqrt(24.0))      # geometric mean
    assert s.pixels[1] == round(math.sqrt(24.0))


def test_no_emission_gives_min_count_scales():
    s = suggest_scales(np.random.default_rng(8).normal(0, NOISE, (N, N)), PSF, min_count=4)
    assert s.largest_structure_px is None and s.extent.n_islands == 0
    assert s.pixels == (0, 4, 8, 16)
    assert any("unknown" in r for r in s.reasons)


def test_float32_input_and_json_report(disk40, disk40_suggestion):
    s32 = suggest_scales(disk40.astype(np.float32), PSF.astype(np.float32), cell_arcsec=CELL)
    assert s32.pixels == disk40_suggestion.pixels
    d = json.loads(json.dumps(disk40_suggestion.as_dict()))
    assert d["pixels"] == list(disk40_suggestion.pixels)
    assert d["extent"]["n_islands"] == 1
    assert d["beam"]["major"] == pytest.approx(BEAM, abs=0.05)


# ------------------------------------------------------------------------ checks

def test_check_is_quiet_for_the_suggestion_and_a_good_set(disk40, disk40_suggestion):
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert check_scales(disk40_suggestion.pixels, suggestion=disk40_suggestion) == []
        assert check_scales([0, 4, 8, 16], disk40, PSF, cell_arcsec=CELL,
                            shortest_baseline=500.0, max_affordable_scales=4) == []


FOUR = Beam(BEAM, BEAM, 0.0)


@pytest.mark.parametrize("scales, kwargs, match", [
    ([4, 8, 16], {}, r"no delta scale \(0 px\)"),
    ([0, 4, 8, 24], {"cell_arcsec": CELL, "largest_size": 40.0},
     r"scale 24 px is above the largest structure \(20.0 px\)"),
    ([0, 4, 8, 24], {"cell_arcsec": CELL, "shortest_baseline": 1500.0},
     r"scale 24 px is near the largest recoverable scale \(41 px"),
    ([0, 4, 8, 48], {"cell_arcsec": CELL, "shortest_baseline": 3000.0},
     r"scale 48 px is above the largest recoverable scale \(21 px"),
    ([0, 4, 5, 10], {}, r"scales 4 and 5 px are closer than a factor 1.5 \(ratio 1.25\)"),
    ([0, 4, 4, 8], {}, r"scale 4 px is given 2 times"),
    ([0, 1, 4, 8], {}, r"scale 1 px is below half the beam FWHM \(2.0 px of 4.0 px\)"),
    ([0, 4, 8, 16], {"max_affordable_scales": 3}, r"4 scales, but the planned run can afford 3"),
])
def test_check_warns_for_each_rule(scales, kwargs, match):
    with pytest.warns(ScaleChoiceWarning, match=match) as record:
        problems = check_scales(scales, beam=FOUR, **kwargs)
    # 0.6 / B_min radians (common practice, from memory): 41.25 px for 1500
    # wavelengths, 20.6 px for 3000, at 2 arcsec per pixel.
    assert len(problems) == 1 and len(record) == 1


def test_check_measures_the_structure_and_image_size():
    # A 20 px disk: its measured structure is below 32 px, the image limit 40 px.
    dirty = observe(disk(20, 0.01), seed=9)
    with pytest.warns(ScaleChoiceWarning, match="scale 32 px is above the largest structure"):
        problems = check_scales([0, 4, 8, 16, 32], dirty, PSF)
    assert len(problems) == 1
    with pytest.warns(ScaleChoiceWarning, match=r"above a quarter of the image's smaller "
                                                r"side \(40 px\)") as record:
        check_scales([0, 4, 8, 16, 48], dirty, PSF, cell_arcsec=CELL, largest_size=400.0)
    assert len(record) == 1


def test_check_accepts_angles():
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert check_scales([0, 8, 16] * u.arcsec, beam=FOUR, cell_arcsec=CELL) == []
    with pytest.warns(ScaleChoiceWarning, match="scale 1 px is below half the beam"):
        check_scales([0, 2, 8] * u.arcsec, beam=FOUR, cell_arcsec=CELL)


# ------------------------------------------------------------------------ errors

@pytest.mark.parametrize("call, match", [
    (lambda d: suggest_scales(d, PSF, cell_arcsec=-1.0), r"cell_arcsec is -1.0"),
    (lambda d: suggest_scales(d, PSF, cell_arcsec=CELL, largest_size=5 * u.m),
     r"largest_size is .*not an angle"),
    (lambda d: suggest_scales(d, PSF, largest_size=30.0), r"largest_size is 30.0 but cell_arcsec"),
    (lambda d: suggest_scales(d, PSF, cell_arcsec=CELL, shortest_baseline=0.0),
     r"shortest_baseline is 0.0"),
    (lambda d: suggest_scales(d, PSF, shortest_baseline=100.0),
     r"shortest_baseline is 100.0 but cell_arcsec"),
    (lambda d: suggest_scales(d, PSF, min_count=4, max_count=3), r"min_count is 4 but max_count is 3"),
    (lambda d: suggest_scales(d, PSF, max_count=0), r"max_count is 0"),
    (lambda d: suggest_scales(d), r"psf is None and no beam"),
    (lambda d: suggest_scales(d, beam=(4, 4)), r"beam is \(4, 4\)"),
    (lambda d: suggest_scales(d[0], PSF), r"dirty has shape"),
    (lambda d: measure_emission_extent(d, BEAM, sigma=0), r"sigma is 0"),
    (lambda d: measure_emission_extent(d, BEAM, diameter="box"), r"diameter is 'box'"),
    (lambda d: measure_emission_extent(d, -2.0), r"beam_fwhm_px is -2.0"),
    (lambda d: check_scales([0, -4]), r"scales_px is \[0, -4\]"),
    (lambda d: check_scales([0, 4], d), r"dirty was given but neither psf"),
    (lambda d: check_scales([0, 4] * u.arcsec), r"cell_arcsec is None"),
    (lambda d: check_scales([0, 4], max_affordable_scales=0), r"max_affordable_scales is 0"),
])
def test_bad_input_gets_one_clear_error(call, match):
    dirty = np.zeros((32, 32))
    with pytest.raises(ValueError, match=match):
        call(dirty)


def test_suggestion_type():
    s = suggest_scales(np.random.default_rng(10).normal(0, 1, (64, 64)), beam=FOUR)
    assert isinstance(s, ScaleSuggestion)
    assert s.arcsec is None
    assert s.image_limit_px == 16.0


def test_questionable_limits_warn_and_are_explained(disk40):
    # 4 arcsec at 2 arcsec/pixel is 2 px, half the beam: unresolved.
    with pytest.warns(ScaleChoiceWarning, match="largest_size is 4 arcsec, smaller than "
                                                "the beam"):
        s = suggest_scales(disk40, PSF, cell_arcsec=CELL, largest_size=4.0)
    assert s.pixels == (0, 4)
    assert any("beam scale 4 px kept although above 2/3 of the largest structure (1.3 px)"
               in r for r in s.reasons)
    # 0.6 / B_min radians (common practice, from memory): 3.1 px for 20000 wavelengths.
    expected = 0.6 / 20000.0 * ARCSEC_PER_RAD / CELL
    with pytest.warns(ScaleChoiceWarning, match=f"recoverable scale \\({expected:.3g} px\\) "
                                                "is under twice the beam"):
        s = suggest_scales(disk40, PSF, cell_arcsec=CELL, shortest_baseline=20000.0)
    assert s.pixels == (0, 4)
    assert any(r.startswith("only 2 scales, fewer than min_count = 3; no scale 8 px, which "
                            "would be above half the largest recoverable scale")
               for r in s.reasons)
