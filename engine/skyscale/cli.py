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
                   help="bias toward small scales, weight 1 - p s/s_max [0.3]")
    g.add_argument("--extended-depth", type=float,
                   help="inside a mask, finite scales stop at this fraction of the noise "
                   "multiple [0.25]")
    g.add_argument("--psf-patch", type=int, help="no longer used (minor cycles subtract "
                   "whole scale beams); accepted with a warning")
    g.add_argument("--beam", type=_beam, help="restoring beam MAJOR,MINOR,PA in arcsec and "
                   "degrees [fitted to the PSF]")
    m = p.add_argument_group("masks")
    m.add_argument("--mask", help="FITS mask on the image grid, non-zero = may clean [none]")
    m.add_argument("--mask-regions", help="regions where components may go, e.g. "
                   "'circle 120 130 15; box 10 20 50 60' (see skyscale.regions) [none]")
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


def _add_visibility_options(p, *, demo=False):
    v = p.add_argument_group("visibilities (major cycles against the data)")
    if demo:
        v.add_argument("--from-visibilities", action="store_true",
                       help="image the demo's visibilities.npz and run the major cycles "
                       "against them, instead of its dirty.fits and psf.fits")
    else:
        v.add_argument("--visibilities", metavar="FILE",
                       help="skyscale visibility file (.npz, see skyscale.visfile): image it "
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

    run = sub.add_parser("run", help="deconvolve a dirty image with its PSF (FITS), or "
                         "visibilities (--visibilities)")
    run.add_argument("dirty", nargs="?", help="dirty image, FITS, Jy/beam")
    run.add_argument("psf", nargs="?", help="PSF, FITS, same grid, the image's size or larger")
    run.add_argument("--out", required=True, help="output directory")
    _add_run_options(run)
    _add_visibility_options(run)
    run.set_defaults(func=cmd_run)

    demo = sub.add_parser("demo", help="run the whole job on the bundled demo observation")
    demo.add_argument("--out", default="demo-out", help="output directory [demo-out]")
    _add_run_options(demo)
    _add_visibility_options(demo, demo=True)
    demo.set_defaults(func=cmd_demo)

    suggest = sub.add_parser("suggest", help="propose a scale set and explain why")
    suggest.add_argument("dirty", help="dirty image, FITS")
    suggest.add_argument("psf", help="PSF, FITS")
    suggest.add_argument("--largest-size", type=float,
                         help="largest angular size of the emission, arcsec [measured]")
    suggest.add_argument("--shortest-baseline", type=float,
                         help="shortest projected baseline, wavelengths [unknown]")
    suggest.add_argument("--max-count", type=int, default=4,
                         help="most scales, the delta scale included [4]")
    suggest.add_argument("--check", type=_scales, help="check this scale set (pixels) instead")
    _add_global_flags(suggest)
    suggest.set_defaults(func=cmd_suggest)

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


def _execute(args, dirty, psf, out, visibilities=None):
    from . import console
    params = _params(args)
    with console.RunProgress(enabled=not args.quiet) as progress:
        t0 = time.perf_counter()
        if visibilities is None:
            from .job import run_files
            result, written, report = run_files(dirty, psf, out, params,
                                                callback=progress.update)
        else:
            from .job_vis import run_visibilities
            result, written, report = run_visibilities(
                visibilities["path"], out, params, size=visibilities["size"],
                cell_arcsec=visibilities["cell"], weighting=args.weighting or "natural",
                robust=0.0 if args.robust is None else args.robust, epsilon=args.accuracy,
                callback=progress.update)
        elapsed = time.perf_counter() - t0
    if not args.quiet:
        console.summary(result, written, report, elapsed)
    return 0


def _check_run_inputs(args):
    """Either DIRTY and PSF, or --visibilities with --size and --cell; None or the latter."""
    vis_only = [f"--{n}" for n in ("weighting", "robust", "accuracy", "size", "cell")
                if getattr(args, n) is not None]
    if args.visibilities is None:
        if args.dirty is None or args.psf is None:
            raise ValueError("run needs DIRTY and PSF (FITS files), or --visibilities FILE "
                             "with --size and --cell")
        if vis_only:
            raise ValueError(f"{', '.join(vis_only)} apply to --visibilities runs only; "
                             "drop them or give --visibilities FILE")
        return None
    if args.dirty is not None:
        raise ValueError(f"run got both a dirty image ({args.dirty}) and --visibilities; "
                         "give one or the other")
    missing = [f"--{n}" for n in ("size", "cell") if getattr(args, n) is None]
    if missing:
        raise ValueError(f"--visibilities needs {' and '.join(missing)}: the image size in "
                         "pixels and the cell size in arcsec")
    return {"path": args.visibilities, "size": args.size, "cell": args.cell}


def cmd_run(args):
    vis = _check_run_inputs(args)
    return _execute(args, args.dirty, args.psf, args.out, visibilities=vis)


def cmd_demo(args):
    data = demo_data_dir()
    if args.scales is None and args.config is None:
        args.scales = [0, 4, 8, 16, 32]
    if args.noise_threshold is None and args.threshold is None and args.config is None:
        args.noise_threshold = 3.0
    if args.auto_mask is None and args.mask is None and args.config is None:
        args.auto_mask = True
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
                    args.out, visibilities=vis)
    if not args.quiet:
        from . import console
        console.say(f"demo finished: the results are in {os.path.abspath(args.out)}")
    return code


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
        with warnings.catch_warnings():     # judged by the suggestion's own limits
            warnings.simplefilter("ignore")
            problems = check_scales(args.check, suggestion=s)
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
