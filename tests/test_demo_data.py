"""The invented demo observation in demo_data/: present, consistent, as documented."""

import importlib.util
import json
import pathlib

import numpy as np
import pytest
from astropy.io import fits
from astropy.wcs import WCS
from scipy import ndimage
from scipy.signal import fftconvolve

from skyscale.core.noise import robust_noise

DEMO = pathlib.Path(__file__).resolve().parents[1] / "demo_data"
NAMES = ("dirty", "psf", "true_sky")


@pytest.fixture(scope="module")
def demo():
    out = {}
    for name in NAMES:
        with fits.open(DEMO / f"{name}.fits") as hdul:
            out[name] = (hdul[0].data.copy(), hdul[0].header.copy())
    out["truth"] = json.loads((DEMO / "truth.json").read_text())
    return out


@pytest.fixture(scope="module")
def seen(demo):
    """PSF (*) true sky as a linear convolution, cropped to the image grid."""
    sky = demo["true_sky"][0].astype(np.float64)
    psf = demo["psf"][0].astype(np.float64)
    n = sky.shape[0]
    c = psf.shape[0] // 2
    # reference library: scipy.signal.fftconvolve (full linear convolution)
    return fftconvolve(sky, psf, mode="full")[c:c + n, c:c + n]


def test_files_exist_and_are_small():
    for name in ("dirty.fits", "psf.fits", "true_sky.fits", "truth.json", "README.md",
                 "make_demo.py", "visibilities.npz"):
        assert (DEMO / name).is_file(), name
    total = sum(p.stat().st_size for p in DEMO.iterdir() if p.is_file())
    assert total < 4 * 2 ** 20


def test_shapes_dtypes_units(demo):
    dirty, hd = demo["dirty"]
    psf, _ = demo["psf"]
    sky, hs = demo["true_sky"]
    assert dirty.shape == sky.shape == (256, 256)
    assert psf.shape == (512, 512)
    for name in NAMES:
        assert demo[name][1]["BITPIX"] == -32      # FITS Standard 4.0: IEEE float32
        assert np.all(np.isfinite(demo[name][0]))
    assert hd["BUNIT"] == "Jy/beam"
    assert hs["BUNIT"] == "Jy/pixel"
    assert hd["NOISE"] == pytest.approx(demo["truth"]["noise_jy_per_beam"])


def test_psf_peak_is_one_at_centre(demo):
    psf = demo["psf"][0]
    assert psf[256, 256] == 1.0
    assert np.unravel_index(np.argmax(psf), psf.shape) == (256, 256)
    # Natural weighting of a real visibility set gives a point-symmetric PSF
    # (Hermitian weights, common practice): psf[c + d] == psf[c - d].
    core = psf[1:, 1:]
    np.testing.assert_allclose(core, core[::-1, ::-1], atol=1e-6)


def test_psf_main_lobe_width(demo):
    """Main lobe about 4-5 px FWHM: from the area above half power, FWHM = 2 sqrt(A / pi)
    for a round beam (analytic), pixel-quantised."""
    psf = demo["psf"][0]
    lab, _ = ndimage.label(psf > 0.5)          # reference library: scipy.ndimage.label
    area = np.count_nonzero(lab == lab[256, 256])
    fwhm = 2 * np.sqrt(area / np.pi)
    assert 3.8 < fwhm < 5.5
    assert fwhm == pytest.approx(demo["truth"]["image"]["psf_half_power_fwhm_px"], abs=1e-3)


def test_wcs_is_celestial_sin_with_ra_to_the_left(demo):
    for name in NAMES:
        hdr = demo[name][1]
        w = WCS(hdr)                            # reference library: astropy.wcs
        assert w.has_celestial
        assert list(w.wcs.ctype) == ["RA---SIN", "DEC--SIN"]
        assert hdr["CDELT1"] < 0 < hdr["CDELT2"]
        assert abs(hdr["CDELT1"]) * 3600 == pytest.approx(2.0)
        n = demo[name][0].shape[0]
        ra, dec = w.pixel_to_world_values(n // 2, n // 2)
        assert ra == pytest.approx(demo["truth"]["observation"]["ra_deg"])
        assert dec == pytest.approx(demo["truth"]["observation"]["dec_deg"])
        # one pixel to the right is further west: smaller RA
        ra_right, _ = w.pixel_to_world_values(n // 2 + 1, n // 2)
        assert ra_right < ra


def test_dirty_is_psf_convolved_sky_plus_noise(demo, seen):
    dirty = demo["dirty"][0].astype(np.float64)
    sigma = demo["truth"]["noise_jy_per_beam"]
    diff = dirty - seen
    # The difference is the noise image: its rms is the stated noise ...
    assert np.std(diff) == pytest.approx(sigma, rel=0.02)
    assert abs(np.mean(diff)) < 0.2 * sigma
    # ... nowhere far out of the Gaussian budget (beam-correlated, ~3000 beams) ...
    assert np.abs(diff).max() < 6 * sigma
    # ... and it carries no trace of the sky: a wrong PSF or a shift would leave
    # emission-shaped structure many times the noise.
    corr = np.corrcoef(diff.ravel(), seen.ravel())[0, 1]
    assert abs(corr) < 0.05
    assert np.abs(seen).max() > 100 * sigma


def test_noise_far_from_emission(demo, seen):
    dirty = demo["dirty"][0].astype(np.float64)
    sky = demo["true_sky"][0]
    sigma = demo["truth"]["noise_jy_per_beam"]
    # Pixels more than 40 px from any emission brighter than 1e-4 of the peak
    # (reference library: scipy.ndimage.distance_transform_edt).
    far = ndimage.distance_transform_edt(sky <= 1e-4 * sky.max()) > 40
    assert far.sum() > 20000
    # Once the sidelobes of the known sky are taken away, what is left far from the
    # emission is the stated thermal noise (robust estimate, Rousseeuw & Croux 1993).
    assert robust_noise(dirty[far] - seen[far]) == pytest.approx(sigma, rel=0.1)
    # The dirty image itself is sidelobe-limited there: the noise is only a floor.
    assert robust_noise(dirty[far]) > sigma


def test_truth_matches_true_sky(demo):
    sky = demo["true_sky"][0].astype(np.float64)
    truth = demo["truth"]
    listed = (truth["disk"]["flux_jy"] + sum(b["flux_jy"] for b in truth["blobs"])
              + sum(p["flux_jy"] for p in truth["points"]))
    assert sky.sum() == pytest.approx(listed, rel=1e-5)
    assert sky.sum() == pytest.approx(truth["total_flux_jy"], rel=1e-6)
    assert sky.min() >= 0
    assert 3 <= len(truth["points"]) <= 5
    for p in truth["points"]:
        # a point source is a spike of its flux above the smooth emission around it
        around = np.median(sky[p["y"] - 1:p["y"] + 2, p["x"] - 1:p["x"] + 2])
        assert sky[p["y"], p["x"]] - around == pytest.approx(p["flux_jy"], rel=1e-3)


def test_isolated_point_is_far_from_everything(demo):
    sky = demo["true_sky"][0]
    fwhm = demo["truth"]["image"]["psf_half_power_fwhm_px"]
    (iso,) = [p for p in demo["truth"]["points"] if p["isolated"]]
    others = sky.copy()
    others[iso["y"], iso["x"]] = 0
    yy, xx = np.nonzero(others > 1e-6 * sky.max())
    nearest = np.hypot(yy - iso["y"], xx - iso["x"]).min()
    assert nearest > 10 * fwhm
    # its surroundings hold nothing else, so its flux is what a restore should find
    box = sky[iso["y"] - 20:iso["y"] + 21, iso["x"] - 20:iso["x"] + 21]
    assert box.sum() == pytest.approx(iso["flux_jy"], rel=1e-5)


def test_script_regenerates_the_files(tmp_path, demo):
    spec = importlib.util.spec_from_file_location("make_demo", DEMO / "make_demo.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    mod.main(["--out", str(tmp_path)])
    for name in NAMES:
        fresh = fits.getdata(tmp_path / f"{name}.fits")
        np.testing.assert_allclose(fresh, demo[name][0], rtol=0, atol=1e-6 * np.abs(fresh).max())
    fresh_truth = json.loads((tmp_path / "truth.json").read_text())
    assert fresh_truth["points"] == demo["truth"]["points"]
    assert fresh_truth["consistency_max_abs_diff"] < 1e-9
    if importlib.util.find_spec("ducc0") is not None:       # the visibilities need it
        from skyscale.visibility.file import read_visibilities
        fresh, kept = (read_visibilities(d / "visibilities.npz") for d in (tmp_path, DEMO))
        np.testing.assert_array_equal(fresh.uvw, kept.uvw)
        np.testing.assert_allclose(fresh.vis, kept.vis, rtol=0,
                                   atol=1e-6 * np.abs(kept.vis).max())
        np.testing.assert_array_equal(fresh.weights, kept.weights)
