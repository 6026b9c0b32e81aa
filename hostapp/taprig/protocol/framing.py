"""Frames on the wire (PROTOCOL.md §1): ``COBS(header ‖ body ‖ crc) ‖ 0x00`` with a CRC-32/ISO-HDLC trailer.

COBS is the ``cobs`` package (its C extension); the CRC is ``zlib.crc32``, which is CRC-32/ISO-HDLC.
"""

from __future__ import annotations

import struct
import zlib
from dataclasses import dataclass
from typing import Sequence

from cobs import cobs

from taprig.protocol.messages import MESSAGE_TYPES, Encoding, Samples, encode_body
from taprig.protocol.samples import encode_samples

FLAG_BOOT = 1
"""Header flag bit 0: first frame a device sends after power-up or reset."""

MAX_FRAME = 4096
"""Largest decoded frame (header + body + CRC) [bytes]."""

HEADER = struct.Struct("<BBHI")
"""``type``, ``flags``, ``length``, ``seq``."""

HEADER_SIZE = HEADER.size
CRC_SIZE = 4
MIN_FRAME = HEADER_SIZE + CRC_SIZE
MAX_BODY = MAX_FRAME - MIN_FRAME
MAX_ENCODED = MAX_FRAME + -(-MAX_FRAME // 254)
"""Longest COBS encoding of a legal frame, 4113 bytes; a receiver discards longer runs unread."""

CRC_RESIDUE = 0x2144DF1C
"""``zlib.crc32(data + crc32(data) as u32 LE)`` for every ``data``: CRC-32/ISO-HDLC's residue after its final XOR
(the register residue 0xDEBB20E3 of the catalogue, complemented). Checking it saves slicing off the trailer."""

_CRC = struct.Struct("<I")


class FrameError(ValueError):
    """An encoded frame that is not well formed; ``counter`` names the :class:`Counters` field it counts toward."""

    def __init__(self, message: str, counter: str):
        super().__init__(message)
        self.counter = counter


@dataclass(frozen=True)
class Frame:
    """A well-formed decoded frame: header fields and the body bytes."""

    msg_type: int
    flags: int
    seq: int
    body: bytes


def encode_frame(msg_type: int, seq: int, body: bytes, flags: int = 0) -> bytes:
    """Return the whole wire frame ``COBS(header ‖ body ‖ crc) ‖ 0x00``.

    ``msg_type`` and ``flags`` are u8, ``seq`` u32, ``body`` at most 4084 bytes; anything else raises ``ValueError``.

    >>> encode_frame(0x84, 0, b"\\x01\\x00").hex()
    '028402020101010102010531f75a5700'
    """
    if len(body) > MAX_BODY:
        raise ValueError(f"body of {len(body)} bytes; a frame holds at most {MAX_BODY}")
    try:
        header = HEADER.pack(msg_type, flags, len(body), seq)
    except struct.error as exc:
        raise ValueError(f"frame header out of range (type {msg_type}, flags {flags}, seq {seq}): {exc}") from None
    raw = header + body
    return cobs.encode(raw + _CRC.pack(zlib.crc32(raw))) + b"\x00"


def encode_message(msg: object, seq: int, flags: int = 0, encodings: Sequence[Encoding] | None = None) -> bytes:
    """Return the wire frame of any message dataclass.

    ``encodings`` (the encodings of the channels in the mask, in index order) is needed only for
    :class:`~taprig.protocol.messages.Samples`.
    """
    msg_type = MESSAGE_TYPES.get(type(msg))
    if msg_type is None:
        raise TypeError(f"not a protocol message: {type(msg).__name__}")
    if isinstance(msg, Samples):
        if encodings is None:
            raise ValueError("encode_message(Samples) needs the encodings of the channels in its mask")
        body = encode_samples(msg, encodings)
    else:
        body = encode_body(msg)
    return encode_frame(msg_type, seq, body, flags)


def open_frame(encoded: bytes) -> tuple[bytes, int, int, int]:
    """Check one encoded frame (without its delimiter); return ``(decoded, msg_type, flags, seq)``.

    ``decoded`` is header ‖ body ‖ crc, so the body is ``decoded[8:-4]``. Raises :class:`FrameError` whose
    ``counter`` is ``"oversize"``, ``"framing_errors"`` or ``"crc_errors"`` following PROTOCOL.md §5.
    """
    if len(encoded) > MAX_ENCODED:
        raise FrameError(f"encoded frame of {len(encoded)} bytes > {MAX_ENCODED}", "oversize")
    try:
        raw = cobs.decode(encoded)
    except cobs.DecodeError as exc:
        raise FrameError(f"not valid COBS: {exc}", "framing_errors") from None
    size = len(raw)
    if size < MIN_FRAME or size > MAX_FRAME:
        raise FrameError(f"decoded frame of {size} bytes, expected {MIN_FRAME}–{MAX_FRAME}", "framing_errors")
    if zlib.crc32(raw) != CRC_RESIDUE:
        raise FrameError("CRC mismatch", "crc_errors")
    msg_type, flags, length, seq = HEADER.unpack_from(raw)
    if length != size - MIN_FRAME:
        raise FrameError(f"header length {length} but the body has {size - MIN_FRAME} bytes", "framing_errors")
    return raw, msg_type, flags, seq


def decode_frame(encoded: bytes) -> Frame:
    """Decode one encoded frame (without its delimiter) into a :class:`Frame`; errors as :func:`open_frame`."""
    raw, msg_type, flags, seq = open_frame(encoded)
    return Frame(msg_type, flags, seq, raw[HEADER_SIZE:-CRC_SIZE])
