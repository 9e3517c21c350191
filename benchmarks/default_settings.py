"""Old and new command-line defaults side by side on invented fields (issue 19).

For each field: the off-source rms of the residual and its mean inside the emission, in
units of the noise put in, and the fraction of the true flux in the model, for

* the old default of ``skyscale run`` (scales 0,4,8,16, no mask),
* scales 0,4,8,16 inside the automatic mask,
* the new default (the scale advisor's scales, ``"auto"``, inside the automatic mask),

all stopping at 3 times the noise.  Fields: `fields.invented_field` (256 px, seeds
given on the command line) and the demo observation (its truth from true_sky.fits).

    PYTHONPATH=engine python benchmarks/default_settings.py 3 0 5
"""

import json
import os
import sys
import warnings

import numpy as np
from astropy.io import fits
from scipy import ndimage

from fields import invented_field
from skyscale import deconvolve

SETTINGS = {"old default (0,4,8,16, no mask)": dict(scales=[0, 4, 8, 16]),
            "0,4,8,16 + automatic mask": dict(scales=[0, 4, 8, 16], mask="auto"),
            "new default (auto scales + automatic mask)": dict(scales="auto", mask="auto")}


def _demo():
    here = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "demo_data")
    sky = fits.getdata(os.path.join(here, "true_sky.fits")).astype(np.float64)
    with open(os.path.join(here, "truth.json"), encoding="utf-8") as fh:
        sigma = json.load(fh)["noise_jy_per_beam"]
    return {"dirty": fits.getdata(os.path.join(here, "dirty.fits")),
            "psf": fits.getdata(os.path.join(here, "psf.fits")), "sky": sky,
            "sigma": sigma,
            "mask": ndimage.binary_dilation(sky > sigma / 100, iterations=3)}


def figures(field, **options):
    """Off-source rms and mean residual in the emission (noise units), flux fraction."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        r = deconvolve(field["dirty"], field["psf"], noise_threshold=3, restore=False,
                       **options)
    res, e, s = r.residual.astype(np.float64), field["mask"], field["sigma"]
    return (float(np.sqrt(np.mean(res[~e] ** 2)) / s), float(res[e].mean() / s),
            float(r.model.sum() / field["sky"].sum()), r.stop_reason, len(r.warnings))


def main(seeds):
    fields_ = [("demo", _demo())] + [(f"invented 256 px, seed {s}", invented_field(256, seed=s))
                                     for s in seeds]
    for name, field in fields_:
        print(f"{name} (emission over {field['mask'].mean():.0%} of the image)")
        for label, options in SETTINGS.items():
            off, mean, flux, stop, nwarn = figures(field, **options)
            print(f"  {label:45s} off-source rms {off:4.2f}  mean in emission {mean:+5.2f}  "
                  f"flux {flux:6.1%}  stop {stop}  warnings {nwarn}")


if __name__ == "__main__":
    main([int(s) for s in sys.argv[1:]] or [3])
