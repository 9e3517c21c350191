"""What ``skyscale bench`` prints and draws: the user's summary and bench.png.

The summary says what was measured, what it means for a run, how the planner did on
runs the fit did not see, and where the calibration went.  The developer's tables
(each point against the model, the fit's exponents and coefficients) are printed
from bench.json by ``benchmarks/sweep_tables.py``.
"""

import io
import os

import numpy as np

from skyscale.cli.formats import memory_text, plain_console, scales_text, time_text

__all__ = ["show_bench", "plot_bench", "BENCH_SIZE_PX"]

#: ``(width, height)`` in pixels of bench.png.
BENCH_SIZE_PX = (1200, 900)
_DPI = 100


def _and(values):
    values = [str(v) for v in values]
    return values[0] if len(values) == 1 else ", ".join(values[:-1]) + " and " + values[-1]


def _typical_scales(n, measured):
    """The scale set of the user table at size ``n``: 0,4,8,16 where the sweep measured
    it, else the largest set it measured at that size."""
    sets = [tuple(int(v) for v in r["scales"]) for r in measured if r["size"] == n]
    return (0, 4, 8, 16) if (0, 4, 8, 16) in sets else max(sets, key=len)


def show_bench(sweep, out=None, *, calibration_path=None, files=()):
    """Print what ``skyscale bench`` measured and what it means for a user's runs.

    The per-point tables, exponents and coefficients are for developers:
    ``benchmarks/sweep_tables.py`` prints them from bench.json.
    """
    from rich.table import Table
    from skyscale.cost import model as cost
    from skyscale.core.calibration import default_calibration_path, load_calibration
    from skyscale.core.scales import ScaleSet
    out = out or plain_console()
    m, st, pts = sweep["machine"], sweep["settings"], sweep["points"]
    sizes = sorted({r["size"] for r in pts})
    threads = sorted({r.get("threads", 1) for r in sweep.get("fft_threads", [])})
    out.print(f"skyscale bench measured this machine ({m['cores']} cores; load average "
              f"{m['load'][0]:.1f} at the start, {m.get('load_after', [float('nan')])[0]:.1f} "
              f"at the end) in {sweep['seconds']:.0f} s: each step of a run (precompute, "
              "beams, FFT and direct updates, major cycle, statistics, peak memory) on "
              "invented fields of "
              f"{_and(sizes)} pixels square with {len(st['scale_sets'])} scale sets, "
              f"FFTs on {len(sweep['fft'])} grid sizes, "
              + (f"{_and(threads)} threads, " if threads else "")
              + f"and {len(sweep['runs'])} whole runs that count sub-loops and major cycles.")
    if st.get("quick"):
        out.print("[bold]--quick[/]: tiny images and few components, a rough fit: a check "
                  "that skyscale runs here, not figures to plan with.")
    cal = sweep["calibration"]
    t = Table(title="what it means for your runs (the fitted model: 1 thread, float32, PSF "
              "twice the image)")
    for c in ("image", "scales (px)", "precompute and beams", "each FFT update",
              "a direct update", "each major cycle", "peak memory"):
        t.add_column(c, justify="right")
    for n in sizes:
        sc = _typical_scales(n, pts)
        g = cost.run_geometry((n, n), (2 * n, 2 * n), ScaleSet(sc).support_radii)
        tm = cost.predict_times(g, cal)
        t.add_row(f"{n} x {n}", scales_text(sc), time_text(tm["precompute"] + tm["beams"]),
                  time_text(tm["round"]), time_text(tm["direct"]), time_text(tm["major"] + tm["stats"]),
                  memory_text(cost.predict_memory(g, cal)["peak"]))
    out.print(t)
    out.print("A run takes about its precompute and beams, plus each sub-loop's update (an "
              "FFT update of the cycle's box, or a direct update of the mask's pixels when it "
              "takes few components), plus its major cycles; skyscale plan counts them for "
              "your image, mask and scales.")
    ratios = sweep.get("summary", {}).get("validation_ratios", {})
    if ratios:
        def span(label, key):
            v = ratios.get(label, {}).get(key) or []
            return "-" if not v else (f"{v[0]:.2f}" if len(v) == 1 else
                                      f"{min(v):.2f} to {max(v):.2f}")
        out.print(f"Checked on {len(sweep['validation'])} run(s) the fit did not see: the "
                  f"planner's total time was {span('model, run' + chr(39) + 's counts', 'total')}"
                  f" x the measured with the runs' own counts and "
                  f"{span('a priori', 'total')} x from the dynamic range alone; its peak "
                  f"memory {span('a priori', 'memory')} x.")
    if calibration_path:
        same = os.path.abspath(calibration_path) == os.path.abspath(default_calibration_path())
        out.print(f"Calibration written to {calibration_path}: "
                  + ("skyscale plan and skyscale run use it from now on." if same else
                     f"give it to skyscale plan --calibration {calibration_path}, or set "
                     "SKYSCALE_COST_CALIBRATION to it."))
    else:
        why = "--quick" if st.get("quick") else "--no-calibration"
        out.print(f"No calibration written ({why}): skyscale plan and run keep using "
                  f"{load_calibration()['source']}.")
    if files:
        out.print("Wrote " + " and ".join(files) + "; the developer's tables (each point "
                  "against the model, the exponents and coefficients of the fit) are in "
                  "bench.json: PYTHONPATH=engine python benchmarks/sweep_tables.py "
                  + files[0] + " prints them.")


def plot_bench(sweep):
    """bench.png as PNG bytes: the beams, an FFT update and peak memory against the
    number of scales, one line per image size, with the model; the FFT law."""
    try:
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure
    except ImportError as exc:
        raise ImportError("bench.png needs matplotlib; pip install skyscale[plots]") from exc
    fig = Figure(figsize=(BENCH_SIZE_PX[0] / _DPI, BENCH_SIZE_PX[1] / _DPI), dpi=_DPI,
                 layout="constrained")
    FigureCanvasAgg(fig)
    axes = fig.subplots(2, 2)
    pts = sweep["points"]
    sizes = sorted({r["size"] for r in pts})
    panels = [(axes[0, 0], "beams_s", "beams_s", 1.0, "beams (s)"),
              (axes[0, 1], "round_s", "round_s", 1e3, "FFT update (ms)"),
              (axes[1, 0], "traced_peak", "memory", 2.0 ** -20, "peak memory (MiB)")]
    for ax, key, mkey, unit, label in panels:
        for i, n in enumerate(sizes):
            rows = sorted((r for r in pts if r["size"] == n), key=lambda r: r["n_scales"])
            ns = [r["n_scales"] for r in rows]
            ax.plot(ns, [r[key] * unit for r in rows], "o", color=f"C{i}",
                    label=f"{n} px measured")
            ax.plot(ns, [r["model"][mkey] * unit for r in rows], "-", color=f"C{i}",
                    label=f"{n} px model")
            if key == "traced_peak":
                ax.plot(ns, [r["engine_memory"] * unit for r in rows], ":", color=f"C{i}",
                        label=f"{n} px engine's own account")
        ax.set_yscale("log")
        ax.set_xlabel("number of scales")
        ax.set_ylabel(label)
        ax.grid(alpha=0.3)
        ax.legend(fontsize=7)
    ax = axes[1, 1]
    f = sorted(sweep["fft"], key=lambda r: r["grid"][0] * r["grid"][1])
    work = [r["grid"][0] * r["grid"][1] * np.log2(r["grid"][0] * r["grid"][1]) for r in f]
    law = sweep["calibration"]["fft"]
    ax.plot(work, [r["seconds"] for r in f], "o", color="C0", label="measured")
    ax.plot(work, [law["coefficient"] * w ** law["exponent"] for w in work], "-", color="C0",
            label=f"model, exponent {law['exponent']:.2f}")
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xlabel("FFT work S log2 S")
    ax.set_ylabel("one real FFT (s)")
    ax.grid(alpha=0.3)
    ax.legend(fontsize=7)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=_DPI)
    return buf.getvalue()
