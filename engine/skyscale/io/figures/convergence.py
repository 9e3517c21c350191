"""``convergence.png``: how the residual fell, where the run stopped, and each scale's flux.

Two panels sharing one x axis (components found, cumulative), both drawn from
``result.history`` with one point per major cycle (the first is the dirty image):

* top: peak and rms residual inside the mask, or the whole image without one
  (Jy/beam, logarithmic), the stop level
  of the delta scale (``result.scale_levels``) and the absolute threshold when one
  was set, each a labelled horizontal line;
* bottom: the flux each scale has found so far (Jy, `CycleRecord.scale_flux`), one
  line per scale labelled in pixels and arcsec, with the total.

The PNG is `CONVERGENCE_SIZE_PX` = 800 x 800 pixels (width x height) at 100 dpi.
"""

import textwrap

import numpy as np

from skyscale.io.figures.common import (check_result, field_of, figure_cell_arcsec, fmt,
                                        new_figure, refuse_existing, save_png, scale_colours,
                                        scale_label)

__all__ = ["CONVERGENCE_SIZE_PX", "plot_convergence"]

#: ``(width, height)`` in pixels of the convergence figure.
CONVERGENCE_SIZE_PX = (800, 800)


def _delta_level(result):
    """The delta scale's final stop level (Jy/beam), or None when there is none.

    Only the delta scale's level applies to the plotted peak: the other scales' levels
    are for their smoothed residuals.
    """
    scales = list(getattr(result, "scales", ()) or ())
    levels = getattr(result, "scale_levels", None)
    if levels is None or 0.0 not in [float(s) for s in scales]:
        return None
    level = float(levels[[float(s) for s in scales].index(0.0)])
    return level if np.isfinite(level) and level > 0 else None


def _threshold(result, threshold):
    """The absolute threshold to draw: the argument, else the run's own; None for 0."""
    if threshold is None:
        params = getattr(result, "parameters", None) or {}
        threshold = params.get("threshold") if isinstance(params, dict) else None
    if not isinstance(threshold, (int, float, np.floating)):
        return None
    threshold = float(threshold)
    return threshold if np.isfinite(threshold) and threshold > 0 else None


def _residual_axes(ax, result, history, threshold):
    comps = np.array([field_of(r, "components") for r in history], dtype=float)
    peak = np.array([field_of(r, "peak") for r in history], dtype=float)
    rms = np.array([field_of(r, "rms") for r in history], dtype=float)
    cycles = [int(field_of(r, "cycle")) for r in history]
    for i, n in enumerate(n for n, c in zip(comps, cycles) if c > 0):
        ax.axvline(n, color="0.6", lw=0.8, ls=":", zorder=0,
                   label="end of a major cycle" if i == 0 else None)
    where = "in the mask" if getattr(result, "mask", None) is not None else "in the image"
    ax.plot(comps, peak, "o-", color="tab:red", label=f"peak |residual| {where}")
    ax.plot(comps, rms, "s--", color="tab:blue", label=f"rms residual {where}")
    lines = []
    level = _delta_level(result)
    threshold = _threshold(result, threshold)
    same = threshold is not None and level is not None and \
        abs(threshold - level) <= 1e-6 * level
    if level is not None:
        ax.axhline(level, color="black", lw=1.2, ls="--",
                   label=f"stop level of the delta scale ({fmt(level)} Jy/beam"
                         + (", the threshold)" if same else ")"))
        lines.append(level)
    if threshold is not None and not same:
        ax.axhline(threshold, color="0.3", lw=1.0, ls="-.",
                   label=f"threshold ({fmt(threshold)} Jy/beam)")
        lines.append(threshold)
    values = np.concatenate([peak, rms, lines])
    positive = values[np.isfinite(values) & (values > 0)]
    if positive.size:
        ax.set_yscale("log", nonpositive="mask")
        ax.set_ylim(positive.min() / 1.6, positive.max() * 1.6)
    if not history:
        ax.text(0.5, 0.5, "no major-cycle history recorded", transform=ax.transAxes,
                ha="center", va="center", color="0.4")
    else:
        ax.legend(loc="upper right", fontsize=8, framealpha=0.9)
    ax.set_ylabel("residual (Jy/beam)")
    ax.grid(True, which="major", alpha=0.3)
    return comps


def _scale_flux_axes(ax, result, history, comps, cell):
    scales = [float(s) for s in (getattr(result, "scales", ()) or ())]
    rows = [field_of(r, "scale_flux") for r in history]
    if not history or not scales or any(r is None or len(r) != len(scales) for r in rows):
        ax.text(0.5, 0.5, "no per-scale flux recorded", transform=ax.transAxes,
                ha="center", va="center", color="0.4")
    else:
        flux = np.array(rows, dtype=float)                  # (records, scales)
        for k, (s, colour) in enumerate(zip(scales, scale_colours(len(scales)))):
            ax.plot(comps, flux[:, k], "o-", color=colour, lw=1.6, ms=4,
                    label=f"{scale_label(s, cell)}: {flux[-1, k]:.4g} Jy")
        ax.plot(comps, flux.sum(axis=1), "-", color="0.2", lw=1.0,
                label=f"all scales: {flux[-1].sum():.4g} Jy")
        ax.axhline(0.0, color="0.6", lw=0.6)
        ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.2), ncol=3, fontsize=8,
                  title="scale: flux found by the end of the run", title_fontsize=8)
    ax.set_title("Flux found by each scale after each major cycle", fontsize=10)
    ax.set_xlabel("components found (cumulative)")
    ax.set_ylabel("flux found (Jy, cumulative)")
    ax.grid(True, which="major", alpha=0.3)


def _convergence_figure(result, threshold=None, cell_arcsec=None):
    """Build (but do not save) the convergence figure."""
    check_result(result, ("history", "stop_reason"))
    cell = figure_cell_arcsec(cell_arcsec, None, result)
    fig = new_figure(CONVERGENCE_SIZE_PX)
    top, bottom = fig.subplots(2, 1, sharex=True, height_ratios=(3, 2))
    history = list(result.history)
    comps = _residual_axes(top, result, history, threshold)
    _scale_flux_axes(bottom, result, history, comps, cell)
    description = getattr(result, "stop_description", result.stop_reason)
    fig.suptitle(textwrap.fill(f"Stopped: {result.stop_reason} ({description})", 95),
                 fontsize=11)
    return fig


def plot_convergence(result, path, *, threshold=None, cell_arcsec=None, overwrite=False):
    """Write ``convergence.png``: the residual, the stop level and each scale's flux.

    The top panel has the peak and rms residual inside the mask against components
    found (logarithmic, Jy/beam), a dotted line where each major cycle ended, the stop
    level of the delta scale (``result.scale_levels``) as a dashed line and the
    absolute threshold as a dash-dot line (when above 0 and not the same value); the
    stop reason is the title.  The bottom panel has the flux found by each scale
    (``CycleRecord.scale_flux``, Jy, cumulative) and their total.  The PNG is
    `CONVERGENCE_SIZE_PX` (800 x 800 pixels at 100 dpi).

    Parameters
    ----------
    result : DeconvolutionResult
    path : str or os.PathLike
        Destination PNG.
    threshold : float, optional
        Absolute threshold (Jy/beam).  Default: the run's own
        (``result.parameters['threshold']``); none is drawn when it is 0.
    cell_arcsec : float, optional
        Pixel size in arcsec, to label the scales in arcsec as well as pixels.
        Default: the run's own (``result.parameters['cell_arcsec']``), else pixels only.
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
    refuse_existing(path, overwrite)
    return save_png(_convergence_figure(result, threshold, cell_arcsec), path, overwrite)
