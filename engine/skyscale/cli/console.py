"""Terminal output of the command line (rich): progress bars, tables, messages.

Only the command line uses this module; the engine reports through callbacks.
"""

import logging
import sys

from rich.console import Console
from rich.progress import BarColumn, Progress, SpinnerColumn, TextColumn, TimeElapsedColumn
from rich.table import Table

from skyscale.core.stops import LEVEL_STOPS

__all__ = ["RunProgress", "CubeProgress", "cube_summary", "summary", "show_suggestion",
           "show_check", "say", "warn", "warn_all", "WarningLog", "stop_words"]

_out = Console(stderr=False, highlight=False)


def say(text):
    """Print one line to the terminal."""
    _out.print(text)


def _one_line(text):
    return " ".join(str(text).split())


def warn(text):
    """Print a warning to stderr, on one line (shown with --quiet too)."""
    print(f"skyscale: warning: {_one_line(text)}", file=sys.stderr, flush=True)


class WarningLog(logging.Handler):
    """Shows the engine's logged warnings on stderr as they happen, once each.

    ``said`` holds what was shown, so `warn_all` does not repeat it after the run.
    """

    def __init__(self):
        super().__init__(level=logging.WARNING)
        self.said = set()
        self._logger = None
        self._saved = None
        self._filtered = []

    @classmethod
    def install(cls, debug=False):
        """Attach a new handler to the ``skyscale`` logger; `uninstall` undoes it."""
        handler = cls()
        log = logging.getLogger("skyscale")
        handler._logger, handler._saved = log, (log.level, log.propagate)
        log.addHandler(handler)
        if debug:    # debug logs still reach the root handler; warnings only through here
            log.setLevel(logging.DEBUG)
            for h in logging.getLogger().handlers:
                h.addFilter(handler._not_mine)
                handler._filtered.append(h)
        else:
            log.setLevel(logging.WARNING)
            log.propagate = False
        return handler

    @staticmethod
    def _not_mine(record):
        return not (record.name.startswith("skyscale") and record.levelno == logging.WARNING)

    def uninstall(self):
        """Detach the handler and restore the logger as it was."""
        if self._logger is not None:
            self._logger.removeHandler(self)
            self._logger.setLevel(self._saved[0])
            self._logger.propagate = self._saved[1]
            for h in self._filtered:
                h.removeFilter(self._not_mine)
            self._logger = None

    def emit(self, record):
        if record.levelno != logging.WARNING:
            return          # errors are raised and said by the command line itself
        try:
            text = _one_line(record.getMessage())
        except Exception:   # noqa: BLE001 - a bad log call must not stop a run
            self.handleError(record)
            return
        if text not in self.said:
            self.said.add(text)
            warn(text)


def warn_all(warnings, shown=None):
    """Print each warning not yet shown by ``shown`` (a `WarningLog`), to stderr."""
    said = shown.said if shown is not None else set()
    for w in warnings or ():
        text = _one_line(w)
        if text not in said:
            said.add(text)
            warn(text)


def stop_words(result, report=None):
    """Why the run stopped, in a sentence with the stop level it used."""
    rule = ((report or {}).get("parameters") or {}).get("stop_rule")
    reason = result.stop_reason
    text = result.stop_description
    if reason in LEVEL_STOPS and rule:
        peaks, levels = result.scale_peaks, result.scale_levels
        over = [] if peaks is None or levels is None else \
            [(p / lv - 1.0, s) for p, lv, s in zip(peaks, levels, result.scales)
             if lv > 0 and p > lv]
        if over:
            worst, at = max(over)
            return (f"every scale reached its stop level or came within 5 % of it (the "
                    f"peak left is up to {100 * worst:.0f} % above it, on the {at:g} px "
                    f"scale): {rule}")
        return f"every scale reached its stop level: {rule}"
    if reason in ("max_components", "max_major_cycles", "no_progress") and rule:
        return f"{text}, before every scale reached its stop level ({rule})"
    return text


class _Bar:
    """A rich progress bar with one task, shown only on a terminal."""

    first = ""

    def __init__(self, enabled=True):
        self.enabled = enabled
        self._progress = None
        self._task = None

    def __enter__(self):
        if self.enabled and sys.stdout.isatty():
            self._progress = Progress(SpinnerColumn(), TextColumn("{task.description}"),
                                      BarColumn(), TextColumn("{task.fields[info]}"),
                                      TimeElapsedColumn(), console=_out, transient=False,
                                      redirect_stderr=sys.stderr.isatty())
            self._progress.__enter__()
            self._task = self._progress.add_task(self.first, total=None, info="")
        return self

    def __exit__(self, *exc):
        if self._progress is not None:
            self._progress.__exit__(*exc)
        return False


class RunProgress(_Bar):
    """Progress of a run: one line per major cycle with components and peak residual."""

    first = "major cycle 0"

    def __init__(self, enabled=True):
        super().__init__(enabled)
        self._total = 0
        self._cycle = 0

    def update(self, event):
        """Callback for `skyscale.deconvolve`: take one progress event."""
        if self._progress is None:
            return
        if event.get("stage") == "major":
            self._cycle = event["cycle"]
            self._total = event["components"]
            info = (f"{self._total} components, peak {event['peak']:.4g} Jy/beam, "
                    f"rms {event['rms']:.3g}")
            self._progress.update(self._task, description=f"major cycle {self._cycle}", info=info)
        else:
            info = (f"{self._total + event['components']} components, "
                    f"peak {event['peak']:.4g} Jy/beam (minor cycle)")
            self._progress.update(self._task, description=f"major cycle {self._cycle + 1}",
                                  info=info)


class CubeProgress(_Bar):
    """Progress of a cube run: planes done and running, time left; the dashboard address."""

    first = "planes"

    def update(self, event):
        """Callback for `skyscale.deconvolve_cube`: take one progress event."""
        if not self.enabled:
            return
        if event.get("stage") == "cluster":
            where = {"local": "local cluster", "address": "scheduler", "client": "client"}
            _out.print(f"{where.get(event['kind'], event['kind'])} {event['address']}: "
                       f"{event['workers']} workers, {event['slots']} planes at a time; "
                       f"dashboard {event['dashboard']}")
            if event.get("reused"):
                _out.print(f"resuming: {event['reused']} of {event['total']} planes were "
                           "finished before")
            return
        if self._progress is None:
            return
        eta = event.get("eta_s")
        if eta is None:
            left = ""
        elif eta >= 90:
            left = f", about {eta / 60:.1f} min left"
        else:
            left = f", about {eta:.0f} s left"
        info = f"{event['done']}/{event['total']} done, {event['running']} running{left}"
        self._progress.update(self._task, total=event["total"], completed=event["done"],
                              info=info)


def cube_summary(result):
    """The end-of-run table of a cube: plane counts, the common beam, the outputs."""
    rep = result.report
    t = Table(title="cube", show_header=False)
    t.add_column("what")
    t.add_column("value")
    counts = rep["counts"]
    t.add_row("planes", f"{counts['planes']}: {counts['computed']} computed, {counts['reused']} "
              f"resumed, {counts['skipped']} skipped, {counts['failed']} failed")
    t.add_row("scales (px)", ", ".join(f"{s:g}" for s in rep["scales"]["pixels"])
              + f" ({rep['scales']['chosen']})")
    b = result.common_beam
    t.add_row("restoring beam", f"{b.major:.3g} x {b.minor:.3g} px, PA {b.pa:.1f} deg "
              f"({rep['restoring_beam']['source']})")
    for p in rep["planes"]:
        if p["status"] == "skipped":
            t.add_row(f"plane {p['plane']} skipped", p.get("reason", ""))
        elif p["status"] == "failed":
            t.add_row(f"plane {p['plane']} failed", p.get("error", ""))
    t.add_row("time", f"{rep['timings_s']['total']:.2f} s")
    _out.print(t)
    for kind, path in result.written.items():
        _out.print(f"  {kind:12s} {path}")


def _beam_text(beam, cell):
    """A restoring beam in pixels and, with a cell size, in arcsec."""
    text = f"{beam.major:.3g} x {beam.minor:.3g} px"
    if cell:
        text += f" = {beam.major * cell:.3g} x {beam.minor * cell:.3g} arcsec"
    return text + f", PA {beam.pa:.1f} deg"


def summary(result, written, report, elapsed):
    """The end-of-run tables: per-scale components and flux, residual, timings, outputs.

    Scales and the beam are given in pixels and, where the report has a cell size, in
    arcsec; the peak residual says where it was measured (``report['final']``).
    """
    report = report or {}
    cell = (report.get("image") or {}).get("cell_arcsec")
    levels = getattr(result, "scale_levels", None)
    t = Table(title="components per scale" + (" (noise, stop level and peak left in "
                                              "Jy/beam)" if levels is not None else ""))
    t.add_column("scale (px, arcsec)" if cell else "scale (px)", justify="right")
    t.add_column("components", justify="right")
    t.add_column("flux (Jy)", justify="right")
    if levels is not None:
        t.add_column("noise", justify="right")
        t.add_column("stop level", justify="right")
        t.add_column("peak left", justify="right")
    for i, row in enumerate(result.per_scale()):
        scale = f"{row['scale']:g}" + (f", {row['scale'] * cell:.3g}" if cell else "")
        cells = [scale, str(row["components"]), f"{row['flux']:.5g}"]
        if levels is not None:
            peak = result.scale_peaks[i]
            cells += [f"{result.scale_noise[i]:.3g}", f"{levels[i]:.3g}",
                      f"{peak:.3g}" + (" (active)" if result.scales[i] in
                                        (result.active_scales or ()) else "")]
        t.add_row(*cells)
    t.add_row("all", str(result.components.size),
              f"{float(result.model.sum()):.5g}")
    _out.print(t)
    last = result.history[-1]
    final = report.get("final") or {}
    s = Table(title="run", show_header=False)
    s.add_column("what")
    s.add_column("value")
    s.add_row("stop reason", f"{result.stop_reason}: {stop_words(result, report)}")
    s.add_row("major cycles", f"{len(result.history) - 1} ({getattr(result, 'sub_loops', 0)} "
              f"sub-loops, {getattr(result, 'rollbacks', 0)} rollbacks)")
    if final.get("peak_residual") is not None:
        inside = final.get("region") == "mask"
        where = "in the mask" if inside else "whole image"
        s.add_row(f"peak residual ({where})", f"{final['peak_residual']:.4g} Jy/beam")
        if inside and final.get("peak_residual_image") is not None:
            s.add_row("peak residual (whole image)",
                      f"{final['peak_residual_image']:.4g} Jy/beam")
        s.add_row(f"rms residual ({where})", f"{final['rms_residual']:.4g} Jy/beam")
    else:                                   # no report: the last cycle's own figures
        where = "in the mask" if result.mask is not None else "whole image"
        s.add_row(f"peak residual ({where})", f"{last.peak:.4g} Jy/beam")
        s.add_row(f"rms residual ({where})", f"{last.rms:.4g} Jy/beam")
    if result.beam is not None:
        s.add_row("restoring beam", _beam_text(result.beam, cell))
    tm = report.get("timings_s") or result.timings
    total = tm.get("total", elapsed)
    parts = [f"{k} {tm[k]:.2f} s" for k in ("precompute", "minor", "major", "other", "outputs")
             if k in tm]
    s.add_row("time", ", ".join(parts + [f"total {total:.2f} s"]))
    threads = report.get("threads") or {}
    if isinstance(threads.get("numba"), int):
        fft = threads.get("fft_threads")
        s.add_row("threads", f"{threads['numba']} (kernels)" + (
            f", {fft} ({threads.get('fft_backend')} FFTs)" if isinstance(fft, int) else ""))
    if result.warnings:       # each was said on stderr when it arose (warn, WarningLog)
        s.add_row("warnings", f"{len(result.warnings)}, on stderr and in report.json")
    _out.print(s)
    rows = final.get("component_table_rows")
    for kind, path in written.items():
        note = ""
        if kind == "components" and rows is not None:
            note = (f" ({rows} rows: the {result.components.size} components merged by "
                    "pixel and scale)")
        _out.print(f"  {kind:12s} {path}{note}")


def show_suggestion(suggestion):
    """Print a scale suggestion with its reasons."""
    t = Table(title="suggested scales")
    t.add_column("scale (px)", justify="right")
    t.add_column("scale (arcsec)", justify="right")
    arc = suggestion.arcsec or [None] * len(suggestion.pixels)
    for p, a in zip(suggestion.pixels, arc):
        t.add_row(f"{p:g}", "-" if a is None else f"{a:.3g}")
    _out.print(t)
    for r in suggestion.reasons:
        _out.print(f"  - {r}")
    _out.print("  use: --scales " + ",".join(f"{p:g}" for p in suggestion.pixels))


def show_check(scales, problems):
    """Print what is wrong with a user's scale set (or that nothing is)."""
    _out.print("scales " + ",".join(f"{s:g}" for s in scales) + ":")
    if not problems:
        _out.print("  no rule of thumb broken")
    for p in problems:
        _out.print(f"  - {p}")
