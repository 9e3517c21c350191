"""FITS header fuzzing: random corruptions of a valid file give a clear error, never a
crash of another kind and never a hang.

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

from skyscale import InputError
from skyscale.fitsio import FitsImage, read_image
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
