"""The developer's tables of a ``skyscale bench`` sweep, printed from its bench.json.

    PYTHONPATH=engine python benchmarks/sweep_tables.py bench-out/bench.json

Every point measured against the model (in brackets), the fitted exponents, the cost
model's coefficients with their misfit per family, and the planner against each run it
did not see (predicted over measured).  ``skyscale bench`` itself prints what a user
needs: what was measured, what it means for a run, and where the calibration went.
"""

import argparse
import json
import sys

from rich.console import Console
from rich.table import Table


def _scales(values):
    return ",".join(f"{s:g}" for s in values)


def show_tables(sweep, out=None):
    """Print the sweep's tables: points against the model, exponents, coefficients and
    the planner against runs it did not see."""
    out = out or Console(highlight=False, width=None if sys.stdout.isatty() else 150)
    m = sweep["machine"]
    out.print(f"load average at the start {m['load'][0]:.1f}, at the end "
              f"{m.get('load_after', [float('nan')])[0]:.1f} ({m['cores']} cores)")
    t = Table(title="what scales cost: measured (model), 1 thread, float32")
    for c in ("size", "scales (px)", "precompute s", "beams s", "FFT update ms",
              "direct updates", "sub-loops s", "major ms", "statistics ms", "peak MiB",
              "engine's own MiB", "RSS+ MiB"):
        t.add_column(c, justify="right")
    for r in sweep["points"]:
        md = r["model"]
        t.add_row(str(r["size"]), _scales(r["scales"]),
                  f"{r['precompute_s']:.3f} ({md['precompute_s']:.3f})",
                  "-" if "beams_s" not in r else f"{r['beams_s']:.3f} ({md['beams_s']:.3f})",
                  f"{r['round_s'] * 1e3:.1f} ({md['round_s'] * 1e3:.1f})",
                  str(sum(1 for u in r.get("update_rows", []) if u[0] == "direct")),
                  f"{md['loops_measured_s']:.3f} ({md['loops_s']:.3f})",
                  f"{r['major_s'] * 1e3:.1f} ({md['major_s'] * 1e3:.1f})",
                  f"{r['stats_s'] * 1e3:.1f} ({md['stats_s'] * 1e3:.1f})",
                  f"{r['traced_peak'] / 2**20:.0f} ({md['memory'] / 2**20:.0f})",
                  f"{r['engine_memory'] / 2**20:.0f}", f"{r['rss_increase'] / 2**20:.0f}")
    out.print(t)
    t = Table(title="fitted exponents")
    t.add_column("relation")
    t.add_column("exponent", justify="right")
    for name, values in sweep["summary"]["exponents"].items():
        for key, v in values.items():
            t.add_row(f"{name.replace('_', ' ')}, {key}", f"{v:.3f}")
    out.print(t)
    cal = sweep["calibration"]
    out.print("cost model coefficients: " + "; ".join(
        f"{sec} " + ", ".join(f"{k} {v:.3g}" for k, v in cal[sec].items())
        for sec in ("fft", "precompute", "beams", "setup", "round", "direct", "scan", "loop",
                    "major", "stats", "counts", "threads", "memory", "startup") if sec in cal))
    out.print("relative misfit per family, rms (largest): " + ", ".join(
        f"{k} {v['rms']:.0%} ({v['max']:.0%})" for k, v in cal["fit"].items()))
    for v in sweep["validation"]:
        t = Table(title=f"planner against a run it did not see: {v['field']}, scales "
                  f"{_scales(v['scales'])}, {v['threads']} thread(s): {v['components']} "
                  f"components, {v['rounds']} sub-loops ({v.get('fft_updates', '?')} by FFT "
                  f"update), {v['major_cycles']} major cycles, "
                  f"stop {v['stop_reason']} (predicted / measured)")
        t.add_column("counts")
        for k in v["measured"]:
            t.add_column(k, justify="right")
        for label, ratios in v["ratios"].items():
            t.add_row(label, *(("-" if r is None else f"{r:.2f}") for r in ratios.values()))
        out.print(t)
    out.print(f"sweep took {sweep['seconds']:.0f} s")


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("bench_json", help="bench.json written by skyscale bench")
    args = ap.parse_args(argv)
    with open(args.bench_json, encoding="utf-8") as fh:
        show_tables(json.load(fh))
    return 0


if __name__ == "__main__":
    sys.exit(main())
