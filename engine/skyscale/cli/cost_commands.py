"""The ``skyscale bench`` and ``skyscale plan`` commands: measure and predict what scales cost.

`register` adds both to the main command line's subparsers.  Exit codes: 0 success,
1 failure (or, with ``plan --require-fit``, a run that would not fit), 2 bad input.
"""

import argparse
import json
import os
import re
import sys

import numpy as np

from skyscale.cli.formats import memory_text, plain_console, scales_text, time_text
from skyscale.core.defaults import DEFAULTS, RUN_NOISE_THRESHOLD

__all__ = ["register", "cmd_bench", "cmd_plan", "show_plan", "BENCH_FILES"]

#: Files ``skyscale bench`` writes into ``--out``.
BENCH_FILES = {"json": "bench.json", "figure": "bench.png"}


def _int_list(text):
    try:
        values = [int(v) for v in text.replace(" ", "").split(",") if v]
    except ValueError:
        values = []
    if not values or min(values) < 1:
        raise argparse.ArgumentTypeError(f"{text!r}: give positive integers separated by "
                                         "commas, such as 512,1024")
    return values


def _shape(text):
    m = re.fullmatch(r"\s*(\d+)\s*(?:[xX,]\s*(\d+)\s*)?", text)
    if not m or int(m.group(1)) < 1 or (m.group(2) and int(m.group(2)) < 1):
        raise argparse.ArgumentTypeError(f"{text!r}: give N or NYxNX in pixels, such as 2048 "
                                         "or 1024x2048")
    ny = int(m.group(1))
    return (ny, int(m.group(2)) if m.group(2) else ny)


def register(subparsers):
    """Add ``bench`` and ``plan`` to an argparse subparsers object."""
    b = subparsers.add_parser("bench", help="measure what scales, image size and threads cost "
                              "on this machine, and fit the cost model")
    b.add_argument("--out", required=True, help="output directory for bench.json and bench.png")
    b.add_argument("--sizes", type=_int_list, default=[512, 1024, 2048],
                   help="image sizes, comma-separated [512,1024,2048]")
    b.add_argument("--components", type=int, default=1500,
                   help="components of the minor cycle timed per point [1500]")
    b.add_argument("--threads", type=_int_list, help="thread counts of the thread probes "
                   "[1 and all cores]")
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
    p.add_argument("dirty", nargs="?", help="dirty image, FITS (or give --size); a cube is "
                   "planned one plane at a time, as skyscale cube runs it")
    p.add_argument("psf", nargs="?", help="PSF, FITS (its shape is used)")
    p.add_argument("--size", type=_shape, help="image size N or NYxNX instead of FITS files")
    p.add_argument("--psf-size", type=_shape, help="PSF size with --size [twice the image]")
    scales = scales_text(DEFAULTS.scales)          # the Python API's defaults
    p.add_argument("--scales", default=scales,
                   help="scale diameters as for run: pixels, or with a unit (0,8arcsec,"
                   f"16arcsec) or 'auto' with FITS files [{scales}]")
    p.add_argument("--max-components", type=int, default=DEFAULTS.max_components,
                   help=f"component budget [{DEFAULTS.max_components}]")
    p.add_argument("--max-major-cycles", type=int, default=DEFAULTS.max_major_cycles,
                   help=f"major-cycle budget [{DEFAULTS.max_major_cycles}]")
    p.add_argument("--noise-threshold", type=float, help="stop multiple of the noise, for the "
                   f"dynamic range of a FITS dirty image [{RUN_NOISE_THRESHOLD:g}]")
    p.add_argument("--threshold", default=f"{DEFAULTS.threshold:g}", help="stop level, "
                   f"Jy/beam; a unit may be written (0.1mJy) [{DEFAULTS.threshold:g}]")
    p.add_argument("--dynamic-range", type=float, help="peak over stop level [measured from the "
                   "dirty image, else 1000]")
    p.add_argument("--mask-fraction", type=float, default=1.0,
                   help="fraction of the image where components may go [1]")
    p.add_argument("--mask-box", type=_shape, help="N or NYxNX: the mask's bounding box, "
                   "grown by the largest scale's radius, where minor cycles work [the "
                   "whole image]")
    for name, what in (("components", "components the run will take"),
                       ("sub-loops", "sub-loops (single-scale rounds) the run will run"),
                       ("fft-updates", "sub-loops applied by an FFT update (the others "
                        "directly)"),
                       ("major-cycles", "major cycles the run will need"),
                       ("active-pixels", "mean active pixels per sub-loop")):
        p.add_argument(f"--{name}", type=float, help=f"{what}, when known from an earlier "
                       "run of the field [estimated]")
    p.add_argument("--threads", type=int, help="threads [all cores]")
    p.add_argument("--dtype", choices=("float32", "float64"), default="float32",
                   help="working precision [float32]")
    p.add_argument("--memory", type=float, help="memory available, GiB [what is free now]")
    p.add_argument("--calibration", help="calibration file [the default one, else built-in]")
    p.add_argument("--warm-process", action="store_true", help="the run is not the first "
                   "of its process (a pipeline's later fields): no start-up counted")
    p.add_argument("--json", action="store_true", help="print the plan as JSON")
    p.add_argument("--require-fit", action="store_true",
                   help="exit 1 when the run would not fit in memory")
    from skyscale.cli.wideband_plan_command import add_wideband_plan_options
    add_wideband_plan_options(p)
    p.set_defaults(func=cmd_plan)
    return subparsers


# ---------------------------------------------------------------------------- plan
def cmd_plan(args):
    """``skyscale plan``: print the predicted cost of a run."""
    from skyscale.cost.planner import plan_run
    if args.size is not None and args.dirty:
        raise ValueError("give either FITS files or --size, not both")
    if args.size is None and not args.dirty:
        raise ValueError("give the dirty image and PSF (FITS), or --size N for an image size")
    psf = dirty = psf_data = cell = None
    planes = 1
    if args.size is not None:
        shape = args.size
        psf = args.psf_size or (2 * shape[0], 2 * shape[1])
    else:
        from skyscale.io.fits import read_image
        if not args.psf:
            raise ValueError(f"dirty is {args.dirty!r} but the PSF is missing; give both FITS "
                             "files")
        planes = _planes(args.dirty)
        if planes > 1:                   # a cube: plan one plane, as skyscale cube runs it
            from skyscale.cube.fits import open_cube
            cube = open_cube(args.dirty, name="dirty")
            dirty = cube.read_plane(0)
            cube.close()
            shape = dirty.shape
            psf = (open_cube(args.psf, name="psf").plane_shape if _planes(args.psf) > 1
                   else read_image(args.psf, name="psf").data.shape)
        else:
            dirty_img = read_image(args.dirty, name="dirty")
            dirty = dirty_img.data
            shape = dirty.shape
            psf_data = read_image(args.psf, name="psf").data
            psf = psf_data.shape
            cell = None
            if dirty_img.wcs is not None:
                from skyscale.io.grid import cell_size_arcsec
                cell = cell_size_arcsec(dirty_img.wcs)
    scales = _plan_scales(args.scales, dirty, psf_data, cell)
    from skyscale.job.options import parse_flux
    threshold = parse_flux(args.threshold, "--threshold")
    memory = None if args.memory is None else int(args.memory * 2**30)
    known = {k: (None if getattr(args, a) is None else
                 (float if k == "active_pixels" else int)(getattr(args, a)))
             for k, a in (("components", "components"), ("rounds", "sub_loops"),
                          ("major_cycles", "major_cycles"), ("active_pixels", "active_pixels"),
                          ("fft_updates", "fft_updates"))}
    if getattr(args, "terms", 1) > 1:
        from skyscale.cli.wideband_plan_command import print_wideband_plan
        return print_wideband_plan(args, tuple(shape), tuple(psf), scales, planes, known)
    threads = args.threads if planes == 1 else (args.threads or 1)   # cube: 1 a plane
    plan = plan_run(shape, psf, scales, max_components=args.max_components,
                    max_major_cycles=args.max_major_cycles, threads=threads,
                    dtype=args.dtype, memory_available=memory, calibration=args.calibration,
                    fresh_process=not args.warm_process, dirty=dirty,
                    dynamic_range=args.dynamic_range, threshold=threshold,
                    noise_threshold=args.noise_threshold, mask_fraction=args.mask_fraction,
                    box_shape=args.mask_box, **known)
    if planes > 1:
        plan.messages.append(_cube_words(plan, planes, threads))
    if args.json:
        print(json.dumps(plan.as_dict(), indent=2))
    elif not getattr(args, "quiet", False):
        show_plan(plan)
    return 1 if args.require_fit and not plan.fits else 0


def _planes(path):
    """Planes of a FITS image (1 for a 2-D image), from its header alone."""
    from astropy.io import fits
    try:
        header = fits.getheader(path)
    except (OSError, ValueError):
        return 1                         # read_image says what is wrong with it
    dims = [int(header.get(f"NAXIS{i}", 1)) for i in range(3, int(header.get("NAXIS", 0)) + 1)]
    return int(np.prod(dims)) if dims else 1


def _cube_words(plan, planes, threads):
    """The cube path with its figures: planes at once, workers, the whole cube's time."""
    from skyscale.cube.cluster import size_local_cluster
    workers, per = size_local_cluster(threads, plane_bytes=plan.memory_bytes,
                                      memory_bytes=plan.memory_available)
    rounds = -(-planes // workers)
    each = plan.total_seconds - plan.startup_seconds
    return (f"a cube of {planes} planes: this plan is one plane (its dynamic range from the "
            f"first); skyscale cube deconvolves the planes one per worker, and with "
            f"{memory_text(plan.memory_bytes)} per plane the local cluster here runs {workers} "
            f"worker(s) x {per} thread(s): about {time_text(plan.startup_seconds + rounds * each)} for "
            f"the cube ({rounds} plane(s) per worker); --threads is per plane [1]")


#: Words for where a plan's memory peaks (`skyscale.cost.predict_memory`'s phases).
_PHASES = {"beams": "while the first minor cycle makes the beams",
           "cycles": "during the minor cycles' FFT updates"}


def show_plan(plan):
    """Print a plan as a table."""
    from rich.table import Table
    out = plain_console()
    t = Table(title="planned run", show_header=False)
    t.add_column("what")
    t.add_column("predicted")
    t.add_row("image / PSF", f"{plan.image_shape[0]} x {plan.image_shape[1]} / "
              f"{plan.psf_shape[0]} x {plan.psf_shape[1]}")
    t.add_row("scales (px)", ", ".join(f"{s:g}" for s in plan.scales))
    t.add_row("threads, dtype", f"{plan.threads}, {plan.dtype}")
    c = plan.counts
    t.add_row("counts", f"{c['major_cycles']} major cycles, {c['rounds']} sub-loops "
              f"({c.get('fft_updates', c['rounds'])} by FFT update, the others direct), "
              f"{c['components']} components, {c['active_pixels']:.0f} active pixels per "
              "sub-loop")
    t.add_row("start-up", time_text(plan.startup_seconds) + (" (first run of the process)"
                                                      if plan.startup_seconds else ""))
    t.add_row("precompute", time_text(plan.precompute_seconds))
    t.add_row("beams (first minor cycle)", time_text(plan.beams_seconds))
    t.add_row("each FFT update", time_text(plan.round_seconds))
    t.add_row("minor cycles", f"{time_text(plan.minor_seconds)} (FFT updates "
              f"{time_text(plan.fft_update_seconds)}, direct updates {time_text(plan.direct_seconds)}, "
              f"sub-loop iterations {time_text(plan.loop_seconds)})")
    t.add_row("major cycles", f"{time_text(plan.major_total_seconds)} ({time_text(plan.major_seconds)} each, "
              "with the statistics)")
    t.add_row("total", time_text(plan.total_seconds))
    t.add_row("peak memory", f"{memory_text(plan.memory_bytes)} ({_PHASES.get(plan.memory_phase, plan.memory_phase)})")
    t.add_row("memory available", memory_text(plan.memory_available))
    t.add_row("fits", "yes" if plan.fits else "[bold red]NO: will not fit[/] (what would: "
              "below)")
    out.print(t)
    for m in plan.messages:
        out.print(f"  - {m}")
    if plan.remedies:
        out.print("  what would fit (predicted peak memory, the same model):")
        for r in plan.remedies:
            how = f"  [{r['option']}]" if r["option"] and r["fits"] else ""
            out.print(f"    {'fits' if r['fits'] else 'no  '}  {r['text']}{how}")
    out.print(f"  coefficients: {plan.calibration}")


# --------------------------------------------------------------------------- bench
def cmd_bench(args):
    """``skyscale bench``: run the sweep, print tables, write bench.json and bench.png."""
    from skyscale.io.atomic import atomic_write_bytes
    from skyscale.core.calibration import default_calibration_path
    from skyscale.cost.calibration import save_calibration
    from skyscale.cli.bench_summary import plot_bench, show_bench
    from skyscale.cost.sweep import run_sweep
    if args.components < 1:
        raise ValueError(f"--components {args.components}: give at least 1")
    if not args.quick:
        from skyscale.cost.model import available_memory
        from skyscale.cost.remedies import check_bench_fits
        check_bench_fits(args.sizes, available_memory(), validate=not args.no_validate)
    paths = {k: os.path.join(args.out, v) for k, v in BENCH_FILES.items()}
    clash = [p for p in paths.values() if os.path.exists(p)]
    if clash and not args.overwrite:
        raise FileExistsError(f"{clash[0]} exists; choose another --out or pass --overwrite")
    os.makedirs(args.out, exist_ok=True)
    quiet = getattr(args, "quiet", False)
    out = plain_console()
    status = out.status("measuring") if (not quiet and sys.stdout.isatty()) else None

    def progress(event):
        if status is not None:
            status.update(f"measuring: {event.get('what')} "
                          + " ".join(f"{k}={v}" for k, v in event.items()
                                     if k not in ("stage", "what")))
    if status is not None:
        status.start()
    try:
        sweep = run_sweep(args.sizes, components=args.components, thread_counts=args.threads,
                          quick=args.quick, validate=not args.no_validate, callback=progress)
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
        show_bench(sweep, out, calibration_path=cal_path, files=written)
    return 0


def _plan_scales(text, dirty, psf, cell):
    """Scale diameters in pixels from ``--scales`` read as ``run`` reads them."""
    from skyscale.job.options import parse_scales
    from skyscale.core.validate import InputError
    scales, unit = parse_scales(text, "--scales")
    if scales == "auto":
        if dirty is None or psf is None:
            raise InputError("--scales auto asks the scale advisor, which needs the dirty "
                             "image and the PSF: give both FITS files (not --size), or "
                             "scales in pixels")
        from skyscale.advisor.suggest import resolve_scales
        return list(resolve_scales("auto", dirty, psf, cell_arcsec=cell)[0])
    if unit == "arcsec":
        if cell is None:
            raise InputError(f"--scales is {text!r}, in arcsec, but there is no cell size to "
                             "turn it into pixels: give a dirty image with a celestial WCS "
                             "(not --size), or scales in pixels")
        return [v / cell for v in scales]
    return scales


def _jsonable(value):
    if hasattr(value, "tolist"):
        return value.tolist()
    return float(value)
