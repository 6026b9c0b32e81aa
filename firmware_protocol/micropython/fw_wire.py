"""Frames and message bodies of taprig wire protocol 1.1, device side (PROTOCOL.md is the contract).

Builds every device → host frame, parses every host → device command, and cuts an incoming byte stream into
well-formed frames (`FrameReader`), skipping garbage and counting it. Plain MicroPython-compatible Python.
"""

import struct

from fw_codec import CobsError, cobs_decode, cobs_encode, crc32

try:
    from micropython import const
except ImportError:  # CPython

    def const(value):
        return value


PROTO_MAJOR = const(1)
PROTO_MINOR = const(1)

# Message types (PROTOCOL.md §3).
DESCRIPTION = const(0x01)
SAMPLES = const(0x02)
STATUS = const(0x03)
REPLY = const(0x04)
LOG = const(0x05)
START = const(0x81)
STOP = const(0x82)
SET_ACTUATOR = const(0x83)
HEARTBEAT = const(0x84)
DESCRIBE = const(0x85)
RESET = const(0x86)
ALLOW_MOVES = const(0x87)

FLAG_BOOT = const(1)

# Reply codes.
OK = const(0)
UNKNOWN_COMMAND = const(1)
MALFORMED = const(2)
BAD_ARGUMENT = const(3)
OUT_OF_RANGE = const(4)
BUSY = const(5)
HARDWARE_FAULT = const(6)

# Device states reported in STATUS.
STATE_IDLE = const(0)
STATE_STREAMING = const(1)
STATE_SAFE = const(2)

# Channel encodings: code → (struct letter, bytes).
ENC_I16 = const(1)
ENC_U16 = const(2)
ENC_I32 = const(3)
ENC_U32 = const(4)
ENC_F32 = const(5)
ENCODING_FORMAT = {ENC_I16: "h", ENC_U16: "H", ENC_I32: "i", ENC_U32: "I", ENC_F32: "f"}
ENCODING_SIZE = {ENC_I16: 2, ENC_U16: 2, ENC_I32: 4, ENC_U32: 4, ENC_F32: 4}

# Actuator kinds.
KIND_FAN = const(1)
KIND_ANGLE = const(2)
KIND_OTHER = const(3)

# Log levels.
LOG_DEBUG = const(10)
LOG_INFO = const(20)
LOG_WARNING = const(30)
LOG_ERROR = const(40)

HEADER_SIZE = const(8)
CRC_SIZE = const(4)
MIN_FRAME = const(12)
MAX_FRAME = const(4096)
SAMPLES_HEADER_SIZE = const(24)
MAX_LOG_TEXT = const(1000)

_HEADER = "<BBHI"
_SAMPLES_HEADER = "<IIIHHQ"
_STATUS = "<HhIIIB"

# Command bodies: type → (struct format, size, name). Extra body bytes are ignored (PROTOCOL.md §2).
COMMAND_LAYOUT = {
    START: ("<HfQH", 16, "START"),
    STOP: ("<H", 2, "STOP"),
    SET_ACTUATOR: ("<HBf", 7, "SET_ACTUATOR"),
    HEARTBEAT: ("<H", 2, "HEARTBEAT"),
    DESCRIBE: ("<H", 2, "DESCRIBE"),
    RESET: ("<H", 2, "RESET"),
    ALLOW_MOVES: ("<H", 2, "ALLOW_MOVES"),
}


def max_encoded_size(max_decoded):
    """Largest COBS encoding of a decoded frame of ``max_decoded`` bytes, delimiter excluded (PROTOCOL.md §1)."""
    return max_decoded + (max_decoded + 253) // 254


def f32(value):
    """``value`` rounded to the nearest IEEE 754 binary32, as the wire carries it."""
    return struct.unpack("<f", struct.pack("<f", value))[0]


def _utf8_cut(text, limit):
    raw = text.encode("utf-8")
    if len(raw) > limit:
        cut = limit
        while cut > 0 and (raw[cut] & 0xC0) == 0x80:  # never split a multi-byte character
            cut -= 1
        raw = raw[:cut]
    return raw


def str8(text):
    """A ``str8`` field: u8 byte count, then the UTF-8 bytes, cut to 255 bytes on a character boundary."""
    raw = _utf8_cut(text, 255)
    return bytes((len(raw),)) + raw


def encode_frame(msg_type, seq, body, flags=0):
    """The whole wire frame: COBS(header ‖ body ‖ crc) followed by the 0x00 delimiter."""
    raw = struct.pack(_HEADER, msg_type, flags, len(body), seq & 0xFFFFFFFF) + bytes(body)
    raw += struct.pack("<I", crc32(raw))
    return cobs_encode(raw) + b"\x00"


def description_body(info, channels, actuators):
    """DESCRIPTION body from ``info`` (a dict: firmware, uid, rate_min_hz, rate_max_hz, max_frame,
    heartbeat_timeout_ms; optionally proto_major and proto_minor, which default to this firmware's 1.1) and the
    channel / actuator driver lists (each with the attributes PROTOCOL.md lists)."""
    parts = [
        struct.pack("<BB", info.get("proto_major", PROTO_MAJOR), info.get("proto_minor", PROTO_MINOR)),
        str8(info["firmware"]),
        str8(info["uid"]),
        struct.pack(
            "<ffHHB",
            info["rate_min_hz"],
            info["rate_max_hz"],
            info["max_frame"],
            info["heartbeat_timeout_ms"],
            len(channels),
        ),
    ]
    for channel in channels:
        parts.append(bytes((channel.encoding,)) + str8(channel.name))
    parts.append(bytes((len(actuators),)))
    for act in actuators:
        parts.append(struct.pack("<BBfff", act.id, act.kind, act.min, act.max, act.safe))
        parts.append(str8(act.unit) + str8(act.name))
    return b"".join(parts)


def pack_samples_header(buffer, t_us, period_ns, first_scan, n_scans, channel_mask):
    """Write the SAMPLES head into the first 24 bytes of ``buffer`` in place (no allocation of the block)."""
    struct.pack_into(
        _SAMPLES_HEADER, buffer, 0, t_us & 0xFFFFFFFF, period_ns, first_scan & 0xFFFFFFFF, n_scans, 0, channel_mask
    )


def scan_format(encodings):
    """struct format of one scan of channels with these encoding codes."""
    return "<" + "".join([ENCODING_FORMAT[code] for code in encodings])


def status_body(supply_mv, board_temp_cc, uptime_ms, overruns, dropped_scans, state):
    """STATUS body; counters wrap at 2³² as u32 fields do."""
    return struct.pack(
        _STATUS,
        supply_mv & 0xFFFF,
        board_temp_cc,
        uptime_ms & 0xFFFFFFFF,
        overruns & 0xFFFFFFFF,
        dropped_scans & 0xFFFFFFFF,
        state,
    )


def reply_body(req, code, detail=""):
    """REPLY body: the request id copied from the command, the code, a short text for a person."""
    return struct.pack("<HB", req & 0xFFFF, code) + str8(detail)


def log_body(level, text):
    """LOG body: level, then the UTF-8 text with no terminator, cut to `MAX_LOG_TEXT` bytes on a character
    boundary (so it fits any max_frame a board would choose)."""
    return bytes((level,)) + _utf8_cut(text, MAX_LOG_TEXT)


def parse_command(msg_type, body):
    """Split a host command body into its fields.

    Returns ``(status, req, fields)``: status is OK with the tuple of fields (``req`` first), MALFORMED when the
    body is shorter than the command's fields (``req`` read if at least its two bytes came), or UNKNOWN_COMMAND
    with ``req`` 0 for a type that is not a host command.
    """
    layout = COMMAND_LAYOUT.get(msg_type)
    if layout is None:
        return UNKNOWN_COMMAND, 0, None
    fmt, size, _ = layout
    if len(body) < size:
        req = struct.unpack_from("<H", body, 0)[0] if len(body) >= 2 else 0
        return MALFORMED, req, None
    fields = struct.unpack_from(fmt, body, 0)
    return OK, fields[0], fields


class FrameReader:
    """Incremental decoder of the host → device byte stream.

    ``feed(chunk)`` returns the well-formed frames completed by ``chunk`` as ``(type, flags, seq, body)`` tuples;
    everything else is skipped up to the next delimiter and counted (``framing_errors``, ``crc_errors``,
    ``oversize``), so garbage of any length costs at most the frame it hides in.
    """

    def __init__(self, max_frame=MAX_FRAME):
        self.max_frame = max_frame
        self._max_encoded = max_encoded_size(max_frame)
        self._pending = bytearray()
        self._discarding = False
        self.frames = 0
        self.framing_errors = 0
        self.crc_errors = 0
        self.oversize = 0

    def errors(self):
        """Total of frames skipped for any reason."""
        return self.framing_errors + self.crc_errors + self.oversize

    def feed(self, chunk):
        """Consume ``chunk`` (bytes); return the list of well-formed frames it completed."""
        chunk = bytes(chunk)
        frames = []
        start = 0
        while True:
            end = chunk.find(b"\x00", start)
            if end < 0:
                self._collect(chunk[start:])
                return frames
            self._collect(chunk[start:end])
            if self._discarding:
                self._discarding = False  # the oversize frame ends here; it was counted when it overflowed
            elif len(self._pending):
                frame = self._decode(bytes(self._pending))
                if frame is not None:
                    frames.append(frame)
            self._pending = bytearray()
            start = end + 1

    def _collect(self, piece):
        if self._discarding or not piece:
            return
        self._pending.extend(piece)
        if len(self._pending) > self._max_encoded:
            self.oversize += 1
            self._discarding = True
            self._pending = bytearray()

    def _decode(self, encoded):
        try:
            raw = cobs_decode(encoded)
        except CobsError:
            self.framing_errors += 1
            return None
        size = len(raw)
        if size < MIN_FRAME or size > self.max_frame:
            self.framing_errors += 1
            return None
        (expected_crc,) = struct.unpack_from("<I", raw, size - CRC_SIZE)
        if crc32(raw[: size - CRC_SIZE]) != expected_crc:
            self.crc_errors += 1
            return None
        msg_type, flags, length, seq = struct.unpack_from(_HEADER, raw, 0)
        if length != size - MIN_FRAME:
            self.framing_errors += 1
            return None
        self.frames += 1
        return msg_type, flags, seq, raw[HEADER_SIZE : size - CRC_SIZE]
