"""Property tests of `deconvolve` with hypothesis: whatever the shapes, scales, gains,
thresholds and masks, the result is a result or one InputError; the model flux is
finite; the peak residual inside the mask never exceeds the dirty image's there.

The last property is the guarantee the driver documents (a major cycle that raises the
peak residual in the mask is rolled back).  Examples are few and small so the whole
module runs in seconds once the kernels are compiled; the deadline is off because the
first example compiles them.
"""

import warnings

import numpy as np
from hypothesis import HealthCheck, event, given, settings, strategies as st

from skyscale import STOP_REASONS, InputError, deconvolve
from conftest import gaussian_psf, observe

SETTINGS = settings(max_examples=40, deadline=None, derandomize=True,
                    suppress_health_check=[HealthCheck.too_slow])


@st.composite
def problems(draw, valid):
    """A field, its PSF and options; ``valid`` draws only options inside their ranges."""
    n = draw(st.integers(12, 40))
    sigma = draw(st.floats(1.0, 3.0))
    psf = gaussian_psf(n, sigma=sigma, ring=draw(st.sampled_from([0.0, 0.05])))
    rng = np.random.default_rng(draw(st.integers(0, 2 ** 16)))
    sky = np.zeros((n, n))
    for _ in range(draw(st.integers(0, 4))):
        sky[rng.integers(0, n), rng.integers(0, n)] += rng.uniform(-0.2, 1.0)
    dirty = observe(sky, psf, noise=draw(st.sampled_from([0.0, 1e-3])),
                    seed=int(rng.integers(1000)))
    kind = draw(st.sampled_from(["none", "box", "random"]))
    mask = None
    if kind == "box":
        y0, x0 = draw(st.integers(0, n - 1)), draw(st.integers(0, n - 1))
        h, w = draw(st.integers(1, n)), draw(st.integers(1, n))
        mask = np.zeros((n, n), bool)
        mask[y0:y0 + h, x0:x0 + w] = True
    elif kind == "random":
        mask = rng.random((n, n)) < draw(st.floats(0.0, 1.0))
    if valid:
        scales = draw(st.lists(st.sampled_from([0, 1, 2, 3, 4, 6, 8, 12]), min_size=1,
                               max_size=4, unique=True))
        options = dict(
            scales=scales, loop_gain=draw(st.floats(0.02, 1.0)),
            threshold=draw(st.one_of(st.just(0.0), st.floats(0.0, 0.05))),
            noise_threshold=draw(st.one_of(st.none(), st.floats(0.5, 6.0))),
            max_components=draw(st.integers(1, 150)),
            max_major_cycles=draw(st.integers(1, 4)),
            size_penalty=draw(st.floats(0.0, 0.95)))
    else:
        scales = draw(st.lists(st.sampled_from([0, 1, 2, 4, 8, 16, 24, 48, -2]), min_size=1,
                               max_size=4))
        options = dict(
            scales=scales, loop_gain=draw(st.floats(-0.2, 1.2)),
            threshold=draw(st.floats(-1e-3, 0.05)),
            noise_threshold=draw(st.one_of(st.none(), st.floats(-1.0, 6.0))),
            max_components=draw(st.integers(-1, 150)),
            max_major_cycles=draw(st.integers(0, 4)),
            size_penalty=draw(st.floats(0.0, 1.0)))
    options.update(dtype=draw(st.sampled_from([None, np.float64])), mask=mask, restore=False)
    return dirty, psf, options


def _run(problem):
    """Run one problem; return the result, or None after checking an InputError."""
    dirty, psf, options = problem
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            r = deconvolve(dirty, psf, **options)
        except InputError as exc:
            assert "\n" not in str(exc)
            event(f"InputError: {str(exc).split(' ')[0]}")
            return None
    event(f"result: {r.stop_reason}")
    assert r.stop_reason in STOP_REASONS
    assert np.isfinite(r.model).all() and np.isfinite(r.residual).all()
    assert np.isfinite(float(r.model.sum(dtype=np.float64)))
    inside = np.ones(dirty.shape, bool) if options["mask"] is None else options["mask"]
    dirty_peak = float(np.abs(dirty[inside]).max())
    assert float(np.abs(r.residual[inside]).max()) <= dirty_peak * (1 + 1e-5) + 1e-7
    assert r.components.size <= max(options["max_components"], 0)
    if options["mask"] is not None and r.components.size:
        assert inside[r.components["y"], r.components["x"]].all()
    return r


@SETTINGS
@given(problems(valid=True))
def test_valid_options_give_a_result_that_keeps_the_promises(problem):
    r = _run(problem)
    if r is None:   # only the mask may still be refused: empty, or leaving out all emission
        mask = problem[2]["mask"]
        assert mask is not None


@SETTINGS
@given(problems(valid=False))
def test_any_options_give_a_result_or_one_input_error(problem):
    _run(problem)
