"""The ``skyscale`` command line: a thin layer over the API.

Exit codes (`EXIT_CODES`): 0 success; 1 failure while running; 2 bad input (one line
on stderr, found before any work); 3 interrupted (Ctrl-C or SIGTERM), every output
written with stop reason "interrupted"; 4 interrupted before the outputs were complete
(none written, or the folder keeps its OUTPUTS_INCOMPLETE.txt marker).
"""

import argparse
import logging
import os
import signal
import sys
import time

from skyscale import __version__
from skyscale.core.validate import InputError

__all__ = ["main", "build_parser", "demo_data_dir", "EXIT_CODES"]

#: Every exit code of the command line and what it means.
EXIT_CODES = {
    0: "success",
    1: "failure while running (a bug or a system fault; --debug shows the traceback); "
       "for suggest --check: the set breaks a rule of thumb",
    2: "bad input: one line on stderr names the problem and the fix; nothing was written",
    3: "interrupted (Ctrl-C or SIGTERM): the run stopped after its last complete step and "
       "every output was written, stop reason 'interrupted'",
    4: "interrupted before the outputs were complete: none were written, or the output "
       "folder keeps its OUTPUTS_INCOMPLETE.txt marker",
}
EXIT_OK, EXIT_FAILED, EXIT_BAD_INPUT, EXIT_INTERRUPTED, EXIT_INCOMPLETE = 0, 1, 2, 3, 4

#: Exceptions that mean the input was bad (exit code 2).  Plain ValueError stays here
#: until every check in the engine raises InputError.
BAD_INPUT = (InputError, ValueError, FileNotFoundError, FileExistsError,
             IsADirectoryError, NotADirectoryError, PermissionError)


class _Parser(argparse.ArgumentParser):
    """argparse with usage errors on one line and exit code 2."""

    def error(self, message):
        self.exit(EXIT_BAD_INPUT, f"{self.prog}: error: {message} (see {self.prog} --help)\n")


def demo_data_dir():
    """Folder holding the bundled demo observation (``demo_data/`` of the source tree)."""
    here = os.path.dirname(os.path.abspath(__file__))
    for cand in (os.environ.get("SKYSCALE_DEMO_DATA"),
                 os.path.join(here, "..", "..", "..", "demo_data"),
                 os.path.join(here, "..", "demo_data")):
        if cand and os.path.exists(os.path.join(cand, "dirty.fits")):
            return os.path.normpath(cand)
    raise FileNotFoundError("the demo data was not found; run from a source checkout "
                            "(pip install -e .) or set SKYSCALE_DEMO_DATA to its folder")


def _scales(text):
    from skyscale.job.options import parse_scales
    try:
        scales, unit = parse_scales(text, "--check")
        if unit == "arcsec":
            raise InputError(f"--check is {text!r}; give the scales to check in pixels")
        return scales
    except InputError as exc:
        raise argparse.ArgumentTypeError(str(exc)) from None


#: The demo's own settings, on top of `skyscale.job.options.RUN_DEFAULTS` (its --help shows them;
#: a --config file and the command line override them).
DEMO_SETTINGS = {"scales": [0, 4, 8, 16, 32], "emission_mask": True}


def _shown(defaults):
    """How the defaults of the run options read in --help, from the values themselves
    and each option's kind (`skyscale.core.option_table`)."""
    from skyscale.core.option_table import run_options
    shown = {}
    for o in run_options():
        v = defaults[o.name]
        if v is None:
            text = "off" if o.kind == "sigma" else "none"
        elif o.kind == "scales":
            text = v if isinstance(v, str) else ",".join(f"{float(s):g}" for s in v)
        elif o.kind in ("number", "flux", "sigma"):
            text = f"{float(v):g}"
        elif o.kind == "bool":
            text = "on" if v else "off"
        else:
            text = str(v)
        shown[o.name] = text
    return shown


#: What --threads means and defaults to for ``cube`` (README, "The local cluster").
CUBE_THREADS_HELP = ("threads per plane [1 on the local cluster, which then runs as many "
                     "planes at once as there are cores; on a running cluster the worker's "
                     "NUMBA_NUM_THREADS divided by its --nthreads]")


def _add_run_options(p, defaults=None, threads_help=None):
    # Values are read by skyscale.job.options (the same reader as the TOML file), so every
    # option takes text here and a bad value gets one line naming it.  The bracketed
    # defaults come from the values the command uses (RUN_DEFAULTS, or the demo's).
    from skyscale.core.option_table import run_options
    from skyscale.job.options import RUN_DEFAULTS
    d = _shown(defaults or RUN_DEFAULTS)
    g = p.add_argument_group("deconvolution")
    for o in run_options():      # the algorithm's options and the unit of the scales
        if o.algorithm or o.name == "scale_unit":
            g.add_argument("--" + o.name.replace("_", "-"), help=f"{o.help} [{d[o.name]}]")
    g.add_argument("--beam", help="restoring beam MAJOR,MINOR,PA: FWHMs in arcsec (or with "
                   "a unit: 0.0012deg) and degrees east of north [fitted to the PSF]")
    g.add_argument("--nonfinite", help="NaN/inf pixels in the dirty image: refuse, or mask "
                   f"(leave them out of cleaning, blank in the outputs) [{d['nonfinite']}]")
    m = p.add_argument_group("masks")
    m.add_argument("--mask", help="FITS mask on the image grid, non-zero = may clean [none]")
    m.add_argument("--mask-regions", help="regions where components may go, or a text "
                   "file holding them: "
                   "shapes 'circle X Y R', 'box X1 Y1 X2 Y2' and 'all', separated by ';' "
                   "or lines, applied in order ('-' before a shape removes it, '#' comments). "
                   "Plain numbers are pixels, 0-based, X = column, Y = row (the array index is "
                   "[Y, X]); 'px' may be written. Sky positions need a unit: 145.32deg "
                   "25.3deg or 09h41m17s +25d18m00s, sizes 20arcsec, 1.5arcmin or 0.01deg. A "
                   "position without a unit that can only be degrees on this image is refused. "
                   "E.g. 'circle 120 130 15; -box 10 20 50 60' or 'circle 09h41m17s +25d18m00s "
                   "30arcsec'; with --mask the two are intersected [none]")
    m.add_argument("--emission-mask", action="store_true", default=None,
                   help="renew an automatic mask at each major cycle; with --mask or "
                   "--mask-regions it is kept inside them, so a generous mask bounds the "
                   "cleaning without turning noise into model [" + d["emission_mask"] + "]")
    m.add_argument("--no-emission-mask", dest="emission_mask", action="store_false",
                   default=None, help="no automatic mask")
    m.add_argument("--emission-mask-sigma",
                   help="automatic-mask level, multiples of the robust noise [5]")
    o = p.add_argument_group("run")
    o.add_argument("--threads", help=threads_help or "threads for kernels and FFTs "
                   "[all cores]")
    o.add_argument("--config", help="TOML file with any of these options (the command line "
                   "overrides it)")
    o.add_argument("--no-plots", dest="plots", action="store_false", default=None,
                   help="skip convergence.png and panels.png")
    o.add_argument("--overwrite", action="store_true", default=None,
                   help="replace existing outputs [refuse]")
    _add_global_flags(o)


def _add_visibility_options(p, *, demo=False):
    v = p.add_argument_group("visibilities (major cycles against the data)")
    if demo:
        v.add_argument("--from-visibilities", action="store_true",
                       help="image the demo's visibilities.npz and run the major cycles "
                       "against them, instead of its dirty.fits and psf.fits")
    else:
        v.add_argument("--visibilities", metavar="FILE",
                       help="skyscale visibility file (.npz, see skyscale.visibility.file): image it "
                       "and run the major cycles against it, instead of DIRTY and PSF")
        v.add_argument("--size", type=int, help="image size in pixels, even (with "
                       "--visibilities)")
        v.add_argument("--cell", type=float, help="cell size in arcsec (with --visibilities)")
    v.add_argument("--weighting", choices=("natural", "uniform", "briggs"),
                   help="visibility weighting [natural]")
    v.add_argument("--robust", type=float, help="Briggs robustness, -2 about uniform to "
                   "+2 about natural [0]")
    v.add_argument("--accuracy", type=float, help="gridder accuracy epsilon [1e-5]")


def _add_global_flags(group):
    """--quiet and --debug are also accepted after the command."""
    group.add_argument("--quiet", action="store_true", default=argparse.SUPPRESS,
                       help="no progress bars or tables (warnings still go to stderr)")
    group.add_argument("--debug", action="store_true", default=argparse.SUPPRESS,
                       help="full tracebacks and debug logs")


def build_parser():
    """The argument parser with every subcommand."""
    parser = _Parser(
        prog="skyscale", description="Multi-scale CLEAN deconvolution of radio images.",
        epilog="exit codes: " + "; ".join(f"{k} {v.split(':')[0].split(' (')[0]}"
                                          for k, v in EXIT_CODES.items()))
    parser.add_argument("--version", action="version", version=f"skyscale {__version__}")
    parser.add_argument("--debug", action="store_true", help="full tracebacks and debug logs")
    parser.add_argument("--quiet", action="store_true",
                        help="no progress bars or tables (warnings still go to stderr)")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    sub.required = True

    run = sub.add_parser("run", help="deconvolve a dirty image with its PSF (FITS), or "
                         "visibilities (--visibilities)")
    run.add_argument("dirty", nargs="?", help="dirty image, FITS, Jy/beam")
    run.add_argument("psf", nargs="?", help="PSF, FITS, same grid, the image's size or larger")
    run.add_argument("--out", help="output directory (with --resume: that folder)")
    run.add_argument("--resume", metavar="DIR", help="continue from the model.fits of an "
                     "earlier run's output folder, with its inputs and options (options "
                     "given here override them); budgets count the new part only")
    _add_run_options(run)
    _add_visibility_options(run)
    run.set_defaults(func=cmd_run)

    from skyscale.job.options import RUN_DEFAULTS
    demo = sub.add_parser("demo", help="run the whole job on the bundled demo observation",
                          description="Run the whole job on the bundled demo observation, "
                          "with the demo's own settings (shown in brackets); a --config "
                          "file and the options given here override them.")
    demo.add_argument("--out", default="demo-out", help="output directory [demo-out]")
    _add_run_options(demo, dict(RUN_DEFAULTS, **DEMO_SETTINGS))
    _add_visibility_options(demo, demo=True)
    demo.set_defaults(func=cmd_demo)

    from skyscale.cli.wideband_command import add_wideband_parser
    add_wideband_parser(sub)

    suggest = sub.add_parser("suggest", help="propose a scale set and explain why")
    suggest.add_argument("dirty", help="dirty image, FITS")
    suggest.add_argument("psf", help="PSF, FITS")
    suggest.add_argument("--largest-size", type=float,
                         help="largest angular size of the emission, arcsec [measured]")
    suggest.add_argument("--shortest-baseline", type=float,
                         help="shortest projected baseline, wavelengths [unknown]")
    suggest.add_argument("--max-count", type=int, default=4,
                         help="most scales, the delta scale included [4]")
    suggest.add_argument("--check", type=_scales, help="check this scale set (pixels) "
                         "instead; exits 1 when it breaks a rule")
    _add_global_flags(suggest)
    suggest.set_defaults(func=cmd_suggest)

    cube = sub.add_parser("cube", help="deconvolve a FITS cube plane by plane on Dask "
                          "distributed (a local cluster by default)",
                          description="Deconvolve every plane of a cube with its own PSF plane "
                          "and the options of 'run'; --threads is the threads per plane. "
                          "Rerunning the same command after an interruption resumes it.")
    cube.add_argument("cube", help="FITS cube, Jy/beam (3 axes, or 4 with a degenerate one)")
    cube.add_argument("psf", help="FITS PSF cube on the same spectral axis, or one PSF for all")
    cube.add_argument("--out", required=True, help="output directory")
    _add_run_options(cube, threads_help=CUBE_THREADS_HELP)
    c = cube.add_argument_group("cluster")
    c.add_argument("--scheduler", metavar="ADDRESS", help="address of a running Dask scheduler, "
                   "e.g. tcp://10.0.0.5:8786 [a local cluster on 127.0.0.1]")
    c.add_argument("--workers", type=int, help="worker processes of the local cluster "
                   "[cores / threads, fewer if memory is short]")
    c.add_argument("--connect-timeout", type=float, default=30.0,
                   help="seconds to wait for the scheduler or the local workers [30]")
    cube.set_defaults(func=cmd_cube)

    try:
        from skyscale.cli import cost_commands as cli_cost
        cli_cost.register(sub)
    except ImportError:  # pragma: no cover - the cost commands are part of the package
        pass
    return parser


def _params(args, base=None, base_source="the resumed run's report"):
    """Run options from ``base``, then --config, then the command line; and where each
    came from.  A threshold given (in the file or here) without a noise threshold drops
    the base's noise threshold: it is a fixed level (`skyscale.job.files.merge_params`)."""
    from skyscale.job.options import RUN_DEFAULTS
    from skyscale.job.options import load_config
    params, sources = dict(base or {}), {k: base_source for k in base or {}}
    later = {}
    if getattr(args, "config", None):
        table = load_config(args.config)
        later.update(table)
        sources.update({k: args.config for k in table})
    for key in RUN_DEFAULTS:
        value = getattr(args, key, None)
        if value is not None:
            later[key] = value
            sources[key] = "cli"
    if "threshold" in later and "noise_threshold" not in later:
        params.pop("noise_threshold", None)
    params.update(later)
    return params, sources


_DEMO_SOURCE = "the demo's settings"


def _execute(args, dirty, psf, out, base=None, resume=None, visibilities=None,
             base_source="the resumed run's report"):
    from skyscale.cli import console
    params, sources = _params(args, base, base_source)
    if resume and os.path.abspath(out) == os.path.abspath(resume):
        params["overwrite"], sources["overwrite"] = True, "cli"
    with console.RunProgress(enabled=not args.quiet) as progress:
        t0 = time.perf_counter()
        if visibilities is None:
            from skyscale.job.files import run_files
            result, written, report = run_files(dirty, psf, out, params,
                                                callback=progress.update, sources=sources,
                                                resume_from=resume)
        else:
            from skyscale.visibility.run import run_visibilities
            result, written, report = run_visibilities(
                visibilities["path"], out, params, size=visibilities["size"],
                cell_arcsec=visibilities["cell"], weighting=args.weighting or "natural",
                robust=0.0 if args.robust is None else args.robust, epsilon=args.accuracy,
                callback=progress.update)
        elapsed = time.perf_counter() - t0
    warned = getattr(args, "warning_log", None)
    console.warn_all(result.warnings, warned)     # stderr, quiet or not; once each
    if not args.quiet:
        console.summary(result, written, report, elapsed)
    if result.stop_reason == "interrupted":
        print(f"skyscale: interrupted: every output in {out} holds the last complete major "
              "cycle (stop reason 'interrupted')", file=sys.stderr)
        return EXIT_INTERRUPTED
    if getattr(result, "interrupted_while_writing", False):
        print(f"skyscale: interrupted while writing: the run had finished, and every output "
              f"in {out} was written (stop reason '{result.stop_reason}')", file=sys.stderr)
        return EXIT_INTERRUPTED
    return EXIT_OK


def _check_run_inputs(args):
    """Either DIRTY and PSF, or --visibilities with --size and --cell; None or the latter."""
    vis_only = [f"--{n}" for n in ("weighting", "robust", "accuracy", "size", "cell")
                if getattr(args, n) is not None]
    if args.visibilities is None:
        if args.dirty is None or args.psf is None:
            raise InputError("run needs DIRTY and PSF (FITS files), or --visibilities FILE "
                             "with --size and --cell")
        if vis_only:
            raise InputError(f"{', '.join(vis_only)} apply to --visibilities runs only; "
                             "drop them or give --visibilities FILE")
        return None
    if args.dirty is not None:
        raise InputError(f"run got both a dirty image ({args.dirty}) and --visibilities; "
                         "give one or the other")
    missing = [f"--{n}" for n in ("size", "cell") if getattr(args, n) is None]
    if missing:
        raise InputError(f"--visibilities needs {' and '.join(missing)}: the image size in "
                         "pixels and the cell size in arcsec")
    return {"path": args.visibilities, "size": args.size, "cell": args.cell}


def cmd_run(args):
    if args.resume:
        if args.visibilities is not None:
            raise InputError("--resume continues a run made from FITS images; it cannot be "
                             "combined with --visibilities")
        from skyscale.job.files import resume_inputs
        rd, rp, base = resume_inputs(args.resume)
        dirty, psf = args.dirty or rd, args.psf or rp
        out = args.out or args.resume
        missing = [n for n, v in (("DIRTY", dirty), ("PSF", psf)) if not v]
        if missing:
            raise InputError(f"run needs {' and '.join(missing)} (or --resume DIR of a run "
                             "with a report); see skyscale run --help")
        args.out = out
        return _execute(args, dirty, psf, out, base=base, resume=args.resume)
    vis = _check_run_inputs(args)
    if not args.out:
        raise InputError("run needs --out DIR, the output directory; see skyscale run --help")
    return _execute(args, args.dirty, args.psf, args.out, visibilities=vis)


def cmd_demo(args):
    data = demo_data_dir()
    vis = None
    if args.from_visibilities:
        import json
        with open(os.path.join(data, "truth.json"), encoding="utf-8") as fh:
            image = json.load(fh)["image"]
        vis = {"path": os.path.join(data, "visibilities.npz"), "size": image["size"],
               "cell": image["cell_arcsec"]}
    elif any(getattr(args, n) is not None for n in ("weighting", "robust", "accuracy")):
        raise ValueError("--weighting, --robust and --accuracy apply with --from-visibilities "
                         "only")
    code = _execute(args, os.path.join(data, "dirty.fits"), os.path.join(data, "psf.fits"),
                    args.out, visibilities=vis, base=DEMO_SETTINGS, base_source=_DEMO_SOURCE)
    if not args.quiet:
        from skyscale.cli import console
        console.say(f"demo finished: the results are in {os.path.abspath(args.out)}")
    return code


def cmd_cube(args):
    from skyscale.cube.run import deconvolve_cube
    from skyscale.cli import console
    params, _ = _params(args)
    if not args.debug:   # the scheduler's and workers' own logs (set once dask configured them)
        try:
            import distributed  # noqa: F401
        except ImportError:
            pass                 # deconvolve_cube says how to install it
        logging.getLogger("distributed").setLevel(logging.ERROR)
    with console.CubeProgress(enabled=not args.quiet) as progress:
        try:
            result = deconvolve_cube(args.cube, args.psf, args.out, params,
                                     scheduler=args.scheduler, workers=args.workers,
                                     timeout=args.connect_timeout, callback=progress.update)
        except KeyboardInterrupt:
            print(f"skyscale: interrupted; the finished planes are kept in {args.out}, rerun "
                  "the same command to resume", file=sys.stderr)
            return EXIT_INTERRUPTED
    if not args.quiet:
        console.cube_summary(result)
    if not result.complete:
        print(f"skyscale: {len(result.failed)} planes failed ({result.written['report']}); "
              "rerun the same command to try them again", file=sys.stderr)
        return 1
    return 0


def cmd_suggest(args):
    from skyscale.advisor.suggest import check_scales, suggest_scales
    from skyscale.io.fits import read_image
    from skyscale.io.grid import cell_size_arcsec
    from skyscale.cli import console
    dirty = read_image(args.dirty, name="dirty")
    psf = read_image(args.psf, name="psf")
    cell = cell_size_arcsec(dirty.wcs) if dirty.wcs is not None else None
    s = suggest_scales(dirty.data, psf.data, cell_arcsec=cell, largest_size=args.largest_size,
                       shortest_baseline=args.shortest_baseline, max_count=args.max_count)
    if args.check == "auto":
        raise InputError("--check takes the scale set to check, such as 0,4,16; without "
                         "--check, suggest proposes a set")
    if args.check:
        import warnings
        with warnings.catch_warnings():     # judged by the suggestion's own limits
            warnings.simplefilter("ignore")
            problems = check_scales(args.check, suggestion=s)
        console.show_check(args.check, problems)
        return EXIT_FAILED if problems else EXIT_OK
    console.show_suggestion(s)
    return 0


def _raise_interrupt(signum, frame):
    raise KeyboardInterrupt(f"signal {signum}")


def _interrupted(args):
    from skyscale.io.atomic import INCOMPLETE_MARKER
    out = getattr(args, "out", None)
    if out and os.path.exists(os.path.join(out, INCOMPLETE_MARKER)):
        return (f"skyscale: interrupted while writing the outputs; {out}/{INCOMPLETE_MARKER} "
                "marks them incomplete (run again with --overwrite)")
    return "skyscale: interrupted before any output was written"


def main(argv=None):
    """Entry point of the ``skyscale`` command; returns the exit code (see `EXIT_CODES`)."""
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:        # usage errors (one line, code 2), --help, --version
        return int(exc.code or 0)
    logging.basicConfig(level=logging.DEBUG if args.debug else logging.ERROR,
                        format="%(levelname)s %(name)s: %(message)s")
    if not args.debug:
        import warnings
        warnings.simplefilter("ignore")  # the engine logs them too, and they go in the report
    from skyscale.cli import console
    args.warning_log = console.WarningLog.install(debug=args.debug)
    # SIGTERM (a batch system's stop) is handled as Ctrl-C: stop after the current step.
    try:
        previous = signal.signal(signal.SIGTERM, _raise_interrupt)
    except ValueError:   # not the main thread (an embedding program): leave signals alone
        previous = None
    try:
        return int(args.func(args) or 0)
    except KeyboardInterrupt:
        print(_interrupted(args), file=sys.stderr)
        return EXIT_INCOMPLETE
    except BAD_INPUT as exc:
        if args.debug:
            raise
        print(f"skyscale: error: {' '.join(str(exc).split())}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except MemoryError as exc:
        if args.debug:
            raise
        print(f"skyscale: error: {' '.join(str(exc).split())}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except Exception as exc:  # noqa: BLE001 - one clear line, the rest under --debug
        if args.debug:
            raise
        print(f"skyscale: failed: {type(exc).__name__}: {' '.join(str(exc).split())} (rerun "
              "with --debug for the traceback)", file=sys.stderr)
        return EXIT_FAILED
    finally:
        args.warning_log.uninstall()
        if previous is not None:
            signal.signal(signal.SIGTERM, previous)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
