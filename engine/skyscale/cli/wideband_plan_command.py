"""``skyscale plan --terms N``: the plan of a wideband run (`skyscale.wideband.plan`)."""

import json

__all__ = ["add_wideband_plan_options", "print_wideband_plan"]


def add_wideband_plan_options(p):
    """``--terms`` and ``--channels`` on the ``plan`` parser."""
    p.add_argument("--terms", type=int, default=1, choices=(1, 2, 3),
                   help="Taylor terms of a wideband run (skyscale wideband) [1]")
    p.add_argument("--channels", type=int, help="channels of a wideband run [the cube's "
                   "planes; required with --size]")


def print_wideband_plan(args, shape, psf_shape, scales, planes, known):
    """Plan the wideband run and print it (JSON with ``--json``); returns the exit code."""
    from skyscale.cost.planner import bytes_text, seconds_text
    from skyscale.wideband.plan import plan_wideband
    nchan = args.channels or (planes if planes > 1 else None)
    if nchan is None:
        raise ValueError("--terms needs the number of channels: give a FITS cube or "
                         "--channels N")
    known = {k: v for k, v in known.items() if v is not None}
    p = plan_wideband(shape, psf_shape, nchan, args.terms, scales, threads=args.threads or 1,
                      dtype=args.dtype, box_shape=args.mask_box, calibration=args.calibration,
                      max_components=args.max_components, dynamic_range=args.dynamic_range,
                      **known)
    if args.json:
        out = {k: v for k, v in p.items() if k != "single"}
        print(json.dumps(out, indent=2, default=float))
        return 0
    s, m = p["seconds"], p["memory"]
    print(f"wideband run: {args.terms} Taylor terms, {nchan} channels, "
          f"{shape[0]} x {shape[1]} image, scales {', '.join(f'{v:g}' for v in scales)}")
    print("time: " + ", ".join(f"{k} {seconds_text(v)}" for k, v in s.items()))
    print(f"peak memory: {bytes_text(m['total'])}")
    for line in p["assumptions"]:
        print(f"  assumed: {line}")
    return 0
