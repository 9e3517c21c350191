"""Multi-scale at depth: known answers, per-scale noise, exactness and the driver's guards.

Each check names its outside reference.  Fields are built here from analytic shapes.
"""

import numpy as np
import pytest
from scipy.signal import fftconvolve

import skyscale
from skyscale import Engine, deconvolve
from skyscale.core.engine import REENTRY
from skyscale.core.fft import MultiConvolver
from skyscale.core.noise import scale_noise
from skyscale.core.scales import scale_kernel
from tests.conftest import gaussian_psf, observe

N = 64


@pytest.fixture(scope="module")
def psf64():
    return gaussian_psf(N, sigma=1.6, ring=0.04, bowl=0.02)


def test_scale_beams_match_scipy_fftconvolve(psf64):
    # Reference: scipy.signal.fftconvolve, PSF (*) s_k (*) s_k at every offset.
    engine = Engine(psf64, [0, 4, 10], image_shape=(N, N))
    for k, kern in enumerate(engine.kernels):
        kk = fftconvolve(kern.astype(np.float64), kern.astype(np.float64))
        full = fftconvolve(psf64.astype(np.float64), kk)       # PSF zero beyond its edge
        c = N + kk.shape[0] // 2                                 # zero offset in `full`
        ref = full[c - (N - 1):c + N, c - (N - 1):c + N]
        np.testing.assert_allclose(engine.beams[k], ref, atol=2e-6)
        assert engine.beam_peaks[k] == pytest.approx(ref[N - 1, N - 1], rel=1e-5)


@pytest.mark.parametrize("scale", [6.0, 12.0])
def test_a_source_shaped_like_a_scale_is_found_there_with_its_flux(psf64, scale):
    # Analytic: the sky is exactly a0 * s_j at p; by Cauchy-Schwarz on the PSF's inner
    # product the penalised response peaks at (p, j), and the components sum to a0.
    kern = scale_kernel(scale, dtype=np.float64)
    h = kern.shape[0] // 2
    sky = np.zeros((N, N))
    p = (30, 35)
    sky[p[0] - h:p[0] + h + 1, p[1] - h:p[1] + h + 1] = 2.0 * kern
    r = deconvolve(observe(sky, psf64), psf64, scales=[0, 3, 6, 12], threshold=1e-5,
                   size_penalty=0.0, max_components=5000, restore=False)
    first = r.components[0]
    assert (first["y"], first["x"], first["scale"]) == (p[0], p[1], scale)
    on_scale = r.components["scale"] == scale
    assert r.components["flux"][on_scale].sum() == pytest.approx(2.0, rel=0.02)
    assert r.model.sum() == pytest.approx(2.0, rel=0.005)


def test_a_gaussian_of_known_flux_is_recovered_to_one_percent(psf64):
    # Analytic: a round Gaussian of integrated flux S = A 2 pi sigma^2.
    yy, xx = np.mgrid[:N, :N]
    sigma, amp = 5.0, 0.01
    sky = amp * np.exp(-((yy - 31) ** 2 + (xx - 29) ** 2) / (2 * sigma ** 2))
    flux = amp * 2 * np.pi * sigma ** 2
    r = deconvolve(observe(sky, psf64), psf64, scales=[0, 4, 8, 16], threshold=1e-6,
                   max_components=20000, restore=False)
    assert r.model.sum() == pytest.approx(flux, rel=0.01)
    finite = r.components["scale"] > 0
    assert r.components["flux"][finite].sum() > 0.8 * flux


def test_restored_image_matches_truth_convolved_with_the_restoring_beam():
    # Reference: astropy.convolution.convolve_fft with a Gaussian2DKernel of the fitted
    # beam (FWHM = 2.3548 sigma), compared within the noise.
    from astropy.convolution import Gaussian2DKernel, convolve_fft
    n = 96
    psf = gaussian_psf(n, sigma=1.8, ring=0.03, bowl=0.02)
    yy, xx = np.mgrid[:n, :n]
    sky = 2e-4 * np.exp(-((yy - 50) ** 2 + (xx - 44) ** 2) / (2 * 7.0 ** 2))
    sky[np.hypot(yy - 30, xx - 62) < 8] += 1e-4
    sky[20, 25] += 0.02
    noise = 2e-5
    dirty = observe(sky, psf, noise=noise, seed=5)
    r = deconvolve(dirty, psf, scales=[0, 4, 8, 16], noise_threshold=3, mask="auto",
                   max_components=30000)
    b = r.beam
    assert b.major == pytest.approx(2.3548 * 1.8, rel=0.03)
    fwhm_to_sigma = 1 / (2 * np.sqrt(2 * np.log(2)))
    kernel = Gaussian2DKernel(b.major * fwhm_to_sigma, b.minor * fwhm_to_sigma,
                              theta=np.deg2rad(b.pa), x_size=41, y_size=41)
    kernel.normalize("peak")      # Jy/pixel -> Jy/beam: a peak-1 beam
    truth = convolve_fft(sky, kernel.array, normalize_kernel=False, boundary="fill")
    inner = np.s_[10:-10, 10:-10]
    diff = (r.restored - truth)[inner]
    assert np.abs(diff).max() < 6 * noise
    assert abs(diff.mean()) < 0.3 * noise


def test_per_scale_noise_of_smoothed_white_noise_is_sigma_sqrt_sum_kernel_squared():
    # Analytic: a unit-sum kernel s turns white noise sigma into sigma sqrt(sum s^2).
    rng = np.random.default_rng(8)
    sigma = 3.0
    image = rng.normal(0.0, sigma, (512, 512))
    scales = [0, 4, 8, 16]
    kernels = [scale_kernel(s, dtype=np.float64) for s in scales]
    planes = MultiConvolver(kernels, image.shape, backend="numpy")(image, dtype=np.float64)
    radii = [k.shape[0] // 2 for k in kernels]
    measured, used, how = scale_noise(planes, radii)
    expected = sigma * np.sqrt([np.sum(k ** 2) for k in kernels])
    np.testing.assert_allclose(measured, expected, rtol=0.05)
    assert all(h.startswith("measured") for h in how) and np.all(used > 1000)


def test_noise_is_not_inflated_by_unmasked_emission():
    # Rousseeuw & Croux 1993: the MAD ignores outliers; with clipping, bright emission
    # over a fifth of the image leaves the estimate within 10 % of the true noise.
    rng = np.random.default_rng(2)
    image = rng.normal(0.0, 1.0, (256, 256))
    image[40:150, 60:180] += 30.0
    sigma, used, how = scale_noise(image[None], [0])
    assert sigma[0] == pytest.approx(1.0, rel=0.1)


def _pipeline_field():
    n = 96
    psf = gaussian_psf(n, sigma=1.7, ring=0.06, bowl=0.03)
    yy, xx = np.mgrid[:n, :n]
    sky = 3e-4 * np.exp(-((yy - 40) ** 2 + (xx - 50) ** 2) / (2 * 9.0 ** 2))
    sky[np.hypot(yy - 62, xx - 30) < 12] += 2e-4
    for y, x, f in ((20, 20, 0.3), (70, 70, 0.05), (45, 48, 0.02)):
        sky[y, x] += f
    return psf, sky, observe(sky, psf, noise=3e-5, seed=9)


def test_pipeline_loop_over_minor_cycle_never_raises_the_peak():
    # A pipeline's own loop with an exact operator (linear algebra: the image-plane
    # residual with a twice-size PSF); its minor cycles must never raise the peak
    # residual in the mask above the larger of its previous value and 1.1 times the
    # delta scale's stop level (skyscale.core.levels.LEVEL_ALLOWANCE).
    psf, sky, dirty = _pipeline_field()
    engine = Engine(psf, [0, 4, 8, 16], image_shape=dirty.shape)
    operator = skyscale.ImagePlaneOperator(dirty, psf)
    model = np.zeros_like(dirty)
    residual = dirty
    peaks = [float(np.abs(dirty).max())]
    level0 = 0.0
    for _ in range(12):
        step = engine.minor_cycle(residual, model, noise_threshold=3, cycle_depth=0.2)
        level0 = step.scale_levels[0]
        if step.components.size == 0:
            break
        model = step.model
        residual = operator(model)
        np.testing.assert_allclose(residual, step.residual, atol=1e-6 * peaks[0])
        peaks.append(float(np.abs(residual).max()))
        # the reason the cycle gives is true of its own figures (skyscale.core.stops)
        ends, slack = step.scale_peaks_end, 1 + 1e-4
        if step.stop_reason == "threshold":      # every scale at its stop level
            assert np.all(ends <= step.scale_levels * slack), step.stop_reason
        elif step.stop_reason == "depth":        # every scale at its floor for this cycle,
            # or under the margin that takes a scale up again (skyscale.core.engine.REENTRY)
            floors = np.maximum(step.scale_floors * REENTRY, step.scale_levels)
            assert np.all(ends <= floors * slack), step.stop_reason
        else:
            assert step.stop_reason == "peak_rose" and step.rejected > 0, step.stop_reason
    assert len(peaks) > 4
    for before, after in zip(peaks, peaks[1:]):
        assert after <= max(before, 1.1 * level0) * (1 + 1e-4)
    assert peaks[-1] < 1e-3 * peaks[0]


def _scaled_operator(dirty, psf, factor):
    """A pipeline operator whose real response is ``factor`` times the engine's PSF."""
    op = skyscale.ImagePlaneOperator(dirty, psf)
    return lambda model: dirty - factor * (dirty - op(model))


def test_an_inexact_operator_triggers_a_rollback_and_the_run_recovers():
    psf, sky, dirty = _pipeline_field()
    r = deconvolve(dirty, psf, scales=[0, 4, 8], operator=_scaled_operator(dirty, psf, 2.5),
                   max_major_cycles=6, cycle_depth=0.2, restore=False)
    assert r.rollbacks >= 1
    assert any("rolled back" in w for w in r.warnings)
    peaks = [h.peak for h in r.history]
    assert all(b <= a * (1 + 1e-4) for a, b in zip(peaks, peaks[1:]))


def test_a_wildly_wrong_operator_stops_as_diverging_with_the_last_good_model():
    psf, sky, dirty = _pipeline_field()
    r = deconvolve(dirty, psf, scales=[0, 4], operator=_scaled_operator(dirty, psf, 12.0),
                   restore=False)
    assert r.stop_reason == "diverging"
    assert r.rollbacks == 3
    assert r.components.size == 0 and not r.model.any()


def test_an_operator_that_ignores_the_model_stops_as_no_progress():
    psf, sky, dirty = _pipeline_field()
    r = deconvolve(dirty, psf, scales=[0, 4], operator=lambda model: dirty,
                   max_major_cycles=10, restore=False)
    assert r.stop_reason == "no_progress"
    assert len(r.history) == 4          # the dirty image and three stagnant cycles


def test_non_finite_residual_stops_as_diverging():
    psf, sky, dirty = _pipeline_field()
    calls = []

    def operator(model):
        calls.append(1)
        out = skyscale.ImagePlaneOperator(dirty, psf)(model)
        if len(calls) >= 2:
            out[5, 5] = np.nan
        return out

    r = deconvolve(dirty, psf, scales=[0, 4], operator=operator, restore=False)
    assert r.stop_reason == "diverging"
    assert np.all(np.isfinite(r.model)) and np.all(np.isfinite(r.residual))
    assert len(r.history) == 2


def test_same_size_psf_reaches_the_flux_of_a_twice_size_psf():
    # Linear algebra: with emission in the inner half the residual there is exact
    # with a PSF of the image's size, so the model must agree within 1 %.
    n = 128
    big = gaussian_psf(n, sigma=1.8, ring=0.05, bowl=0.02)
    same = big[n // 2:n // 2 + n, n // 2:n // 2 + n]
    yy, xx = np.mgrid[:n, :n]
    sky = 4e-4 * np.exp(-((yy - 60) ** 2 + (xx - 68) ** 2) / (2 * 8.0 ** 2))
    sky[50, 50] += 0.05
    dirty = observe(sky, big, noise=2e-5, seed=4)
    kw = dict(scales=[0, 4, 8, 16], noise_threshold=3, mask="auto", restore=False)
    r2 = deconvolve(dirty, big, **kw)
    with pytest.warns(UserWarning, match="exact only within"):
        r1 = deconvolve(dirty, same, **kw)
    assert r1.model.sum() == pytest.approx(r2.model.sum(), rel=0.01)
    assert r1.model.sum() == pytest.approx(sky.sum(), rel=0.02)
    assert r1.stop_reason == "noise"
    assert r1.scale_noise[0] == pytest.approx(2e-5, rel=0.3)


def test_mask_auto_selects_the_automatic_mask(psf64):
    yy, xx = np.mgrid[:N, :N]
    sky = np.where(np.hypot(yy - 30, xx - 30) < 8, 2e-4, 0.0)
    dirty = observe(sky, psf64, noise=1e-5, seed=1)
    r = deconvolve(dirty, psf64, scales=[0, 4, 8], mask="auto", noise_threshold=3,
                   restore=False)
    assert r.mask is not None and 0 < r.mask.sum() < 0.5 * N * N
    assert r.mask[30, 30]
    with pytest.raises(ValueError, match="mask is 'everywhere'"):
        deconvolve(dirty, psf64, mask="everywhere")
