"""Tests of skyscale.advisor: the largest structure, scale suggestions and scale checks.

Fields are invented here (tests/advisor_fields.py): disks of known diameter and
Gaussians of known FWHM, seen through a Gaussian beam of FWHM 4 px with white or
beam-correlated noise of rms 1; point sources; pure noise.  Check values come from the
rules of thumb (common practice, REFERENCES.md): the largest scale at most the largest
structure (here 2/3 of it, so between 0.3 and 0.8 of the true size once the
doubling's rounding is allowed for), below the recoverable scale 0.6 / B_min (common
practice, from memory) and at most a quarter of the image; three or four scales to
start.
"""

import json
import math
import warnings

import numpy as np
import pytest
from astropy import units as u

from skyscale import deconvolve, plan_run
from skyscale.cost.planner import bytes_text, seconds_text
from skyscale.advisor.suggest import (DEFAULT_MAX_COUNT, ScaleChoiceWarning, ScaleSuggestion,
                                      check_scales, measure_emission_extent, resolve_scales,
                                      suggest_scales)
from skyscale.core.beam import Beam
from tests.advisor_fields import (BEAM, bowl_psf, gaussian_psf, make_field, noise_field,
                                  point_field, smoothed_snr, source_with_compact)

CELL = 2.0                  # arcsec per pixel
#: Arcseconds in a radian, 180 * 3600 / pi (definition of the arcsecond).
ARCSEC_PER_RAD = 180.0 * 3600.0 / math.pi
ROUND = Beam(BEAM, BEAM, 0.0)


def best_smoothed_snr(seen, n, correlated):
    """The source's peak signal-to-noise at the best width of a doubling ladder."""
    widths = [0.0] + [BEAM * 2 ** k for k in range(12) if BEAM * 2 ** k <= n / 4]
    return max(smoothed_snr(seen, w, correlated) for w in widths)


# (kind, true size px, per-pixel S/N, image side, correlated noise)
FIELDS = [
    ("disk", 12, 30, 128, False),
    ("disk", 40, 3, 256, False),
    ("disk", 100, 1, 512, False),
    ("disk", 60, 2, 256, True),
    ("disk", 300, 1, 1024, False),
    ("disk", 400, 10, 1024, False),
    ("gaussian", 8, 100, 128, False),
    ("gaussian", 30, 10, 256, False),
    ("gaussian", 40, 5, 256, True),
    ("gaussian", 100, 1, 512, False),
    ("gaussian", 250, 1, 1024, False),
]


@pytest.mark.parametrize("kind, size, snr, n, correlated", FIELDS)
def test_largest_scale_follows_the_largest_structure(kind, size, snr, n, correlated):
    dirty, seen = make_field(kind, size, snr, n, seed=size, correlated=correlated)
    # The field is a fair test: once smoothed, the source is far above 5 sigma.
    assert best_smoothed_snr(seen, n, correlated) >= 10
    s = suggest_scales(dirty, beam=ROUND, cell_arcsec=CELL)
    largest = max(s.pixels)
    text = " | ".join(s.reasons)
    assert s.pixels[:2] == (0, 4) and len(s.pixels) <= DEFAULT_MAX_COUNT
    if 0.8 * size > n / 4:                       # the image caps it, and says so
        assert largest == n // 4 and "a quarter of the image" in text
        assert largest >= 0.3 * size
    else:
        assert 0.3 * size <= largest <= 0.8 * size
    # The reason names the structure's size and the smoothing it was found at.
    assert f"largest extended structure {s.largest_structure_px:.1f} px across" in text
    assert f"smoothing {s.extent.smoothing_px:.0f} px" in text or "unsmoothed" in text
    # One rule set: the suggestion passes its own check.
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert check_scales(s.pixels, suggestion=s) == []


def test_faint_broad_emission_is_seen_once_smoothed():
    # The case, scaled to 1024 px: a disk 145 px across and a Gaussian blob of
    # FWHM 95 px, both 0.7 sigma per pixel, invisible pixel by pixel.
    disk, _ = make_field("disk", 145, 0.7, 1024, seed=21, centre=(400, 380))
    blob, _ = make_field("gaussian", 95, 0.7, 1024, seed=22, centre=(700, 700))
    dirty = disk + blob - noise_field(1024, seed=22)     # one noise of rms 1 left
    s = suggest_scales(dirty, beam=ROUND)
    assert s.extent.smoothing_px >= 2 * BEAM              # found only once smoothed
    assert 0.3 * 145 <= max(s.pixels) <= 0.8 * 145
    assert s.largest_structure_px == pytest.approx(145, rel=0.2)


def test_recoverable_scale_caps_the_largest_scale_with_that_reason():
    dirty, _ = make_field("disk", 100, 3, 512, seed=3)
    # Largest recoverable angle about 0.6 / B_min radians (common practice, from
    # memory): 2000 wavelengths at 2 arcsec per pixel is 30.9 px; half of it 15.5 px.
    expected = 0.6 / 2000.0 * ARCSEC_PER_RAD / CELL
    s = suggest_scales(dirty, beam=ROUND, cell_arcsec=CELL, shortest_baseline=2000.0)
    assert s.recoverable_px == pytest.approx(expected, rel=1e-9)
    assert max(s.pixels) == 15 < 0.5 * expected
    assert any(r.startswith("largest scale 15 px (30 arcsec): half the largest "
                            "recoverable scale (15.5 px)") for r in s.reasons)


@pytest.mark.parametrize("correlated", [False, True])
def test_pure_noise_gives_small_scales_and_says_no_emission(correlated):
    s = suggest_scales(noise_field(512, seed=30 + correlated, correlated=correlated),
                       gaussian_psf(512))
    assert s.extent.n_islands == 0 and s.largest_structure_px is None
    assert max(s.pixels) <= 3 * BEAM                      # a few beams at most
    assert any(r.startswith("no extended emission found") for r in s.reasons)


@pytest.mark.parametrize("snr", [20, 300, 3000])
def test_point_sources_give_the_delta_and_beam_scales(snr):
    dirty, _ = point_field(512, 12, snr, seed=snr)
    s = suggest_scales(dirty, beam=ROUND)
    assert s.pixels == (0, 4)
    assert any(r.startswith("compact emission") for r in s.reasons)


def test_faint_unresolved_sources_are_found_but_not_measured():
    # Three points at 8 sigma in beam-correlated noise: above the detection level (5)
    # but under twice it, and unresolved, so their size cannot be read.
    dirty, _ = point_field(256, 3, 8, seed=1, correlated=True)
    s = suggest_scales(dirty, beam=ROUND)
    assert s.extent.n_detected >= 3 and s.extent.n_islands == 0
    assert s.pixels == (0, 4, 8)
    assert any(r.startswith(f"no extended emission found: {s.extent.n_detected} island(s) "
                            "above 5 times the noise") and "none measurable" in r
               for r in s.reasons)


# ------------------------------------------------------------------ the structure

def test_gaussian_reads_as_its_fwhm_at_any_brightness():
    # At half its peak a Gaussian of FWHM f seen through the beam b and smoothed by s
    # is a circle sqrt(f^2 + b^2 + s^2) across (Gaussian widths add in quadrature,
    # analytic); removing the point source's in quadrature leaves f.
    for snr in (3, 30, 300):
        dirty, _ = make_field("gaussian", 24, snr, 256, seed=snr)
        ext = measure_emission_extent(dirty, BEAM)
        assert ext.intrinsic_px == pytest.approx(24, abs=3)


def test_disk_reads_as_its_diameter():
    dirty, _ = make_field("disk", 60, 20, 256, seed=4)
    ext = measure_emission_extent(dirty, ROUND)
    assert ext.n_islands >= 1
    # The contour at half the plateau runs along the disk's edge (a straight edge
    # blurred by a symmetric kernel crosses half its height at the edge, analytic).
    assert 55 <= ext.largest_px <= 64
    assert 0.85 * 60 <= ext.intrinsic_px <= 1.05 * 60


def test_rectangle_feret_and_equal_area_diameters():
    # No smoothing; the contour at half the peak is the rectangle itself (20 x 60 px,
    # 50 sigma).  Largest distance across: its diagonal, hypot(20, 60) (Pythagoras);
    # the circle of the same area has diameter 2 sqrt(A / pi) (analytic).
    image = np.random.default_rng(4).normal(0.0, 1.0, (160, 160))
    image[50:70, 50:110] += 50.0
    feret = measure_emission_extent(image, BEAM, smoothing_px=0, diameter="feret")
    area = measure_emission_extent(image, BEAM, smoothing_px=0)        # the default
    assert abs(feret.areas[0] - 1200) <= 2
    assert abs(feret.largest_px - math.hypot(20, 60)) <= 1.0
    assert area.largest_px == pytest.approx(2.0 * math.sqrt(1200 / math.pi), abs=0.1)


def test_extent_reports_the_noise_ladder():
    dirty, _ = make_field("disk", 40, 2, 256, seed=5)
    ext = measure_emission_extent(dirty, BEAM)
    widths = [w for w, _ in ext.noise_by_smoothing]
    assert widths == [0.0, 4.0, 8.0, 16.0, 32.0, 64.0]
    assert ext.threshold == pytest.approx(5.0 * ext.noise)
    assert dict(ext.noise_by_smoothing)[ext.smoothing_px] == ext.noise
    d = json.loads(json.dumps(ext.as_dict()))
    assert d["noise_by_smoothing"][0][0] == 0.0


# ------------------------------------------------------------------ suggestions

@pytest.fixture(scope="module")
def disk40():
    return make_field("disk", 40, 10, 160, seed=1)[0]


def test_count_is_four_by_default_and_more_are_costed(disk40):
    s = suggest_scales(disk40, gaussian_psf(160), cell_arcsec=CELL)
    assert len(s.pixels) == 4 and s.pixels[-1] == 26           # 2/3 of 40 px
    assert s.fuller == (0, 4, 7, 14, 26)
    # The costs are the planner's (skyscale.plan_run) for the two sets, with the dynamic
    # range of this dirty image, as skyscale plan quotes them for the same files.
    small = plan_run(disk40.shape, gaussian_psf(160), s.pixels, dirty=disk40)
    big = plan_run(disk40.shape, small.psf_shape, s.fuller, dirty=disk40)
    assert s.costs["seconds"] == pytest.approx(small.total_seconds)
    assert s.costs["fuller_seconds"] == pytest.approx(big.total_seconds)
    assert s.costs["bytes"] == small.memory_bytes
    assert any(r.startswith("more scales would help") and
               f"{seconds_text(big.total_seconds)} and {bytes_text(big.memory_bytes)}" in r
               and "max_count = 5" in r for r in s.reasons)
    five = suggest_scales(disk40, gaussian_psf(160), max_count=5)
    assert five.pixels == s.fuller and five.fuller is None
    assert not any("more scales" in r for r in five.reasons)


def test_max_count_limits(disk40):
    assert suggest_scales(disk40, beam=ROUND, max_count=3).pixels == (0, 4, 26)
    assert suggest_scales(disk40, beam=ROUND, max_count=2).pixels == (0, 4)
    with pytest.warns(ScaleChoiceWarning, match="max_count is 1"):
        assert suggest_scales(disk40, beam=ROUND, max_count=1).pixels == (0,)
    noise = noise_field(128, seed=2)                      # extent unknown: min_count
    assert suggest_scales(noise, beam=ROUND, max_count=2).pixels == (0, 4)
    assert suggest_scales(noise, beam=ROUND, min_count=4).pixels == (0, 4, 8, 16)


def test_largest_size_as_quantity_or_arcsec(disk40):
    # 60 arcsec at 2 arcsec/pixel is 30 px; 2/3 of it is 20 px.
    a = suggest_scales(disk40, beam=ROUND, cell_arcsec=CELL, largest_size=60.0)
    b = suggest_scales(disk40, beam=ROUND, cell_arcsec=CELL * u.arcsec,
                       largest_size=1.0 * u.arcmin)
    assert a.pixels == b.pixels and a.pixels[-1] == 20
    assert a.extent is None and a.largest_structure_px == pytest.approx(30.0)
    assert any("30.0 px" in r for r in a.reasons)


def test_beam_instead_of_psf(disk40):
    assert suggest_scales(disk40, beam=Beam(6.0, 6.0, 0.0)).pixels[1] == 6
    s = suggest_scales(disk40, beam=Beam(6.0, 4.0, 30.0))
    assert s.beam_px == pytest.approx(math.sqrt(24.0))      # geometric mean
    assert s.pixels[1] == round(math.sqrt(24.0))


def test_scales_stay_roughly_doubling(disk40):
    for max_count in (4, 5, 6):
        px = suggest_scales(disk40, beam=ROUND, max_count=max_count).pixels
        ratios = [b / a for a, b in zip(px[1:-1], px[2:])]
        assert all(r >= 1.5 for r in ratios)                 # MIN_SCALE_RATIO


def test_float32_input_and_json_report(disk40):
    s64 = suggest_scales(disk40, beam=ROUND)
    s32 = suggest_scales(disk40.astype(np.float32), beam=ROUND)
    assert s32.pixels == s64.pixels
    d = json.loads(json.dumps(s64.as_dict()))
    assert d["pixels"] == list(s64.pixels) and d["extent"]["n_islands"] >= 1


def test_questionable_limits_warn_and_are_explained(disk40):
    # 4 arcsec at 2 arcsec/pixel is 2 px, half the beam: unresolved.
    with pytest.warns(ScaleChoiceWarning, match="largest_size is 4 arcsec, smaller than "
                                                "the beam"):
        s = suggest_scales(disk40, beam=ROUND, cell_arcsec=CELL, largest_size=4.0)
    assert s.pixels == (0, 4)
    assert any(r.startswith("compact emission: 2/3 of the largest structure is 1.3 px")
               for r in s.reasons)
    # 0.6 / B_min radians (common practice, from memory): 3.1 px for 20000 wavelengths.
    expected = 0.6 / 20000.0 * ARCSEC_PER_RAD / CELL
    with pytest.warns(ScaleChoiceWarning, match=f"recoverable scale \\({expected:.3g} px\\) "
                                                "is under twice the beam"):
        s = suggest_scales(disk40, beam=ROUND, cell_arcsec=CELL, shortest_baseline=20000.0)
    assert s.pixels == (0, 4)
    assert any(r.startswith("half the largest recoverable scale is 1.5 px") for r in s.reasons)


# ------------------------------------------------------------------ one rule set

def test_suggest_and_check_agree_on_the_same_set(disk40):
    s = suggest_scales(disk40, beam=ROUND)
    top = s.pixels[-1]
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert check_scales(s.pixels, suggestion=s) == []
    # A scale the suggestion left out for being above 2/3 of the structure is flagged
    # by the check with the same bound.
    bound = 2 / 3 * s.largest_structure_px
    over = top + 1
    assert over > bound
    with pytest.warns(ScaleChoiceWarning) as record:
        problems = check_scales([0, 4, over], suggestion=s)
    assert problems == [str(w.message) for w in record]
    assert len(problems) == 1
    assert problems[0].startswith(f"scale {over} px is above 2/3 of the largest "
                                  f"structure ({bound:.1f} px")
    assert f"2/3 of the largest structure ({bound:.1f} px)" in " ".join(s.reasons)


def test_demo_suggest_and_check_say_the_same(capsys):
    from skyscale.cli.commands import demo_data_dir, main
    from skyscale.io.fits import read_image
    import os
    folder = demo_data_dir()
    dirty = read_image(os.path.join(folder, "dirty.fits")).data
    psf = read_image(os.path.join(folder, "psf.fits")).data
    s = suggest_scales(dirty, psf, cell_arcsec=CELL)
    args = ["suggest", os.path.join(folder, "dirty.fits"), os.path.join(folder, "psf.fits")]
    assert main(args) == 0
    shown = capsys.readouterr().out
    assert "use: --scales " + ",".join(map(str, s.pixels)) in shown
    assert main(args + ["--check", ",".join(map(str, s.pixels))]) == 0
    assert "no rule of thumb broken" in capsys.readouterr().out
    bigger = [p for p in (0, 4, 8, 16, 32, 64) if p not in s.pixels and p > s.pixels[-1]]
    assert main(args + ["--check", "0,4,8,16,32,64"]) == 1   # a rule is broken
    out = " ".join(capsys.readouterr().out.split())
    for p in bigger:
        assert f"scale {p} px is above 2/3 of the largest structure" in out


RULES = [
    ([4, 8, 16], {}, r"no delta scale \(0 px\)"),
    ([0, 4, 8, 24], {"cell_arcsec": CELL, "largest_size": 60.0},
     r"scale 24 px is above 2/3 of the largest structure \(20.0 px of 30.0 px, given as "
     r"60 arcsec\)"),
    ([0, 4, 8, 24], {"cell_arcsec": CELL, "shortest_baseline": 1500.0},
     r"scale 24 px is near the largest recoverable scale \(41 px"),
    ([0, 4, 8, 48], {"cell_arcsec": CELL, "shortest_baseline": 3000.0},
     r"scale 48 px is above the largest recoverable scale \(21 px"),
    ([0, 4, 5, 10], {}, r"scales 4 and 5 px are closer than a factor 1.5 \(ratio 1.25\)"),
    ([0, 4, 4, 8], {}, r"scale 4 px is given 2 times"),
    ([0, 1, 4, 8], {}, r"scale 1 px is below half the beam FWHM \(2.0 px of 4.0 px\)"),
    ([0, 4, 8, 16], {"max_affordable_scales": 3}, r"4 scales, but the planned run can afford 3"),
]


@pytest.mark.parametrize("scales, kwargs, match", RULES)
def test_check_warns_for_each_rule(scales, kwargs, match):
    with pytest.warns(ScaleChoiceWarning, match=match) as record:
        problems = check_scales(scales, beam=ROUND, **kwargs)
    # 0.6 / B_min radians (common practice, from memory): 41.25 px for 1500
    # wavelengths, 20.6 px for 3000, at 2 arcsec per pixel.
    assert len(problems) == 1 and len(record) == 1


def test_check_measures_the_structure_and_image_size():
    dirty, _ = make_field("disk", 30, 10, 160, seed=9)
    with pytest.warns(ScaleChoiceWarning, match="scale 32 px is above 2/3 of the largest "
                                                "structure"):
        problems = check_scales([0, 4, 8, 16, 32], dirty, gaussian_psf(160))
    assert len(problems) == 1
    with pytest.warns(ScaleChoiceWarning, match=r"above a quarter of the image's smaller "
                                                r"side \(40 px\)") as record:
        check_scales([0, 4, 8, 16, 48], dirty, gaussian_psf(160), cell_arcsec=CELL,
                     largest_size=400.0)
    assert len(record) == 1


def test_check_accepts_angles():
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert check_scales([0, 8, 16] * u.arcsec, beam=ROUND, cell_arcsec=CELL) == []
    with pytest.warns(ScaleChoiceWarning, match="scale 1 px is below half the beam"):
        check_scales([0, 2, 8] * u.arcsec, beam=ROUND, cell_arcsec=CELL)


# ------------------------------------------------------------------ scales="auto"

def test_deconvolve_with_auto_scales():
    dirty, _ = make_field("disk", 24, 30, 96, seed=11)
    psf = gaussian_psf(192)[:192, :192].astype(np.float32)   # peak at (96, 96)
    s = suggest_scales(dirty, psf)
    r = deconvolve(dirty.astype(np.float32), psf, scales="auto", max_components=200,
                   max_major_cycles=2, restore=False)
    assert tuple(r.scales) == tuple(float(p) for p in s.pixels)
    assert r.parameters["scales"] == [float(p) for p in s.pixels]
    assert r.parameters["scale_reasons"] == s.reasons
    assert resolve_scales("AUTO", dirty, psf) == (tuple(float(p) for p in s.pixels),
                                                  s.reasons)
    with pytest.raises(ValueError, match=r"scales is 'big'; pass diameters in pixels"):
        deconvolve(dirty, psf, scales="big")


def test_command_line_auto_uses_the_same_function(tmp_path):
    from skyscale.job.files import scales_in_pixels, RUN_DEFAULTS
    dirty, _ = make_field("disk", 24, 30, 96, seed=11)
    psf = gaussian_psf(192)[:192, :192]
    reasons = []
    px = scales_in_pixels(dict(RUN_DEFAULTS, scales="auto"), None, dirty, psf, reasons,
                           "--scales")
    assert (tuple(px), reasons) == resolve_scales("auto", dirty, psf)


# ------------------------------------------------------------------ errors

@pytest.mark.parametrize("call, match", [
    (lambda d: suggest_scales(d, ROUND_PSF, cell_arcsec=-1.0), r"cell_arcsec is -1.0"),
    (lambda d: suggest_scales(d, ROUND_PSF, cell_arcsec=CELL, largest_size=5 * u.m),
     r"largest_size is .*not an angle"),
    (lambda d: suggest_scales(d, ROUND_PSF, largest_size=30.0),
     r"largest_size is 30.0 but cell_arcsec"),
    (lambda d: suggest_scales(d, ROUND_PSF, cell_arcsec=CELL, shortest_baseline=0.0),
     r"shortest_baseline is 0.0"),
    (lambda d: suggest_scales(d, ROUND_PSF, shortest_baseline=100.0),
     r"shortest_baseline is 100.0 but cell_arcsec"),
    (lambda d: suggest_scales(d, ROUND_PSF, min_count=4, max_count=3),
     r"min_count is 4 but max_count is 3"),
    (lambda d: suggest_scales(d, ROUND_PSF, max_count=0), r"max_count is 0"),
    (lambda d: suggest_scales(d), r"psf is None and no beam"),
    (lambda d: suggest_scales(d, beam=(4, 4)), r"beam is \(4, 4\)"),
    (lambda d: suggest_scales(d[0], ROUND_PSF), r"dirty has shape"),
    (lambda d: measure_emission_extent(d, BEAM, sigma=0), r"sigma is 0"),
    (lambda d: measure_emission_extent(d, BEAM, diameter="box"), r"diameter is 'box'"),
    (lambda d: measure_emission_extent(d, -2.0), r"beam_fwhm_px is -2.0"),
    (lambda d: measure_emission_extent(d, BEAM, smoothing_px=-1), r"smoothing_px is -1"),
    (lambda d: check_scales([0, -4]), r"scales_px is \[0, -4\]"),
    (lambda d: check_scales([0, 4], d), r"dirty was given but neither psf"),
    (lambda d: check_scales([0, 4] * u.arcsec), r"cell_arcsec is None"),
    (lambda d: check_scales([0, 4], max_affordable_scales=0), r"max_affordable_scales is 0"),
    (lambda d: check_scales([0, 4], suggestion="yes"), r"suggestion is 'yes'"),
    (lambda d: resolve_scales("many", d, ROUND_PSF), r"scales is 'many'"),
])
def test_bad_input_gets_one_clear_error(call, match):
    dirty = np.zeros((32, 32))
    with pytest.raises(ValueError, match=match):
        call(dirty)


ROUND_PSF = gaussian_psf(64)


def test_suggestion_type():
    s = suggest_scales(np.random.default_rng(10).normal(0, 1, (64, 64)), beam=ROUND)
    assert isinstance(s, ScaleSuggestion)
    assert s.arcsec is None
    assert s.image_limit_px == 16.0


# ------------------------------------------- a compact source on it, the PSF's bowl

# The size read must be the structure's own: a disk's diameter, a Gaussian's FWHM
# 2 sqrt(2 ln 2) sigma (analytic), whatever compact source sits on it.  Tolerance: 5 %
# of the size (the fields have a per-pixel signal-to-noise of 20; the fit's scatter
# across seeds is about 1 %).
SIZE_TOLERANCE = 0.05


@pytest.mark.parametrize("compact", [0.0, 10.0, 40.0])
def test_disk_with_a_compact_source_reads_as_its_diameter(compact):
    # A uniform disk of diameter 50 px convolved with the Gaussian beam by
    # astropy.convolution (reference library), a point of 10 or 40 times the disk's
    # peak 10 px off its centre.  Its half-peak contour is the disk's edge (a straight
    # edge blurred by a symmetric kernel crosses half its height at the edge,
    # analytic), not the point's.
    dirty = source_with_compact("disk", 50.0, compact, 256, seed=int(compact))
    ext = measure_emission_extent(dirty, BEAM)
    assert ext.intrinsic_px == pytest.approx(50.0, rel=SIZE_TOLERANCE)


@pytest.mark.parametrize("compact", [0.0, 10.0])
def test_gaussian_with_a_compact_source_reads_as_its_fwhm(compact):
    sigma = 10.0
    fwhm = 2.0 * math.sqrt(2.0 * math.log(2.0)) * sigma        # analytic: 23.55 px
    dirty = source_with_compact("gaussian", fwhm, compact, 256, seed=7 + int(compact))
    ext = measure_emission_extent(dirty, BEAM)
    assert ext.intrinsic_px == pytest.approx(fwhm, rel=SIZE_TOLERANCE)


@pytest.mark.parametrize("compact", [0.0, 10.0])
def test_disk_in_a_dirty_image_reads_as_its_diameter(compact):
    # Through a PSF that sums to 0 (no zero spacing, common practice) the disk sits in
    # a negative bowl and is domed: its brightest part is its centre, so half its
    # peak lies inside its edge.  The sizes are read through the PSF itself, so the
    # disk of 50 px reads 50 px, and a scale of 32 px (under 2/3 of 50 = 33.3 px)
    # passes the check against the largest structure.
    # (clean_first=False: the profile read through the PSF; with the bright emission
    # cleaned out first and restored through the beam, the same disk reads within 10 %.)
    psf = bowl_psf(256, BEAM, 60.0)
    dirty = source_with_compact("disk", 50.0, compact, 256, seed=3, psf=psf)
    s = suggest_scales(dirty, psf, clean_first=False)
    assert s.largest_structure_px == pytest.approx(50.0, rel=SIZE_TOLERANCE)
    cleaned = suggest_scales(dirty, psf)
    assert cleaned.largest_structure_px == pytest.approx(50.0, rel=0.1)
    assert cleaned.view is not None and cleaned.view["components"] > 0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        problems = check_scales([0, 4, 8, 16, 32], dirty, psf)
    assert not any("2/3 of the largest structure" in p for p in problems), problems
    assert s.extent.shape == "disk"


def test_reasons_name_the_shape_and_the_compact_source():
    dirty = source_with_compact("disk", 50.0, 10.0, 256, seed=5)
    s = suggest_scales(dirty, beam=ROUND)
    text = " | ".join(s.reasons)
    assert "a disk, found" in text
    assert "fitted by a disk seen through the beam" in text
    assert "a compact source on it set apart" in text
