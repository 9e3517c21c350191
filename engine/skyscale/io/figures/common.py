"""What the figures share: a fixed-size Agg figure, atomic PNG writes, scale labels.

matplotlib is imported only inside these functions, so the package imports without it.
"""

import io
import logging
import pathlib

from skyscale.io.atomic import atomic_write_bytes
from skyscale.io.grid import cell_size_arcsec

__all__ = ["DPI", "require_matplotlib", "new_figure", "save_png", "refuse_existing",
           "check_result", "field_of", "fmt", "figure_cell_arcsec", "scale_label",
           "scale_colours"]

log = logging.getLogger(__name__)

#: Resolution of every figure, dots per inch.
DPI = 100
#: Colours of the scales, smallest first, the same in every figure: matplotlib's
#: "tab10" without its green (the mask outline is green), repeated past nine scales.
_SCALE_COLOURS = ("tab:blue", "tab:orange", "tab:red", "tab:purple", "tab:brown",
                  "tab:pink", "tab:olive", "tab:cyan", "tab:gray")


def require_matplotlib():
    """Import the matplotlib pieces used by the figures, or say how to install them."""
    try:
        import matplotlib                                  # noqa: F401
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure
        from matplotlib.patches import Ellipse
    except ImportError as exc:
        raise ImportError("plotting needs matplotlib, which is not installed; "
                          "run: pip install skyscale[plots]") from exc
    return Figure, FigureCanvasAgg, Ellipse


def new_figure(size_px):
    """A constrained-layout `~matplotlib.figure.Figure` of ``size_px`` pixels, Agg canvas."""
    Figure, FigureCanvasAgg, _ = require_matplotlib()
    fig = Figure(figsize=(size_px[0] / DPI, size_px[1] / DPI), dpi=DPI,
                 layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def save_png(fig, path, overwrite):
    """Render ``fig`` to PNG bytes of the fixed size and write them atomically."""
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=DPI)
    path = pathlib.Path(atomic_write_bytes(path, buffer.getvalue(), overwrite=overwrite))
    log.info("figure written to %s", path)
    return path


def refuse_existing(path, overwrite):
    """Fail before drawing when the output would be refused anyway."""
    path = pathlib.Path(path)
    if path.exists() and not overwrite:
        raise FileExistsError(f"path {str(path)!r} already exists; choose another "
                              "path or pass overwrite=True")


def check_result(result, needed):
    """Refuse an object that lacks the attributes a figure reads."""
    missing = [name for name in needed if not hasattr(result, name)]
    if missing:
        raise TypeError(f"result is a {type(result).__name__} without "
                        f"{', '.join(missing)}; pass the DeconvolutionResult of a run")


def field_of(record, name, default=None):
    """``record.name`` or ``record[name]`` (history records may be dicts)."""
    if isinstance(record, dict):
        return record.get(name, default)
    return getattr(record, name, default)


def fmt(value):
    """Three significant figures."""
    return f"{value:.3g}"


def figure_cell_arcsec(cell_arcsec=None, wcs=None, result=None):
    """The pixel size in arcsec for labels, or None when nothing says it.

    The first known of: ``cell_arcsec``; the square cell of ``wcs``
    (`skyscale.io.fits.cell_size_arcsec`; None for a non-square grid); the
    ``cell_arcsec`` the run was given (``result.parameters``).
    """
    if cell_arcsec is not None:
        cell = float(cell_arcsec)
        if not cell > 0:
            raise ValueError(f"cell_arcsec is {cell_arcsec!r}; pass the pixel size in "
                             "arcsec (> 0) or None")
        return cell
    if wcs is not None:
        try:
            return float(cell_size_arcsec(wcs))
        except ValueError:                 # not a square grid: pixels only
            return None
    params = getattr(result, "parameters", None) or {}
    cell = params.get("cell_arcsec") if isinstance(params, dict) else None
    return float(cell) if isinstance(cell, (int, float)) and cell > 0 else None


def scale_label(scale_px, cell):
    """``'16 px (32 arcsec)'``, ``'16 px'`` without a cell size, ``'0 px (delta)'``."""
    scale_px = float(scale_px)
    if scale_px == 0:
        return "0 px (delta)"
    return f"{scale_px:g} px" + ("" if cell is None else f" ({scale_px * cell:.3g} arcsec)")


def scale_colours(n):
    """One colour per scale, smallest to largest, the same in every figure."""
    return [_SCALE_COLOURS[i % len(_SCALE_COLOURS)] for i in range(n)]
