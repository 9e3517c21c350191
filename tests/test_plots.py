"""Tests of skyscale.io.figures.panels: the convergence and four-panel PNG figures.

What a figure shows is checked through its documented size, the matplotlib objects
the private builders return (lines, legends, titles) and a few statistics of the
rendered pixels (Agg canvas, RGBA buffer).
"""

import math
import sys
import types
import warnings

import numpy as np
import pytest

import skyscale

pytest.importorskip("matplotlib")

from skyscale.io.figures.common import DPI  # noqa: E402
from skyscale.io.figures.convergence import (CONVERGENCE_SIZE_PX,  # noqa: E402
                                             _convergence_figure, plot_convergence)
from skyscale.io.figures.panels import (PANELS_SIZE_PX, _panels_figure,  # noqa: E402
                                        _symmetric_asinh_class, plot_panels)
from skyscale.core.result import (CycleRecord, DeconvolutionResult, empty_components)  #noqa: E402
from tests.conftest import gaussian_psf, observe  # noqa: E402

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
    recs = [CycleRecord(0, 0, 1.0, 0.1, 0.0, scale_flux=[0.0, 0.0]),
            CycleRecord(1, 4, 0.2, 0.02, 1.0, 4, "x", scale_flux=[0.8, 0.2]),
            CycleRecord(2, 6, 0.04, 0.0, 1.4, 2, "threshold", scale_flux=[1.0, 0.4])] \
        if history else []
    return DeconvolutionResult(
        model=model, residual=residual, components=comps, stop_reason="threshold",
        history=recs, scales=(0.0, 4.0),
        restored=(sky + residual) if restored else None,
        beam=types.SimpleNamespace(major=6.0, minor=3.0, pa=30.0) if beam else None,
        scale_noise=[0.01, 0.004], scale_levels=[0.03, 0.01])


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


def rendered(fig):
    """The figure drawn by its Agg canvas: (height, width, 3) floats in [0, 1]."""
    fig.canvas.draw()
    return np.asarray(fig.canvas.buffer_rgba())[..., :3].astype(float) / 255.0


def axes_pixels(fig, ax, inset=3):
    """The rendered pixels inside ``ax`` (its spines and ``inset`` pixels cut off)."""
    rgb = rendered(fig)
    box = ax.get_window_extent()
    height = rgb.shape[0]
    rows = slice(int(height - box.y1) + inset, int(height - box.y0) - inset)
    cols = slice(int(box.x0) + inset, int(box.x1) - inset)
    return rgb[rows, cols]


def pixel_at(fig, ax, x, y):
    """The rendered RGB at data coordinates (x, y) of ``ax``."""
    rgb = rendered(fig)
    col, row = ax.transData.transform((x, y))
    return rgb[int(round(rgb.shape[0] - row)), int(round(col))]


def luminance(rgb):
    # Rec. 709 luma weights (ITU-R BT.709, from memory), on the stored sRGB values.
    return rgb[..., 0] * 0.2126 + rgb[..., 1] * 0.7152 + rgb[..., 2] * 0.0722


def point_and_disk_result(noise=1e-3):
    """A bright point (1 Jy) and a faint disk of 1 Jy over ~200 pixels, as a model."""
    n = 64
    yy, xx = np.mgrid[:n, :n]
    disk = (yy - 40) ** 2 + (xx - 24) ** 2 <= 8 ** 2
    model = np.zeros((n, n), np.float32)
    model[disk] = 1.0 / disk.sum()
    model[16, 48] = 1.0
    comps = empty_components(2)
    comps["y"], comps["x"], comps["scale"], comps["flux"] = [16, 40], [48, 24], [0, 16], 1.0
    return DeconvolutionResult(
        model=model, residual=np.zeros((n, n)), components=comps, stop_reason="noise",
        scales=(0.0, 16.0), restored=None,
        beam=types.SimpleNamespace(major=6.0, minor=3.0, pa=30.0),
        scale_noise=None if noise is None else [noise, noise / 4]), disk


def model_axes(fig):
    return [ax for ax in fig.axes if ax.get_images()][1]


def test_documented_sizes():
    assert CONVERGENCE_SIZE_PX == (800, 800) and PANELS_SIZE_PX == (1000, 900)
    assert DPI == 100


def test_convergence_png(tmp_path):
    path = tmp_path / "convergence.png"
    assert plot_convergence(make_result(), path, threshold=0.05) == path
    assert png_size(path) == CONVERGENCE_SIZE_PX


def test_convergence_without_history_still_draws(tmp_path):
    path = plot_convergence(make_result(history=False), tmp_path / "c.png")
    assert png_size(path) == CONVERGENCE_SIZE_PX


def test_convergence_figure_content():
    fig = _convergence_figure(make_result())
    ax, below = fig.axes[0], fig.axes[1]
    assert ax.get_yscale() == "log"
    assert "Jy/beam" in ax.get_ylabel() and "components" in below.get_xlabel()
    assert "threshold" in fig.get_suptitle()
    labels = [line.get_label() for line in ax.get_lines()]
    assert "peak |residual| in the image" in labels            # make_result has no mask
    masked = make_result()
    masked.mask = mask_image()
    labels = [line.get_label() for line in _convergence_figure(masked).axes[0].get_lines()]
    assert "peak |residual| in the mask" in labels and "rms residual in the mask" in labels
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
    assert labels == ["Jy/beam (dirty beam)", "Jy/beam (model (*) restoring beam)",
                      "Jy/beam (dirty beam)", "Jy/beam (restoring beam)"]
    contours = [[c for c in ax.collections if type(c).__name__ != "PathCollection"]
                for ax in image_axes]                        # scatter markers aside
    assert all(len(c) == 1 for c in contours)                # one mask contour each
    bare = _panels_figure(dirty_image(), make_result(), None, None)
    assert all(len([c for c in ax.collections if type(c).__name__ != "PathCollection"]) == 0
               for ax in bare.axes if ax.get_images())
    no_beam = _panels_figure(dirty_image(), make_result(beam=False), None, None)
    assert [ax.get_ylabel() for ax in no_beam.axes if not ax.get_images()][1] == "Jy/pixel"
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


# --------------------------------------------------------------------------- what a user sees

def test_model_panel_shows_faint_extended_flux_beside_a_bright_point():
    # A point holds 1 Jy in one pixel, a disk 1 Jy over ~200 pixels (5e-3 Jy/pixel):
    # drawn linearly from 0 to the peak the disk is black.  Smoothed by the restoring
    # beam (Jy/beam: Jy/pixel times the beam area in pixels, common practice) and
    # softened at the noise, both must show.
    result, disk = point_and_disk_result()
    fig = _panels_figure(np.zeros(disk.shape), result, None, None)
    ax = model_axes(fig)
    assert ax.get_title().startswith("Model smoothed by the restoring beam")
    pixels = axes_pixels(fig, ax)
    lum = luminance(pixels)
    # Not one colour: the disk and the smoothed point cover ~5 % of the panel each.
    assert np.mean(lum > 0.25) > 0.05
    assert lum.std() > 0.1
    assert len(np.unique(pixels.reshape(-1, 3), axis=0)) > 50
    # Away from both markers, inside the disk, is well above the empty sky.
    assert luminance(pixel_at(fig, ax, 24, 35)) > 0.4
    assert luminance(pixel_at(fig, ax, 5, 5)) < 0.05
    # The point stays the brightest: the disk is not stretched above it.
    image = ax.get_images()[0]
    norm = image.norm
    assert float(norm(image.get_array()[16, 48])) > float(norm(image.get_array()[40, 24]))


def test_model_panel_smooths_with_the_restoring_beam_in_jy_per_beam():
    # Reference: a point of S Jy restored with a peak-1 Gaussian beam peaks at S Jy/beam
    # (skyscale.core.beam.restore, checked against astropy's Gaussian2DKernel in test_beam).
    from skyscale.core.beam import Beam, restore

    result, disk = point_and_disk_result()
    image = model_axes(_panels_figure(np.zeros(disk.shape), result, None, None)).get_images()[0]
    expected = restore(result.model, None, Beam(6.0, 3.0, 30.0))
    assert np.asarray(image.get_array()) == pytest.approx(expected, abs=1e-6)
    assert float(image.get_array()[16, 48]) == pytest.approx(1.0, rel=0.02)


def test_model_panel_stretch_is_softened_at_the_noise():
    result, disk = point_and_disk_result(noise=2e-3)
    image = model_axes(_panels_figure(np.zeros(disk.shape), result, None, None)).get_images()[0]
    assert image.norm.vmin == 0.0
    assert image.norm.stretch.a == pytest.approx(2e-3 / image.norm.vmax)
    result, disk = point_and_disk_result(noise=None)
    image = model_axes(_panels_figure(np.zeros(disk.shape), result, None, None)).get_images()[0]
    assert image.norm.stretch.a == pytest.approx(1e-3)


def test_component_positions_are_marked_by_scale_with_a_legend_in_pixels_and_arcsec():
    result = make_result()
    comps = np.concatenate([result.components, result.components[[0, 4]]])  # two repeats
    result.components = comps
    fig = _panels_figure(dirty_image(), result, make_wcs(), mask_image())
    ax = model_axes(fig)
    marks = {c.get_label(): c for c in ax.collections if type(c).__name__ == "PathCollection"}
    assert set(marks) == {"components at 0 px (delta)", "components at 4 px (8 arcsec)"}
    for label, scale in (("components at 0 px (delta)", 0),
                         ("components at 4 px (8 arcsec)", 4)):
        sel = comps[comps["scale"] == scale]
        expected = sorted(set(zip(sel["x"].tolist(), sel["y"].tolist())))
        assert sorted(map(tuple, marks[label].get_offsets().tolist())) == expected
    assert "8 components at 6 positions" in ax.get_title()
    legend_texts = [t.get_text() for t in fig.legends[0].get_texts()]
    assert "components at 4 px (8 arcsec)" in legend_texts
    # Without a WCS or a cell size there is no arcsec to give.
    bare = _panels_figure(dirty_image(), make_result(), None, None)
    assert [t.get_text() for t in bare.legends[0].get_texts()][:2] == [
        "components at 0 px (delta)", "components at 4 px"]


def test_residual_title_gives_the_peak_in_the_mask_and_in_the_whole_image_and_the_noise():
    result = make_result()
    mask = mask_image()
    residual = np.array(result.residual)
    residual[0, 0] = 0.5                                      # outside the mask
    result.residual = residual
    title = [ax for ax in _panels_figure(dirty_image(), result, None, mask).axes
             if ax.get_images()][2].get_title()
    inside = float(np.max(np.abs(residual[mask])))
    assert f"{inside:.3g} in the mask" in title
    assert "0.5 in the whole image" in title
    assert "noise 0.01 (emission-free pixels)" in title and "Jy/beam" in title
    # No noise from the run: the rms outside the mask (numpy), labelled as such.
    result.scale_noise = None
    title = [ax for ax in _panels_figure(dirty_image(), result, None, mask).axes
             if ax.get_images()][2].get_title()
    rms = float(np.sqrt(np.mean(residual[~mask].astype(np.float32) ** 2)))
    assert f"rms outside the mask {rms:.3g}" in title
    # No mask: the whole image only, never a peak "in the mask".
    title = [ax for ax in _panels_figure(dirty_image(), result, None, None).axes
             if ax.get_images()][2].get_title()
    assert "in the mask" not in title and "0.5 in the whole image" in title


def test_mask_outline_has_a_legend_entry_in_its_colour():
    fig = _panels_figure(dirty_image(), make_result(), None, mask_image())
    (legend,) = fig.legends
    entries = dict(zip([t.get_text() for t in legend.get_texts()], legend.legend_handles))
    (label,) = [k for k in entries if k.startswith("mask")]
    contour = [c for c in fig.axes[0].collections if type(c).__name__ != "PathCollection"][0]
    from matplotlib.colors import to_rgba
    assert to_rgba(entries[label].get_color()) == pytest.approx(
        tuple(contour.get_edgecolor()[0]))
    assert "restoring beam (FWHM)" in entries
    bare = _panels_figure(dirty_image(), make_result(), None, None)
    assert not [t for t in bare.legends[0].get_texts() if t.get_text().startswith("mask")]


def test_beam_in_arcsec_as_well_as_pixels():
    # make_wcs has 2 arcsec pixels: a 6 x 3 px beam is 12 x 6 arcsec.
    fig = _panels_figure(dirty_image(), make_result(), make_wcs(), None)
    title = [ax for ax in fig.axes if ax.get_images()][3].get_title()
    assert "beam 6 x 3 px (12 x 6 arcsec), PA 30 deg" in title
    result = make_result()
    result.parameters = {"cell_arcsec": 0.5}                   # the run's own cell size
    title = [ax for ax in _panels_figure(dirty_image(), result, None, None).axes
             if ax.get_images()][3].get_title()
    assert "(3 x 1.5 arcsec)" in title
    title = [ax for ax in _panels_figure(dirty_image(), make_result(), None, None).axes
             if ax.get_images()][3].get_title()
    assert "beam 6 x 3 px, PA 30 deg" in title


def horizontal_lines(ax):
    return {line.get_label(): float(line.get_ydata()[0]) for line in ax.get_lines()
            if len(line.get_ydata()) == 2 and np.ptp(line.get_ydata()) == 0
            and np.ptp(line.get_xdata()) != 0}


def test_stop_level_of_the_delta_scale_is_drawn_at_its_value():
    fig = _convergence_figure(make_result())
    top = fig.axes[0]
    lines = horizontal_lines(top)
    (label,) = [k for k in lines if k.startswith("stop level of the delta scale")]
    assert lines[label] == 0.03 and "0.03 Jy/beam" in label
    low, high = top.get_ylim()
    assert low < 0.03 < high                                   # visible on the axis
    assert label in [t.get_text() for t in top.get_legend().get_texts()]
    # The run's absolute threshold, when set and not the same value, gets its own line.
    result = make_result()
    result.parameters = {"threshold": 0.05}
    lines = horizontal_lines(_convergence_figure(result).axes[0])
    assert lines["threshold (0.05 Jy/beam)"] == 0.05
    assert lines[label] == 0.03
    result.parameters = {"threshold": 0.03}                    # the level is the threshold
    lines = horizontal_lines(_convergence_figure(result).axes[0])
    assert lines == {"stop level of the delta scale (0.03 Jy/beam, the threshold)": 0.03}
    # Without a delta scale no level applies to the unsmoothed peak: none is drawn.
    result = make_result()
    result.scales = (4.0, 8.0)
    assert not [k for k in horizontal_lines(_convergence_figure(result).axes[0])
                if k.startswith("stop level")]


def test_flux_per_scale_per_major_cycle_is_drawn_with_scales_in_pixels_and_arcsec():
    result = make_result()
    result.parameters = {"cell_arcsec": 2.0}
    below = _convergence_figure(result).axes[1]
    lines = {line.get_label(): line for line in below.get_lines()}
    assert lines["0 px (delta): 1 Jy"].get_ydata().tolist() == [0.0, 0.8, 1.0]
    assert lines["4 px (8 arcsec): 0.4 Jy"].get_ydata().tolist() == [0.0, 0.2, 0.4]
    assert lines["all scales: 1.4 Jy"].get_ydata().tolist() == pytest.approx([0.0, 1.0, 1.4])
    assert lines["4 px (8 arcsec): 0.4 Jy"].get_xdata().tolist() == [0, 4, 6]
    assert "Jy" in below.get_ylabel()
    # Older histories without per-scale flux say so instead of drawing nothing.
    result = make_result()
    for rec in result.history:
        rec.scale_flux = None
    below = _convergence_figure(result).axes[1]
    assert not below.get_lines()[1:] and "no per-scale flux" in below.texts[0].get_text()


def test_history_records_the_flux_each_scale_found():
    # Bookkeeping (common practice): each record's per-scale flux is the flux of the
    # components found so far at that scale, so the last one matches the component
    # table and sums to the model's flux (no starting model).
    psf = gaussian_psf(64, sigma=1.5)
    yy, xx = np.mgrid[:64, :64]
    sky = 0.02 * np.exp(-((yy - 30) ** 2 + (xx - 34) ** 2) / (2 * 5.0 ** 2))
    sky[12, 12] += 1.0
    result = skyscale.deconvolve(observe(sky, psf), psf, scales=[0, 8], threshold=2e-3,
                                 max_major_cycles=6, restore=False)
    history = result.history
    assert len(history) >= 3
    assert history[0].scale_flux == [0.0, 0.0]
    for rec in history:
        assert len(rec.scale_flux) == 2
    by_scale = [result.components["flux"][result.components["scale"] == s].sum()
                for s in (0, 8)]
    assert history[-1].scale_flux == pytest.approx(by_scale, rel=1e-9)
    assert sum(history[-1].scale_flux) == pytest.approx(float(result.model.sum()), rel=1e-5)
    assert all(f > 0 for f in history[-1].scale_flux)         # both scales at work
    assert "scale_flux" in history[-1].as_dict()


def test_run_writes_figures_with_the_new_content(tmp_path):
    path = plot_convergence(make_result(), tmp_path / "c.png")
    assert png_size(path) == CONVERGENCE_SIZE_PX
    path = plot_panels(dirty_image(), make_result(), tmp_path / "p.png", wcs=make_wcs(),
                       mask=mask_image(), cell_arcsec=2.0)
    assert png_size(path) == PANELS_SIZE_PX
