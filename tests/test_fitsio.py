"""Tests of skyscale.io.fits: reading, cell size, grid checks, atomic writes, provenance."""

import csv
import doctest
import importlib.metadata
import math
import os
import warnings

import numpy as np
import pytest
from astropy.io import fits
from astropy.wcs import WCS
from astropy.wcs.utils import proj_plane_pixel_scales

import skyscale.io.fits_cards as fitscards_module
import skyscale.io.fits as fitsio_module
from skyscale.core.beam import Beam
from skyscale.io.fits import (FitsImage, cell_size_arcsec, check_same_grid, provenance_history,
                              read_image, write_image, write_table_csv)

# An invented field: the coordinates are arbitrary.
CRVAL = (201.25, -37.5)


def make_wcs(cell=2.0, rot=0.0, flip=False, crpix=(17.0, 15.0), cd=True):
    """Celestial SIN WCS with square cells of ``cell`` arcsec, rotated by ``rot`` deg."""
    w = WCS(naxis=2)
    w.wcs.ctype = ["RA---SIN", "DEC--SIN"]
    w.wcs.crval = CRVAL
    w.wcs.crpix = crpix
    c = cell / 3600.0
    sx = c if flip else -c
    if cd:
        t = math.radians(rot)
        w.wcs.cd = np.array([[sx * math.cos(t), -c * math.sin(t)],
                             [sx * math.sin(t), c * math.cos(t)]])
    else:
        w.wcs.cdelt = [sx, c]
    return w


def neighbour_separation_arcsec(w):
    """Angular distance between adjacent pixel centres at the reference pixel."""
    x0, y0 = w.wcs.crpix - 1
    a = w.pixel_to_world(x0, y0)
    return (a.separation(w.pixel_to_world(x0 + 1, y0)).arcsec,
            a.separation(w.pixel_to_world(x0, y0 + 1)).arcsec)


def list_dir(d):
    return sorted(os.listdir(d))


# ---------------------------------------------------------------- cell size

@pytest.mark.parametrize("kind", ["cdelt", "cd_rotated", "pc_cdelt"])
def test_cell_size_matches_astropy(kind):
    if kind == "cdelt":
        w = make_wcs(cell=2.5, cd=False)
    elif kind == "cd_rotated":
        w = make_wcs(cell=2.5, rot=33.0)
    else:
        w = make_wcs(cell=2.5, cd=False)
        t = math.radians(-20.0)
        w.wcs.pc = [[math.cos(t), -math.sin(t)], [math.sin(t), math.cos(t)]]
    cell = cell_size_arcsec(w)
    # reference library: astropy.wcs.utils.proj_plane_pixel_scales (degrees)
    np.testing.assert_allclose(proj_plane_pixel_scales(w) * 3600.0, cell, rtol=1e-12)
    # reference library: astropy SkyCoord.separation of neighbouring pixel centres
    np.testing.assert_allclose(neighbour_separation_arcsec(w), 2.5, rtol=1e-6)
    assert cell == pytest.approx(2.5, rel=1e-12)


def test_cell_size_refuses_non_square_and_missing_wcs():
    w = make_wcs(cd=False)
    w.wcs.cdelt = [-1.0 / 3600, 1.5 / 3600]
    with pytest.raises(ValueError, match="not square.*regrid"):
        cell_size_arcsec(w)
    with pytest.raises(ValueError, match="no celestial WCS"):
        cell_size_arcsec(None)


def test_cell_size_refuses_skewed_grid():
    w = make_wcs()
    c = 2.0 / 3600
    w.wcs.cd = [[-c, 0.3 * c], [0.0, c * math.sqrt(1.0 - 0.09)]]   # equal lengths, skewed
    with pytest.raises(ValueError, match="perpendicular"):
        cell_size_arcsec(w)


# ---------------------------------------------------------------- reading

def write_raw(path, data, header):
    fits.PrimaryHDU(data=data, header=header).writeto(path)


def cube_header(nfreq=1):
    h = make_wcs(cd=False).to_header()
    h["CTYPE3"], h["CRVAL3"], h["CDELT3"], h["CRPIX3"], h["CUNIT3"] = \
        "FREQ", 1.2e9, 1e6, 1.0, "Hz"
    h["CTYPE4"], h["CRVAL4"], h["CDELT4"], h["CRPIX4"] = "STOKES", 1.0, 1.0, 1.0
    return h


def test_read_degenerate_4d(tmp_path):
    rng = np.random.default_rng(0)
    plane = rng.normal(size=(12, 10)).astype(np.float64)
    p = tmp_path / "cube.fits"
    write_raw(p, plane[None, None], cube_header())
    img = read_image(p, name="dirty")
    assert img.data.shape == (12, 10) and img.data.dtype == np.float32
    np.testing.assert_allclose(img.data, plane.astype(np.float32))
    assert img.wcs.naxis == 2 and img.wcs.has_celestial
    assert img.header["NAXIS"] == 4 and img.path == os.fspath(p)
    assert img.beam is None and img.bunit is None


def test_read_refuses_non_degenerate_axis(tmp_path):
    p = tmp_path / "cube3.fits"
    write_raw(p, np.zeros((1, 3, 8, 8), np.float32), cube_header())
    with pytest.raises(ValueError, match=r"psf file .*axis 3 \(FREQ\) has 3 planes"):
        read_image(p, name="psf")


def test_read_refuses_missing_file_and_empty_primary(tmp_path):
    with pytest.raises(FileNotFoundError, match="nothere.fits"):
        read_image(tmp_path / "nothere.fits")
    p = tmp_path / "empty.fits"
    fits.HDUList([fits.PrimaryHDU(), fits.ImageHDU(np.zeros((4, 4)))]).writeto(p)
    with pytest.raises(ValueError, match="primary HDU"):
        read_image(p)


def test_read_beam_keywords_into_pixels(tmp_path):
    h = make_wcs(cell=1.5, cd=False).to_header()
    # common practice: BMAJ/BMIN FWHM in degrees, BPA degrees east of north
    h["BMAJ"], h["BMIN"], h["BPA"], h["BUNIT"] = 6.0 / 3600, 3.0 / 3600, -35.0, "Jy/beam"
    p = tmp_path / "withbeam.fits"
    write_raw(p, np.zeros((8, 8), np.float32), h)
    img = read_image(p)
    assert img.beam.major == pytest.approx(4.0, rel=1e-9)
    assert img.beam.minor == pytest.approx(2.0, rel=1e-9)
    assert img.beam.pa == pytest.approx(-35.0, abs=1e-9)
    assert img.bunit == "Jy/beam"


def test_read_beam_without_wcs_warns(tmp_path):
    h = fits.Header()
    h["BMAJ"], h["BMIN"], h["BPA"] = 1e-3, 1e-3, 0.0
    p = tmp_path / "nowcs.fits"
    write_raw(p, np.zeros((4, 4), np.float32), h)
    with pytest.warns(UserWarning, match="no celestial WCS"):
        img = read_image(p)
    assert img.beam is None and img.wcs is None


# ---------------------------------------------------------------- writing

@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_round_trip_keeps_wcs_data_and_unit(tmp_path, dtype):
    w = make_wcs(cell=2.0, rot=12.0)
    src = tmp_path / "src.fits"
    data = np.arange(30 * 28, dtype=dtype).reshape(30, 28)
    write_image(src, data, like=w, bunit="Jy/beam")
    first = read_image(src)
    out = tmp_path / "copy.fits"
    write_image(out, data, like=first, bunit="Jy/pixel")
    back = read_image(out)
    with fits.open(out) as hdul:
        assert hdul[0].data.dtype == np.dtype(dtype).newbyteorder(">")
    np.testing.assert_array_equal(back.data, data.astype(np.float32))
    assert back.bunit == "Jy/pixel"
    # reference library: astropy.wcs header values and pixel -> world
    want, got = w.to_header(), back.wcs.to_header()
    for key in ("CTYPE1", "CTYPE2", "RADESYS"):
        assert got[key] == want[key]
    for key in ("CRVAL1", "CRVAL2", "CRPIX1", "CRPIX2"):
        assert got[key] == pytest.approx(want[key], rel=1e-12)
    np.testing.assert_allclose(back.wcs.pixel_scale_matrix, w.pixel_scale_matrix, rtol=1e-12)
    pix = np.array([[0, 0], [27, 29], [5.5, 17.25]])
    a = w.pixel_to_world(pix[:, 0], pix[:, 1])
    b = back.wcs.pixel_to_world(pix[:, 0], pix[:, 1])
    assert np.all(a.separation(b).arcsec < 1e-6)


def test_write_from_4d_like_keeps_its_axes(tmp_path):
    p = tmp_path / "cube.fits"
    write_raw(p, np.zeros((1, 1, 8, 9), np.float32), cube_header())
    src = read_image(p)
    out = write_image(tmp_path / "plane.fits", np.ones((8, 9)), like=src, bunit="Jy/beam")
    h = fits.getheader(out)
    # FITS Standard 4.0 sec. 4.4.1: degenerate axes written back with NAXISn = 1
    assert h["NAXIS"] == 4 and (h["NAXIS3"], h["NAXIS4"]) == (1, 1)
    assert (h["CTYPE1"], h["CTYPE2"], h["CTYPE3"], h["CTYPE4"]) == \
        ("RA---SIN", "DEC--SIN", "FREQ", "STOKES")
    # reference library: astropy.wcs spectral sub-WCS value and unit
    spec = WCS(h).spectral.pixel_to_world(0)
    assert spec.unit == "Hz" and spec.value == 1.2e9
    assert fits.getdata(out).shape == (1, 1, 8, 9)
    back = read_image(out)
    assert back.data.shape == (8, 9) and back.wcs.naxis == 2


def test_like_image_keeps_observation_cards_only(tmp_path):
    h = make_wcs(cd=False).to_header()
    del h["MJDREF"]                           # as a file written by hand would be
    h["NAXIS"], h["NAXIS1"], h["NAXIS2"] = 2, 6, 5
    kept = {"OBJECT": "invented field", "TELESCOP": "NOWHERE ARRAY", "INSTRUME": "none",
            "OBSERVER": "tests", "DATE-OBS": "2030-01-02T03:04:05", "RESTFRQ": 1.4e9,
            "SPECSYS": "LSRK"}
    dropped = {"BSCALE": 2.0, "BZERO": 1.0, "BLANK": -1, "DATAMIN": 0.0, "DATAMAX": 9.0,
               "CHECKSUM": "0000000000000000", "DATASUM": "0", "BUNIT": "K",
               "BMAJ": 1.0, "BMIN": 1.0, "BPA": 0.0, "ORIGIN": "elsewhere", "NOISE": 1e-3}
    for key, value in {**kept, **dropped}.items():
        h[key] = value
    h.add_history("another tool's history")
    h.add_comment("another tool's comment")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", Warning)          # astropy: MJD-OBS from DATE-OBS
        src = FitsImage(np.zeros((5, 6), np.float32), h, WCS(h).celestial)
    out = write_image(tmp_path / "o.fits", np.ones((5, 6)), like=src, bunit="Jy/pixel")
    with fits.open(out) as hdul:
        got = hdul[0].header
        assert hdul[0].verify_checksum() == 1                 # our own CHECKSUM, valid
        np.testing.assert_array_equal(hdul[0].data, np.ones((5, 6), np.float32))
    for key, value in kept.items():
        assert got[key] == value, key
    for key in ("BSCALE", "BZERO", "BLANK", "DATAMIN", "DATAMAX", "BMAJ", "ORIGIN", "NOISE",
                "COMMENT", "MJDREF"):
        assert key not in got, key
    assert got["BUNIT"] == "Jy/pixel" and got["CHECKSUM"] != dropped["CHECKSUM"]
    assert "HISTORY" not in got


def test_like_without_wcs_stays_a_plain_plane(tmp_path):
    h = fits.Header({"NAXIS": 3, "NAXIS1": 4, "NAXIS2": 3, "NAXIS3": 1, "OBJECT": "x"})
    out = write_image(tmp_path / "p.fits", np.ones((3, 4)),
                      like=FitsImage(np.zeros((3, 4), np.float32), h), bunit="Jy/beam")
    got = fits.getheader(out)
    assert got["NAXIS"] == 2 and "CTYPE1" not in got and got["OBJECT"] == "x"


def test_like_wcs_adds_no_time_reference(tmp_path):
    # astropy's WCS.to_header writes MJDREF = 0.0 for a WCS made in memory
    assert "MJDREF" in make_wcs().to_header()
    out = write_image(tmp_path / "w.fits", np.ones((4, 4)), like=make_wcs(), bunit="Jy/beam")
    got = fits.getheader(out)
    assert "MJDREF" not in got and got["CTYPE1"] == "RA---SIN"
    timed = make_wcs()
    timed.wcs.mjdref = [51544.0, 0.5]                 # a time reference that was set
    out = write_image(tmp_path / "t.fits", np.ones((4, 4)), like=timed, bunit="Jy/beam")
    got = fits.getheader(out)
    assert got["MJDREFI"] + got["MJDREFF"] == 51544.5


@pytest.mark.parametrize("rot, flip", [(0.0, False), (25.0, False), (0.0, True), (-40.0, True)])
def test_beam_keywords_in_degrees_east_of_north(tmp_path, rot, flip):
    w = make_wcs(cell=2.0, rot=rot, flip=flip)
    b = Beam(4.0, 2.0, 30.0)
    out = write_image(tmp_path / "r.fits", np.zeros((32, 32)), like=w, bunit="Jy/beam", beam=b)
    h = fits.getheader(out)
    # common practice: BMAJ/BMIN are FWHMs in degrees
    assert h["BMAJ"] == pytest.approx(8.0 / 3600, rel=1e-12)
    assert h["BMIN"] == pytest.approx(4.0 / 3600, rel=1e-12)
    # reference library: astropy SkyCoord.position_angle (east of north) of a short step
    # along the major axis, pixel direction (-sin pa, cos pa)
    t, eps = math.radians(b.pa), 1e-3
    x0, y0 = 16.0, 16.0
    a = w.pixel_to_world(x0, y0)
    c = w.pixel_to_world(x0 - eps * math.sin(t), y0 + eps * math.cos(t))
    sky_pa = a.position_angle(c).deg
    assert abs((h["BPA"] - sky_pa + 90.0) % 180.0 - 90.0) < 1e-3
    if rot == 0.0 and not flip:
        assert h["BPA"] == pytest.approx(30.0, abs=1e-9)   # usual orientation: same angle
    back = read_image(out).beam
    assert back.major == pytest.approx(4.0) and back.minor == pytest.approx(2.0)
    assert back.pa == pytest.approx(30.0, abs=1e-9)


def test_refuse_overwrite(tmp_path):
    p = tmp_path / "out.fits"
    write_image(p, np.zeros((4, 4)), bunit="Jy/beam")
    before = p.read_bytes()
    with pytest.raises(FileExistsError, match=r"out\.fits.*overwrite=True.*--overwrite"):
        write_image(p, np.ones((4, 4)), bunit="Jy/beam")
    assert p.read_bytes() == before
    write_image(p, np.ones((4, 4)), bunit="Jy/beam", overwrite=True)
    assert read_image(p).data[0, 0] == 1.0
    assert list_dir(tmp_path) == ["out.fits"]


def test_atomic_failure_leaves_no_partial_or_temp_files(tmp_path, monkeypatch):
    keep = tmp_path / "keep.fits"
    write_image(keep, np.zeros((4, 4)), bunit="Jy/beam")
    before = keep.read_bytes()

    def broken_writeto(self, fileobj, **kwargs):
        fileobj.write(b"SIMPLE  =                    T" + b" " * 100)
        raise OSError("disk full (simulated)")

    monkeypatch.setattr(fits.HDUList, "writeto", broken_writeto)
    with pytest.raises(OSError, match="simulated"):
        write_image(tmp_path / "new.fits", np.ones((4, 4)), bunit="Jy/beam")
    with pytest.raises(OSError, match="simulated"):
        write_image(keep, np.ones((4, 4)), bunit="Jy/beam", overwrite=True)
    assert list_dir(tmp_path) == ["keep.fits"]
    assert keep.read_bytes() == before


def test_checksum_verifies_and_detects_damage(tmp_path):
    p = tmp_path / "sum.fits"
    write_image(p, np.random.default_rng(1).normal(size=(16, 16)), bunit="Jy/beam",
                history=["checksum test"])
    # reference library: astropy.io.fits checksum verification
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        with fits.open(p, checksum=True) as hdul:
            assert "CHECKSUM" in hdul[0].header and "DATASUM" in hdul[0].header
            assert hdul[0].verify_checksum() == 1 and hdul[0].verify_datasum() == 1
    raw = bytearray(p.read_bytes())
    raw[-100] ^= 0xFF                                    # damage one data byte
    p.write_bytes(bytes(raw))
    with pytest.warns(Warning, match="(?i)checksum|datasum"):
        with fits.open(p, checksum=True) as hdul:
            hdul[0].data


def test_history_extra_and_date(tmp_path):
    lines = provenance_history({"loop_gain": 0.1, "scales": (0, 4, 8)}, "2001-02-03T04:05:06",
                               "2001-02-03T04:15:00")
    p = write_image(tmp_path / "h.fits", np.zeros((4, 4)), bunit="Jy/beam", history=lines,
                    extra={"OBSERVER": "nobody", "NCOMP": (42, "components")})
    h = fits.getheader(p)
    assert list(h["HISTORY"]) == lines
    assert h["OBSERVER"] == "nobody" and h["NCOMP"] == 42 and h.comments["NCOMP"] == "components"
    assert "DATE" in h and h["BUNIT"] == "Jy/beam"


def test_provenance_lines_wrap_and_record_version(monkeypatch):
    monkeypatch.setattr(importlib.metadata, "version", lambda name: "9.8.7")
    long_value = "x" * 150 + " tail"
    lines = provenance_history({"comment": long_value, "name": "caf\u00e9"}, None, None)
    assert lines[0] == "skyscale version 9.8.7"
    # FITS Standard 4.0: a HISTORY card holds 72 characters of text
    assert all(len(line) <= 72 for line in lines)
    assert all(line.isascii() for line in lines)
    joined = "".join(line.strip() for line in lines)
    assert long_value.replace(" ", "") in joined.replace(" ", "")
    assert not any(line.startswith("skyscale start") for line in lines)


def _join_cards(cards):
    """Entries of HISTORY card texts by the documented rule, written out independently:
    a card starting with two spaces continues the entry before it, minus those two."""
    entries = []
    for text in cards:
        if text.startswith("  ") and entries:
            entries[-1] += text[2:]
        else:
            entries.append(text)
    return entries


def test_history_continues_long_entries_without_losing_text(tmp_path):
    scales = [round(0.75 * k, 2) for k in range(40)]
    tight = "[" + ",".join(str(k * 3) for k in range(45)) + "]"
    path = "/data/" + "/".join(f"folder{k:02d}" for k in range(12)) + "/mask.fits"
    params = {"scales": scales, "tight": tight, "mask": path, "gain": 0.1}
    p = write_image(tmp_path / "long.fits", np.zeros((4, 4)), bunit="Jy/beam",
                    history=provenance_history(params, None, None))
    # reference library: astropy.io.fits reads the HISTORY cards back
    cards = [str(x) for x in fits.getheader(p)["HISTORY"]]
    # FITS Standard 4.0 sec. 4.4.2.4: HISTORY text is columns 9-80, 72 characters
    assert all(len(c) <= 72 for c in cards) and len(cards) > 1 + len(params)
    entries = _join_cards(cards)
    assert entries[1:] == [f"skyscale parameter {k} = {v}" for k, v in params.items()]
    # no number of a list is cut: each break is before a space or after a separator
    groups = []
    for text in cards:
        if text.startswith("  ") and groups:
            groups[-1].append(text)
        else:
            groups.append([text])
    for name in ("scales", "tight"):
        group = next(g for g in groups if g[0].startswith(f"skyscale parameter {name} "))
        assert len(group) > 1
        for first, cont in zip(group, group[1:]):
            assert first[-1] in ",=" or cont[2] == " ", (first, cont)


def test_history_line_longer_than_a_card_is_continued(tmp_path):
    line = "skyscale note: " + "; ".join(f"part {k} of a long note" for k in range(12))
    p = write_image(tmp_path / "note.fits", np.zeros((4, 4)), bunit="Jy/beam",
                    history=["short line", line])
    cards = [str(x) for x in fits.getheader(p)["HISTORY"]]
    assert len(cards) > 2 and all(len(c) <= 72 for c in cards)
    assert _join_cards(cards) == ["short line", line]


def test_provenance_version_fallback(monkeypatch):
    def missing(name):
        raise importlib.metadata.PackageNotFoundError(name)

    monkeypatch.setattr(importlib.metadata, "version", missing)
    assert provenance_history({}, None, None) == ["skyscale version unknown"]
    with pytest.raises(TypeError, match="parameters"):
        provenance_history([("a", 1)], None, None)


def test_write_refusals(tmp_path):
    w = make_wcs()
    with pytest.raises(ValueError, match="shape"):
        write_image(tmp_path / "a.fits", np.zeros((4, 4)),
                    like=FitsImage(np.zeros((5, 5), np.float32), fits.Header(), w),
                    bunit="Jy/beam")
    with pytest.raises(ValueError, match="no celestial WCS.*like="):
        write_image(tmp_path / "b.fits", np.zeros((4, 4)), bunit="Jy/beam",
                    beam=Beam(3.0, 2.0))
    with pytest.raises(ValueError, match="reserved keyword 'BITPIX'"):
        write_image(tmp_path / "c.fits", np.zeros((4, 4)), bunit="Jy/beam",
                    extra={"BITPIX": 8})
    with pytest.raises(FileNotFoundError, match="does not exist"):
        write_image(tmp_path / "nodir" / "d.fits", np.zeros((4, 4)), bunit="Jy/beam")
    assert list_dir(tmp_path) == []


# ---------------------------------------------------------------- grid check

def test_check_same_grid():
    img = make_wcs(cell=2.0, rot=10.0)
    bigger_psf = make_wcs(cell=2.0, rot=10.0, crpix=(33.0, 33.0))   # larger PSF, same grid
    assert check_same_grid(img, bigger_psf) is None
    assert check_same_grid(img, None) is None
    with pytest.raises(ValueError, match="cell size .*same cell size"):
        check_same_grid(img, make_wcs(cell=2.1, rot=10.0))
    with pytest.raises(ValueError, match="orientation"):
        check_same_grid(img, make_wcs(cell=2.0, rot=11.0))
    with pytest.raises(ValueError, match="east to \\+x"):
        check_same_grid(make_wcs(), make_wcs(flip=True))


# ---------------------------------------------------------------- CSV

def test_csv_round_trip_and_overwrite(tmp_path):
    table = np.zeros(3, dtype=[("y", np.int32), ("x", np.int32), ("flux", np.float64)])
    table["y"], table["x"], table["flux"] = [1, 2, 3], [4, 5, 6], [0.5, 1e-7, -2.25]
    p = tmp_path / "components.csv"
    write_table_csv(p, table, ["y", "x", "flux"])
    # reference library: Python csv.DictReader
    with open(p, newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert [int(r["x"]) for r in rows] == [4, 5, 6]
    assert [float(r["flux"]) for r in rows] == [0.5, 1e-7, -2.25]
    with pytest.raises(FileExistsError, match="overwrite"):
        write_table_csv(p, [{"a": 1}], ["a"])
    write_table_csv(p, [{"a": 1}, [2]], ["a"], overwrite=True)
    assert p.read_text().splitlines() == ["a", "1", "2"]


def test_csv_bad_row_leaves_nothing(tmp_path):
    with pytest.raises(ValueError, match=r"rows\[1\] has 1 values"):
        write_table_csv(tmp_path / "t.csv", [[1, 2], [3]], ["a", "b"])
    with pytest.raises(ValueError, match=r"rows\[0\] lacks the fields \['b'\]"):
        write_table_csv(tmp_path / "t.csv", [{"a": 1}], ["a", "b"])
    assert list_dir(tmp_path) == []


def test_doctests():
    assert doctest.testmod(fitsio_module).failed == 0
    assert doctest.testmod(fitscards_module).failed == 0
