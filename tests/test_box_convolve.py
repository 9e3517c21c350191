"""The PSF's response to a model in a box (`skyscale.core.box_convolve.BoxConvolver`).

Reference: ``scipy.signal.fftconvolve`` (a reference library) of the whole model with
the PSF, ``out[q] = full[q + c]``, the PSF zero beyond its edge.
"""

import numpy as np
import pytest
from scipy.signal import fftconvolve

from skyscale import ImagePlaneOperator
from skyscale.core.box_convolve import BOX_STEP, BoxConvolver


def _reference(model, psf):
    full = fftconvolve(model.astype(np.float64), psf.astype(np.float64), mode="full")
    cy, cx = psf.shape[0] // 2, psf.shape[1] // 2
    return full[cy:cy + model.shape[0], cx:cx + model.shape[1]]


@pytest.mark.parametrize("psf_factor", [2, 1])         # exact PSF, and a PSF cut short
@pytest.mark.parametrize("where", [(600, 650, 700, 720), (0, 5, 1000, 1024),
                                   (1010, 1024, 0, 30)])
def test_box_response_matches_scipy(psf_factor, where):
    n = 1024
    rng = np.random.default_rng(8)
    psf = rng.normal(size=(psf_factor * n, psf_factor * n))
    psf[psf.shape[0] // 2, psf.shape[1] // 2] = 1.0
    model = np.zeros((n, n))
    y0, y1, x0, x1 = where
    model[y0:y1, x0:x1] = rng.normal(size=(y1 - y0, x1 - x0))
    conv = BoxConvolver(psf, (n, n), precision=np.float64)
    box = conv.box_for(model)
    if psf_factor == 2:     # a PSF of the image's size has a small whole-image grid already
        assert box is not None and all(v % BOX_STEP == 0 or v == n for v in box)
    box = (y0 // BOX_STEP * BOX_STEP, y1, x0 // BOX_STEP * BOX_STEP, x1)
    got = conv(model, box)
    ref = _reference(model, psf)
    np.testing.assert_allclose(got, ref, atol=1e-9 * np.abs(ref).max())


def test_a_spread_model_takes_the_whole_image_grid():
    model = np.zeros((512, 512))
    model[3, 3] = model[500, 500] = 1.0
    assert BoxConvolver(np.ones((1024, 1024)), (512, 512)).box_for(model) is None
    assert BoxConvolver(np.ones((1024, 1024)), (512, 512)).box_for(0 * model) is None


def test_operator_gives_the_same_residual_either_way():
    n = 1024
    rng = np.random.default_rng(9)
    psf = (0.1 * rng.normal(size=(2 * n, 2 * n))).astype(np.float32)
    psf[n, n] = 1.0
    dirty = rng.normal(size=(n, n)).astype(np.float32)
    model = np.zeros((n, n), np.float32)
    model[400:420, 300:330] = rng.normal(size=(20, 30))
    op = ImagePlaneOperator(dirty, psf)
    assert op._box_conv.box_for(model) is not None
    ref = dirty - _reference(model, psf)
    np.testing.assert_allclose(op(model), ref, atol=2e-5 * np.abs(ref).max())
