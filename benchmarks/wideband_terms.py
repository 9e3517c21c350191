"""Wideband cost: one, two and three Taylor terms side by side, same field and scales.

    PYTHONPATH=engine python benchmarks/wideband_terms.py --size 256 --out wideband.json
    PYTHONPATH=engine python benchmarks/wideband_terms.py --size 512 --threads 1

An invented 16-channel field across 1-2 GHz (tests/wideband_fields.py: a Gaussian with
an index gradient, a disk and two points of other indices, a broad mask) is cleaned to
3 sigma (or ``--threshold``) with `skyscale.deconvolve_wideband` at ``terms`` 1 (the single-term engine on
the band-averaged images), 2 and 3.  Each is run once to compile, then ``--repeat``
times; the best CPU and wall times are kept with the run's split (precompute, minor,
major cycles), its components and sub-loops, and the peak memory (tracemalloc) beside
`skyscale.wideband.memory.wideband_memory`'s prediction.  The target (issue 22): two
terms within 2.5 x one term.

Compare the terms at equal depth (``--threshold``).  With the 3 sigma noise stop one
term measures a noise about eight times higher on this field and stops far earlier;
that is an honest difference, not a flaw of the one-term noise measure: the one-term
model cannot represent the spectra, and what the band-averaged PSF leaves of them spreads
over the whole image.  ``--floor`` shows it: the band-averaged residual of the true,
noise-free sky (the channels' mean sky as the one-term model) has a robust noise off the
mask about 15 times the band's thermal noise at 256 x 256 (7.6e-3 against 5.0e-4
Jy/beam), where the one-term run measures 9.2e-3 and the two-term run 1.2e-3.
"""

import argparse
import json
import os
import sys
import time
import tracemalloc

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(__file__), "..", "tests"))

from scipy.ndimage import binary_dilation  # noqa: E402

import skyscale  # noqa: E402
from skyscale.core.beam import restore  # noqa: E402
from skyscale.core.scales import ScaleSet  # noqa: E402
from skyscale.wideband.memory import wideband_memory  # noqa: E402
from wideband_fields import band, disk, gaussian_blob, observe, psf_cube  # noqa: E402

NU0 = 1.5e9


def field(size, nchan=16, sigma=2e-3):
    """An invented field scaled to ``size``: cube, PSF cube (twice the size), freqs, mask."""
    freqs = band(nchan)
    psfs = psf_cube(freqs, n=2 * size)
    shape = (size, size)
    f = size / 128.0
    y, x = np.mgrid[:size, :size]
    amp = 0.02 * 2 * np.pi * 49 * f * f * gaussian_blob(shape, 50 * f, 45 * f, 7.0 * f)
    alpha = -0.3 - 0.8 * (x - 25 * f) / (40 * f)
    d = 2.0 * f * f * disk(shape, 85 * f, 85 * f, 9.0 * f)
    alpha = np.where(d > 0, -0.5, alpha)
    amp = amp + d
    for py, px, s, a in ((25, 100, 0.05, 0.6), (100, 25, 0.08, -1.6)):
        amp[int(py * f), int(px * f)] += s
        alpha[int(py * f), int(px * f)] = a
    sky = amp[None] * (freqs[:, None, None] / NU0) ** alpha[None]
    dirty = observe(sky, psfs, sigma, freqs)
    mask = binary_dilation(restore(sky[nchan // 2], None, skyscale.Beam(8.0, 8.0)) > 1e-3,
                           iterations=4)
    return dirty, psfs.astype(np.float32), freqs, mask, sky


def one_term_floor(size, nchan=16, sigma=2e-3):
    """What one term cannot clean on this field: the robust noise (1.4826 MAD, off the
    mask) of the band-averaged residual of the noise-free sky with the channels' mean sky
    as the model, beside the band's thermal noise ``sigma / sqrt(nchan)``."""
    from scipy.signal import fftconvolve
    _, psfs, freqs, mask, sky = field(size, nchan, sigma)
    clean = observe(sky, psfs.astype(np.float64), 0.0, freqs).mean(axis=0)
    band_psf = psfs.astype(np.float64).mean(axis=0)
    model = fftconvolve(sky.mean(axis=0), band_psf)[size:2 * size, size:2 * size]
    left = (clean - model)[~mask]
    return 1.4826 * float(np.median(np.abs(left - np.median(left)))), sigma / np.sqrt(nchan)


def one_run(dirty, psfs, freqs, mask, terms, scales, threads, threshold=None):
    tracemalloc.start()
    c0, w0 = time.process_time(), time.perf_counter()
    r = skyscale.deconvolve_wideband(dirty, psfs, freqs, terms=terms, scales=scales,
                                     mask=mask, reference_frequency=NU0, threads=threads,
                                     **({"noise_threshold": 3} if threshold is None else
                                        {"threshold": threshold}))
    cpu, wall = time.process_time() - c0, time.perf_counter() - w0
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    predicted = None
    if terms > 1:
        radii = ScaleSet(scales, image_shape=dirty.shape[1:]).support_radii
        rows, cols = np.nonzero(mask)
        grow = max(radii)
        box = (min(rows.max() + grow + 1, dirty.shape[1]) - max(rows.min() - grow, 0),
               min(cols.max() + grow + 1, dirty.shape[2]) - max(cols.min() - grow, 0))
        predicted = wideband_memory(dirty.shape[1:], psfs.shape[1:], len(freqs), terms,
                                    radii, box_shape=box)["total"] / 2 ** 20
    return {"terms": terms, "cpu_s": cpu, "wall_s": wall, "peak_mib": peak / 2 ** 20,
            "predicted_mib": predicted,
            "components": int(r.components.size), "sub_loops": int(r.sub_loops),
            "major_cycles": len(r.history) - 1, "stop": r.stop_reason,
            "timings": {k: float(v) for k, v in r.timings.items()
                        if isinstance(v, (int, float))}}


def main(argv=None):
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--size", type=int, default=256)
    p.add_argument("--scales", default="0,4,8,16")
    p.add_argument("--threads", type=int, default=None)
    p.add_argument("--repeat", type=int, default=2)
    p.add_argument("--threshold", type=float, help="stop every run at this level, Jy/beam, "
                   "instead of 3 sigma (one term measures a noise several times higher on "
                   "this field, where the band-averaged PSF cannot model the spectra, and "
                   "stops much earlier: a fixed level compares equal work)")
    p.add_argument("--out", help="JSON file for the figures")
    p.add_argument("--floor", action="store_true", help="print what one term cannot clean "
                   "on this field (see the module docstring) and stop")
    args = p.parse_args(argv)
    scales = [float(s) for s in args.scales.split(",")]
    if args.floor:
        floor, thermal = one_term_floor(args.size)
        print(f"one-term floor {floor:.3g} Jy/beam, band thermal noise {thermal:.3g} "
              f"Jy/beam ({floor / thermal:.1f} x)")
        return
    data = field(args.size)[:4]
    rows = []
    for terms in (1, 2, 3):
        one_run(*data, terms, scales, args.threads, args.threshold)     # compile, warm up
        runs = [one_run(*data, terms, scales, args.threads, args.threshold)
                for _ in range(args.repeat)]
        best = min(runs, key=lambda r: r["cpu_s"])
        rows.append(best)
        print(f"terms {terms}: {best['cpu_s']:.2f} s CPU, {best['wall_s']:.2f} s wall, "
              f"{best['components']} components, {best['sub_loops']} sub-loops, "
              f"{best['major_cycles']} major cycles, peak {best['peak_mib']:.0f} MiB"
              + (f" (predicted {best['predicted_mib']:.0f} MiB)" if best["predicted_mib"]
                 else "") + f", stop {best['stop']}")
    base = rows[0]["cpu_s"]
    for row in rows[1:]:
        print(f"terms {row['terms']} / terms 1: {row['cpu_s'] / base:.2f} x CPU "
              f"(target for 2 terms: 2.5 x)")
    if args.out:
        with open(args.out, "w") as fh:
            json.dump({"size": args.size, "scales": scales, "threads": args.threads,
                       "threshold": args.threshold,
                       "rows": rows}, fh, indent=1)


if __name__ == "__main__":
    main()
