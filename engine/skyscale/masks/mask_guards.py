"""What a rung adds to the automatic mask: the guards against sidelobes and blur.

Noise and the PSF's sidelobes come with both signs, emission only positive; a wider
rung blurs every island beyond its emission; an unresolved source's island is its
main lobe.  These rules keep what `skyscale.masks.detect.detect_emission` adds to the
mask (with ``guard_negative``) to what holds emission.
"""

import math

import numpy as np
from scipy import ndimage

from skyscale.core.noise import grow_mask
from skyscale.masks.islands import label_max, point_island

__all__ = ["MASK_GAIN", "TRIM_SIGMA", "POINT_AREA", "point_cores", "resolved_part",
           "off_emission"]


#: A wider rung adds an island to the mask only when its peak signal-to-noise rose by
#: this factor over the rung before's on the same pixels.  An unresolved source seen
#: through a smoothing of half a beam or less keeps about the same signal-to-noise
#: (its peak and beam-correlated noise fall alike: 0.83 and 0.82 on the invented
#: field of tests/test_sky_as_seen.py), so a gain of 1 does not set it apart.
MASK_GAIN = 1.1

#: ... and only where the rung before is above this many times its own noise: the
#: wider rung's island reaches a smoothing width beyond the emission, the finer one's
#: less far.
TRIM_SIGMA = 2.0

#: An island no larger than this multiple of the island an unresolved source of its
#: peak would make (`point_island`) is an unresolved source: the mask keeps its core,
#: the pixels above a quarter of its peak (one delta component models it; its faint
#: wings are not emission of their own).  A round Gaussian's area above a fraction f
#: of its peak is pi (FWHM / 2)^2 log2(1 / f) (analytic): 1.39 beam areas at f = 1/4,
#: so the core passes a smallest-island rule of one beam area.
POINT_AREA = 1.5


def point_cores(found, sm, level, spread):
    """Islands of unresolved sources cut to their cores (see `POINT_AREA`)."""
    labels, n = ndimage.label(found, structure=np.ones((3, 3), dtype=bool))
    cores = np.zeros(found.shape, dtype=bool)
    if n == 0:
        return found, cores
    out = found.copy()
    for k, sl in enumerate(ndimage.find_objects(labels), start=1):
        if sl is None:
            continue
        inside = labels[sl] == k
        peak = float(sm[sl][inside].max())
        point = point_island(spread, peak / level)
        if inside.sum() <= POINT_AREA * math.pi * point * point / 4.0:
            core = inside & (sm[sl] >= 0.25 * peak)
            out[sl] &= ~inside | core
            cores[sl] |= core
    return out, cores


def resolved_part(found, sm, noise, before, before_noise, signed, known):
    """What a wider rung adds to the mask: its islands where smoothing helped.

    A wider rung blurs every island beyond its emission.  An island the smoothing
    did not make clearly more significant (its peak signal-to-noise did not rise by
    `MASK_GAIN` over the rung before's on the same pixels) is an unresolved source,
    or emission already found, seen blurred: it adds nothing.  An island it did is kept
    where the rung before is above `TRIM_SIGMA` times its own noise.
    """
    labels, n = ndimage.label(found, structure=np.ones((3, 3), dtype=bool))
    if n == 0:
        return found
    now = np.abs(sm) if signed else sm
    then = np.abs(before) if signed else before
    gain = label_max(now, labels, n) / noise
    base = label_max(then, labels, n) / before_noise
    keep = np.zeros(n + 1, dtype=bool)
    keep[1:] = gain >= MASK_GAIN * np.maximum(base, 0.0)
    return keep[labels] & (then > TRIM_SIGMA * before_noise)


def off_emission(sm, level, margin, exclude):
    """Pixels farther than ``margin`` from any above ``level``, and not in ``exclude``."""
    above = sm > level
    off = ~above
    if above.any() and margin >= 1:
        off = ~grow_mask(above, int(round(margin)))
    if exclude is not None:
        off &= ~np.asarray(exclude, dtype=bool)
    return off
