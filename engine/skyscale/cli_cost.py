"""The ``skyscale bench`` and ``skyscale plan`` commands: measure and predict what scales cost.

`register` adds both to the main command line's subparsers.  Exit codes: 0 success,
1 failure (or, with ``plan --require-fit``, a run that would not fit), 2 bad input.
"""

import argparse
import io
import json
import os
import re
import sys

__all__ = ["register", "cmd_bench", "cmd_plan", "show_plan", "show_bench", "plot_bench",
           "BENCH_FILES", "BENCH_SIZE_PX"]

#: Files ``skyscale bench`` writes into ``--out``.
BENCH_FILES = {"json": "bench.json", "figure": "bench.png"}
#: ``(width, height)`` in pixels of bench.png.
BENCH_SIZE_PX = (1200, 900)
_DPI = 100


def _int_list(text):
    try:
        values = [int(v) for v in text.replace(" ", "").split(",") if v]
    except ValueError:
        values = []
    if not values or min(values) < 1:
        raise argparse.ArgumentTypeError(f"{text!r}: give positive integers separated by "
                                         "commas, such as 512,1024")
    return values


def _floats(text):
    try:
        return [float(v) for v in re.split(r"[,;\s]+", text.strip()) if v]
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r}: give numbers separated by commas or "
                                         "spaces, such as 0,4,8,16") from None


def _shape(text):
    m = re.fullmatch(r"\s*(\d+)\s*(?:[xX,]\s*(\d+)\s*)?", text)
    if not m or int(m.group(1)) < 1 or (m.group(2) and int(m.group(2)) < 1):
        raise argparse.ArgumentTypeError(f"{text!r}: give N or NYxNX in pixels, such as 2048 "
                                         "or 1024x2048")
    ny = int(m.group(1))
    return (ny, int(m.group(2)) if m.group(2) else ny)


def _mix(text):
    from .cost import SCALE_MIXES
    return text if text in SCALE_MIXES else _floats(text)


def register(subparsers):
    """Add ``bench`` and ``plan`` to an argparse subparsers object."""
    b = subparsers.add_parser("bench", help="measure what scales, image size, sub-region and "
                              "threads cost on this machine, and fit the cost model")
    b.add_argument("--out", required=True, help="output directory for bench.json and bench.png")
    b.add_argument("--sizes", type=_int_list, default=[512, 1024],
                   help="image sizes, comma-separated [512,1024]")
    b.add_argument("--max-scales", type=int, default=8, help="scales 1 .. this many [8]")
    b.add_argument("--iterations", type=int, default=200,
                   help="minor-cycle iterations timed per point [200]")
    b.add_argument("--repeats", type=int, default=3, help="identical timed runs, best kept [3]")
    b.add_argument("--threads", type=_int_list, help="thread counts of the thread sweep "
                   "[1 .. all cores]")
    b.add_argument("--calibration", help="write the fitted coefficients here [the default "
                   "calibration file, which skyscale plan and run then use]")
    b.add_argument("--no-calibration", action="store_true", help="do not write a calibration")
    b.add_argument("--no-validate", action="store_true",
                   help="skip the check of the planner against real runs")
    b.add_argument("--quick", action="store_true", help="tiny settings for a smoke test "
                   "(rough fit; no calibration is written unless --calibration is given)")
    b.add_argument("--overwrite", action="store_true", help="replace existing outputs [refuse]")
    b.set_defaults(func=cmd_bench)

    p = subparsers.add_parser("plan", help="predict time and memory of a run before it starts")
    p.add_argument("dirty", nargs="?", help="dirty image, FITS (or give --size)")
    p.add_argument("psf", nargs="?", help="PSF, FITS (measured for its patch)")
    p.add_argument("--size", type=_shape, help="image size N or NYxNX instead of FITS files")
    p.add_argument("--psf-size", type=_shape, help="PSF size with --size [twice the image]")
    p.add_argument("--scales", type=_floats, default=[0.0, 4.0, 8.0, 16.0],
                   help="scale diameters in pixels, comma-separated [0,4,8,16]")
    p.add_argument("--max-components", type=int, default=20000, help="component budget [20000]")
    p.add_argument("--major-cycles", type=int, help="major cycles to count [20, the budget]")
    p.add_argument("--threads", type=int, help="threads [all cores]")
    p.add_argument("--psf-patch", type=int, help="PSF patch half-width, pixels [measured from "
                   "the PSF, else 12]")
    p.add_argument("--dtype", choices=("float32", "float64"), default="float32",
                   help="working precision [float32]")
    p.add_argument("--memory", type=float, help="memory available, GiB [what is free now]")
    p.add_argument("--scale-mix", type=_mix, help="how components spread over the scales: "
                   "uniform, smallest, largest, or one fraction per scale [uniform]")
    p.add_argument("--calibration", help="calibration file [the default one, else built-in]")
    p.add_argument("--warm-process", action="store_true", help="the run is not the first "
                   "of its process (a pipeline's later fields): no start-up counted")
    p.add_argument("--json", action="store_true", help="print the plan as JSON")
    p.add_argument("--require-fit", action="store_true",
                   help="exit 1 when the run would not fit in memory")
    p.set_defaults(func=cmd_plan)
    return subparsers


def _console():
    from rich.console import Console
    return Console(highlight=False, width=None if sys.stdout.isatty() else 150)


# ---------------------------------------------------------------------------- plan
def cmd_plan(args):
    """``skyscale plan``: print the predicted cost of a run."""
    from .cost import plan_run
    if args.size is not None and args.dirty:
        raise ValueError("give either FITS files or --size, not both")
    if args.size is None and not args.dirty:
        raise ValueError("give the dirty image and PSF (FITS), or --size N for an image size")
    psf = None
    if args.size is not None:
        shape = args.size
        psf = args.psf_size or (2 * shape[0], 2 * shape[1])
    else:
        from .fitsio import read_image
        if not args.psf:
            raise ValueError(f"dirty is {args.dirty!r} but the PSF is missing; give both FITS "
                             "files")
        shape = read_image(args.dirty, name="dirty").data.shape
        psf = read_image(args.psf, name="psf").data
    memory = None if args.memory is None else int(args.memory * 2**30)
    plan = plan_run(shape, psf, args.scales, max_components=args.max_components,
                    threads=args.threads, psf_patch=args.psf_patch, dtype=args.dtype,
                    memory_available=memory, major_cycles=args.major_cycles,
                    scale_mix=args.scale_mix, calibration=args.calibration,
                    fresh_process=not args.warm_process)
    if args.json:
        print(json.dumps(plan.as_dict(), indent=2))
    elif not getattr(args, "quiet", False):
        show_plan(plan)
    return 1 if args.require_fit and not plan.fits else 0


def _t(seconds):
    if seconds < 1e-3:
        return f"{seconds * 1e6:.3g} us"
    if seconds < 1:
        return f"{seconds * 1e3:.3g} ms"
    if seconds < 600:
        return f"{seconds:.3g} s"
    return f"{seconds / 60:.3g} min"


def _b(nbytes):
    return "unknown" if nbytes is None else f"{nbytes / 2**20:,.0f} MiB"


def show_plan(plan):
    """Print a plan as a table."""
    from rich.table import Table
    out = _console()
    t = Table(title="planned run", show_header=False)
    t.add_column("what")
    t.add_column("predicted")
    t.add_row("image / PSF", f"{plan.image_shape[0]} x {plan.image_shape[1]} / "
              f"{plan.psf_shape[0]} x {plan.psf_shape[1]}")
    t.add_row("scales (px)", ", ".join(f"{s:g}" for s in plan.scales))
    t.add_row("PSF patch", f"{plan.psf_patch} px ({plan.psf_patch_source})")
    t.add_row("threads, dtype", f"{plan.threads}, {plan.dtype}")
    t.add_row("start-up", _t(plan.startup_seconds) + (" (first run of the process)"
                                                      if plan.startup_seconds else ""))
    t.add_row("precompute", _t(plan.precompute_seconds))
    lo, hi = plan.iteration_seconds_range
    t.add_row("per iteration", f"{_t(plan.iteration_seconds)} ({_t(lo)} .. {_t(hi)})")
    t.add_row("minor cycles", f"{_t(plan.minor_seconds)} for {plan.max_components} components"
              f" and {plan.major_cycles} cycles")
    t.add_row("major cycles", f"{_t(plan.major_total_seconds)} ({_t(plan.major_seconds)} each "
              "after the first)")
    t.add_row("total", _t(plan.total_seconds))
    t.add_row("peak memory", f"{_b(plan.memory_bytes)} (at {plan.memory_phase})")
    t.add_row("memory available", _b(plan.memory_available))
    t.add_row("fits", "yes" if plan.fits else "[bold red]NO: will not fit[/]")
    out.print(t)
    for m in plan.messages:
        out.print(f"  - {m}")
    out.print(f"  coefficients: {plan.calibration}")


# --------------------------------------------------------------------------- bench
def cmd_bench(args):
    """``skyscale bench``: run the sweep, print tables, write bench.json and bench.png."""
    from .cost import save_calibration, default_calibration_path
    from ._atomic import atomic_write_bytes
    from .sweep import run_sweep
    if args.max_scales < 1 or args.iterations < 1 or args.repeats < 1:
        raise ValueError(f"--max-scales {args.max_scales}, --iterations {args.iterations}, "
                         f"--repeats {args.repeats}: each must be at least 1")
    paths = {k: os.path.join(args.out, v) for k, v in BENCH_FILES.items()}
    clash = [p for p in paths.values() if os.path.exists(p)]
    if clash and not args.overwrite:
        raise FileExistsError(f"{clash[0]} exists; choose another --out or pass --overwrite")
    os.makedirs(args.out, exist_ok=True)
    quiet = getattr(args, "quiet", False)
    out = _console()
    status = out.status("measuring") if (not quiet and sys.stdout.isatty()) else None

    def progress(event):
        if status is not None:
            status.update(f"measuring: {event.get('what')} "
                          + " ".join(f"{k}={v}" for k, v in event.items()
                                     if k not in ("stage", "what")))
    if status is not None:
        status.start()
    try:
        sweep = run_sweep(args.sizes, args.max_scales, iterations=args.iterations,
                          repeats=args.repeats, thread_counts=args.threads, quick=args.quick,
                          validate=not args.no_validate, callback=progress)
    finally:
        if status is not None:
            status.stop()
    cal_path = None
    if not args.no_calibration and (args.calibration or not args.quick):
        cal_path = save_calibration(sweep["calibration"],
                                    args.calibration or default_calibration_path())
    sweep["calibration_path"] = cal_path
    data = json.dumps(sweep, indent=1, default=_jsonable).encode()
    atomic_write_bytes(paths["json"], data, overwrite=args.overwrite)
    written = [paths["json"]]
    try:
        atomic_write_bytes(paths["figure"], plot_bench(sweep), overwrite=args.overwrite)
        written.append(paths["figure"])
    except ImportError as exc:
        out.print(f"figure skipped: {exc}")
    if not quiet:
        show_bench(sweep, out)
        for p in written + ([cal_path] if cal_path else []):
            out.print(f"  wrote {p}")
    return 0


def _jsonable(value):
    if hasattr(value, "tolist"):
        return value.tolist()
    return float(value)


def _ratio(a, b):
    return f"{a / b:.2f}" if b else "-"


def show_bench(sweep, out=None):
    """Print the sweep's tables: points, other sweeps, exponents, targets, validation."""
    from rich.table import Table
    out = out or _console()
    out.print("streaming copy (read + write): " + ", ".join(
        f"{p['bytes'] >> 20} MiB, {p['threads']} thread(s): {p['bandwidth'] / 1e9:.1f} GB/s"
        for p in sorted(sweep["bandwidth"], key=lambda p: (p["threads"], p["bytes"]))))
    t = Table(title="what scales cost: measured (fitted model), 1 thread, float32")
    for c in ("size", "scales (px)", "precompute s", "iteration us", "planner us",
              "kB/iter", "x bw-bound", "major s", "peak MiB", "RSS+ MiB"):
        t.add_column(c, justify="right")
    for r in sweep["points"]:
        m = r["model"]
        t.add_row(str(r["size"]), ",".join(f"{s:g}" for s in r["scales"]),
                  f"{r['precompute_s']:.3f} ({m['precompute_s']:.3f})",
                  f"{r['iteration_s'] * 1e6:.1f} ({m['iteration_s'] * 1e6:.1f})",
                  f"{m['planner_iteration_s'] * 1e6:.1f}",
                  f"{r['bytes_per_iteration'] / 1e3:.0f}",
                  _ratio(r["iteration_s"], m["bandwidth_bound_s"]),
                  f"{r['major_s']:.3f} ({m['major_s']:.3f})",
                  f"{r['traced_peak'] / 2**20:.0f} ({m['memory'] / 2**20:.0f})",
                  f"{r['rss_increase'] / 2**20:.0f}")
    out.print(t)
    t = Table(title="iteration time against touched area, sub-region and threads")
    for c in ("sweep", "setting", "scales (px)", "iteration us", "pixels rescanned", "x bw"):
        t.add_column(c, justify="right")
    for r in sweep["patch_points"]:
        t.add_row("PSF patch", f"{r['psf_patch']} px", ",".join(f"{s:g}" for s in r["scales"]),
                  f"{r['iteration_s'] * 1e6:.1f}", f"{r['scan_pixels']:.0f}", "")
    for r in sweep["region_points"]:
        t.add_row("sub-region", f"{r['region_shape'][0]} x {r['region_shape'][1]}",
                  ",".join(f"{s:g}" for s in r["scales"]), f"{r['iteration_s'] * 1e6:.1f}",
                  f"{r['scan_pixels']:.0f}", "")
    for r in sweep["thread_points"]:
        t.add_row("threads", str(r["threads"]), ",".join(f"{s:g}" for s in r["scales"]),
                  f"{r['iteration_s'] * 1e6:.1f}", f"{r['scan_pixels']:.0f}",
                  f"{r.get('bandwidth_ratio', float('nan')):.2f}")
    out.print(t)
    ex = sweep["summary"]["exponents"]
    t = Table(title="fitted exponents")
    t.add_column("relation")
    t.add_column("exponent", justify="right")
    j = ex["iteration_joint"]
    t.add_row("iteration ~ N_s^p A^q (A: pixels touched per plane)",
              f"p {j['exponents'][0]:.3f}, q {j['exponents'][1]:.3f}")
    for n, v in ex["iteration_vs_scales_ladder"].items():
        t.add_row(f"iteration ~ N_s^p, scale ladder, {n} px (patches grow too)", f"{v:.3f}")
    if "iteration_vs_scales_fixed_largest" in ex:
        t.add_row("iteration ~ N_s^p, fixed largest scale",
                  f"{ex['iteration_vs_scales_fixed_largest']:.3f}")
    for k, v in ex["iteration_vs_image_area"].items():
        t.add_row(f"iteration ~ (image area)^p, {k} scales, whole-image region", f"{v:.3f}")
    if "iteration_vs_region_area" in ex:
        t.add_row("iteration ~ (sub-region area)^p", f"{ex['iteration_vs_region_area']:.3f}")
    for n, v in ex["precompute_vs_scales_ladder"].items():
        t.add_row(f"precompute ~ N_s^p, scale ladder, {n} px", f"{v:.3f}")
    q = ex.get("precompute_quadratic_fixed_largest")
    if q:
        t.add_row("precompute = a + b N_s + c N_s^2, fixed largest scale (s)",
                  f"a {q['a']:.3g}, b {q['b']:.3g}, c {q['c']:.3g}")
    for n, v in ex["memory_vs_scales_ladder"].items():
        t.add_row(f"peak memory ~ N_s^p, scale ladder, {n} px", f"{v:.3f}")
    out.print(t)
    cal = sweep["calibration"]
    out.print("cost model coefficients (s): " + "; ".join(
        f"{sec} " + ", ".join(f"{k} {v:.3g}" for k, v in cal[sec].items())
        for sec in ("iteration", "precompute", "minor_overhead", "major", "setup", "threads",
                    "memory")))
    out.print("relative misfit per family, rms (largest): " + ", ".join(
        f"{k} {v['rms']:.0%} ({v['max']:.0%})" for k, v in cal["fit"].items()))
    t = Table(title="targets")
    for c in ("target", "limit", "measured", "met", "where"):
        t.add_column(c)
    for g in sweep["summary"]["targets"]:
        met = {True: "yes", False: "[bold red]MISSED[/]", None: "not measured"}[g["met"]]
        val = "-" if g["measured"] is None else f"{g['measured']:.3g}"
        sign = "<=" if g["kind"] == "max" else ">="
        t.add_row(g["what"], f"{sign} {g['limit']}", val, met, g["where"])
    out.print(t)
    for v in sweep["validation"]:
        t = Table(title=f"planner against a real run: {v['image_shape'][0]} x "
                  f"{v['image_shape'][1]}, scales {v['scales']}, {v['components']} components,"
                  f" {v['major_cycles']} major cycles, {v.get('threads', 1)} thread(s) "
                  "(predicted / measured)")
        t.add_column("assumed mix")
        for k in v["measured"]:
            t.add_column(k, justify="right")
        for label, ratios in v["ratios"].items():
            t.add_row(label, *(("-" if r is None else f"{r:.2f}") for r in ratios.values()))
        out.print(t)
    out.print(f"sweep took {sweep['seconds']:.0f} s")


def plot_bench(sweep):
    """bench.png as PNG bytes: time and memory against the number of scales, one line per
    image size, with the fitted cost model; and iteration time against the sub-region."""
    try:
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure
    except ImportError as exc:
        raise ImportError("bench.png needs matplotlib; pip install skyscale[plots]") from exc
    fig = Figure(figsize=(BENCH_SIZE_PX[0] / _DPI, BENCH_SIZE_PX[1] / _DPI), dpi=_DPI,
                 layout="constrained")
    FigureCanvasAgg(fig)
    axes = fig.subplots(2, 2)
    ladder = [r for r in sweep["points"] if r.get("series") == "ladder"]
    sizes = sorted({r["size"] for r in ladder})
    colours = [f"C{i}" for i in range(len(sizes))]
    panels = [(axes[0, 0], "iteration_s", 1e6, "per iteration (us)"),
              (axes[0, 1], "precompute_s", 1.0, "precompute (s)"),
              (axes[1, 0], "traced_peak", 2.0 ** -20, "peak memory (MiB)")]
    model_key = {"iteration_s": "iteration_s", "precompute_s": "precompute_s",
                 "traced_peak": "memory"}
    for ax, key, unit, label in panels:
        for n, col in zip(sizes, colours):
            rows = sorted((r for r in ladder if r["size"] == n), key=lambda r: r["n_scales"])
            ns = [r["n_scales"] for r in rows]
            ax.plot(ns, [r[key] * unit for r in rows], "o", color=col, label=f"{n} px measured")
            ax.plot(ns, [r["model"][model_key[key]] * unit for r in rows], "-", color=col,
                    label=f"{n} px model")
            if key == "iteration_s":
                ax.plot(ns, [r["model"]["planner_iteration_s"] * unit for r in rows], ":",
                        color=col, label=f"{n} px planner (uniform mix)")
                ax.plot(ns, [r["model"]["bandwidth_bound_s"] * unit for r in rows], "--",
                        color=col, alpha=0.5, label=f"{n} px bandwidth bound")
            if key == "traced_peak":
                ax.plot(ns, [r["rss_increase"] * unit for r in rows], "x", color=col,
                        label=f"{n} px resident set increase")
        ax.set_yscale("log")
        ax.set_xlabel("number of scales (ladder " + ", ".join(
            f"{s:g}" for s in sweep["settings"]["ladder"]) + " px)")
        ax.set_ylabel(label)
        ax.grid(alpha=0.3)
        ax.legend(fontsize=7)
    ax = axes[1, 1]
    reg = sweep["region_points"]
    if reg:
        cal = sweep["calibration"]["iteration"]
        area = [r["region_area"] for r in reg]
        ax.plot(area, [r["iteration_s"] * 1e6 for r in reg], "o", color="C0", label="measured")
        ax.plot(area, [(cal["fixed"] + cal["per_pixel"] * r["scan_pixels"] + cal["per_row"] *
                        r["n_scales"] * -(-r["region_shape"][0] // r["tile"])) * 1e6
                       for r in reg], "-", color="C0", label="model")
        ax.set_xscale("log")
        ax.set_yscale("log")
        ax.set_title(f"{reg[0]['size']} px image, scales " +
                     ",".join(f"{s:g}" for s in reg[0]["scales"]), fontsize=9)
        ax.legend(fontsize=7)
    ax.set_xlabel("minor-cycle sub-region area (pixels)")
    ax.set_ylabel("per iteration (us)")
    ax.grid(alpha=0.3)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=_DPI)
    return buf.getvalue()
