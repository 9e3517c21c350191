"""Delta-only against multi-scale CLEAN on an invented field, to 3 sigma in a truth mask.

    PYTHONPATH=engine python benchmarks/compare_delta_multiscale.py [size]

Prints, for each, the components, sub-loops and seconds to its stop, the flux recovered
against the sky's, the share of the model flux on finite scales, and the peak and mean
residual in the mask in units of the delta scale's noise.
"""

import os
import sys
import time

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path[:0] = [HERE, os.path.join(os.path.dirname(HERE), "engine")]

import numpy as np  # noqa: E402

import skyscale  # noqa: E402
from fields import invented_field  # noqa: E402


def main(n=256):
    f = invented_field(n, largest_scale=16)
    mask = f["mask"]
    print(f"{n} x {n}, sky flux {f['sky'].sum():.4f} Jy, mask {mask.mean():.1%} of the image")
    for name, scales in (("delta", [0]), ("multi-scale", [0, 4, 8, 16])):
        t0 = time.perf_counter()
        r = skyscale.deconvolve(f["dirty"], f["psf"], scales=scales, mask=mask,
                                noise_threshold=3.0, max_components=200000,
                                max_major_cycles=60, restore=False)
        wall = time.perf_counter() - t0
        sigma = r.scale_noise[0]
        c = r.components
        finite = c["flux"][c["scale"] > 0].sum() / max(c["flux"].sum(), 1e-30)
        res = r.residual[mask].astype(np.float64)
        print(f"{name:12s} {c.size:7d} components, {r.sub_loops:5d} sub-loops, {wall:7.1f} s, "
              f"stop {r.stop_reason}; flux {r.model.sum() / f['sky'].sum():.1%} of the sky, "
              f"{finite:.0%} on finite scales; residual in the mask: peak "
              f"{np.abs(res).max() / sigma:.2f} sigma, mean {res.mean() / sigma:+.2f} sigma")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 256)
