"""Wideband runs with major cycles against each channel's visibilities
(`skyscale.visibility.channels`, `deconvolve_wideband(operators=...)`).

Check values: the measurement equation for point sources (Thompson, Moran & Swenson
2017, ch. 3), the power law of the invented source, and scipy.signal.fftconvolve for the
image-plane identity ``residual_c = dirty_c - PSF_c (*) model_c`` (convolution theorem;
exact with the PSF on twice the image and no w-term).  The array and field are invented.
"""

import numpy as np
import pytest
from scipy.signal import fftconvolve

pytest.importorskip("ducc0")

import skyscale  # noqa: E402
from skyscale import InputError  # noqa: E402
from skyscale.visibility import channel_operators, wideband_inputs  # noqa: E402

C = 299792458.0                      # m/s, SI definition
ARCSEC = np.pi / 180 / 3600
NPIX, CELL = 64, 8.0
NU0 = 1.5e9


def point_vis(uvw, freqs, y, x, fluxes):
    """Visibilities of a point source of flux ``fluxes[c]`` at pixel (y, x), no w-term:
    S exp(-2 pi i (u l + v m)), l = -(x - nx/2) cell, m = (y - ny/2) cell (the operator's
    sign convention, skyscale.visibility.operator; TMS 2017 ch. 3)."""
    l, m = -(x - NPIX // 2) * CELL * ARCSEC, (y - NPIX // 2) * CELL * ARCSEC
    out = np.empty((uvw.shape[0], len(freqs)), complex)
    for c, f in enumerate(freqs):
        u, v = uvw[:, 0] * f / C, uvw[:, 1] * f / C
        out[:, c] = fluxes[c] * np.exp(-2j * np.pi * (u * l + v * m))
    return out


@pytest.fixture(scope="module")
def data():
    rng = np.random.default_rng(3)
    nrow, freqs = 1500, np.linspace(1.0e9, 2.0e9, 6)
    uvw = rng.normal(scale=[300.0, 300.0, 0.0], size=(nrow, 3))
    flux = 1.0 * (freqs / NU0) ** -0.7
    sigma = 0.05                      # Jy per visibility
    vis = point_vis(uvw, freqs, 30, 36, flux)
    vis = vis + sigma * (rng.normal(size=vis.shape) + 1j * rng.normal(size=vis.shape))
    weights = np.full(vis.shape, 1 / sigma ** 2)
    weights[:, 0] *= 0.5              # one channel noisier in weight
    ops = channel_operators(uvw, freqs, vis, weights, npix=NPIX, cell_arcsec=CELL,
                            wgridding=False, dtype=np.float64)
    return freqs, ops


def test_inputs_from_channel_operators(data):
    freqs, ops = data
    dirty, psf, f, w = wideband_inputs(ops)
    assert dirty.shape == (6, NPIX, NPIX) and psf.shape == (6, 2 * NPIX, 2 * NPIX)
    np.testing.assert_array_equal(f, freqs)
    assert np.all(psf[:, NPIX, NPIX] == 1.0)
    # natural weights: each channel's weight is the sum of its 1/sigma^2 (the inverse
    # variance of its dirty image), normalised; channel 0 holds half of the others'
    np.testing.assert_allclose(w, np.r_[0.5, np.ones(5)] / 5.5, rtol=1e-12)


def test_major_cycles_against_every_channel(data):
    freqs, ops = data
    dirty, psf, f, w = wideband_inputs(ops)
    r = skyscale.deconvolve_wideband(dirty, psf, f, terms=2, scales=[0], operators=ops,
                                     channel_weights=w, reference_frequency=NU0,
                                     noise_threshold=3, mask="auto")
    assert r.stop_reason == "noise"
    # the power law of the source, -0.7 (analytic), at SNR ~ 400 per channel
    assert abs(r.spectral_index[30, 36] + 0.7) < 0.05
    assert abs(r.reference_intensity[30, 36] - 1.0) < 0.02
    # every channel's residual is its data's: dirty_c - PSF_c (*) model_c
    # (scipy.signal.fftconvolve; the convolution theorem, exact without the w-term)
    x = (f - NU0) / NU0
    for c in range(len(f)):
        model = r.terms[0].astype(np.float64) + x[c] * r.terms[1]
        want = dirty[c] - fftconvolve(model, psf[c], mode="full")[NPIX:2 * NPIX, NPIX:2 * NPIX]
        np.testing.assert_allclose(r.channel_residuals[c], want, atol=2e-4)
    # and the Taylor residuals are their weighted sums
    np.testing.assert_allclose(r.residuals[1], np.einsum("c,c,cyx->yx", w, x,
                                                         r.channel_residuals), atol=1e-5)


def test_one_term_with_operators_is_deconvolve_of_the_band(data):
    freqs, ops = data
    dirty, psf, f, w = wideband_inputs(ops)
    r = skyscale.deconvolve_wideband(dirty, psf, f, terms=1, scales=[0], operators=ops,
                                     channel_weights=w, noise_threshold=3, dtype=np.float64)
    band = lambda m: sum(wc * op(m) for wc, op in zip(w, ops))   # noqa: E731
    one = skyscale.deconvolve(np.einsum("c,cyx->yx", w, dirty),
                              np.einsum("c,cyx->yx", w, psf), scales=[0],
                              noise_threshold=3, dtype=np.float64,
                              operator=skyscale.FunctionOperator(band, (NPIX, NPIX),
                                                                 dtype=np.float64))
    # the same components; amplitudes equal up to the order of the float64 sums
    assert r.components.size == one.components.size > 0
    for name in ("y", "x", "scale"):
        np.testing.assert_array_equal(r.components[name], one.components[name])
    np.testing.assert_allclose(r.terms[0], one.model, rtol=1e-6, atol=1e-12)


def test_operators_must_match_the_channels(data):
    freqs, ops = data
    dirty, psf, f, w = wideband_inputs(ops)
    with pytest.raises(InputError, match="operators"):
        skyscale.deconvolve_wideband(dirty, psf, f, operators=ops[:3])


def test_file_route_gives_the_same_channels(data, tmp_path):
    from skyscale.visibility import channel_operators_from_file, write_visibilities
    freqs, ops = data
    rng = np.random.default_rng(3)
    uvw = rng.normal(scale=[300.0, 300.0, 0.0], size=(200, 3))
    vis = point_vis(uvw, freqs, 30, 36, (freqs / NU0) ** -0.7)
    path = tmp_path / "vis.npz"
    write_visibilities(path, uvw, freqs, vis, np.ones(vis.shape))
    from_file = channel_operators_from_file(path, npix=NPIX, cell_arcsec=CELL,
                                            wgridding=False, dtype=np.float64)
    direct = channel_operators(uvw, freqs, vis, np.ones(vis.shape), npix=NPIX,
                               cell_arcsec=CELL, wgridding=False, dtype=np.float64)
    assert len(from_file) == len(freqs)
    for a, b in zip(from_file, direct):
        # the gridder's float64 sums vary at 1e-16 relative with the threads
        np.testing.assert_allclose(a.dirty_image(), b.dirty_image(), rtol=0, atol=1e-10)
    # a noise-free point source reads its flux at its pixel in each channel's dirty image
    # (measurement equation, unit weights: the dirty image is the PSF times S there)
    for c, op in enumerate(from_file):
        assert op.dirty_image()[30, 36] == pytest.approx((freqs[c] / NU0) ** -0.7, rel=1e-6)


def test_wideband_command_from_visibilities(tmp_path):
    import json
    from astropy.io import fits
    from skyscale.cli import main
    from skyscale.visibility import write_visibilities
    rng = np.random.default_rng(4)
    freqs = np.linspace(1.0e9, 2.0e9, 6)
    uvw = rng.normal(scale=[300.0, 300.0, 0.0], size=(1500, 3))
    sigma = 0.05
    vis = point_vis(uvw, freqs, 30, 36, (freqs / NU0) ** -0.7)
    vis = vis + sigma * (rng.normal(size=vis.shape) + 1j * rng.normal(size=vis.shape))
    path = tmp_path / "vis.npz"
    write_visibilities(path, uvw, freqs, vis, np.full(vis.shape, 1 / sigma ** 2),
                       phase_centre_deg=(150.0, 20.0))
    out = tmp_path / "out"
    code = main(["--quiet", "wideband", "--visibilities", str(path), "--size", str(NPIX),
                 "--cell", str(CELL), "--out", str(out), "--scales", "0",
                 "--reference-frequency", str(NU0), "--no-figure"])
    assert code == 0
    alpha = fits.getdata(out / "spectral-index.fits")
    assert abs(alpha[30, 36] + 0.7) < 0.05           # the power law's index (analytic)
    head = fits.getheader(out / "restored_t0.fits")
    assert head["CTYPE1"] == "RA---SIN" and head["CRVAL1"] == pytest.approx(150.0)
    report = json.loads((out / "wideband-report.json").read_text())
    # equal natural weights in every channel: the data's channel weights are equal
    np.testing.assert_allclose(report["channel_weights"], np.full(6, 1 / 6), rtol=1e-12)
    # neither cube nor visibilities: one clear error (exit 2)
    assert main(["--quiet", "wideband", "--out", str(tmp_path / "o2")]) == 2
