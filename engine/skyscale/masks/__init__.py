"""Clean masks: from a FITS file, from region text, or found automatically.

A mask is a boolean image on the image's grid, ``[y, x]``: True where the minor cycle
may place components.  Each kind has its own module; this one keeps the names
importable from ``skyscale.masks``:

- `skyscale.masks.regions`: region text (circles and boxes, in pixels or on the sky), with
  its syntax;
- `skyscale.masks.loading`: masks from FITS files or arrays;
- `skyscale.masks.emission`: the automatic mask, on `skyscale.masks.detect`.
"""

from skyscale.masks.emission import EmissionMask, emission_mask
from skyscale.masks.loading import load_mask
from skyscale.masks.regions import (ANGLE_UNITS, REGION_EXAMPLE, REGION_SHAPES, parse_regions,
                                    regions_to_mask)

__all__ = ["REGION_SHAPES", "ANGLE_UNITS", "REGION_EXAMPLE", "load_mask", "parse_regions",
           "regions_to_mask", "EmissionMask", "emission_mask"]
