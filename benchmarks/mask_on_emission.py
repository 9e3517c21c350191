"""How much of the automatic mask lies on true emission, and what it costs (issue 20).

Each field is invented (tests/advisor_fields.group_field: an ellipse, a Gaussian, an
arc and eight points up to 1e4 times the noise, through the invented array's PSF; the
sky scaled by ``k``).  A run with the given scales, the automatic mask by default
(``emission_mask='auto'``; with ``--clean-first`` the mask that cleans the residual's
bright emission out first) and a stop at 3 times the noise; then:

- the share of the mask's final area on true emission: the sky above 1e-3 of the noise
  per pixel (the reading of tests/test_sky_as_seen.py), grown by a beam (a disk of the beam's geometric-mean FWHM,
  ``scipy.ndimage.binary_dilation``);
- the mask's final area, its islands and the spurious-island count;
- the seconds spent in the mask's updates, their count, and the whole run's.

Run from the repository root::

    PYTHONPATH=engine python benchmarks/mask_on_emission.py --fields 512:1 1024:1
    PYTHONPATH=engine python benchmarks/mask_on_emission.py --fields 512:1 1024:1 --clean-first
"""

import argparse
import math
import os
import sys
import time

import numpy as np
from scipy import ndimage

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path[:0] = [os.path.join(HERE, "..", "engine"), os.path.join(HERE, "..")]

from skyscale import deconvolve  # noqa: E402
from skyscale.core.beam import fit_beam  # noqa: E402
from skyscale.masks.emission import EmissionMask  # noqa: E402
from tests.advisor_fields import group_field  # noqa: E402

SIGMA = 1e-4


def true_emission(sky, psf, level):
    """The sky above ``level`` grown by a disk of the beam's geometric-mean FWHM."""
    b = fit_beam(psf)
    radius = math.sqrt(b.major * b.minor)
    r = int(radius)
    yy, xx = np.mgrid[-r:r + 1, -r:r + 1]
    return ndimage.binary_dilation(sky > level, xx ** 2 + yy ** 2 <= radius ** 2)


def timed_updates():
    """Wrap `EmissionMask.update` to count its calls and seconds."""
    spent = {"calls": 0, "seconds": 0.0}
    plain = EmissionMask.update

    def update(self, *args, **kwargs):
        t0 = time.perf_counter()
        try:
            return plain(self, *args, **kwargs)
        finally:
            spent["calls"] += 1
            spent["seconds"] += time.perf_counter() - t0
    EmissionMask.update = update
    return spent, plain


def measure(n, k, scales, clean_first=False):
    dirty, psf, sky, _ = group_field(n, k, sigma=SIGMA)
    auto = EmissionMask.for_beam(scales, fit_beam(psf), psf=psf, clean_first=True) \
        if clean_first else "auto"
    spent, plain = timed_updates()
    try:
        t0 = time.perf_counter()
        r = deconvolve(dirty, psf, scales=scales, noise_threshold=3, emission_mask=auto,
                       restore=False)
        total = time.perf_counter() - t0
    finally:
        EmissionMask.update = plain
    m = r.mask
    labels, islands = ndimage.label(m, structure=np.ones((3, 3)))
    share = float((m & true_emission(sky, psf, 1e-3 * SIGMA)).sum() / max(m.sum(), 1))
    em = r.emission_mask
    return (f"| {n} | {k:g} | {', '.join(f'{s:g}' for s in scales)} | {int(m.sum())} | "
            f"{islands} | {share:.2f} | "
            f"{sum(em.spurious.values()) if em.spurious else 0} | {spent['calls']} | "
            f"{spent['seconds']:.2f} | {total:.1f} | {r.model.sum() / sky.sum():.3f} |")


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--fields", nargs="+", default=["512:1", "1024:1"],
                        help="SIZE:K pairs (image side, sky scale)")
    parser.add_argument("--scales", default="0,4,14,46",
                        help="scale diameters in pixels, comma-separated")
    parser.add_argument("--clean-first", action="store_true",
                        help="the mask cleans the residual's bright emission out first "
                             "(EmissionMask(clean_first=True))")
    args = parser.parse_args(argv)
    scales = [float(s) for s in args.scales.split(",")]
    print("| image | k | scales px | mask px | islands | on emission | spurious | updates | "
          "mask s | run s | flux |")
    print("|---|---|---|---|---|---|---|---|---|---|---|")
    for field in args.fields:
        n, k = field.split(":")
        print(measure(int(n), float(k), scales, args.clean_first), flush=True)


if __name__ == "__main__":
    main()
