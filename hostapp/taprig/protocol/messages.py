"""Message types of the wire protocol (PROTOCOL.md §3): enums, one frozen dataclass per message, body codecs.

Bodies of every type except ``SAMPLES`` are small and rare, so they are packed and parsed with ``struct`` field by
field. ``SAMPLES`` bodies are the hot path and live in :mod:`taprig.protocol.samples`.
"""

from __future__ import annotations

import struct
from dataclasses import dataclass
from enum import IntEnum
from typing import Callable

import numpy as np


class MsgType(IntEnum):
    """Frame ``type`` codes: ``0x01–0x7F`` device → host, ``0x81–0xFF`` host → device."""

    DESCRIPTION = 0x01
    SAMPLES = 0x02
    STATUS = 0x03
    REPLY = 0x04
    LOG = 0x05
    START = 0x81
    STOP = 0x82
    SET_ACTUATOR = 0x83
    HEARTBEAT = 0x84
    DESCRIBE = 0x85
    RESET = 0x86
    ALLOW_MOVES = 0x87


class Encoding(IntEnum):
    """Native encoding of a channel's value in ``SAMPLES``."""

    I16 = 1
    U16 = 2
    I32 = 3
    U32 = 4
    F32 = 5


class ReplyCode(IntEnum):
    """Result code of a ``REPLY``."""

    OK = 0
    UNKNOWN_COMMAND = 1
    MALFORMED = 2
    BAD_ARGUMENT = 3
    OUT_OF_RANGE = 4
    BUSY = 5
    HARDWARE_FAULT = 6


class ActuatorKind(IntEnum):
    """What an actuator drives."""

    FAN = 1
    ANGLE = 2
    OTHER = 3


class DeviceState(IntEnum):
    """Device state reported in ``STATUS``."""

    IDLE = 0
    STREAMING = 1
    SAFE = 2


class MalformedBody(ValueError):
    """A well-formed frame whose body does not hold the fields of its type (counted as a framing error)."""


@dataclass(frozen=True)
class ChannelInfo:
    """One channel of the self-description; its index is its position in ``Description.channels``.

    ``encoding`` is an :class:`Encoding`, or the plain ``int`` code of one this host does not know (PROTOCOL.md §2:
    the channel cannot be decoded, the others can).
    """

    name: str
    encoding: Encoding | int


@dataclass(frozen=True)
class ActuatorInfo:
    """One actuator of the self-description; ``min``/``max``/``safe`` in the actuator's ``unit``."""

    id: int
    kind: ActuatorKind
    min: float
    max: float
    safe: float
    unit: str
    name: str


@dataclass(frozen=True)
class Description:
    """``DESCRIPTION`` (0x01): the device's self-description."""

    proto_major: int
    proto_minor: int
    firmware: str
    uid: str
    rate_min_hz: float
    rate_max_hz: float
    max_frame: int
    heartbeat_timeout_ms: int
    channels: tuple[ChannelInfo, ...]
    actuators: tuple[ActuatorInfo, ...]


@dataclass(frozen=True, eq=False)
class Samples:
    """``SAMPLES`` (0x02) as a sender builds it: ``data`` is scans × channels of the mask, in native counts.

    The decoder does not return this type; it returns :class:`taprig.protocol.RawBlock`.
    """

    t_us: int
    period_ns: int
    first_scan: int
    channel_mask: int
    data: np.ndarray

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, Samples):
            return NotImplemented
        head = (self.t_us, self.period_ns, self.first_scan, self.channel_mask)
        other_head = (other.t_us, other.period_ns, other.first_scan, other.channel_mask)
        return head == other_head and np.array_equal(self.data, other.data)


@dataclass(frozen=True)
class Status:
    """``STATUS`` (0x03): supply [mV], board temperature [0.01 °C], uptime [ms], counters since boot, state."""

    supply_mv: int
    board_temp_cc: int
    uptime_ms: int
    overruns: int
    dropped_scans: int
    state: DeviceState


@dataclass(frozen=True)
class Reply:
    """``REPLY`` (0x04): the answer to the host command with request id ``req``."""

    req: int
    code: ReplyCode
    detail: str


@dataclass(frozen=True)
class Log:
    """``LOG`` (0x05): a line of text for a person; ``level`` 10 debug … 40 error."""

    level: int
    text: str


@dataclass(frozen=True)
class Start:
    """``START`` (0x81): stream ``channel_mask`` at ``rate_hz`` [Hz]; ``scans_per_frame`` 0 lets the device choose."""

    req: int
    rate_hz: float
    channel_mask: int
    scans_per_frame: int


@dataclass(frozen=True)
class Stop:
    """``STOP`` (0x82)."""

    req: int


@dataclass(frozen=True)
class SetActuator:
    """``SET_ACTUATOR`` (0x83): drive actuator ``actuator_id`` toward ``value`` (in the actuator's unit)."""

    req: int
    actuator_id: int
    value: float


@dataclass(frozen=True)
class Heartbeat:
    """``HEARTBEAT`` (0x84): feeds the device's watchdog."""

    req: int


@dataclass(frozen=True)
class Describe:
    """``DESCRIBE`` (0x85): asks for a ``DESCRIPTION``."""

    req: int


@dataclass(frozen=True)
class Reset:
    """``RESET`` (0x86): asks the device to reboot."""

    req: int


@dataclass(frozen=True)
class AllowMoves:
    """``ALLOW_MOVES`` (0x87, protocol 1.1): ends the device's safe hold after a watchdog trip, so that
    ``SET_ACTUATOR`` may move actuators again; a host sends it only on an operator's request (PROTOCOL.md §4)."""

    req: int


MESSAGE_TYPES: dict[type, MsgType] = {
    Description: MsgType.DESCRIPTION,
    Samples: MsgType.SAMPLES,
    Status: MsgType.STATUS,
    Reply: MsgType.REPLY,
    Log: MsgType.LOG,
    Start: MsgType.START,
    Stop: MsgType.STOP,
    SetActuator: MsgType.SET_ACTUATOR,
    Heartbeat: MsgType.HEARTBEAT,
    Describe: MsgType.DESCRIBE,
    Reset: MsgType.RESET,
    AllowMoves: MsgType.ALLOW_MOVES,
}

_STATUS = struct.Struct("<HhIIIB")
_REPLY_HEAD = struct.Struct("<HB")
_START = struct.Struct("<HfQH")
_SET_ACTUATOR = struct.Struct("<HBf")
_REQ = struct.Struct("<H")
_RATES = struct.Struct("<ffHHB")
_ACTUATOR_HEAD = struct.Struct("<BBfff")
_VERSION = struct.Struct("<BB")
_U8 = struct.Struct("<B")

MAX_CHANNELS = 64
MAX_ACTUATORS = 16


# --- encoding -----------------------------------------------------------------------------------------------------


def _str8(text: str, field: str) -> bytes:
    raw = text.encode("utf-8")
    if len(raw) > 255:
        raise ValueError(f"{field}: {len(raw)} UTF-8 bytes, a str8 holds at most 255")
    return bytes((len(raw),)) + raw


def _pack(layout: struct.Struct, what: str, *values) -> bytes:
    try:
        return layout.pack(*values)
    except struct.error as exc:
        raise ValueError(f"{what}: a field is out of range for its wire type ({exc})") from None


def _encode_description(msg: Description) -> bytes:
    if len(msg.channels) > MAX_CHANNELS or len(msg.actuators) > MAX_ACTUATORS:
        raise ValueError(f"Description: at most {MAX_CHANNELS} channels and {MAX_ACTUATORS} actuators")
    parts = [
        _pack(_VERSION, "Description", msg.proto_major, msg.proto_minor),
        _str8(msg.firmware, "Description.firmware"),
        _str8(msg.uid, "Description.uid"),
        _pack(_RATES, "Description", msg.rate_min_hz, msg.rate_max_hz, msg.max_frame, msg.heartbeat_timeout_ms,
              len(msg.channels)),
    ]
    for i, ch in enumerate(msg.channels):
        code = int(ch.encoding)
        if not 0 < code < 256:
            raise ValueError(f"Description.channels[{i}].encoding: {code} is not a u8 encoding code (1–255)")
        parts += [bytes((code,)), _str8(ch.name, f"Description.channels[{i}].name")]
    parts.append(bytes((len(msg.actuators),)))
    for i, act in enumerate(msg.actuators):
        parts += [
            _pack(_ACTUATOR_HEAD, f"Description.actuators[{i}]", act.id, ActuatorKind(act.kind), act.min, act.max,
                  act.safe),
            _str8(act.unit, f"Description.actuators[{i}].unit"),
            _str8(act.name, f"Description.actuators[{i}].name"),
        ]
    return b"".join(parts)


def encode_body(msg: object) -> bytes:
    """Return the body bytes of any message dataclass except :class:`Samples` (see ``samples.encode_samples``).

    Raises ``ValueError`` when a field does not fit its wire type (a programming error of the sender).
    """
    if isinstance(msg, Description):
        return _encode_description(msg)
    if isinstance(msg, Status):
        return _pack(_STATUS, "Status", msg.supply_mv, msg.board_temp_cc, msg.uptime_ms, msg.overruns,
                     msg.dropped_scans, DeviceState(msg.state))
    if isinstance(msg, Reply):
        return _pack(_REPLY_HEAD, "Reply", msg.req, ReplyCode(msg.code)) + _str8(msg.detail, "Reply.detail")
    if isinstance(msg, Log):
        return _pack(_U8, "Log", msg.level) + msg.text.encode("utf-8")
    if isinstance(msg, Start):
        return _pack(_START, "Start", msg.req, msg.rate_hz, msg.channel_mask, msg.scans_per_frame)
    if isinstance(msg, SetActuator):
        return _pack(_SET_ACTUATOR, "SetActuator", msg.req, msg.actuator_id, msg.value)
    if isinstance(msg, (Stop, Heartbeat, Describe, Reset, AllowMoves)):
        return _pack(_REQ, type(msg).__name__, msg.req)
    raise TypeError(f"not a protocol message: {type(msg).__name__}")


# --- decoding -----------------------------------------------------------------------------------------------------


class _Reader:
    """Cursor over a body; every read past the end raises MalformedBody."""

    __slots__ = ("body", "pos")

    def __init__(self, body: bytes):
        self.body = body
        self.pos = 0

    def unpack(self, layout: struct.Struct) -> tuple:
        if self.pos + layout.size > len(self.body):
            raise MalformedBody(f"body ends at byte {len(self.body)}, needs {self.pos + layout.size}")
        values = layout.unpack_from(self.body, self.pos)
        self.pos += layout.size
        return values

    def u8(self) -> int:
        return self.unpack(_U8)[0]

    def str8(self, errors: str = "strict") -> str:
        size = self.u8()
        if self.pos + size > len(self.body):
            raise MalformedBody(f"str8 of {size} bytes runs past the body end")
        raw = self.body[self.pos:self.pos + size]
        self.pos += size
        try:
            return raw.decode("utf-8", errors)
        except UnicodeDecodeError as exc:
            raise MalformedBody(f"str8 is not UTF-8: {exc}") from None



def _enum(kind: type[IntEnum], code: int) -> IntEnum:
    try:
        return kind(code)
    except ValueError:
        raise MalformedBody(f"{code} is not a {kind.__name__}") from None


def channel_encoding(code: int) -> Encoding | int:
    """The :class:`Encoding` of a code, or the code itself when this host does not know it (PROTOCOL.md §2).

    >>> channel_encoding(2), channel_encoding(9)
    (<Encoding.U16: 2>, 9)
    """
    try:
        return Encoding(code)
    except ValueError:
        return int(code)


def encoding_name(encoding: Encoding | int) -> str:
    """``u16`` for a known encoding, ``unknown encoding 9`` for a code this host does not know."""
    return encoding.name.lower() if isinstance(encoding, Encoding) else f"unknown encoding {int(encoding)}"


def is_device_to_host(msg_type: int) -> bool:
    """True for a type of the device → host range ``0x01–0x7F`` (PROTOCOL.md §1)."""
    return 0 < msg_type < 0x80


def _decode_description(body: bytes) -> Description:
    r = _Reader(body)
    major, minor = r.u8(), r.u8()
    firmware, uid = r.str8(), r.str8()
    rate_min, rate_max, max_frame, heartbeat_ms, n_channels = r.unpack(_RATES)
    if n_channels > MAX_CHANNELS:
        raise MalformedBody(f"n_channels {n_channels} > {MAX_CHANNELS}")
    channels = tuple(ChannelInfo(encoding=channel_encoding(r.u8()), name=r.str8()) for _ in range(n_channels))
    n_actuators = r.u8()
    if n_actuators > MAX_ACTUATORS:
        raise MalformedBody(f"n_actuators {n_actuators} > {MAX_ACTUATORS}")
    actuators = []
    for _ in range(n_actuators):
        act_id, kind, lo, hi, safe = r.unpack(_ACTUATOR_HEAD)
        actuators.append(ActuatorInfo(act_id, _enum(ActuatorKind, kind), lo, hi, safe, r.str8(), r.str8()))
    return Description(major, minor, firmware, uid, rate_min, rate_max, max_frame, heartbeat_ms, channels,
                       tuple(actuators))


def _decode_status(body: bytes) -> Status:
    supply, temp, uptime, overruns, dropped, state = _Reader(body).unpack(_STATUS)
    return Status(supply, temp, uptime, overruns, dropped, _enum(DeviceState, state))


def _decode_reply(body: bytes) -> Reply:
    r = _Reader(body)
    req, code = r.unpack(_REPLY_HEAD)
    # detail is for a person: a firmware that cut a string mid-character should not lose the reply
    return Reply(req, _enum(ReplyCode, code), r.str8(errors="replace"))


def _decode_log(body: bytes) -> Log:
    level = _Reader(body).u8()
    return Log(level, body[1:].decode("utf-8", "replace"))


def _decode_start(body: bytes) -> Start:
    return Start(*_Reader(body).unpack(_START))


def _decode_set_actuator(body: bytes) -> SetActuator:
    return SetActuator(*_Reader(body).unpack(_SET_ACTUATOR))


def _req_only(kind: type) -> Callable[[bytes], object]:
    return lambda body: kind(*_Reader(body).unpack(_REQ))


BODY_DECODERS: dict[int, Callable[[bytes], object]] = {
    MsgType.DESCRIPTION: _decode_description,
    MsgType.STATUS: _decode_status,
    MsgType.REPLY: _decode_reply,
    MsgType.LOG: _decode_log,
    MsgType.START: _decode_start,
    MsgType.STOP: _req_only(Stop),
    MsgType.SET_ACTUATOR: _decode_set_actuator,
    MsgType.HEARTBEAT: _req_only(Heartbeat),
    MsgType.DESCRIBE: _req_only(Describe),
    MsgType.RESET: _req_only(Reset),
    MsgType.ALLOW_MOVES: _req_only(AllowMoves),
}
"""Body parsers for every known type except SAMPLES; each raises :class:`MalformedBody` on a short or bad body.

Bytes past the fields of version 1.1 are ignored (PROTOCOL.md §2).
"""
