"""Table of true sizes against the scale advisor's largest suggested scale.

Every field is invented (tests/advisor_fields.py): one disk (size = diameter) or one
Gaussian (size = FWHM) in noise of rms 1, white or correlated by the beam (FWHM 4 px),
at a per-pixel signal-to-noise (the beam-convolved peak over the noise rms); plus the
issue's field: a disk 290 px across and a diffuse Gaussian blob of FWHM 190 px on a
2048 x 2048 image, and the same sky on 1024 and 512 px grids (sizes halved, brighter
per pixel).

Run from the repository root::

    PYTHONPATH=engine python benchmarks/advisor_sizes.py            # the full table
    PYTHONPATH=engine python benchmarks/advisor_sizes.py --quick    # a few rows
    PYTHONPATH=engine python benchmarks/advisor_sizes.py --groups 512 1024 2048 4096
    PYTHONPATH=engine python benchmarks/advisor_sizes.py --share 1024 2048 4096

``--groups`` measures issue 20's field (tests/advisor_fields.group_field: an ellipse of
smaller extent 72 k px, a Gaussian of FWHM 46 k, an arc 12 k wide and eight points to
1e4 times the noise, through the invented array's PSF), the same sky (k = 1) embedded in
every image size and the sky scaled up with the image (k = n / 512): the scales
suggested with the image as given (``clean_first=False``, the old reading) and with
the bright emission cleaned out first, the largest over the largest true single
structure (ok within 0.3 to 1.0), the noise read, and the seconds taken.

Verdicts: ``ok`` when the largest suggested scale is between 0.3 and 0.8 of the true
size; ``capped (image)`` when a quarter of the image sets it (the reasons say so);
``unresolved`` when the source is under 1.5 beams and only 0 and the beam scale are
given (``unresolved, not measured`` when it was too faint to measure and 0, the beam
and twice the beam are given, the reasons saying the extent is unknown); ``too faint`` when even the best smoothing leaves its peak under 10 sigma (not
a fair test: listed, not judged).  Anything else is ``MISS``.
"""

import argparse
import os
import sys
import time

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path[:0] = [os.path.join(HERE, "..", "engine"), os.path.join(HERE, "..")]

from skyscale.advisor import suggest_scales  # noqa: E402
from skyscale.core.beam import Beam  # noqa: E402
from tests.advisor_fields import BEAM, make_field, smoothed_snr  # noqa: E402

ROUND = Beam(BEAM, BEAM, 0.0)


def best_snr(seen, n, correlated):
    widths = [0.0] + [BEAM * 2 ** k for k in range(12) if BEAM * 2 ** k <= n / 4]
    return max(smoothed_snr(seen, w, correlated) for w in widths)


def image_side(size):
    for n in (256, 512, 1024):
        if size <= 0.4 * n:
            return n
    return 1024


def verdict(size, pixels, reasons, snr):
    largest = max(pixels)
    if snr < 10:
        return "too faint"
    if 0.3 * size <= largest <= 0.8 * size:
        return "ok"
    if any(r.startswith("largest scale") and "a quarter of the image" in r for r in reasons):
        return "capped (image)"
    if size < 1.5 * BEAM and pixels == (0, round(BEAM)):
        return "unresolved"
    if size < 1.5 * BEAM and max(pixels) <= 2 * BEAM:
        return "unresolved, not measured"
    return "MISS"


def issue_field(n, seed=0):
    """The issue's sky on an n x n grid: disk 290 px and blob 190 px FWHM at 2048."""
    k = n / 2048.0
    per_pixel = 0.5 / k ** 2          # the same flux on fewer pixels: brighter per pixel
    disk, _ = make_field("disk", 290 * k, per_pixel, n, seed=seed,
                         centre=(0.40 * n, 0.35 * n))
    blob, _ = make_field("gaussian", 190 * k, 0.6 * per_pixel, n, seed=seed + 1,
                         centre=(0.68 * n, 0.70 * n))
    from tests.advisor_fields import noise_field
    return disk + blob - noise_field(n, seed=seed + 1), 290 * k, per_pixel


def groups(sizes):
    """Issue 20's separate-object field at each size: before and after, with times."""
    from tests.advisor_fields import group_field
    print("| image | k | largest true px | as given: scales | noise read | s | "
          "cleaned first: scales | noise read | s | largest / true | verdict |")
    print("|---|---|---|---|---|---|---|---|---|---|---|")
    for n in sizes:
        for k in sorted({1.0, n / 512.0}):
            dirty, psf, _, truth = group_field(n, k)
            true = max(w for _, w, *_ in truth)
            t0 = time.perf_counter()
            old = suggest_scales(dirty, psf, clean_first=False)
            t1 = time.perf_counter()
            new = suggest_scales(dirty, psf)
            t2 = time.perf_counter()
            ratio = max(new.pixels) / true
            print(f"| {n} | {k:g} | {true:.0f} | {', '.join(map(str, old.pixels))} | "
                  f"{old.extent.noise_by_smoothing[0][1]:.3g} | {t1 - t0:.1f} | "
                  f"{', '.join(map(str, new.pixels))} | {new.view['noise_after']:.3g} | "
                  f"{t2 - t1:.1f} | {ratio:.2f} | "
                  f"{'ok' if 0.3 <= ratio <= 1.0 else 'MISS'} |", flush=True)


def share(sizes, run_limit):
    """Seconds of `suggest_scales` against the run it advises (issue 20: under 10 %).

    The field is issue 20's sky scaled with the image (k = n / 512); the run is
    ``deconvolve(dirty, psf, scales=suggested, emission_mask='auto',
    noise_threshold=3)``, measured only up to ``run_limit`` image pixels (a longer run
    makes the share smaller still: the table says "not run")."""
    from skyscale import deconvolve
    from tests.advisor_fields import group_field
    print("| image | k | suggest s | suggested scales | largest / true | run s | "
          "suggest / run |")
    print("|---|---|---|---|---|---|---|")
    for n in sizes:
        k = n / 512.0
        t0 = time.perf_counter()
        dirty, psf, _, truth = group_field(n, k)
        made = time.perf_counter() - t0
        true = max(w for _, w, *_ in truth)
        t0 = time.perf_counter()
        s = suggest_scales(dirty, psf)
        advise = time.perf_counter() - t0
        run = "not run"
        ratio = "-"
        if n * n <= run_limit:
            t0 = time.perf_counter()
            deconvolve(dirty, psf, scales=list(s.pixels), emission_mask="auto",
                       noise_threshold=3, restore=False)
            seconds = time.perf_counter() - t0
            run, ratio = f"{seconds:.1f}", f"{advise / seconds:.1%}"
        print(f"| {n} | {k:g} | {advise:.1f} | {', '.join(map(str, s.pixels))} | "
              f"{max(s.pixels) / true:.2f} | {run} | {ratio} |  (field made in "
              f"{made:.0f} s)", flush=True)


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="a few rows only")
    parser.add_argument("--groups", type=int, nargs="+", metavar="N",
                        help="issue 20's separate-object field at these image sizes")
    parser.add_argument("--share", type=int, nargs="+", metavar="N",
                        help="seconds of suggest_scales against the run it advises")
    parser.add_argument("--run-limit", type=int, default=2048 * 2048, metavar="PIXELS",
                        help="with --share, run the advised deconvolution only up to "
                             "this many image pixels (default 2048^2)")
    args = parser.parse_args(argv)
    if args.share:
        share(args.share, args.run_limit)
        return
    if args.groups:
        groups(args.groups)
        return
    sizes = (2, 4, 8, 16, 32, 64, 128, 256, 400)
    snrs = (1, 3, 10, 30, 100)
    if args.quick:
        sizes, snrs = (8, 64, 256), (1, 30)
    rows = []
    print("| source | true size px | S/N per px | noise | image | best smoothed S/N | "
          "structure px | found at px | suggested scales px | largest / true | verdict |")
    print("|---|---|---|---|---|---|---|---|---|---|---|")
    t0 = time.perf_counter()
    for kind in ("disk", "gaussian"):
        for size in sizes:
            for snr in snrs:
                for correlated in (False, True):
                    n = image_side(size)
                    dirty, seen = make_field(kind, size, snr, n, seed=size + snr,
                                             correlated=correlated)
                    best = best_snr(seen, n, correlated)
                    s = suggest_scales(dirty, beam=ROUND)
                    rows.append(report(kind, size, snr, correlated, n, best, s))
    for n in ((512, 1024) if args.quick else (512, 1024, 2048)):
        dirty, size, per_pixel = issue_field(n)
        s = suggest_scales(dirty, beam=ROUND)
        rows.append(report("issue disk+blob", size, per_pixel, False, n, np.inf, s))
    counts = {}
    for r in rows:
        counts[r] = counts.get(r, 0) + 1
    print(f"\n{len(rows)} fields in {time.perf_counter() - t0:.0f} s: " +
          ", ".join(f"{v} {k}" for k, v in sorted(counts.items())))


def report(kind, size, snr, correlated, n, best, s):
    v = verdict(size, s.pixels, s.reasons, best)
    ext = s.extent
    structure = "-" if s.largest_structure_px is None else f"{s.largest_structure_px:.0f}"
    found = "-" if ext is None or not ext.n_islands else f"{ext.smoothing_px:.0f}"
    print(f"| {kind} | {size:g} | {snr:g} | {'beam' if correlated else 'white'} | {n} | "
          f"{best:.0f} | {structure} | {found} | {', '.join(map(str, s.pixels))} | "
          f"{max(s.pixels) / size:.2f} | {v} |", flush=True)
    return v


if __name__ == "__main__":
    main()
