"""Delta-only against multi-scale CLEAN on the synthetic extended field of the tests.

    PYTHONPATH=engine python benchmarks/compare_delta_multiscale.py

Prints, for each, the components needed to reach a common residual level and the
flux recovered, against the field's true flux.
"""

import os
import sys

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
sys.path[:0] = [ROOT, os.path.join(ROOT, "engine")]

import skyscale  # noqa: E402
from tests.conftest import NOISE, extended_field, gaussian_psf, observe  # noqa: E402


def main():
    psf = gaussian_psf(128, sigma=2.0, ring=0.05, bowl=0.02)
    sky = extended_field(128)
    dirty = observe(sky, psf, noise=NOISE)
    runs = {}
    for name, scales in (("delta", [0]), ("multi-scale", [0, 4, 8, 16, 32])):
        runs[name] = skyscale.deconvolve(dirty, psf, scales=scales, threshold=3e-4,
                                         max_components=30000, max_major_cycles=40,
                                         restore=False)
    level = max(r.history[-1].peak for r in runs.values())
    print(f"true flux {sky.sum():.4f} Jy; common residual level {level:.3g} Jy/beam")
    for name, r in runs.items():
        rec = next(h for h in r.history if h.peak <= level)
        print(f"{name:12s} {rec.components:6d} components to reach it, flux {rec.flux:.4f} Jy;"
              f" stop {r.stop_reason} after {r.components.size} components")
    deep = skyscale.deconvolve(dirty, psf, scales=[0, 4, 8, 16, 32], threshold=3 * NOISE,
                               max_components=30000, max_major_cycles=60, restore=False)
    print(f"multi-scale to 3 sigma: flux {deep.model.sum():.4f} Jy "
          f"({100 * (deep.model.sum() / sky.sum() - 1):+.2f} %)")


if __name__ == "__main__":
    main()
