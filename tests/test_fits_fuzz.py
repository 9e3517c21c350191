"""FITS header fuzzing: random corruptions of a valid file give a clear error, never a
crash of another kind and never a hang; random HISTORY text and random input headers
come back out of `write_image` as the rules say.

The valid file follows the FITS Standard 4.0 (80-character cards, 2880-byte blocks);
the corruptions hit the header block (bytes, card values, NAXISn, the END card) and the
file's length.
"""

import io
import signal
import warnings

import numpy as np
import pytest
from astropy.io import fits
from hypothesis import HealthCheck, given, settings, strategies as st

from astropy.wcs import WCS

from skyscale import InputError
from skyscale.io.fits import FitsImage, read_image, write_image
from smallfits import sky_header

#: Seconds one read may take before it counts as a hang.
HANG_SECONDS = 10


def _valid_file():
    hdr = sky_header(16)
    hdr["BUNIT"] = "Jy/beam"
    hdr["BMAJ"], hdr["BMIN"], hdr["BPA"] = 2e-3, 1.5e-3, 20.0
    buf = io.BytesIO()
    fits.PrimaryHDU(np.arange(256, dtype=np.float32).reshape(16, 16), header=hdr).writeto(buf)
    return buf.getvalue()


VALID = _valid_file()
HEADER_END = VALID.index(b"END" + b" " * 77) + 80
CARD_STARTS = list(range(0, HEADER_END - 80, 80))


class _Hang(Exception):
    pass


def _alarm(signum, frame):
    raise _Hang()


def _read_bounded(path):
    old = signal.signal(signal.SIGALRM, _alarm)
    signal.alarm(HANG_SECONDS)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            return read_image(path, name="dirty")
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, old)


def _check(raw, tmp_path_factory):
    path = tmp_path_factory.mktemp("fuzz") / "f.fits"
    path.write_bytes(raw)
    try:
        img = _read_bounded(path)
    except InputError as exc:
        msg = str(exc)
        assert "dirty file" in msg and "\n" not in msg
        assert "ignore_missing_simple" not in msg
        return "error"
    except _Hang:
        pytest.fail(f"reading hung for {HANG_SECONDS} s on {raw[:400]!r}")
    assert isinstance(img, FitsImage) and img.data.ndim == 2
    return "read"


printable = st.integers(32, 126)
any_byte = st.integers(0, 255)
byte_edits = st.lists(st.tuples(st.integers(0, HEADER_END - 1), st.one_of(printable, any_byte)),
                      min_size=1, max_size=12)
card_values = st.one_of(st.text(min_size=0, max_size=20),
                        st.integers(-10 ** 12, 10 ** 12).map(str),
                        st.floats(allow_nan=True, allow_infinity=True).map(repr),
                        st.sampled_from(["T", "F", "'", "''", "'RA---SIN'", "1E999", "-0",
                                         "/ comment", "=", "NaN"]))


@settings(max_examples=120, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(edits=byte_edits, cut=st.one_of(st.none(), st.integers(0, len(VALID) - 1)))
def test_random_byte_corruption_is_a_clear_error_or_a_good_read(edits, cut, tmp_path_factory):
    raw = bytearray(VALID)
    for pos, value in edits:
        raw[pos] = value
    if cut is not None:
        raw = raw[:cut]
    _check(bytes(raw), tmp_path_factory)


@settings(max_examples=120, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(card=st.sampled_from(CARD_STARTS), value=card_values)
def test_random_card_values_are_a_clear_error_or_a_good_read(card, value, tmp_path_factory):
    raw = bytearray(VALID)
    key = raw[card:card + 8]
    raw[card:card + 80] = (bytes(key) + b"= " + value.encode("ascii", "replace")).ljust(80)[:80]
    _check(bytes(raw), tmp_path_factory)


@pytest.mark.parametrize("cards", [
    {"NAXIS1": 10 ** 12}, {"NAXIS2": -1}, {"NAXIS": 3}, {"NAXIS": 1000}, {"BITPIX": 12},
    {"NAXIS1": "'16'"}, {"BITPIX": "-32.0"}, {"NAXIS1": 10 ** 5, "NAXIS2": 10 ** 5},
])
def test_structural_keywords_out_of_range_are_refused(cards, tmp_path_factory):
    raw = bytearray(VALID)
    for key, value in cards.items():
        i = raw.find(key.ljust(8).encode() + b"=")
        raw[i:i + 80] = f"{key.ljust(8)}= {value:>20}".ljust(80).encode()
    assert _check(bytes(raw), tmp_path_factory) == "error"


def test_a_file_without_its_end_card_is_refused(tmp_path_factory):
    raw = VALID.replace(b"END" + b" " * 77, b" " * 80)
    assert _check(raw, tmp_path_factory) == "error"


def test_the_untouched_file_reads(tmp_path_factory):
    assert _check(VALID, tmp_path_factory) == "read"


# ------------------------------------------------------------------------ output headers

def _join_cards(cards):
    """The documented rule, written out here: a card starting with two spaces continues
    the entry before it, minus those two spaces."""
    entries = []
    for text in cards:
        if text.startswith("  ") and entries:
            entries[-1] += text[2:]
        else:
            entries.append(text)
    return entries


history_text = st.text(st.sampled_from("abcXYZ0123456789 ,;:/=[]()._-'\""), min_size=40,
                       max_size=400).filter(lambda t: t[0] != " " and " " * 70 not in t)


@settings(max_examples=60, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(texts=st.lists(history_text, min_size=1, max_size=4))
def test_random_history_comes_back_whole(texts, tmp_path_factory):
    path = tmp_path_factory.mktemp("hist") / "h.fits"
    write_image(path, np.zeros((2, 2)), bunit="Jy/beam", history=texts)
    # reference library: astropy.io.fits reads the cards back
    cards = [str(x) for x in fits.getheader(path)["HISTORY"]]
    # FITS Standard 4.0 sec. 4.4.2.4: 72 characters of HISTORY text per card; trailing
    # blanks of a card are not kept
    assert all(len(c) <= 72 for c in cards)
    assert _join_cards(cards) == [t.rstrip() for t in texts]


KEPT = {"OBJECT": "field x", "TELESCOP": "NOWHERE", "OBSERVER": "tests",
        "DATE-OBS": "2032-03-04T05:06:07", "SPECSYS": "LSRK", "RESTFRQ": 1.1e9,
        "EQUINOX": 2000.0}
DROPPED = {"DATAMIN": -1.0, "DATAMAX": 1.0, "BMAJ": 0.1, "BMIN": 0.1, "BPA": 5.0,
           "ORIGIN": "elsewhere", "MYNOTE": "unknown to skyscale"}
EXTRA_AXES = [("FREQ", 9.5e8, 1e6, "Hz"), ("STOKES", 2.0, 1.0, ""), ("VRAD", 1.5e3, 1e3, "m/s")]


@settings(max_examples=25, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(axes=st.lists(st.sampled_from(range(3)), max_size=2, unique=True),
       kept=st.lists(st.sampled_from(sorted(KEPT)), unique=True),
       dropped=st.lists(st.sampled_from(sorted(DROPPED)), unique=True))
def test_random_input_headers_keep_axes_and_observation_cards(axes, kept, dropped,
                                                               tmp_path_factory):
    folder = tmp_path_factory.mktemp("like")
    h = sky_header(6)
    del h["MJDREF"]
    for k, i in enumerate(axes, start=3):
        ctype, crval, cdelt, cunit = EXTRA_AXES[i]
        h[f"CTYPE{k}"], h[f"CRVAL{k}"], h[f"CDELT{k}"], h[f"CRPIX{k}"] = ctype, crval, cdelt, 1.0
        if cunit:
            h[f"CUNIT{k}"] = cunit
    for key in kept:
        h[key] = KEPT[key]
    for key in dropped:
        h[key] = DROPPED[key]
    data = np.arange(30, dtype=np.float32).reshape(5, 6)
    fits.PrimaryHDU(data.reshape((1,) * len(axes) + data.shape), header=h).writeto(
        folder / "in.fits")
    src = read_image(folder / "in.fits")
    out = write_image(folder / "out.fits", data * 2, like=src, bunit="Jy/pixel")
    with fits.open(out) as hdul:
        got, back = hdul[0].header, hdul[0].data
    assert got["NAXIS"] == 2 + len(axes) and back.shape == (1,) * len(axes) + (5, 6)
    np.testing.assert_array_equal(back.reshape(5, 6), data * 2)
    assert all(got[key] == KEPT[key] for key in kept)
    assert not any(key in got for key in dropped) and "MJDREF" not in got
    # reference library: astropy.wcs, pixel -> world of every axis as in the input
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        win, wout = WCS(fits.getheader(folder / "in.fits")), WCS(got)
    pix = [np.array([0.0, 5.0, 2.5]), np.array([0.0, 4.0, 1.25])] + [np.zeros(3)] * len(axes)
    np.testing.assert_array_equal(np.array(win.pixel_to_world_values(*pix)),
                                  np.array(wout.pixel_to_world_values(*pix)))
    assert list(wout.wcs.ctype) == list(win.wcs.ctype)
