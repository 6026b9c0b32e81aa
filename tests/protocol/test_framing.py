"""Framing (PROTOCOL.md §1): the CRC-32 and COBS the codec relies on, frame encoding, and every single-bit flip."""

from __future__ import annotations

import struct
import zlib

import numpy as np
import pytest
from cobs import cobs
from hypothesis import given
from hypothesis import strategies as st

from taprig.protocol import (
    MAX_ENCODED,
    MAX_FRAME,
    ChannelInfo,
    Description,
    DeviceState,
    Encoding,
    FrameError,
    Log,
    Samples,
    Status,
    StreamDecoder,
    decode_frame,
    encode_frame,
    encode_message,
)
from taprig.protocol.framing import CRC_RESIDUE, open_frame


def test_crc32_check_value():
    # CRC-32/ISO-HDLC check value: Greg Cook, "Catalogue of parametrised CRC algorithms" (also PROTOCOL.md §1)
    assert zlib.crc32(b"123456789") == 0xCBF43926


def test_crc32_residue():
    # residue of CRC-32/ISO-HDLC, 0xDEBB20E3 in the catalogue, here after the final XOR: 0xDEBB20E3 ^ 0xFFFFFFFF
    assert CRC_RESIDUE == 0xDEBB20E3 ^ 0xFFFFFFFF
    data = b"123456789"
    assert zlib.crc32(data + struct.pack("<I", 0xCBF43926)) == CRC_RESIDUE


# COBS examples as tabulated for Cheshire & Baker's method (IEEE/ACM Trans. Networking, 1999) — from memory
COBS_EXAMPLES = [
    ("00", "0101"),
    ("0000", "010101"),
    ("001100", "01021101"),
    ("11220033", "0311220233"),
    ("11223344", "0511223344"),
    ("11000000", "0211010101"),
    (bytes(range(1, 255)).hex(), "ff" + bytes(range(1, 255)).hex()),
    (bytes(range(0, 255)).hex(), "01ff" + bytes(range(1, 255)).hex()),
    (bytes(range(1, 256)).hex(), "ff" + bytes(range(1, 255)).hex() + "02ff"),
    (bytes(range(2, 256)).hex() + "00", "ff" + bytes(range(2, 256)).hex() + "0101"),
]


@pytest.mark.parametrize("plain,encoded", COBS_EXAMPLES)
def test_cobs_examples(plain, encoded):
    assert cobs.encode(bytes.fromhex(plain)).hex() == encoded
    assert cobs.decode(bytes.fromhex(encoded)).hex() == plain


def test_cobs_accepts_optional_trailing_code_after_full_block():
    # some encoders follow a final 254-byte block with a 0x01 code; both forms mean the same bytes (common practice)
    data = bytes(range(1, 255))
    assert cobs.decode(b"\xff" + data + b"\x01") == data


def test_encode_frame_layout():
    wire = encode_frame(0x03, 0x01020304, b"\xaa\xbb", flags=1)
    assert wire.endswith(b"\x00") and b"\x00" not in wire[:-1]
    raw = cobs.decode(wire[:-1])
    # header: type, flags, length u16 LE, seq u32 LE (PROTOCOL.md §1)
    assert raw[:8] == bytes([0x03, 0x01, 0x02, 0x00, 0x04, 0x03, 0x02, 0x01])
    assert raw[8:10] == b"\xaa\xbb"
    assert raw[10:] == struct.pack("<I", zlib.crc32(raw[:10]))


def test_decode_frame_round_trip():
    frame = decode_frame(encode_frame(0x7E, 0xFFFFFFFF, b"xyz", flags=0x80)[:-1])
    assert (frame.msg_type, frame.flags, frame.seq, frame.body) == (0x7E, 0x80, 0xFFFFFFFF, b"xyz")


@pytest.mark.parametrize("kwargs", [
    {"msg_type": 256, "seq": 0, "body": b""},
    {"msg_type": 1, "seq": -1, "body": b""},
    {"msg_type": 1, "seq": 1 << 32, "body": b""},
    {"msg_type": 1, "seq": 0, "body": b"", "flags": 300},
    {"msg_type": 1, "seq": 0, "body": bytes(MAX_FRAME - 11)},
])
def test_encode_frame_rejects_bad_arguments(kwargs):
    with pytest.raises(ValueError):
        encode_frame(**kwargs)


def test_largest_frame_encodes_to_the_limit():
    # a 4096-byte frame with no zero byte at all has the longest COBS form: 4096 + ceil(4096/254) = 4113 (§1)
    body = None
    for last in range(1, 256):
        candidate = bytes([20]) + b"x" * (MAX_FRAME - 14) + bytes([last])
        wire = encode_frame(0x05, 0x01010101, candidate, flags=0x02)
        if b"\x00" not in cobs.decode(wire[:-1]):
            body = candidate
            break
    assert body is not None
    assert len(wire) - 1 == MAX_ENCODED == 4113
    decoder = StreamDecoder()
    (item,) = decoder.feed(wire)
    assert item == Log(20, body[1:].decode())  # reserved flag bit 1 is ignored on receipt (§1)


@pytest.mark.parametrize("encoded,counter", [
    (b"\x05\x01", "framing_errors"),  # block cut short
    (cobs.encode(bytes(11)), "framing_errors"),  # 11 bytes < 12
    (cobs.encode(bytes(MAX_FRAME + 1)), "framing_errors"),  # decodes to more than 4096 bytes
    (cobs.encode(bytes(16)), "crc_errors"),
    (b"\x01" * (MAX_ENCODED + 1), "oversize"),
])
def test_open_frame_errors_name_their_counter(encoded, counter):
    with pytest.raises(FrameError) as info:
        open_frame(encoded)
    assert info.value.counter == counter


def _sample_frames() -> list[bytes]:
    description = Description(1, 0, "fw", "id", 1.0, 100.0, 4096, 1000,
                              (ChannelInfo("a", Encoding.I32), ChannelInfo("b", Encoding.U16)), ())
    scans = np.arange(600, dtype=np.float64)
    data = np.column_stack([scans * 997 - 3e5, scans * 100])
    return [
        encode_message(Status(5000, -10, 1234, 0, 0, DeviceState.IDLE), 17),
        encode_message(description, 0, flags=1),
        encode_message(Samples(123, 1000, 5, 0b11, data), 3, encodings=[Encoding.I32, Encoding.U16]),
    ]


def _assert_flip_detected(wire: bytes, description: Description | None) -> None:
    decoder = StreamDecoder(description)
    items = decoder.feed(wire)
    counters = decoder.counters
    assert items == [] and counters.frames == 0
    assert counters.crc_errors + counters.framing_errors + counters.oversize >= 1


@pytest.mark.parametrize("index", range(3))
def test_every_single_bit_flip_is_detected(index):
    wire = _sample_frames()[index]
    description = StreamDecoder().feed(_sample_frames()[1])[0]
    for bit in range((len(wire) - 1) * 8):  # every bit of the COBS bytes; the delimiter is tested below
        flipped = bytearray(wire)
        flipped[bit // 8] ^= 1 << (bit % 8)
        _assert_flip_detected(bytes(flipped), description)


def test_flipped_delimiter_costs_the_next_frame_too_and_is_counted():
    first, second = _sample_frames()[0], encode_message(Status(1, 1, 1, 1, 1, DeviceState.SAFE), 18)
    for bit in range(8):
        merged = first[:-1] + bytes([1 << bit]) + second
        decoder = StreamDecoder()
        assert decoder.feed(merged) == []
        counters = decoder.counters
        assert counters.frames == 0 and counters.crc_errors + counters.framing_errors == 1


@given(body=st.binary(max_size=300), seq=st.integers(0, 2**32 - 1), flags=st.integers(0, 255),
       position=st.integers(0, 10**6), bit=st.integers(0, 7))
def test_random_frame_bit_flip_is_detected(body, seq, flags, position, bit):
    wire = bytearray(encode_frame(0x7E, seq, body, flags))
    wire[position % (len(wire) - 1)] ^= 1 << bit
    _assert_flip_detected(bytes(wire), None)
