"""The firmware's own COBS and CRC-32 against published check values and reference libraries."""

import zlib

import pytest
from cobs import cobs as cobs_reference
from hypothesis import given, settings
from hypothesis import strategies as st

import fw_codec
from fw_codec import CobsError, cobs_decode, cobs_encode, crc32, crc32_table

# Check value of CRC-32/ISO-HDLC: Greg Cook, "Catalogue of parametrised CRC algorithms", entry CRC-32/ISO-HDLC
# (check = 0xCBF43926 for ASCII "123456789"); the same figure is in PROTOCOL.md §1.
CHECK_INPUT = b"123456789"
CHECK_VALUE = 0xCBF43926


def test_crc_check_value_native_and_table():
    assert crc32(CHECK_INPUT) == CHECK_VALUE
    assert crc32_table(CHECK_INPUT) == CHECK_VALUE


def test_crc_of_empty_input_is_zero():
    # init 0xFFFFFFFF then final XOR 0xFFFFFFFF with no data in between (catalogue parameters, common practice)
    assert crc32_table(b"") == 0


def test_crc_falls_back_to_the_table_without_binascii(monkeypatch):
    monkeypatch.setattr(fw_codec, "_native_crc32", None)
    assert crc32(CHECK_INPUT) == CHECK_VALUE
    assert crc32(b"\x00" * 300) == zlib.crc32(b"\x00" * 300)


@settings(deadline=None, max_examples=200)
@given(st.binary(max_size=600), st.binary(max_size=50))
def test_crc_table_matches_zlib_and_runs(head, tail):
    # zlib.crc32 is CRC-32/ISO-HDLC (zlib documentation), an independent reference
    assert crc32_table(head + tail) == zlib.crc32(head + tail)
    assert crc32_table(tail, crc32_table(head)) == zlib.crc32(head + tail)


# Worked examples of COBS (Cheshire & Baker 1999 and the examples commonly listed with it; from memory),
# data → encoding without the delimiter.
RUN_254 = bytes(range(1, 255))
PAPER_EXAMPLES = [
    (b"", b"\x01"),
    (b"\x00", b"\x01\x01"),
    (b"\x00\x00", b"\x01\x01\x01"),
    (b"\x00\x11\x00", b"\x01\x02\x11\x01"),
    (b"\x11\x22\x00\x33", b"\x03\x11\x22\x02\x33"),
    (b"\x11\x22\x33\x44", b"\x05\x11\x22\x33\x44"),
    (b"\x11\x00\x00\x00", b"\x02\x11\x01\x01\x01"),
    (RUN_254, b"\xff" + RUN_254),
    (b"\x00" + RUN_254, b"\x01\xff" + RUN_254),
    (bytes(range(1, 256)), b"\xff" + RUN_254 + b"\x02\xff"),
    (bytes(range(2, 256)) + b"\x00", b"\xff" + bytes(range(2, 256)) + b"\x01\x01"),
    (bytes(range(3, 256)) + b"\x00\x01", b"\xfe" + bytes(range(3, 256)) + b"\x02\x01"),
]


@pytest.mark.parametrize("data, encoded", PAPER_EXAMPLES, ids=[str(i) for i in range(len(PAPER_EXAMPLES))])
def test_cobs_worked_examples(data, encoded):
    assert cobs_encode(data) == encoded
    if data:  # the empty input round-trips through b"\x01"
        assert cobs_decode(encoded) == data
    assert cobs_decode(b"\x01") == b""


def test_cobs_decoder_accepts_the_optional_code_after_a_final_full_block():
    assert cobs_decode(b"\xff" + RUN_254 + b"\x01") == RUN_254


@pytest.mark.parametrize("bad", [b"", b"\x05\x11\x22", b"\x03\x11\x00", b"\x02\x11\xff" + b"\x01" * 10])
def test_cobs_decoder_rejects_invalid_input(bad):
    with pytest.raises(CobsError):
        cobs_decode(bad)


@settings(deadline=None, max_examples=300)
@given(st.lists(st.sampled_from([b"\x00", b"\x01", b"\xff", b"\x00" * 3, bytes(range(1, 200)), RUN_254]),
                max_size=8).map(b"".join) | st.binary(max_size=1200))
def test_cobs_matches_the_reference_package_and_round_trips(data):
    # the ``cobs`` package (PyPI) is an independent implementation of the same paper
    encoded = cobs_encode(data)
    assert encoded == cobs_reference.encode(data)
    assert b"\x00" not in encoded
    assert len(encoded) <= len(data) + 1 + len(data) // 254
    assert cobs_decode(encoded) == data
