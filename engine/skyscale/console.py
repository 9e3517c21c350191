"""Terminal output of the command line (rich): progress bars, tables, messages.

Only the command line uses this module; the engine reports through callbacks.
"""

import logging
import sys

from rich.console import Console
from rich.progress import BarColumn, Progress, SpinnerColumn, TextColumn, TimeElapsedColumn
from rich.table import Table

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
    if reason in ("noise", "threshold") and rule:
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


def summary(result, written, report, elapsed):
    """The end-of-run tables: per-scale components and flux, residual, timings, outputs."""
    t = Table(title="components per scale")
    t.add_column("scale (px)", justify="right")
    t.add_column("components", justify="right")
    t.add_column("flux (Jy)", justify="right")
    levels = getattr(result, "scale_levels", None)
    if levels is not None:
        t.add_column("noise (Jy/beam)", justify="right")
        t.add_column("stop level", justify="right")
        t.add_column("peak left", justify="right")
    for i, row in enumerate(result.per_scale()):
        cells = [f"{row['scale']:g}", str(row["components"]), f"{row['flux']:.5g}"]
        if levels is not None:
            peak = result.scale_peaks[i]
            cells += [f"{result.scale_noise[i]:.3g}", f"{levels[i]:.3g}",
                      f"{peak:.3g}" + (" (active)" if result.scales[i] in
                                        (result.active_scales or ()) else "")]
        t.add_row(*cells)
    t.add_row("all", str(result.components.size), f"{float(result.model.sum()):.5g}")
    _out.print(t)
    last = result.history[-1]
    s = Table(title="run", show_header=False)
    s.add_column("what")
    s.add_column("value")
    s.add_row("stop reason", f"{result.stop_reason}: {stop_words(result, report)}")
    s.add_row("major cycles", f"{len(result.history) - 1} ({getattr(result, 'sub_loops', 0)} "
              f"sub-loops, {getattr(result, 'rollbacks', 0)} rollbacks)")
    s.add_row("peak residual", f"{last.peak:.4g} Jy/beam")
    s.add_row("rms residual", f"{last.rms:.4g} Jy/beam")
    if result.beam is not None:
        b = result.beam
        s.add_row("restoring beam", f"{b.major:.3g} x {b.minor:.3g} px, PA {b.pa:.1f} deg")
    tm = result.timings
    s.add_row("time", f"precompute {tm.get('precompute', 0):.2f} s, minor {tm.get('minor', 0):.2f} s,"
              f" major {tm.get('major', 0):.2f} s, total {elapsed:.2f} s")
    if result.warnings:       # each was said on stderr when it arose (warn, WarningLog)
        s.add_row("warnings", f"{len(result.warnings)}, on stderr and in report.json")
    _out.print(s)
    for kind, path in written.items():
        _out.print(f"  {kind:12s} {path}")


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
