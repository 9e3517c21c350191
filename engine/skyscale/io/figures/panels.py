"""PNG figures of a run: the images side by side, and how the residual converged.

matplotlib is optional (``pip install skyscale[plots]``) and is imported only inside
the plotting functions.  Figures are drawn on a `matplotlib.figure.Figure` with the
Agg canvas, never through pyplot, so nothing global changes and no window opens.

Both figures have a fixed size in pixels, so a pipeline can lay them out blind:

* `plot_convergence` (`skyscale.io.figures.convergence`): `CONVERGENCE_SIZE_PX` = 800 x 800
  (width x height);
* `plot_panels`: `PANELS_SIZE_PX` = 1000 x 900.

Images are drawn with ``origin="lower"``: pixel ``[0, 0]`` at the bottom left, north
up and east to the left when the WCS is the usual one.  A beam's position angle is
measured from +y (north) through -x (east), so its major axis points along
``(x, y) = (-sin pa, cos pa)`` (the convention of `skyscale.core.beam`).
"""

import functools

import numpy as np

from skyscale.core.beam import Beam, restore
from skyscale.core.validate import as_image
from skyscale.io.figures.common import (DPI, check_result, figure_cell_arcsec, fmt,
                                        new_figure, refuse_existing, require_matplotlib,
                                        save_png, scale_colours, scale_label)

__all__ = ["PANELS_SIZE_PX", "plot_panels"]

#: ``(width, height)`` in pixels of the four-panel figure.
PANELS_SIZE_PX = (1000, 900)

_IMAGE_CMAP = "inferno"
_MODEL_CMAP = "gray"     # the scales' colours (tab10) show on it from black to white
_RESIDUAL_CMAP = "RdBu_r"
_MASK_COLOUR = "limegreen"
_ASINH_A = 0.1           # asinh softening, a fraction of the display range
_PERCENTILE = 99.5       # display interval of the dirty and restored images


# --------------------------------------------------------------------------- panels

@functools.lru_cache(maxsize=None)
def _symmetric_asinh_class():
    """An asinh stretch about the middle of [0, 1], for images centred on zero."""
    from astropy.visualization import BaseStretch

    class SymmetricAsinhStretch(BaseStretch):
        r"""``y = 1/2 + asinh((2x - 1) / a) / (2 asinh(1 / a))``: 0.5 stays 0.5."""

        def __init__(self, a=_ASINH_A, inverted=False):
            super().__init__()
            self.a, self.inverted = float(a), bool(inverted)

        def __call__(self, values, clip=True, out=None):
            x = np.asarray(values, dtype=float)
            if clip:
                x = np.clip(x, 0.0, 1.0)
            t = 2.0 * x - 1.0
            scale = np.arcsinh(1.0 / self.a)
            y = np.sinh(t * scale) * self.a if self.inverted else np.arcsinh(t / self.a) / scale
            y = 0.5 + 0.5 * y
            if out is None:
                return y
            out[...] = y
            return out

        @property
        def inverse(self):
            return SymmetricAsinhStretch(self.a, not self.inverted)

    return SymmetricAsinhStretch


def _finite_limits(data, kind):
    """Display limits ``(vmin, vmax)`` for one panel, never an empty interval."""
    values = data[np.isfinite(data)]
    if values.size == 0:
        return (-1.0, 1.0) if kind == "residual" else (0.0, 1.0)
    if kind == "residual":
        v = float(np.max(np.abs(values)))
        v = v if v > 0 else 1.0
        return -v, v
    if kind == "model":
        lo, hi = 0.0, float(values.max())
    else:
        lo, hi = np.percentile(values, (100.0 - _PERCENTILE, _PERCENTILE))
        lo, hi = float(lo), float(hi)
    if not hi > lo:
        hi = lo + (abs(lo) if lo != 0 else 1.0)
    return lo, hi


def _norm(data, kind, softening=_ASINH_A):
    from astropy.visualization import AsinhStretch, ImageNormalize

    vmin, vmax = _finite_limits(data, kind)
    stretch = _symmetric_asinh_class()() if kind == "residual" else AsinhStretch(softening)
    return ImageNormalize(vmin=vmin, vmax=vmax, stretch=stretch, clip=False)


def _check_wcs(wcs, shape):
    if wcs is None:
        return None
    from astropy.wcs import WCS

    if not isinstance(wcs, WCS):
        raise TypeError(f"wcs is a {type(wcs).__name__}; pass an astropy.wcs.WCS with "
                        "two celestial axes, or None for pixel axes")
    if wcs.naxis != 2:
        celestial = wcs.celestial
        if celestial.naxis != 2:
            raise ValueError(f"wcs has {wcs.naxis} axes and no two celestial ones; "
                             "pass a 2-D celestial WCS (wcs.celestial) or None")
        wcs = celestial
    if wcs.pixel_shape is not None and tuple(wcs.pixel_shape) != (shape[1], shape[0]):
        raise ValueError(f"wcs describes {wcs.pixel_shape[1]}x{wcs.pixel_shape[0]} "
                         f"pixels but the images are {shape[0]}x{shape[1]}; pass the "
                         "WCS of these images")
    return wcs


#: Axis names for the IVOA physical types a celestial WCS reports.
_AXIS_NAMES = {"pos.eq.ra": "Right ascension", "pos.eq.dec": "Declination",
               "pos.galactic.lon": "Galactic longitude",
               "pos.galactic.lat": "Galactic latitude",
               "pos.ecliptic.lon": "Ecliptic longitude",
               "pos.ecliptic.lat": "Ecliptic latitude"}


def _axis_labels(wcs):
    """Readable names of the two world axes, with the reference frame if known."""
    types = list(wcs.world_axis_physical_types)
    ctypes = list(wcs.wcs.ctype)
    frame = str(wcs.wcs.radesys).strip() if types[0] and types[0].startswith("pos.eq") \
        else ""
    labels = []
    for kind, ctype in zip(types, ctypes):
        name = _AXIS_NAMES.get(kind) or (ctype.split("-")[0] if ctype else "world axis")
        labels.append(f"{name} ({frame})" if frame else name)
    return labels


def _beam_ellipse(beam, shape):
    """A patch of the restoring beam in the bottom-left corner, in pixel coordinates."""
    _, _, Ellipse = require_matplotlib()
    major, minor, pa = float(beam.major), float(beam.minor), float(beam.pa)
    margin = 0.5 * major + max(2.0, 0.03 * min(shape))
    return Ellipse((margin - 0.5, margin - 0.5), width=minor, height=major, angle=pa,
                   facecolor="white", edgecolor="black", lw=1.0, alpha=0.9, zorder=5,
                   label="restoring beam (FWHM)")


def _beam_text(beam, cell):
    """``'beam 4.68 x 4.29 px (9.36 x 8.58 arcsec), PA 79.2 deg'``."""
    major, minor = float(beam.major), float(beam.minor)
    text = f"beam {major:.3g} x {minor:.3g} px"
    if cell is not None:
        text += f" ({major * cell:.3g} x {minor * cell:.3g} arcsec)"
    return text + f", PA {float(beam.pa):.3g} deg"


def _run_noise(result):
    """The run's noise of the unsmoothed residual (Jy/beam): the delta scale's, or None."""
    noise = getattr(result, "scale_noise", None)
    scales = [float(s) for s in (getattr(result, "scales", ()) or ())]
    if noise is None or 0.0 not in scales or len(noise) != len(scales):
        return None
    value = float(noise[scales.index(0.0)])
    return value if np.isfinite(value) and value > 0 else None


def _residual_title(residual, mask, noise):
    """The residual panel's title: peak in the mask and in the whole image, and noise."""
    finite = np.isfinite(residual)

    def peak(sel):
        return fmt(float(np.max(np.abs(residual[sel])))) if sel.any() else "n/a"

    partial = mask is not None and mask.any() and not mask.all()
    parts = ([f"{peak(finite & mask)} in the mask"] if partial else []) + \
        [f"{peak(finite)} in the whole image"]
    first = "Residual (Jy/beam)"
    if noise is not None:
        first += f": noise {fmt(noise)} (emission-free pixels)"
    elif partial and (finite & ~mask).any():
        rms = float(np.sqrt(np.mean(residual[finite & ~mask] ** 2)))
        first += f": rms outside the mask {fmt(rms)}"
    return f"{first}\npeak |residual| " + ", ".join(parts)


def _model_view(model, beam):
    """The model as drawn: smoothed by the restoring beam (Jy/beam) when there is one."""
    if beam is None:
        return model, "Jy/pixel"

    smooth = restore(np.where(np.isfinite(model), model, 0.0).astype(np.float32), None,
                     Beam(float(beam.major), float(beam.minor), float(beam.pa)))
    return smooth, "Jy/beam (model (*) restoring beam)"


def _model_softening(view, noise):
    """asinh softening of the model panel: the run's noise as a fraction of the peak.

    Flux down to about the noise level is drawn on the steep, linear part of the
    stretch, so faint extended flux shows beside bright points; 1e-3 of the peak
    without a noise, and never above the other panels' `_ASINH_A`.
    """
    _, vmax = _finite_limits(view, "model")
    ratio = 1e-3 if noise is None else noise / vmax
    return float(np.clip(ratio, 1e-4, _ASINH_A))


def _stretched_ticks(norm):
    """Colour-bar ticks of a strongly softened asinh: 0, then 1, 2, 5 x 10^k up to vmax."""
    vmin, vmax = float(norm.vmin), float(norm.vmax)
    low = max(vmin, vmax * float(norm.stretch.a))
    ticks = [0.0] if vmin <= 0.0 else []
    for k in range(int(np.floor(np.log10(low))), int(np.ceil(np.log10(vmax))) + 1):
        ticks += [m * 10.0 ** k for m in (1, 2, 5) if low <= m * 10.0 ** k <= vmax]
    return ticks


#: Above this many distinct component positions the model panel marks them as small
#: see-through dots, so the markers do not hide the model they sit on.
FULL_MARKERS = 300


def _mark_components(ax, components, scales, cell):
    """Component positions, one colour per scale (largest drawn first); legend handles."""
    handles = []
    if components.size == 0:
        return handles
    scales = [float(s) for s in scales] or sorted({float(s) for s in components["scale"]})
    colours = scale_colours(len(scales))
    places = [np.unique(np.stack([components["y"][components["scale"] == np.float32(s)],
                                  components["x"][components["scale"] == np.float32(s)]],
                                 axis=1), axis=0) for s in scales]
    few = sum(len(p) for p in places) <= FULL_MARKERS
    style = dict(s=9, edgecolors="black", linewidths=0.3) if few else \
        dict(s=1.5, linewidths=0, alpha=0.45)
    for k in range(len(scales) - 1, -1, -1):
        yx = places[k]
        if len(yx) == 0:
            continue
        handles.append(ax.scatter(yx[:, 1], yx[:, 0], marker="o", color=colours[k], zorder=4,
                                  label=f"components at {scale_label(scales[k], cell)}",
                                  **style))
    return handles[::-1]


def _panels_figure(dirty, result, wcs=None, mask=None, cell_arcsec=None):
    """Build (but do not save) the four-panel figure."""
    check_result(result, ("model", "residual", "components", "restored", "beam"))
    model = as_image(result.model, "result.model", dtype=np.float32, allow_nan=True)
    shape = model.shape
    dirty = as_image(dirty, "dirty", dtype=np.float32, allow_nan=True)
    if dirty.shape != shape:
        raise ValueError(f"dirty has shape {dirty.shape} but the model has {shape}; "
                         "pass the dirty image that was deconvolved")
    residual = as_image(result.residual, "result.residual", dtype=np.float32,
                        allow_nan=True)
    restored = result.restored
    if restored is not None:
        restored = as_image(restored, "result.restored", dtype=np.float32, allow_nan=True)
    if mask is not None:
        mask = np.asarray(mask)
        if mask.shape != shape:
            raise ValueError(f"mask has shape {mask.shape} but the images are {shape}; "
                             "pass a mask of the image's shape (or None)")
        mask = mask.astype(bool)
    wcs = _check_wcs(wcs, shape)
    cell = figure_cell_arcsec(cell_arcsec, wcs, result)
    beam = result.beam
    noise = _run_noise(result)
    components = np.asarray(result.components)

    view, model_unit = _model_view(model, beam)
    positions = np.unique(np.stack([components["y"], components["x"]], axis=1),
                          axis=0).shape[0] if components.size else 0
    model_title = ("Model smoothed by the restoring beam" if beam is not None else "Model") \
        + (f"\n{components.size} components at {positions} positions, marked by scale"
           if components.size else "\nno components")
    rest_title = "Restored image" + ("" if beam is None else f"\n{_beam_text(beam, cell)}")
    panels = [
        ("Dirty image", dirty, "image", "Jy/beam (dirty beam)"),
        (model_title, view, "model", model_unit),
        (_residual_title(residual, mask, noise), residual, "residual",
         "Jy/beam (dirty beam)"),
        (rest_title, restored, "image", "Jy/beam (restoring beam)"),
    ]
    fig = new_figure(PANELS_SIZE_PX)
    handles = []
    draw_mask = mask is not None and mask.any() and not mask.all()
    for i, (title, data, kind, unit) in enumerate(panels):
        kwargs = {"projection": wcs} if wcs is not None else {}
        ax = fig.add_subplot(2, 2, i + 1, **kwargs)
        ax.set_title(title, fontsize=9.5)
        if wcs is not None:
            ax.coords[0].set_ticks(number=4)
            ax.coords[1].set_ticks(number=5)
            ax.coords[0].set_ticklabel(size=8)
            ax.coords[1].set_ticklabel(size=8)
            for coord, label in zip((ax.coords[0], ax.coords[1]), _axis_labels(wcs)):
                coord.set_axislabel(label, fontsize=9)
        else:
            ax.set_xlabel("x (pixel)", fontsize=9)
            ax.set_ylabel("y (pixel)", fontsize=9)
            ax.tick_params(labelsize=8)
        if data is None:
            ax.set_xlim(-0.5, shape[1] - 0.5)
            ax.set_ylim(-0.5, shape[0] - 0.5)
            ax.text(0.5, 0.5, "not computed", transform=ax.transAxes, ha="center",
                    va="center", color="0.4")
            continue
        cmap = {"residual": _RESIDUAL_CMAP, "model": _MODEL_CMAP}.get(kind, _IMAGE_CMAP)
        softening = _model_softening(data, noise) if kind == "model" else _ASINH_A
        im = ax.imshow(data, origin="lower", cmap=cmap, norm=_norm(data, kind, softening))
        bar = fig.colorbar(im, ax=ax, fraction=0.05, pad=0.02,
                           **({"ticks": _stretched_ticks(im.norm), "format": "%g"}
                              if kind == "model" else {}))
        bar.set_label(unit, fontsize=9)
        bar.ax.tick_params(labelsize=8)
        if draw_mask:
            ax.contour(mask.astype(np.float32), levels=[0.5], colors=_MASK_COLOUR,
                       linewidths=0.9)
        if kind == "model":
            handles += _mark_components(ax, components, result.scales, cell)
            ax.set_xlim(-0.5, shape[1] - 0.5)
            ax.set_ylim(-0.5, shape[0] - 0.5)
        if i == 3 and beam is not None:
            handles.append(ax.add_patch(_beam_ellipse(beam, shape)))
    if draw_mask:
        from matplotlib.lines import Line2D
        handles.insert(0, Line2D([], [], color=_MASK_COLOUR, lw=1.5,
                                 label="mask (where components may go)"))
    if handles:
        legend = fig.legend(handles=handles, loc="outside lower center", fontsize=8,
                            ncol=min(4, len(handles)), framealpha=0.9)
        legend.get_frame().set_facecolor("0.85")
    return fig


def plot_panels(dirty, result, path, *, wcs=None, mask=None, cell_arcsec=None,
                overwrite=False):
    """Write ``panels.png``: dirty, model, residual and restored images in a 2 x 2 grid.

    Each panel has an asinh stretch (astropy `~astropy.visualization.AsinhStretch`)
    and a colour bar in its unit.  The dirty and restored images span their 0.25 to
    99.75 percentiles with ``a = 0.1``.  The model panel shows the model smoothed by
    the restoring beam (Jy/beam; the model itself, Jy/pixel, without a beam) from 0
    to its maximum, softened at the run's noise (``a`` = noise / maximum, between
    1e-4 and 0.1; 1e-3 without a noise) so faint extended flux shows beside bright
    points, with each component position marked in its scale's colour.  The
    residual is symmetric about zero with a zero-centred asinh and a diverging colour
    map; its title gives the peak |residual| inside the mask and in the whole image
    and the run's noise (the delta scale's, else the rms outside the mask).  With a
    WCS the axes show sky coordinates, otherwise pixels.  The mask is outlined in
    green; the restoring beam is drawn as a white ellipse in the bottom-left corner
    of the restored panel.  A legend below the panels names the mask outline, the
    scales (pixels, and arcsec when the cell size is known) and the beam.  The PNG is
    `PANELS_SIZE_PX` (1000 x 900 pixels at 100 dpi).

    Parameters
    ----------
    dirty : (ny, nx) array_like
        The dirty image, Jy/beam.
    result : DeconvolutionResult
        The run's result (``model``, ``residual``, ``restored``, ``beam``,
        ``components``, ``scales``, ``scale_noise``).
    path : str or os.PathLike
        Destination PNG.
    wcs : astropy.wcs.WCS, optional
        Celestial WCS of the images (a WCS with more axes is cut to its celestial
        part).
    mask : (ny, nx) array of bool, optional
        Outlined on every panel when given (for the run's own, pass ``result.mask``).
    cell_arcsec : float, optional
        Pixel size in arcsec for the beam and scale labels.  Default: the WCS's square
        cell, else the run's own (``result.parameters['cell_arcsec']``), else pixels
        only.
    overwrite : bool
        Replace an existing file.  Default False: an existing file is refused.

    Returns
    -------
    pathlib.Path
        The path written.

    Raises
    ------
    ImportError
        If matplotlib is not installed.
    FileExistsError
        If ``path`` exists and ``overwrite`` is False.
    ValueError, TypeError
        If an image, the mask or the WCS does not fit the others.
    """
    refuse_existing(path, overwrite)
    return save_png(_panels_figure(dirty, result, wcs, mask, cell_arcsec), path, overwrite)
