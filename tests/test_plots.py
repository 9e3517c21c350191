"""Tests of skyscale.plots: the convergence and four-panel PNG figures."""

import math
import sys
import types
import warnings

import numpy as np
import pytest

pytest.importorskip("matplotlib")

from skyscale.plots import (CONVERGENCE_SIZE_PX, DPI, PANELS_SIZE_PX,  # noqa: E402
                            _panels_figure, _symmetric_asinh_class, plot_convergence,
                            plot_panels)
from skyscale.result import CycleRecord, DeconvolutionResult, empty_components  # noqa: E402

N = 32


def make_wcs(naxis=2, n=N):
    """An invented SIN-projected field, 2 arcsec pixels, RA growing to the left."""
    from astropy.wcs import WCS

    w = WCS(naxis=naxis)
    ctype = ["RA---SIN", "DEC--SIN", "FREQ"][:naxis]
    w.wcs.ctype = ctype
    w.wcs.crval = [201.5, -41.25, 1.4e9][:naxis]
    w.wcs.crpix = [n / 2 + 1, n / 2 + 1, 1][:naxis]
    w.wcs.cdelt = [-2 / 3600, 2 / 3600, 1e6][:naxis]
    w.wcs.cunit = ["deg", "deg", "Hz"][:naxis]
    w.wcs.set()
    return w


def make_result(*, beam=True, restored=True, history=True, empty=False):
    rng = np.random.default_rng(11)
    yy, xx = np.mgrid[:N, :N]
    sky = np.exp(-((yy - 12) ** 2 + (xx - 20) ** 2) / 8.0)
    comps = empty_components(0 if empty else 6)
    if not empty:
        comps["y"], comps["x"] = [12, 12, 13, 11, 20, 21], [20, 19, 20, 21, 8, 8]
        comps["scale"] = [0, 0, 0, 0, 4, 4]
        comps["flux"] = [0.5, 0.2, 0.2, 0.1, 0.3, 0.1]
    model = np.zeros((N, N), np.float32)
    np.add.at(model, (comps["y"], comps["x"]), comps["flux"].astype(np.float32))
    residual = np.zeros((N, N)) if empty else rng.normal(0, 0.01, (N, N))
    recs = [CycleRecord(0, 0, 1.0, 0.1, 0.0), CycleRecord(1, 4, 0.2, 0.02, 1.0, 4, "x"),
            CycleRecord(2, 6, 0.04, 0.0, 1.4, 2, "threshold")] if history else []
    return DeconvolutionResult(
        model=model, residual=residual, components=comps, stop_reason="threshold",
        history=recs, scales=(0.0, 4.0),
        restored=(sky + residual) if restored else None,
        beam=types.SimpleNamespace(major=6.0, minor=3.0, pa=30.0) if beam else None)


def dirty_image():
    yy, xx = np.mgrid[:N, :N]
    return np.exp(-((yy - 12) ** 2 + (xx - 20) ** 2) / 8.0) + 0.1 * np.cos(xx / 2.0)


def mask_image():
    mask = np.zeros((N, N), bool)
    mask[6:20, 12:28] = True
    return mask


def png_size(path):
    """(width, height) of a PNG read by reference libraries: PIL and matplotlib."""
    import matplotlib.image

    with open(path, "rb") as fh:
        assert fh.read(8) == b"\x89PNG\r\n\x1a\n"            # PNG signature (RFC 2083)
    height, width = matplotlib.image.imread(path).shape[:2]
    try:
        from PIL import Image
    except ImportError:
        return width, height
    with Image.open(path) as img:
        assert img.format == "PNG"
        img.verify()
        assert img.size == (width, height)
    return width, height


def test_documented_sizes():
    assert CONVERGENCE_SIZE_PX == (800, 500) and PANELS_SIZE_PX == (1000, 900)
    assert DPI == 100


def test_convergence_png(tmp_path):
    path = tmp_path / "convergence.png"
    assert plot_convergence(make_result(), path, threshold=0.05) == path
    assert png_size(path) == CONVERGENCE_SIZE_PX


def test_convergence_without_history_still_draws(tmp_path):
    path = plot_convergence(make_result(history=False), tmp_path / "c.png")
    assert png_size(path) == CONVERGENCE_SIZE_PX


def test_convergence_figure_content():
    from skyscale.plots import _convergence_figure

    fig = _convergence_figure(make_result())
    ax = fig.axes[0]
    assert ax.get_yscale() == "log"
    assert "Jy/beam" in ax.get_ylabel() and "components" in ax.get_xlabel()
    assert "threshold" in ax.get_title()
    # Two major cycles -> two vertical boundary lines, at 4 and 6 components.
    vlines = [line for line in ax.get_lines() if np.ptp(line.get_xdata()) == 0
              and len(line.get_xdata()) == 2 and line.get_linestyle() == ":"]
    assert sorted(float(line.get_xdata()[0]) for line in vlines) == [4.0, 6.0]


def test_panels_png_with_wcs_mask_and_beam(tmp_path):
    path = plot_panels(dirty_image(), make_result(), tmp_path / "panels.png",
                       wcs=make_wcs(), mask=mask_image())
    assert png_size(path) == PANELS_SIZE_PX


def test_panels_png_pixel_axes_without_mask_beam_or_restored(tmp_path):
    path = plot_panels(dirty_image(), make_result(beam=False, restored=False),
                       tmp_path / "panels.png")
    assert png_size(path) == PANELS_SIZE_PX


def test_panels_with_a_spectral_axis_use_the_celestial_part(tmp_path):
    path = plot_panels(dirty_image(), make_result(), tmp_path / "p.png",
                       wcs=make_wcs(naxis=3))
    assert png_size(path) == PANELS_SIZE_PX


def test_degenerate_images_draw_without_warnings(tmp_path):
    result = make_result(empty=True)
    result.restored = np.zeros((N, N))
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        path = plot_panels(np.zeros((N, N)), result, tmp_path / "p.png",
                           mask=np.ones((N, N), bool))
    assert png_size(path) == PANELS_SIZE_PX


def test_panel_labels_units_and_mask():
    fig = _panels_figure(dirty_image(), make_result(), None, mask_image())
    image_axes = [ax for ax in fig.axes if ax.get_images()]
    assert len(image_axes) == 4
    assert all(ax.get_xlabel() == "x (pixel)" for ax in image_axes)
    labels = [ax.get_ylabel() for ax in fig.axes if ax not in image_axes]   # colour bars
    assert labels == ["Jy/beam (dirty beam)", "Jy/pixel", "Jy/beam (dirty beam)",
                      "Jy/beam (restoring beam)"]
    assert all(len(ax.collections) == 1 for ax in image_axes)              # mask contour
    bare = _panels_figure(dirty_image(), make_result(), None, None)
    assert all(len(ax.collections) == 0 for ax in bare.axes if ax.get_images())
    # The residual's stretch puts zero in the middle of the diverging colour map.
    residual = image_axes[2].get_images()[0]
    assert float(residual.norm(0.0)) == pytest.approx(0.5)


def test_sky_axis_labels():
    fig = _panels_figure(dirty_image(), make_result(), make_wcs(), None)
    ax = fig.axes[0]
    assert ax.coords[0].get_axislabel().startswith("Right ascension")
    assert ax.coords[1].get_axislabel().startswith("Declination")


@pytest.mark.parametrize("pa", [0.0, 30.0, 90.0, -45.0])
def test_beam_ellipse_orientation(pa):
    result = make_result()
    result.beam.pa = pa
    fig = _panels_figure(dirty_image(), result, None, None)
    restored_ax = [ax for ax in fig.axes if ax.get_images()][3]
    (ellipse,) = [p for p in restored_ax.patches if type(p).__name__ == "Ellipse"]
    # Reference: matplotlib's own patch transform maps the unit circle's top
    # (0, 1) to the tip of the 'height' axis, which must be the major axis and
    # point north through east: (x, y) = (-sin pa, cos pa) * major / 2.
    centre = np.array(ellipse.center)
    tip = ellipse.get_patch_transform().transform([[0.0, 1.0]])[0] - centre
    side = ellipse.get_patch_transform().transform([[1.0, 0.0]])[0] - centre
    t = math.radians(pa)
    assert tip == pytest.approx([-3.0 * math.sin(t), 3.0 * math.cos(t)], abs=1e-9)
    assert np.hypot(*side) == pytest.approx(1.5)
    assert centre[0] < N / 3 and centre[1] < N / 3           # bottom-left corner


def test_symmetric_asinh_stretch_matches_astropy():
    from astropy.visualization import AsinhStretch

    stretch = _symmetric_asinh_class()(0.1)
    x = np.linspace(0.0, 1.0, 21)
    y = stretch(x)
    # Reference: astropy's AsinhStretch on the upper half, mirrored below the middle.
    upper = x >= 0.5
    expected = 0.5 + 0.5 * AsinhStretch(0.1)(2 * x[upper] - 1, clip=False)
    assert y[upper] == pytest.approx(expected)
    assert y == pytest.approx(1.0 - y[::-1])                 # odd about the middle
    assert stretch.inverse(y) == pytest.approx(x)
    out = np.empty_like(x)
    assert stretch(x, out=out) is out and out == pytest.approx(y)


def test_refuses_overwrite(tmp_path):
    path = tmp_path / "panels.png"
    path.write_bytes(b"keep")
    with pytest.raises(FileExistsError, match=r"panels\.png.*overwrite=True"):
        plot_panels(dirty_image(), make_result(), path)
    with pytest.raises(FileExistsError, match="overwrite=True"):
        plot_convergence(make_result(), path)
    assert path.read_bytes() == b"keep"
    plot_convergence(make_result(), path, overwrite=True)
    assert png_size(path) == CONVERGENCE_SIZE_PX
    assert [p.name for p in tmp_path.iterdir()] == ["panels.png"]     # no temp left


def test_bad_inputs_name_the_argument(tmp_path):
    out = tmp_path / "p.png"
    with pytest.raises(ValueError, match="dirty"):
        plot_panels(np.zeros((N, N + 1)), make_result(), out)
    with pytest.raises(ValueError, match="mask"):
        plot_panels(dirty_image(), make_result(), out, mask=np.ones((4, 4), bool))
    with pytest.raises(TypeError, match="wcs"):
        plot_panels(dirty_image(), make_result(), out, wcs={"CTYPE1": "RA---SIN"})
    wrong = make_wcs(n=N)
    wrong.pixel_shape = (N + 2, N)
    with pytest.raises(ValueError, match="wcs"):
        plot_panels(dirty_image(), make_result(), out, wcs=wrong)
    with pytest.raises(TypeError, match="result"):
        plot_convergence(object(), out)
    assert not out.exists()


def test_missing_matplotlib_says_how_to_install(monkeypatch, tmp_path):
    for name in [m for m in sys.modules if m == "matplotlib" or m.startswith("matplotlib.")]:
        monkeypatch.setitem(sys.modules, name, None)
    monkeypatch.setitem(sys.modules, "matplotlib", None)
    with pytest.raises(ImportError, match=r"pip install skyscale\[plots\]"):
        plot_convergence(make_result(), tmp_path / "c.png")
    with pytest.raises(ImportError, match=r"pip install skyscale\[plots\]"):
        plot_panels(dirty_image(), make_result(), tmp_path / "p.png")
