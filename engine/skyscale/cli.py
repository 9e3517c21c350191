"""The ``skyscale`` command line: a thin layer over the API.

Exit codes: 0 success, 1 failure while running, 2 bad input.
"""

import argparse
import logging
import os
import sys
import time

from . import __version__

__all__ = ["main", "build_parser", "demo_data_dir"]

#: Exceptions that mean the input was bad (exit code 2).
BAD_INPUT = (ValueError, TypeError, FileNotFoundError, FileExistsError, KeyError,
             IsADirectoryError, NotADirectoryError)


def demo_data_dir():
    """Folder holding the bundled demo observation (``demo_data/`` of the source tree)."""
    here = os.path.dirname(os.path.abspath(__file__))
    for cand in (os.environ.get("SKYSCALE_DEMO_DATA"),
                 os.path.join(here, "..", "..", "demo_data"),
                 os.path.join(here, "demo_data")):
        if cand and os.path.exists(os.path.join(cand, "dirty.fits")):
            return os.path.normpath(cand)
    raise FileNotFoundError("the demo data was not found; run from a source checkout "
                            "(pip install -e .) or set SKYSCALE_DEMO_DATA to its folder")


def _floats(text):
    return [float(v) for v in text.replace(" ", "").split(",") if v]


def _scales(text):
    if text.strip().lower() == "auto":
        return "auto"
    try:
        return _floats(text)
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"--scales {text!r}: give comma-separated diameters such as 0,4,16, or auto") from None


def _beam(text):
    vals = _floats(text)
    if len(vals) != 3:
        raise argparse.ArgumentTypeError("--beam takes MAJOR,MINOR,PA: FWHMs in arcsec, "
                                         "position angle in degrees east of north")
    return vals


def _add_run_options(p):
    g = p.add_argument_group("deconvolution")
    g.add_argument("--scales", type=_scales, help="scale diameters, comma-separated, 0 = delta; "
                   "'auto' asks the scale advisor [0,4,8,16]")
    g.add_argument("--scale-unit", choices=("pixel", "arcsec"),
                   help="unit of --scales: pixel, or arcsec through the WCS [pixel]")
    g.add_argument("--scale-shape", choices=("paraboloid", "gaussian"),
                   help="scale kernel shape [paraboloid]")
    g.add_argument("--loop-gain", type=float, help="fraction of a component taken per step [0.1]")
    g.add_argument("--threshold", type=float, help="stop at this peak residual, Jy/beam [0]")
    g.add_argument("--noise-threshold", type=float,
                   help="stop at this multiple of the robust noise (1.4826 MAD) [off]")
    g.add_argument("--max-components", type=int, help="component budget [20000]")
    g.add_argument("--max-major-cycles", type=int, help="major-cycle budget [20]")
    g.add_argument("--cycle-depth", type=float,
                   help="each minor cycle cleans to this fraction of its start peak [0.2]")
    g.add_argument("--size-penalty", type=float,
                   help="bias toward small scales, weight 1 - p s/s_max [0.6]")
    g.add_argument("--psf-patch", type=int, help="half-width of the minor-cycle PSF patch, "
                   "pixels [automatic]")
    g.add_argument("--beam", type=_beam, help="restoring beam MAJOR,MINOR,PA in arcsec and "
                   "degrees [fitted to the PSF]")
    m = p.add_argument_group("masks")
    m.add_argument("--mask", help="FITS mask on the image grid, non-zero = may clean [none]")
    m.add_argument("--mask-regions", help="regions where components may go, e.g. "
                   "'circle 120 130 15; box 10 20 50 60' (see skyscale.masks) [none]")
    m.add_argument("--auto-mask", action="store_true", default=None,
                   help="renew an automatic mask at each major cycle [off]")
    m.add_argument("--auto-mask-sigma", type=float,
                   help="automatic-mask level, multiples of the robust noise [5]")
    o = p.add_argument_group("run")
    o.add_argument("--threads", type=int, help="threads for kernels and FFTs [all cores]")
    o.add_argument("--config", help="TOML file with any of these options (the command line "
                   "overrides it)")
    o.add_argument("--no-plots", dest="plots", action="store_false", default=None,
                   help="skip convergence.png and panels.png")
    o.add_argument("--overwrite", action="store_true", default=None,
                   help="replace existing outputs [refuse]")
    _add_global_flags(o)


def _add_global_flags(group):
    """--quiet and --debug are also accepted after the command."""
    group.add_argument("--quiet", action="store_true", default=argparse.SUPPRESS,
                       help="no progress bars or tables")
    group.add_argument("--debug", action="store_true", default=argparse.SUPPRESS,
                       help="full tracebacks and debug logs")


def build_parser():
    """The argument parser with every subcommand."""
    parser = argparse.ArgumentParser(
        prog="skyscale", description="Multi-scale CLEAN deconvolution of radio images.")
    parser.add_argument("--version", action="version", version=f"skyscale {__version__}")
    parser.add_argument("--debug", action="store_true", help="full tracebacks and debug logs")
    parser.add_argument("--quiet", action="store_true", help="no progress bars or tables")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True

    run = sub.add_parser("run", help="deconvolve a dirty image with its PSF (FITS)")
    run.add_argument("dirty", help="dirty image, FITS, Jy/beam")
    run.add_argument("psf", help="PSF, FITS, same grid, the image's size or larger")
    run.add_argument("--out", required=True, help="output directory")
    _add_run_options(run)
    run.set_defaults(func=cmd_run)

    demo = sub.add_parser("demo", help="run the whole job on the bundled demo observation")
    demo.add_argument("--out", default="demo-out", help="output directory [demo-out]")
    _add_run_options(demo)
    demo.set_defaults(func=cmd_demo)

    suggest = sub.add_parser("suggest", help="propose a scale set and explain why")
    suggest.add_argument("dirty", help="dirty image, FITS")
    suggest.add_argument("psf", help="PSF, FITS")
    suggest.add_argument("--largest-size", type=float,
                         help="largest angular size of the emission, arcsec [measured]")
    suggest.add_argument("--shortest-baseline", type=float,
                         help="shortest projected baseline, wavelengths [unknown]")
    suggest.add_argument("--max-count", type=int, default=6, help="most scales [6]")
    suggest.add_argument("--check", type=_scales, help="check this scale set (pixels) instead")
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
    _add_run_options(cube)
    c = cube.add_argument_group("cluster")
    c.add_argument("--scheduler", metavar="ADDRESS", help="address of a running Dask scheduler, "
                   "e.g. tcp://10.0.0.5:8786 [a local cluster on 127.0.0.1]")
    c.add_argument("--workers", type=int, help="worker processes of the local cluster "
                   "[cores / threads, fewer if memory is short]")
    c.add_argument("--connect-timeout", type=float, default=30.0,
                   help="seconds to wait for the scheduler or the local workers [30]")
    cube.set_defaults(func=cmd_cube)

    try:
        from . import cli_cost
        cli_cost.register(sub)
    except ImportError:  # pragma: no cover - the cost commands are part of the package
        pass
    return parser


def _load_config(path):
    try:
        import tomllib
    except ImportError:  # Python < 3.11
        import tomli as tomllib
    with open(path, "rb") as fh:
        data = tomllib.load(fh)
    return {k.replace("-", "_"): v for k, v in data.get("run", data).items()}


def _params(args):
    from .job import RUN_DEFAULTS
    params = {}
    if getattr(args, "config", None):
        params.update(_load_config(args.config))
        unknown = sorted(set(params) - set(RUN_DEFAULTS))
        if unknown:
            raise ValueError(f"--config {args.config}: unknown options {unknown}; valid ones are "
                             f"{', '.join(sorted(RUN_DEFAULTS))}")
    for key in RUN_DEFAULTS:
        value = getattr(args, key, None)
        if value is not None:
            params[key] = value
    return params


def _execute(args, dirty, psf, out):
    from .job import run_files
    from . import console
    params = _params(args)
    with console.RunProgress(enabled=not args.quiet) as progress:
        t0 = time.perf_counter()
        result, written, report = run_files(dirty, psf, out, params, callback=progress.update)
        elapsed = time.perf_counter() - t0
    if not args.quiet:
        console.summary(result, written, report, elapsed)
    return 0


def cmd_run(args):
    return _execute(args, args.dirty, args.psf, args.out)


def cmd_demo(args):
    data = demo_data_dir()
    if args.scales is None and args.config is None:
        args.scales = [0, 4, 8, 16, 32]
    if args.noise_threshold is None and args.threshold is None and args.config is None:
        args.noise_threshold = 3.0
    if args.auto_mask is None and args.mask is None and args.config is None:
        args.auto_mask = True
    code = _execute(args, os.path.join(data, "dirty.fits"), os.path.join(data, "psf.fits"),
                    args.out)
    if not args.quiet:
        from . import console
        console.say(f"demo finished: the results are in {os.path.abspath(args.out)}")
    return code


def cmd_cube(args):
    from .cube import deconvolve_cube
    from . import console
    params = _params(args)
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
            return 1
    if not args.quiet:
        console.cube_summary(result)
    if not result.complete:
        print(f"skyscale: {len(result.failed)} planes failed ({result.written['report']}); "
              "rerun the same command to try them again", file=sys.stderr)
        return 1
    return 0


def cmd_suggest(args):
    from .advisor import check_scales, suggest_scales
    from .fitsio import cell_size_arcsec, read_image
    from . import console
    dirty = read_image(args.dirty, name="dirty")
    psf = read_image(args.psf, name="psf")
    cell = cell_size_arcsec(dirty.wcs) if dirty.wcs is not None else None
    s = suggest_scales(dirty.data, psf.data, cell_arcsec=cell, largest_size=args.largest_size,
                       shortest_baseline=args.shortest_baseline, max_count=args.max_count)
    if args.check and args.check != "auto":
        import warnings
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            problems = check_scales(args.check, dirty.data, psf.data, suggestion=s,
                                    cell_arcsec=cell, shortest_baseline=args.shortest_baseline)
        console.show_check(args.check, problems)
        return 0
    console.show_suggestion(s)
    return 0


def main(argv=None):
    """Entry point of the ``skyscale`` command."""
    parser = build_parser()
    args = parser.parse_args(argv)
    logging.basicConfig(level=logging.DEBUG if args.debug else logging.ERROR,
                        format="%(levelname)s %(name)s: %(message)s")
    if not args.debug:
        import warnings
        warnings.simplefilter("ignore")  # warnings go into the report instead
    try:
        return int(args.func(args) or 0)
    except KeyboardInterrupt:
        print("skyscale: interrupted", file=sys.stderr)
        return 1
    except BAD_INPUT as exc:
        if args.debug:
            raise
        print(f"skyscale: error: {exc}", file=sys.stderr)
        return 2
    except MemoryError as exc:
        if args.debug:
            raise
        print(f"skyscale: error: {exc}", file=sys.stderr)
        return 2
    except Exception as exc:  # noqa: BLE001 - one clear line, the rest under --debug
        if args.debug:
            raise
        print(f"skyscale: failed: {type(exc).__name__}: {exc} (rerun with --debug for the "
              "traceback)", file=sys.stderr)
        return 1


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
