"""What the FITS outputs of a run keep of the input's header, checked with astropy.

An input with degenerate frequency and Stokes axes goes through `run_files`; the model,
residual, restored image and mask must come back with the same axes (NAXISn = 1, in the
same order, the same world values), the same celestial pixel -> world mapping, the
observation cards, and nothing the run did not make true (no MJDREF the input lacked,
not the input's BUNIT, beam, data range or another tool's HISTORY).

The field, array and object names are invented.
"""

import warnings

import numpy as np
import pytest
from astropy import units as u
from astropy.io import fits
from astropy.wcs import FITSFixedWarning
from astropy.wcs import WCS as _WCS

from skyscale.io.fits import read_image
from skyscale.job.files import run_files
from smallfits import CELL, N, small_field

def WCS(header):
    """astropy's WCS of a header, quiet about the fixes it reports (MJD-OBS from DATE-OBS)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FITSFixedWarning)
        return _WCS(header)


OUTPUTS = ("model", "residual", "restored", "mask")
#: Observation cards of the invented input that every output keeps.
OBSERVATION = {"OBJECT": "Lantern Reach", "TELESCOP": "FENWICK ARRAY",
               "OBSERVER": "skyscale tests", "DATE-OBS": "2031-04-05T06:07:08",
               "RADESYS": "FK5", "EQUINOX": 2000.0, "SPECSYS": "TOPOCENT",
               "RESTFRQ": 1.4204e9}
#: Cards of the input that describe its own pixels or history, and must not be copied.
NOT_COPIED = {"DATAMIN": -0.5, "DATAMAX": 2.5, "BMAJ": 1.0, "BMIN": 0.5, "BPA": 10.0,
              "ORIGIN": "another program"}


def input_header(n, axes):
    """A hand-written header (no MJDREF) for an n x n image with ``axes`` extra axes."""
    h = fits.Header()
    cards = [("CTYPE1", "RA---SIN"), ("CRVAL1", 150.25), ("CDELT1", -CELL / 3600.0),
             ("CRPIX1", n / 2 + 1.0), ("CUNIT1", "deg"),
             ("CTYPE2", "DEC--SIN"), ("CRVAL2", -30.5), ("CDELT2", CELL / 3600.0),
             ("CRPIX2", n / 2 + 1.0), ("CUNIT2", "deg")]
    if axes >= 1:
        cards += [("CTYPE3", "FREQ"), ("CRVAL3", 1.3125e9), ("CDELT3", 4.0e6),
                  ("CRPIX3", 1.0), ("CUNIT3", "Hz")]
    if axes >= 2:
        cards += [("CTYPE4", "STOKES"), ("CRVAL4", 1.0), ("CDELT4", 1.0), ("CRPIX4", 1.0)]
    for key, value in cards + list(OBSERVATION.items()) + list(NOT_COPIED.items()):
        h[key] = value
    h["BUNIT"] = "Jy/beam"
    h.add_history("written by another program: this text describes the input only")
    h.add_comment("a comment about the input file")
    return h


def write_input(folder, axes, psf_axes=None):
    dirty, psf = small_field(N)
    lead = (1,) * axes
    d = folder / "dirty.fits"
    fits.PrimaryHDU(dirty.reshape(lead + dirty.shape), header=input_header(N, axes)).writeto(d)
    plead = (1,) * (axes if psf_axes is None else psf_axes)
    p = folder / "psf.fits"
    fits.PrimaryHDU(psf.reshape(plead + psf.shape),
                    header=input_header(2 * N, len(plead))).writeto(p)
    return str(d), str(p)


@pytest.fixture(scope="module", params=[2, 1], ids=["ra-dec-freq-stokes", "ra-dec-freq"])
def run(request, tmp_path_factory):
    folder = tmp_path_factory.mktemp(f"axes{request.param}")
    dirty, psf = write_input(folder, request.param)
    params = {"scales": [0, 4], "max_components": 300, "max_major_cycles": 3,
              "emission_mask": True, "plots": False}
    result, written, report = run_files(dirty, psf, str(folder / "out"), params)
    return request.param, fits.getheader(dirty), written, result


@pytest.mark.parametrize("kind", OUTPUTS)
def test_outputs_keep_degenerate_axes(run, kind):
    axes, hin, written, _ = run
    with fits.open(written[kind]) as hdul:
        h, data = hdul[0].header, hdul[0].data
    # FITS Standard 4.0 sec. 4.4.1: NAXIS, NAXISn; numpy order is the reverse
    assert h["NAXIS"] == 2 + axes
    assert data.shape == (1,) * axes + (N, N)
    assert all(h[f"NAXIS{k}"] == 1 for k in range(3, 3 + axes))
    win, wout = WCS(hin), WCS(h)
    # reference library: astropy.wcs (the spectral sub-WCS, its unit and world value)
    assert wout.naxis == 2 + axes and wout.has_spectral
    assert wout.wcs.ctype[2] == "FREQ" and str(wout.spectral.wcs.cunit[0]) == "Hz"
    got = wout.spectral.pixel_to_world(0)
    want = win.spectral.pixel_to_world(0)
    assert got.unit == u.Hz and got.to_value(u.Hz) == want.to_value(u.Hz) == 1.3125e9
    assert wout.spectral.wcs.cdelt[0] == 4.0e6
    if axes == 2:
        stokes = wout.sub([4])
        assert stokes.wcs.ctype[0] == "STOKES"
        assert stokes.pixel_to_world_values(0) == pytest.approx(1.0)   # 1 = I (Stokes)
    # reference library: astropy.wcs celestial pixel -> world, identical to the input's
    yy, xx = np.mgrid[0:N:7, 0:N:5].astype(float)
    a = win.celestial.pixel_to_world_values(xx.ravel(), yy.ravel())
    b = wout.celestial.pixel_to_world_values(xx.ravel(), yy.ravel())
    np.testing.assert_array_equal(a, b)
    assert wout.celestial.wcs.radesys == "FK5" and wout.celestial.wcs.equinox == 2000.0


@pytest.mark.parametrize("kind", OUTPUTS)
def test_outputs_keep_observation_cards_and_add_only_what_is_true(run, kind):
    _, _, written, _ = run
    h = fits.getheader(written[kind])
    for key, value in OBSERVATION.items():
        assert h[key] == value, key
    # the input had no time reference: none is made up (astropy writes MJDREF = 0.0
    # for a WCS made in memory)
    assert "MJDREF" not in h and "MJD-OBS" not in h
    for key in ("DATAMIN", "DATAMAX", "ORIGIN", "COMMENT"):
        assert key not in h, key
    if kind in ("model", "mask"):
        assert "BMAJ" not in h and "BPA" not in h
    else:
        assert h["BMAJ"] != NOT_COPIED["BMAJ"] and h["BMAJ"] < 0.01   # the run's beam
    assert h["BUNIT"] == {"model": "Jy/pixel", "mask": ""}.get(kind, "Jy/beam")
    history = [str(x) for x in h["HISTORY"]]
    assert history and not any("another program" in line for line in history)
    assert history[0].startswith("skyscale version ")


def test_outputs_read_back_as_the_2d_plane(run):
    _, _, written, result = run
    for kind, want in (("model", result.model), ("residual", result.residual),
                       ("restored", result.restored)):
        back = read_image(written[kind])
        assert back.data.shape == (N, N)
        np.testing.assert_array_equal(back.data, np.asarray(want, np.float32))
        assert back.wcs is not None and back.wcs.naxis == 2


def test_plane_input_keeps_object_and_no_mjdref(tmp_path):
    dirty, psf = write_input(tmp_path, 0)
    _, written, _ = run_files(dirty, psf, str(tmp_path / "out"),
                              {"scales": [0], "max_components": 50, "plots": False})
    hin = fits.getheader(dirty)
    for kind in ("model", "residual", "restored"):
        h = fits.getheader(written[kind])
        assert h["NAXIS"] == 2 and "CTYPE3" not in h
        assert h["OBJECT"] == OBSERVATION["OBJECT"] and h["TELESCOP"] == OBSERVATION["TELESCOP"]
        assert "MJDREF" not in h
        # reference library: astropy.wcs, pixel -> world identical to the input's
        pix = np.array([[0.0, 0.0], [N - 1.0, 17.5], [31.25, N - 1.0]])
        np.testing.assert_array_equal(WCS(hin).pixel_to_world_values(pix[:, 0], pix[:, 1]),
                                      WCS(h).pixel_to_world_values(pix[:, 0], pix[:, 1]))


def test_four_d_input_with_plane_psf(tmp_path):
    dirty, psf = write_input(tmp_path, 2, psf_axes=0)
    _, written, _ = run_files(dirty, psf, str(tmp_path / "out"),
                              {"scales": [0], "max_components": 50, "plots": False})
    h = fits.getheader(written["restored"])
    assert h["NAXIS"] == 4 and (h["CTYPE3"], h["CTYPE4"]) == ("FREQ", "STOKES")


def test_cube_outputs_keep_the_same_cards_as_image_outputs():
    # The cube writer applies the rule of write_image: axis and observation cards as
    # written (checked with astropy.wcs), nothing that described the input's data.
    from types import SimpleNamespace

    from astropy.wcs import WCS

    from skyscale.cube.fits import _output_header
    from tests.cubedata import header as cube_header
    h = fits.Header({"SIMPLE": True, "BITPIX": -64, "NAXIS": 4, "NAXIS1": 16, "NAXIS2": 16,
                     "NAXIS3": 5, "NAXIS4": 1})
    h.update(cube_header(16, 5))
    h["OBJECT"], h["TELESCOP"], h["SPECSYS"] = "test field", "TESTARRAY", "TOPOCENT"
    h["DATAMIN"], h["DATAMAX"], h["ORIGIN"], h["BSCALE"] = -1.0, 2.0, "another writer", 1.0
    h["COMMENT"] = "describes the input's data"
    h["HISTORY"] = "made by another tool"
    out = _output_header(SimpleNamespace(header=h, wcs=None), "Jy/pixel", None, ["ours"])
    for key in ("OBJECT", "TELESCOP", "SPECSYS", "CTYPE3", "CRVAL3", "CDELT3", "CUNIT3",
                "CTYPE4", "NAXIS3", "NAXIS4"):
        assert out[key] == h[key], key
    for key in ("DATAMIN", "DATAMAX", "ORIGIN", "BSCALE", "COMMENT", "MJDREF"):
        assert key not in out, key
    assert out["BITPIX"] == -32 and out["BUNIT"] == "Jy/pixel"
    assert list(out["HISTORY"]) == ["ours"]
    w_in, w_out = WCS(h), WCS(out)
    assert w_out.spectral.pixel_to_world(2) == w_in.spectral.pixel_to_world(2)
