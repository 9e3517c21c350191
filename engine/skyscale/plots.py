"""PNG figures of a run: how the residual converged, and the images side by side.

matplotlib is optional (``pip install skyscale[plots]``) and is imported only inside
the plotting functions.  Figures are drawn on a `matplotlib.figure.Figure` with the
Agg canvas, never through pyplot, so nothing global changes and no window opens.

Both figures have a fixed size in pixels, so a pipeline can lay them out blind:

* `plot_convergence`: `CONVERGENCE_SIZE_PX` = 800 x 500 (width x height);
* `plot_panels`: `PANELS_SIZE_PX` = 1000 x 900.

Images are drawn with ``origin="lower"``: pixel ``[0, 0]`` at the bottom left, north
up and east to the left when the WCS is the usual one.  A beam's position angle is
measured from +y (north) through -x (east), so its major axis points along
``(x, y) = (-sin pa, cos pa)`` (the convention of `skyscale.beam`).
"""

import functools
import io
import logging
import pathlib
import textwrap

import numpy as np

from ._validate import as_image
from ._atomic import atomic_write_bytes

__all__ = ["CONVERGENCE_SIZE_PX", "DPI", "PANELS_SIZE_PX", "plot_convergence",
           "plot_panels"]

log = logging.getLogger(__name__)

#: Resolution of every figure, dots per inch.
DPI = 100
#: ``(width, height)`` in pixels of the convergence figure.
CONVERGENCE_SIZE_PX = (800, 500)
#: ``(width, height)`` in pixels of the four-panel figure.
PANELS_SIZE_PX = (1000, 900)

_IMAGE_CMAP = "inferno"
_RESIDUAL_CMAP = "RdBu_r"
_MASK_COLOUR = "limegreen"
_ASINH_A = 0.1           # asinh softening, a fraction of the display range
_PERCENTILE = 99.5       # display interval of the dirty and restored images


def _require_matplotlib():
    """Import the matplotlib pieces used here, or say how to install them."""
    try:
        import matplotlib                                  # noqa: F401
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure
        from matplotlib.patches import Ellipse
    except ImportError as exc:
        raise ImportError("plotting needs matplotlib, which is not installed; "
                          "run: pip install skyscale[plots]") from exc
    return Figure, FigureCanvasAgg, Ellipse


def _new_figure(size_px):
    Figure, FigureCanvasAgg, _ = _require_matplotlib()
    fig = Figure(figsize=(size_px[0] / DPI, size_px[1] / DPI), dpi=DPI,
                 layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _save(fig, path, overwrite):
    """Render ``fig`` to PNG bytes of the fixed size and write them atomically."""
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=DPI)
    path = pathlib.Path(atomic_write_bytes(path, buffer.getvalue(), overwrite=overwrite))
    log.info("figure written to %s", path)
    return path


def _refuse_existing(path, overwrite):
    """Fail before drawing when the output would be refused anyway."""
    path = pathlib.Path(path)
    if path.exists() and not overwrite:
        raise FileExistsError(f"path {str(path)!r} already exists; choose another "
                              "path or pass overwrite=True")


def _check_result(result, needed):
    missing = [name for name in needed if not hasattr(result, name)]
    if missing:
        raise TypeError(f"result is a {type(result).__name__} without "
                        f"{', '.join(missing)}; pass the DeconvolutionResult of a run")


def _get(record, name):
    return record[name] if isinstance(record, dict) else getattr(record, name)


# --------------------------------------------------------------------------- convergence

def _convergence_figure(result, threshold=None):
    """Build (but do not save) the convergence figure."""
    _check_result(result, ("history", "stop_reason"))
    fig = _new_figure(CONVERGENCE_SIZE_PX)
    ax = fig.add_subplot()
    history = list(result.history)
    comps = np.array([_get(r, "components") for r in history], dtype=float)
    peak = np.array([_get(r, "peak") for r in history], dtype=float)
    rms = np.array([_get(r, "rms") for r in history], dtype=float)
    cycles = [int(_get(r, "cycle")) for r in history]

    for i, (n, c) in enumerate((n, c) for n, c in zip(comps, cycles) if c > 0):
        ax.axvline(n, color="0.6", lw=0.8, ls=":", zorder=0,
                   label="end of a major cycle" if i == 0 else None)
    ax.plot(comps, peak, "o-", color="tab:red", label="peak |residual|")
    ax.plot(comps, rms, "s--", color="tab:blue", label="rms residual")
    if threshold is not None:
        ax.axhline(float(threshold), color="0.3", lw=1.0, ls="-.", label="threshold")

    values = np.concatenate([peak, rms, [] if threshold is None else [float(threshold)]])
    if np.any(np.isfinite(values) & (values > 0)):
        ax.set_yscale("log", nonpositive="mask")
    if not history:
        ax.text(0.5, 0.5, "no major-cycle history recorded", transform=ax.transAxes,
                ha="center", va="center", color="0.4")
    else:
        ax.legend(loc="upper right", fontsize=9, framealpha=0.9)
    ax.set_xlabel("components found (cumulative)")
    ax.set_ylabel("residual inside the mask (Jy/beam)")
    ax.grid(True, which="major", alpha=0.3)
    description = getattr(result, "stop_description", result.stop_reason)
    ax.set_title(textwrap.fill(f"Stopped: {result.stop_reason} ({description})", 95),
                 fontsize=11)
    return fig


def plot_convergence(result, path, *, threshold=None, overwrite=False):
    """Write ``convergence.png``: peak and rms residual against components found.

    One point per record of ``result.history`` (the first is the dirty image), a
    logarithmic y axis in Jy/beam, a dotted vertical line where each major cycle
    ended, and the stop reason in the title.  The PNG is `CONVERGENCE_SIZE_PX`
    (800 x 500 pixels at `DPI` = 100).

    Parameters
    ----------
    result : DeconvolutionResult
    path : str or os.PathLike
        Destination PNG.
    threshold : float, optional
        Absolute threshold (Jy/beam), drawn as a horizontal line.
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
    """
    _refuse_existing(path, overwrite)
    return _save(_convergence_figure(result, threshold), path, overwrite)


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


def _norm(data, kind):
    from astropy.visualization import AsinhStretch, ImageNormalize

    vmin, vmax = _finite_limits(data, kind)
    stretch = _symmetric_asinh_class()() if kind == "residual" else AsinhStretch(_ASINH_A)
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
    _, _, Ellipse = _require_matplotlib()
    major, minor, pa = float(beam.major), float(beam.minor), float(beam.pa)
    margin = 0.5 * major + max(2.0, 0.03 * min(shape))
    return Ellipse((margin - 0.5, margin - 0.5), width=minor, height=major, angle=pa,
                   facecolor="white", edgecolor="black", lw=1.0, alpha=0.9, zorder=5)


def _fmt(value):
    return f"{value:.3g}"


def _panels_figure(dirty, result, wcs=None, mask=None):
    """Build (but do not save) the four-panel figure."""
    _check_result(result, ("model", "residual", "components", "restored", "beam"))
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
    beam = result.beam

    finite_res = residual[np.isfinite(residual)]
    res_peak = float(np.max(np.abs(finite_res))) if finite_res.size else float("nan")
    res_title = f"Residual (peak {_fmt(res_peak)} Jy/beam)"
    rest_title = "Restored image"
    if beam is not None:
        rest_title += (f" (beam {float(beam.major):.3g} x {float(beam.minor):.3g} px, "
                       f"PA {float(beam.pa):.3g} deg)")
    panels = [
        ("Dirty image", dirty, "image", "Jy/beam (dirty beam)"),
        (f"Model ({len(result.components)} components)", model, "model", "Jy/pixel"),
        (res_title, residual, "residual", "Jy/beam (dirty beam)"),
        (rest_title, restored, "image", "Jy/beam (restoring beam)"),
    ]
    fig = _new_figure(PANELS_SIZE_PX)
    for i, (title, data, kind, unit) in enumerate(panels):
        kwargs = {"projection": wcs} if wcs is not None else {}
        ax = fig.add_subplot(2, 2, i + 1, **kwargs)
        ax.set_title(title, fontsize=10)
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
        cmap = _RESIDUAL_CMAP if kind == "residual" else _IMAGE_CMAP
        im = ax.imshow(data, origin="lower", cmap=cmap, norm=_norm(data, kind))
        bar = fig.colorbar(im, ax=ax, fraction=0.05, pad=0.02)
        bar.set_label(unit, fontsize=9)
        bar.ax.tick_params(labelsize=8)
        if mask is not None and mask.any() and not mask.all():
            ax.contour(mask.astype(np.float32), levels=[0.5], colors=_MASK_COLOUR,
                       linewidths=0.9)
        if i == 3 and beam is not None:
            ax.add_patch(_beam_ellipse(beam, shape))
    return fig


def plot_panels(dirty, result, path, *, wcs=None, mask=None, overwrite=False):
    """Write ``panels.png``: dirty, model, residual and restored images in a 2 x 2 grid.

    Each panel has an asinh stretch (astropy `~astropy.visualization.AsinhStretch`
    with ``a = 0.1``) and a colour bar in its unit.  The dirty and restored images
    span their 0.25 to 99.75 percentiles; the model spans 0 to its maximum (Jy/pixel);
    the residual is symmetric about zero with a zero-centred asinh and a diverging
    colour map.  With a WCS the axes show sky coordinates, otherwise pixels.  The
    mask is outlined in green; the restoring beam is drawn as a white ellipse in the
    bottom-left corner of the restored panel.  The PNG is `PANELS_SIZE_PX`
    (1000 x 900 pixels at `DPI` = 100).

    Parameters
    ----------
    dirty : (ny, nx) array_like
        The dirty image, Jy/beam.
    result : DeconvolutionResult
        The run's result (``model``, ``residual``, ``restored``, ``beam``).
    path : str or os.PathLike
        Destination PNG.
    wcs : astropy.wcs.WCS, optional
        Celestial WCS of the images (a WCS with more axes is cut to its celestial
        part).
    mask : (ny, nx) array of bool, optional
        Outlined on every panel when given (for the run's own, pass ``result.mask``).
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
    _refuse_existing(path, overwrite)
    return _save(_panels_figure(dirty, result, wcs, mask), path, overwrite)
