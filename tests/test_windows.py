"""The measurement window of a compact mask in a large image (`skyscale.core.windows`).

References: the smoothed residual inside the window is checked against
``scipy.signal.fftconvolve`` of the whole image with each scale kernel (a reference
library); the window's geometry against its definition.
"""

import numpy as np
import pytest
from scipy.signal import fftconvolve

from skyscale import Engine
from skyscale.core.windows import MIN_WINDOW, WINDOW_STEP, measurement_window
from tests.conftest import gaussian_psf

N = 2 * MIN_WINDOW + WINDOW_STEP       # a window can be under half this image


def _mask(n, y0, y1, x0, x1):
    mask = np.zeros((n, n), bool)
    mask[y0:y1, x0:x1] = True
    return mask


def test_no_window_without_a_compact_mask():
    assert measurement_window(None, (N, N), 10) is None
    assert measurement_window(np.zeros((N, N), bool), (N, N), 10) is None
    spread = _mask(N, 0, 4, 0, 4) | _mask(N, N - 4, N, N - 4, N)
    assert measurement_window(spread, (N, N), 10) is None


def test_window_holds_the_mask_and_its_margin_inside_the_image():
    for y0, x0 in [(5, 7), (N // 2, N // 3), (N - 30, N - 40)]:
        mask = _mask(N, y0, y0 + 20, x0, x0 + 25)
        wy0, wy1, wx0, wx1 = measurement_window(mask, (N, N), 50)
        assert 0 <= wy0 and wy1 <= N and 0 <= wx0 and wx1 <= N
        assert wy1 - wy0 == wx1 - wx0 == MIN_WINDOW
        assert wy0 <= max(y0 - 50, 0) and min(y0 + 20 + 50, N) <= wy1
        assert wx0 <= max(x0 - 50, 0) and min(x0 + 25 + 50, N) <= wx1


def test_measure_in_a_window_matches_scipy_smoothing_over_the_mask():
    rng = np.random.default_rng(3)
    psf = gaussian_psf(N, sigma=2.0)
    residual = rng.normal(0, 1e-3, (N, N)).astype(np.float32)
    residual[N // 2 - 3:N // 2 + 3, N // 2 - 3:N // 2 + 3] += 0.05
    mask = _mask(N, N // 2 - 10, N // 2 + 10, N // 2 - 10, N // 2 + 10)
    engine = Engine(psf, scales=[0, 4, 8], image_shape=(N, N), threads=1)
    state = engine.measure(residual, mask)
    assert state.window is not None
    y0, y1, x0, x1 = state.window
    r = max(engine.scales.support_radii)
    for k, kern in enumerate(engine.kernels):
        # reference: scipy's linear convolution of the whole residual
        ref = fftconvolve(residual.astype(np.float64), kern, mode="same")
        inner = (slice(y0 + r, y1 - r), slice(x0 + r, x1 - r))
        np.testing.assert_allclose(state.planes[k][inner], ref[inner], atol=2e-6)
    whole = engine.measure(residual, None)
    allowed = engine.allowed(mask)
    for k in range(engine.n_scales):
        assert state.peaks[k] == pytest.approx(np.abs(whole.planes[k][allowed[k]]).max(),
                                               rel=1e-5)
    # the smallest scale's noise off the mask: 1e-3 within the MAD's scatter
    # (1.17 / sqrt(N) for N independent samples, Rousseeuw & Croux 1993)
    assert state.noise[0] == pytest.approx(1e-3, rel=0.05)
