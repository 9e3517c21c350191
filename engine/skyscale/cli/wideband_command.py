"""``skyscale wideband``: multi-term deconvolution of a FITS cube with its PSF cube.

Argument parsing and console output only; the work is `skyscale.deconvolve_wideband`
and `skyscale.wideband.outputs.write_wideband`.
"""

import numpy as np

from skyscale.core.validate import InputError

__all__ = ["add_wideband_parser", "cmd_wideband"]


def _floats(text, name):
    try:
        return [float(v) for v in str(text).replace(",", " ").split()]
    except ValueError:
        raise InputError(f"{name} is {text!r}; give numbers separated by commas") from None


def add_wideband_parser(sub):
    """Add the ``wideband`` command to the subparsers ``sub``."""
    p = sub.add_parser(
        "wideband", help="multi-term (Taylor) multi-scale deconvolution of a cube: "
        "intensity, spectral index and curvature",
        description="Deconvolve every channel of a FITS cube jointly with its PSF cube: "
        "the sky at each pixel is a Taylor series in frequency about a reference "
        "frequency (Rau & Cornwell 2011). Writes each term's model, residual and restored "
        "image, the spectral index (and curvature) with an error map, the component table "
        "and a report.")
    p.add_argument("cube", nargs="?", help="FITS cube of dirty images, Jy/beam, one plane "
                   "per channel (or give --visibilities)")
    p.add_argument("psf", nargs="?", help="FITS cube of PSFs, one per channel, the image's "
                   "size or larger")
    p.add_argument("--visibilities", metavar="FILE", help="skyscale visibility file (.npz): "
                   "image every channel and run the major cycles against each channel's "
                   "data, instead of CUBE and PSF")
    p.add_argument("--size", type=int, help="image size N (N x N pixels) with --visibilities")
    p.add_argument("--cell", type=float, help="cell size in arcsec with --visibilities")
    p.add_argument("--weighting", default="natural", choices=("natural", "uniform", "briggs"),
                   help="visibility weighting of each channel [natural]")
    p.add_argument("--out", required=True, help="output folder")
    p.add_argument("--terms", type=int, default=2, help="Taylor terms, 1 to 3 [2]")
    p.add_argument("--scales", default="0,4,8,16", help="scale diameters, pixels [0,4,8,16]")
    p.add_argument("--noise-threshold", default="3",
                   help="stop each scale at this multiple of its noise, or 'off' [3]")
    p.add_argument("--threshold", type=float, default=0.0,
                   help="absolute stop level of the term-0 residual, Jy/beam [0]")
    p.add_argument("--mask", help="FITS mask on the image's grid (non-zero: may clean)")
    p.add_argument("--emission-mask", action="store_true", default=True,
                   help="clean inside the automatic mask, found on the band (term-0) "
                   "residual and renewed every major cycle; kept inside --mask [on]")
    p.add_argument("--no-emission-mask", dest="emission_mask", action="store_false",
                   help="clean everywhere (or everywhere in --mask)")
    p.add_argument("--freqs", help="channel frequencies in Hz, comma-separated [the cube's "
                   "spectral axis]")
    p.add_argument("--channel-weights",
                   help="'equal', 'noise' (inverse variance of each dirty plane) or one "
                   "number per channel [equal; with --visibilities each channel's sum of "
                   "imaging weights]")
    p.add_argument("--reference-frequency", type=float,
                   help="Taylor reference frequency, Hz [the weighted mean]")
    p.add_argument("--index-snr", type=float, default=10.0,
                   help="blank the spectral maps below this multiple of the term-0 noise [10]")
    p.add_argument("--index-method", default="band", choices=("band", "taylor"),
                   help="spectral index from a power law fitted across the band, or the "
                   "ratio of the terms [band]")
    p.add_argument("--restoring-beam", default="band", choices=("band", "lowest"),
                   help="fit the restoring beam to the band-averaged PSF or to the lowest "
                   "frequency's [band]")
    p.add_argument("--max-components", type=int, default=20000, help="component budget [20000]")
    p.add_argument("--max-major-cycles", type=int, default=20, help="major-cycle budget [20]")
    p.add_argument("--loop-gain", type=float, default=0.1, help="loop gain [0.1]")
    p.add_argument("--threads", type=int, help="threads [all cores]")
    p.add_argument("--no-figure", action="store_true", help="skip spectral-index.png")
    p.add_argument("--overwrite", action="store_true", help="replace existing outputs")
    p.set_defaults(func=cmd_wideband)
    return p


def _read(path, name):
    from skyscale.cube.fits import open_cube
    cube = open_cube(path, name=name)
    try:
        data = np.stack([cube.read_plane(i) for i in range(cube.nplanes)])
    finally:
        cube.close()
    return cube, data


def _frequencies(cube, text):
    if text is not None:
        return np.array(_floats(text, "--freqs"))
    kind = (cube.spectral_type or "").upper()
    if cube.spectral is None or not kind.startswith("FREQ"):
        raise InputError(f"the cube's plane axis is {cube.spectral_type or 'not described'}, "
                         "not a frequency axis; give the channels' frequencies with --freqs "
                         "(Hz, comma-separated)")
    scale = {"[HZ]": 1.0, "[KHZ]": 1e3, "[MHZ]": 1e6, "[GHZ]": 1e9}.get(
        kind.split(" ", 1)[-1] if " " in kind else "[HZ]", 1.0)
    return np.asarray(cube.spectral, dtype=np.float64) * scale


def _from_visibilities(args):
    """Per-channel operators of a visibility file and the inputs they make."""
    from skyscale.visibility.run import image_header
    from skyscale.visibility.channels import channel_operators, wideband_inputs
    from skyscale.visibility.file import read_visibilities
    if args.size is None or args.cell is None:
        raise InputError("--visibilities needs the image's --size N and --cell ARCSEC")
    data = read_visibilities(args.visibilities)
    ops = channel_operators(data.uvw, data.freqs, data.vis, data.weights, flags=data.flags,
                            npix=args.size, cell_arcsec=args.cell, weighting=args.weighting)
    dirty, psf, freqs, weights = wideband_inputs(ops)
    like = image_header((args.size, args.size), args.cell, data.phase_centre_deg)
    return ops, dirty, psf, freqs, like, weights


def cmd_wideband(args):
    """Run ``skyscale wideband``; return the exit code."""
    from skyscale.io.fits import read_image
    from skyscale.wideband.driver import deconvolve_wideband
    from skyscale.wideband.outputs import write_wideband
    operators = None
    weights = args.channel_weights
    if args.visibilities:
        operators, dirty, psf, freqs, like, data_weights = _from_visibilities(args)
        if weights is None:
            weights = data_weights
    elif args.cube and args.psf:
        cube, dirty = _read(args.cube, "cube")
        _, psf = _read(args.psf, "psf")
        freqs = _frequencies(cube, args.freqs)
        like = cube.wcs
    else:
        raise InputError("give the dirty cube and the PSF cube (FITS), or --visibilities "
                         "FILE with --size and --cell")
    weights = "equal" if weights is None else weights
    if isinstance(weights, str) and weights not in ("equal", "noise"):
        weights = _floats(weights, "--channel-weights")
    noise = None if str(args.noise_threshold).lower() == "off" else \
        _floats(args.noise_threshold, "--noise-threshold")[0]
    mask = None
    if args.mask:
        mask = np.asarray(read_image(args.mask, name="mask").data) != 0
    result = deconvolve_wideband(
        dirty, psf, freqs, terms=args.terms, scales=_floats(args.scales, "--scales"),
        mask=mask, emission_mask="auto" if args.emission_mask else None, operators=operators,
        threshold=args.threshold, noise_threshold=noise,
        channel_weights=weights, reference_frequency=args.reference_frequency,
        loop_gain=args.loop_gain, max_components=args.max_components,
        max_major_cycles=args.max_major_cycles, index_snr=args.index_snr,
        index_method=args.index_method, beam=args.restoring_beam, threads=args.threads)
    written = write_wideband(result, args.out, like=like, overwrite=args.overwrite,
                             figure=not args.no_figure)
    if not args.quiet:
        print(f"{result.n_terms} Taylor terms about {result.reference_frequency / 1e9:.6g} GHz: "
              f"{result.components.size} components, stopped: {result.stop_description}")
        if result.blank_level is not None:
            print(f"spectral maps blanked below {result.blank_level:.3g} Jy/beam "
                  f"({result.index_snr:g} x the term-0 noise)")
        print(f"{len(written)} files written to {args.out}")
    return 0
