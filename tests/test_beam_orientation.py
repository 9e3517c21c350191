"""A restoring beam points the same way on the sky whether it comes from a header's BPA
or from the user, also on a rotated or flipped grid.

Check values: astropy's `SkyCoord.position_angle` (east of north) between the beam
centre and a point along its major axis, on WCSs with a rotated CD matrix (Calabretta &
Greisen 2002, eq. 185-186 for CD); BPA is east of north (common practice).
"""

import math

import numpy as np
import pytest
from astropy.io import fits
from astropy.wcs import WCS

from skyscale.io.fits import pixel_position_angle, read_image, sky_position_angle
from skyscale.job.preflight import restoring_beam

CELL = 2.0        # arcsec
N = 64


def rotated_wcs(rotation_deg, flip=False):
    """RA---SIN/DEC--SIN, RA to the left (or to the right with ``flip``), rotated."""
    w = WCS(naxis=2)
    w.wcs.ctype = ["RA---SIN", "DEC--SIN"]
    w.wcs.crval = [150.0, -30.0]
    w.wcs.crpix = [N / 2 + 1, N / 2 + 1]
    r = math.radians(rotation_deg)
    rot = np.array([[math.cos(r), -math.sin(r)], [math.sin(r), math.cos(r)]])
    w.wcs.cd = CELL / 3600.0 * rot @ np.diag([1.0 if flip else -1.0, 1.0])
    return w


def sky_pa_of_pixel_pa(w, pa_pixel):
    """Position angle on the sky (astropy) of the pixel direction ``pa_pixel``."""
    t = math.radians(pa_pixel)
    x0 = y0 = N / 2
    x1, y1 = x0 - 5 * math.sin(t), y0 + 5 * math.cos(t)   # the pixel frame's convention
    c0, c1 = w.pixel_to_world(x0, y0), w.pixel_to_world(x1, y1)
    return c0.position_angle(c1).deg % 180.0


def same_axis(a, b, tol=0.05):
    d = (a - b) % 180.0
    return min(d, 180.0 - d) < tol


@pytest.mark.parametrize("rotation", [0.0, 30.0, -65.0, 120.0])
@pytest.mark.parametrize("flip", [False, True])
@pytest.mark.parametrize("pa_sky", [0.0, 30.0, 100.0])
def test_user_beam_points_where_the_user_said(rotation, flip, pa_sky):
    w = rotated_wcs(rotation, flip)
    beam = restoring_beam({"beam": (6.0, 3.0, pa_sky)}, CELL, "--beam", w)
    assert beam.major == pytest.approx(3.0) and beam.minor == pytest.approx(1.5)
    assert same_axis(sky_pa_of_pixel_pa(w, beam.pa), pa_sky)


@pytest.mark.parametrize("rotation", [0.0, 30.0, -65.0])
def test_header_bpa_and_user_beam_agree(tmp_path, rotation):
    w = rotated_wcs(rotation)
    header = w.to_header()
    header["BMAJ"], header["BMIN"], header["BPA"] = 6.0 / 3600, 3.0 / 3600, 30.0
    path = tmp_path / "psf.fits"
    fits.PrimaryHDU(np.zeros((N, N), np.float32), header).writeto(path)
    from_header = read_image(str(path)).beam
    from_user = restoring_beam({"beam": (6.0, 3.0, 30.0)}, CELL, "--beam", w)
    assert from_header.pa == pytest.approx(from_user.pa, abs=1e-6)
    assert same_axis(sky_pa_of_pixel_pa(w, from_header.pa), 30.0)


@pytest.mark.parametrize("rotation", [0.0, 45.0, 170.0])
def test_pixel_and_sky_angles_are_inverse(rotation):
    cel = rotated_wcs(rotation)
    for pa in (0.0, 15.0, 89.0, 135.0):
        assert same_axis(sky_position_angle(pixel_position_angle(pa, cel), cel), pa, 1e-6)
