"""End-to-end deconvolution against analytic results and the known truth of synthetic fields."""

import numpy as np
import pytest

import skyscale
from skyscale import Engine, ImagePlaneOperator, deconvolve
from tests.conftest import NOISE, gaussian_psf, observe
import skyscale.core.noise  # noqa: E402


def test_hogbom_recovers_isolated_point_sources_at_the_exact_pixels():
    # Hogbom 1974: on a known PSF each isolated point source comes back as components
    # at its own pixel whose fluxes add up to the source's flux.
    psf = gaussian_psf(64, sigma=1.5, ring=0.05)
    sky = np.zeros((64, 64))
    truth = {(10, 12): 1.0, (40, 50): 0.5, (55, 8): 2.0, (30, 30): 0.25}
    for (y, x), s in truth.items():
        sky[y, x] = s
    r = deconvolve(observe(sky, psf), psf, scales=[0], threshold=1e-4, max_components=5000,
                   restore=False)
    assert r.stop_reason == "threshold"
    assert set(zip(r.components["y"], r.components["x"])) == set(truth)
    for (y, x), s in truth.items():
        assert r.model[y, x] == pytest.approx(s, rel=0.01)


@pytest.mark.parametrize("gain, n", [(0.1, 7), (0.3, 5), (0.5, 3)])
def test_residual_after_n_components_is_s_times_one_minus_g_to_the_n(gain, n):
    # analytic (Hogbom 1974): one source of flux S; after n components at its pixel the
    # residual there is S (1 - g)^n.
    psf = gaussian_psf(32, sigma=1.5)
    sky = np.zeros((32, 32))
    sky[15, 17] = 3.0
    r = deconvolve(observe(sky, psf), psf, scales=[0], loop_gain=gain, max_components=n,
                   restore=False)
    assert r.components.size == n
    assert r.stop_reason == "max_components"
    assert r.residual[15, 17] == pytest.approx(3.0 * (1 - gain) ** n, rel=1e-4)
    assert r.model[15, 17] == pytest.approx(3.0 * (1 - (1 - gain) ** n), rel=1e-4)


def _components_to_reach(result, level):
    for rec in result.history:
        if rec.peak <= level:
            return rec.components
    return None


def test_multiscale_needs_far_fewer_components_and_recovers_more_flux(extended_case):
    # common practice (Cornwell 2008): on extended emission multi-scale CLEAN reaches a
    # given residual with far fewer components and recovers more flux than delta CLEAN.
    sky, psf, dirty = extended_case
    kw = dict(threshold=3e-4, max_components=30000, max_major_cycles=40, restore=False)
    delta = deconvolve(dirty, psf, scales=[0], **kw)
    multi = deconvolve(dirty, psf, scales=[0, 4, 8, 16, 32], **kw)
    level = max(delta.history[-1].peak, multi.history[-1].peak)
    n_delta = _components_to_reach(delta, level)
    n_multi = _components_to_reach(multi, level)
    assert n_delta is not None and n_multi is not None
    assert n_delta >= 3 * n_multi
    true_flux = sky.sum()
    assert abs(multi.model.sum() - true_flux) < abs(delta.model.sum() - true_flux)


def test_multiscale_converged_to_the_noise_recovers_the_flux_within_two_percent(extended_case):
    # common practice: once converged to the noise the model holds the true flux (2 %).
    sky, psf, dirty = extended_case
    r = deconvolve(dirty, psf, scales=[0, 4, 8, 16, 32], threshold=3 * NOISE,
                   max_components=30000, max_major_cycles=60, restore=False)
    assert r.stop_reason == "threshold"
    assert r.model.sum() == pytest.approx(sky.sum(), rel=0.02)


def test_noise_threshold_stops_at_a_multiple_of_the_robust_noise(extended_case):
    # Rousseeuw & Croux 1993: sigma = 1.4826 MAD, measured outside the mask.
    sky, psf, dirty = extended_case
    from scipy import ndimage
    mask = ndimage.binary_dilation(sky > 1e-5, iterations=8)
    r = deconvolve(dirty, psf, scales=[0, 4, 8, 16, 32], noise_threshold=5.0, mask=mask,
                   max_components=30000, max_major_cycles=60, restore=False)
    assert r.stop_reason == "noise"
    sigma = r.scale_noise[0]          # the delta scale's noise, measured outside the mask
    assert sigma == pytest.approx(NOISE, rel=0.3)
    assert sigma == pytest.approx(skyscale.core.noise.robust_noise(r.residual, mask), rel=0.1)
    assert r.scale_levels[0] == pytest.approx(5.0 * sigma)
    assert r.history[-1].peak <= r.scale_levels[0] * 1.05    # cycles.LEVEL_SLACK
    assert r.history[-2].peak > 5.0 * skyscale.core.noise.robust_noise(r.residual, mask) * 0.9


def test_peak_residual_in_a_fixed_mask_never_grows():
    # The run's robustness guarantee for a mask that stays the same (a growing emission
    # mask takes in new pixels, whose peak may be higher): emission cut by the image
    # edge plus noise.
    psf = gaussian_psf(96, sigma=2.0, ring=0.1)
    n = 96
    yy, xx = np.mgrid[:n, :n]
    sky = 0.003 * np.exp(-((yy - 5) ** 2 + (xx - 48) ** 2) / (2 * 10.0 ** 2))
    sky[np.hypot(yy - 70, xx - 88) < 14] += 0.001
    dirty = observe(sky, psf, noise=1e-3, seed=4)
    mask = np.zeros((n, n), bool)
    mask[:40, 10:90] = True
    mask[50:, 60:] = True
    r = deconvolve(dirty, psf, scales=[0, 4, 8, 16, 32], mask=mask, noise_threshold=1.0,
                   max_components=20000, max_major_cycles=30, restore=False)
    peaks = [h.peak for h in r.history]
    assert len(peaks) > 2
    assert all(b <= a * (1 + 1e-6) for a, b in zip(peaks, peaks[1:]))
    assert np.all(mask[r.components["y"], r.components["x"]])
    # large scales keep their kernels inside the image
    big = r.components["scale"] == 32
    assert np.all(r.components["y"][big] >= 16) and np.all(r.components["x"][big] <= n - 17)


def test_mask_with_no_allowed_centre_is_an_empty_cycle():
    # Without a delta scale no component may be centred within a kernel's radius of the
    # edge; a mask that lies only there leaves nothing to clean (it used to crash).
    psf = gaussian_psf(32)
    engine = Engine(psf, [4, 8], image_shape=(32, 32), threads=1)
    residual = np.random.default_rng(0).normal(size=(32, 32)).astype(np.float32)
    mask = np.zeros((32, 32), bool)
    mask[0, 0] = True
    r = engine.minor_cycle(residual, mask=mask)
    assert r.stop_reason == "empty" and r.components.size == 0
    assert r.peak_start == r.peak_end == pytest.approx(abs(float(residual[0, 0])))
    np.testing.assert_array_equal(r.model, 0.0)


def test_function_operator_checks_its_shape_both_ways():
    # The shape FunctionOperator stores is the contract: a model of another shape is
    # refused before the function runs, and so is a residual of another shape.
    calls = []
    op = skyscale.FunctionOperator(lambda m: calls.append(m.shape) or np.zeros((8, 8)),
                                   (8, 8))
    assert op(np.zeros((8, 8))).dtype == np.float32
    with pytest.raises(skyscale.InputError, match="model of shape \\(4, 4\\)"):
        op(np.zeros((4, 4)))
    assert calls == [(8, 8)]
    wrong = skyscale.FunctionOperator(lambda m: np.zeros((4, 4)), (8, 8))
    with pytest.raises(skyscale.InputError, match="returned a residual of shape"):
        wrong(np.zeros((8, 8)))


def test_pipeline_engine_with_own_operator_matches_deconvolve(extended_case):
    sky, psf, dirty = extended_case
    scales = [0, 4, 16]
    engine = Engine(psf, scales, image_shape=dirty.shape)
    op = ImagePlaneOperator(dirty, psf)   # stands for the pipeline's own degrid/grid
    residual, model = dirty.copy(), np.zeros_like(dirty)
    peaks = []
    for _ in range(5):
        mc = engine.minor_cycle(residual, model, cycle_depth=0.2)
        model = mc.model
        residual = op(model)
        peaks.append(float(np.abs(residual).max()))
    ref = deconvolve(dirty, psf, scales=scales, max_major_cycles=5, restore=False,
                     max_components=100000)
    assert peaks == pytest.approx([h.peak for h in ref.history[1:6]], rel=1e-5)
    np.testing.assert_allclose(model, ref.model, atol=1e-7)
    own = deconvolve(dirty, psf, scales=scales, max_major_cycles=5, restore=False,
                     max_components=100000, operator=lambda m: op(m))
    np.testing.assert_allclose(own.model, ref.model, atol=1e-7)


def test_result_does_not_depend_on_the_thread_count(extended_case):
    sky, psf, dirty = extended_case
    a = deconvolve(dirty, psf, scales=[0, 4, 8], threads=1, max_major_cycles=3, restore=False)
    b = deconvolve(dirty, psf, scales=[0, 4, 8], threads=2, max_major_cycles=3, restore=False)
    np.testing.assert_array_equal(a.components, b.components)
    np.testing.assert_array_equal(a.model, b.model)


def test_dtypes_follow_the_one_rule(extended_case):
    sky, psf, dirty = extended_case
    r32 = deconvolve(dirty, psf, scales=[0, 4], max_major_cycles=1, restore=False)
    r64 = deconvolve(dirty, psf, scales=[0, 4], max_major_cycles=1, dtype=np.float64,
                     restore=False)
    assert r32.model.dtype == r32.residual.dtype == np.float32
    assert r64.model.dtype == r64.residual.dtype == np.float64
    np.testing.assert_allclose(r32.model, r64.model, atol=1e-6)


def test_same_size_psf_warns_with_the_approximate_region():
    psf = gaussian_psf(16, sigma=1.5)          # 32 x 32, same as the image
    sky = np.zeros((32, 32))
    sky[3, 4] = 1.0
    dirty = observe(sky, gaussian_psf(32, sigma=1.5))
    with pytest.warns(UserWarning, match="exact only within"):
        r = deconvolve(dirty, psf, scales=[0], threshold=1e-3, restore=False)
    assert any("exact only within" in w for w in r.warnings)


def test_restored_point_source_peak_equals_its_flux():
    # analytic: a point model convolved with a peak-1 beam has peak S Jy/beam.
    psf = gaussian_psf(48, sigma=2.0)
    sky = np.zeros((48, 48))
    sky[20, 25] = 1.5
    r = deconvolve(observe(sky, psf), psf, scales=[0, 4], threshold=1e-5, max_components=5000)
    assert r.beam.major == pytest.approx(2 * np.sqrt(2 * np.log(2)) * 2.0, rel=0.01)
    assert r.restored[20, 25] == pytest.approx(1.5, rel=0.01)


@pytest.mark.parametrize("kwargs, match", [
    (dict(loop_gain=0.0), "loop_gain"),
    (dict(cycle_depth=1.5), "cycle_depth"),
    (dict(mask=np.ones((5, 5), bool)), "mask has shape"),
    (dict(scales=[0, -3]), "negative"),
])
def test_bad_input_gets_one_clear_error(kwargs, match, extended_case):
    sky, psf, dirty = extended_case
    with pytest.raises(ValueError, match=match):
        deconvolve(dirty, psf, max_major_cycles=1, restore=False, **kwargs)


def test_off_centre_psf_is_refused():
    psf = np.roll(gaussian_psf(16), 3, axis=1)
    with pytest.raises(ValueError, match="re-centre"):
        deconvolve(np.zeros((16, 16), np.float32), psf, restore=False)


def test_empty_mask_is_refused_before_any_work(extended_case):
    sky, psf, dirty = extended_case
    with pytest.raises(skyscale.InputError, match="mask allows no pixel"):
        deconvolve(dirty, psf, mask=np.zeros(dirty.shape, bool), restore=False)


def _textbook_hogbom(dirty, psf, gain, threshold, max_iter):
    """Hogbom 1974 as printed: find the peak, subtract gain * peak * shifted PSF, repeat."""
    res = dirty.astype(np.float64).copy()
    n = res.shape[0]
    c = psf.shape[0] // 2
    comps = []
    for _ in range(max_iter):
        y, x = np.unravel_index(int(np.argmax(np.abs(res))), res.shape)
        if abs(res[y, x]) <= threshold:
            break
        f = gain * res[y, x]
        comps.append((y, x, f))
        res -= f * psf[c - y:c - y + n, c - x:c - x + n]
    return comps, res


def test_delta_only_reproduces_textbook_hogbom():
    # Hogbom 1974: with a PSF patch covering every offset, one minor cycle is the
    # textbook algorithm, component for component.
    psf = gaussian_psf(40, sigma=1.7)
    sky = np.zeros((40, 40))
    for (y, x), s in {(8, 9): 1.0, (20, 31): 0.63, (33, 12): 0.41, (25, 22): 0.27}.items():
        sky[y, x] = s
    dirty = observe(sky, psf)
    comps, res = _textbook_hogbom(dirty, psf.astype(np.float64), 0.2, 1e-3, 500)
    r = deconvolve(dirty, psf, scales=[0], loop_gain=0.2, threshold=1e-3, psf_patch=40,
                   cycle_depth=0.0, max_major_cycles=1, restore=False)
    assert r.components.size == len(comps)
    assert [(int(c["y"]), int(c["x"])) for c in r.components] == [(y, x) for y, x, _ in comps]
    np.testing.assert_allclose(r.components["flux"], [f for _, _, f in comps], rtol=1e-4)
    np.testing.assert_allclose(r.residual, res, atol=1e-5)


def test_function_operator_built_for_another_shape_is_refused_before_the_run():
    from skyscale import FunctionOperator, InputError
    y, x = np.mgrid[-16:17, -16:17]
    psf = np.exp(-(x ** 2 + y ** 2) / (2 * 1.5 ** 2)).astype(np.float32)
    dirty = psf[8:25, 8:25].copy()
    calls = []
    op = FunctionOperator(lambda m: calls.append(1) or np.zeros((20, 20), np.float32), (20, 20))
    with pytest.raises(InputError, match=r"built for images of shape \(20, 20\)"):
        deconvolve(dirty, psf, scales=[0], operator=op)
    assert not calls
