"""Generate the golden vectors ``vectors.json`` from PROTOCOL.md alone (see README.md in this folder).

Standard library only, on purpose: the host and the firmware test against these bytes, so they are built here
with a small COBS encoder of our own, ``struct`` and ``zlib.crc32``, never with the host's codec. Every expected
decoded field and every counter below is written by hand from the spec; the script only does the arithmetic
(time of scan k, byte counts). A few frames are assembled byte by byte in ``hand_assembled``.

Run ``python make_vectors.py`` to rewrite ``vectors.json``; ``python make_vectors.py --check`` exits 1 when the
file is stale.
"""

from __future__ import annotations

import json
import struct
import sys
import zlib
from pathlib import Path

OUT = Path(__file__).with_name("vectors.json")
FORMAT = 2
COUNTERS = ("frames", "bytes", "framing_errors", "crc_errors", "oversize", "unknown_types", "gaps", "frames_lost",
            "scans_lost", "duplicates", "late", "resets", "undecodable")
TYPE_NAMES = {0x01: "DESCRIPTION", 0x02: "SAMPLES", 0x03: "STATUS", 0x04: "REPLY", 0x05: "LOG", 0x81: "START",
              0x82: "STOP", 0x83: "SET_ACTUATOR", 0x84: "HEARTBEAT", 0x85: "DESCRIBE", 0x86: "RESET",
              0x87: "ALLOW_MOVES"}
BOOT = 1
# struct codes of the channel encodings of §3: 1 i16, 2 u16, 3 i32, 4 u32, 5 f32
ENCODING_CODES = {1: "h", 2: "H", 3: "i", 4: "I", 5: "f"}


# --- framing, written from §1 ---------------------------------------------------------------------------------------


def cobs_encode(data: bytes) -> bytes:
    """COBS as in Cheshire & Baker (1999); after a full 254-byte block that ends the data no 0x01 code follows."""
    out = bytearray()
    block = bytearray()
    for i, byte in enumerate(data):
        if byte == 0:
            out += bytes((len(block) + 1,)) + block
            block.clear()
            continue
        block.append(byte)
        if len(block) == 254:
            out += b"\xff" + block
            block.clear()
            if i == len(data) - 1:
                return bytes(out)
    return bytes(out + bytes((len(block) + 1,)) + block)


def cobs_decode(encoded: bytes) -> bytes | None:
    """Decode COBS (no delimiter); ``None`` when invalid (a zero byte, or a block cut short)."""
    out, pos = bytearray(), 0
    while pos < len(encoded):
        code = encoded[pos]
        block = encoded[pos + 1:pos + code]
        if code == 0 or len(block) != code - 1 or 0 in block:
            return None
        pos += code
        out += block
        if code != 0xFF and pos < len(encoded):
            out.append(0)
    return bytes(out)


def decoded_frame(msg_type: int, seq: int, body: bytes, flags: int = 0, length: int | None = None) -> bytes:
    """header ‖ body ‖ crc; ``length`` overrides the header's length field (for a bad-length case)."""
    header = struct.pack("<BBHI", msg_type, flags, len(body) if length is None else length, seq)
    return header + body + struct.pack("<I", zlib.crc32(header + body))


def wire(msg_type: int, seq: int, body: bytes, flags: int = 0) -> bytes:
    return cobs_encode(decoded_frame(msg_type, seq, body, flags)) + b"\x00"


# --- bodies, written from §3; each returns (type, body, expected fields) ---------------------------------------------


def str8(text: str) -> bytes:
    raw = text.encode("utf-8")
    return bytes((len(raw),)) + raw


def description(channels, actuators, firmware="taprig-ref 0.1.0", uid="e6614103e7452d2f",
                rate_min_hz=1.0, rate_max_hz=2000.0, max_frame=4096, heartbeat_timeout_ms=1000, proto_minor=1):
    body = bytes((1, proto_minor)) + str8(firmware) + str8(uid)
    body += struct.pack("<ffHHB", rate_min_hz, rate_max_hz, max_frame, heartbeat_timeout_ms, len(channels))
    for name, encoding in channels:
        body += bytes((encoding,)) + str8(name)
    body += bytes((len(actuators),))
    for act_id, kind, lo, hi, safe, unit, name in actuators:
        body += struct.pack("<BBfff", act_id, kind, lo, hi, safe) + str8(unit) + str8(name)
    fields = {
        "proto_major": 1, "proto_minor": proto_minor, "firmware": firmware, "uid": uid, "rate_min_hz": rate_min_hz,
        "rate_max_hz": rate_max_hz, "max_frame": max_frame, "heartbeat_timeout_ms": heartbeat_timeout_ms,
        "channels": [{"name": n, "encoding": e} for n, e in channels],
        "actuators": [{"id": a[0], "kind": a[1], "min": a[2], "max": a[3], "safe": a[4], "unit": a[5],
                       "name": a[6]} for a in actuators],
    }
    return 0x01, body, fields


# The description used by every SAMPLES case: one channel or more of each encoding.
CHANNELS8 = [("ref_static", 1), ("venturi_throat", 2), ("tap_upper_1", 3), ("pulse_count", 4),
             ("board_temp", 5), ("tap_lower_1", 3), ("tap_upper_2", 1), ("fan_current", 5)]
ACTUATORS2 = [(1, 1, 0.0, 1.0, 0.0, "duty", "blower"), (2, 2, -10.0, 20.0, 0.0, "deg", "aoa servo")]
DESC8 = description(CHANNELS8, ACTUATORS2)


def samples(t_us, period_ns, first_scan, mask, data, t0_ns, scan0, channels=CHANNELS8, n_scans=None):
    """SAMPLES body; ``t0_ns``/``scan0`` are the hand-worked unwrapped time [ns] and index of the first scan."""
    picked = [i for i in range(64) if mask >> i & 1]
    fmt = "<" + "".join(ENCODING_CODES[channels[i][1]] for i in picked)
    body = struct.pack("<IIIHHQ", t_us, period_ns, first_scan, len(data) if n_scans is None else n_scans, 0, mask)
    body += b"".join(struct.pack(fmt, *row) for row in data)
    fields = {
        "t_us": t_us, "period_ns": period_ns, "first_scan": first_scan, "n_scans": len(data),
        "channel_mask": mask, "channels": picked, "data": [list(row) for row in data],
        "t_ns": [t0_ns + k * period_ns for k in range(len(data))],
        "scan_index": [scan0 + k for k in range(len(data))],
    }
    return 0x02, body, fields


def status(supply_mv=5012, board_temp_cc=2315, uptime_ms=61000, overruns=0, dropped_scans=0, state=1):
    body = struct.pack("<HhIIIB", supply_mv, board_temp_cc, uptime_ms, overruns, dropped_scans, state)
    return 0x03, body, {"supply_mv": supply_mv, "board_temp_cc": board_temp_cc, "uptime_ms": uptime_ms,
                        "overruns": overruns, "dropped_scans": dropped_scans, "state": state}


def reply(req, code, detail=""):
    return 0x04, struct.pack("<HB", req, code) + str8(detail), {"req": req, "code": code, "detail": detail}


def log(level, text):
    return 0x05, bytes((level,)) + text.encode("utf-8"), {"level": level, "text": text}


def start(req, rate_hz, mask, scans_per_frame):
    body = struct.pack("<HfQH", req, rate_hz, mask, scans_per_frame)
    return 0x81, body, {"req": req, "rate_hz": rate_hz, "channel_mask": mask, "scans_per_frame": scans_per_frame}


def set_actuator(req, actuator_id, value):
    body = struct.pack("<HBf", req, actuator_id, value)
    return 0x83, body, {"req": req, "actuator_id": actuator_id, "value": value}


def req_only(msg_type, req):
    return msg_type, struct.pack("<H", req), {"req": req}


# --- cases ---------------------------------------------------------------------------------------------------------


class Case:
    """Bytes of one vector and the frames a decoder must deliver from them."""

    def __init__(self, name: str, description_text: str, receiver: str | None = None):
        self.name, self.description = name, description_text
        self.receiver = receiver  # None: from the types sent (§1: each end interprets the other end's types)
        self.types: set[int] = set()
        self.stream = bytearray()
        self.frames: list[dict] = []

    def send(self, message, seq: int, flags: int = 0, delivered: bool = True, as_sent: bytes | None = None):
        """Append a well-formed frame; ``delivered`` False for one a decoder counts but does not deliver."""
        msg_type, body, fields = message
        self.types.add(msg_type)
        canonical = wire(msg_type, seq, body, flags)
        self.stream += canonical if as_sent is None else as_sent
        if delivered:
            self.frames.append({"type": TYPE_NAMES[msg_type], "type_code": msg_type, "flags": flags, "seq": seq,
                                "fields": fields, "wire": canonical.hex()})
        return self

    def raw(self, data: bytes):
        """Append bytes as they are (garbage, bad frames)."""
        self.stream += data
        return self

    def done(self, **counters) -> dict:
        counts = {name: counters.pop(name, 0) for name in COUNTERS}
        assert not counters, f"{self.name}: unknown counters {counters}"
        assert counts["bytes"] == 0, "bytes is computed"
        counts["bytes"] = len(self.stream)
        receiver = self.receiver or ("device" if self.types and min(self.types) > 0x80 else "host")
        assert receiver == "device" or all(t < 0x80 for t in self.types), f"{self.name}: mixed directions"
        return {"name": self.name, "description": self.description, "receiver": receiver, "hex": self.stream.hex(),
                "frames": self.frames, "counters": counts}


def message_cases() -> list[dict]:
    """One case per message type, each a single frame."""
    cases = [
        Case("description_boot", "DESCRIPTION with the BOOT flag, 8 channels of all five encodings, 2 actuators")
        .send(DESC8, 0, BOOT).done(frames=1, resets=1),
        Case("description_empty", "DESCRIPTION of a board with no channels and no actuators")
        .send(description([], [], firmware="", uid="x", rate_min_hz=0.5, rate_max_hz=0.5), 0).done(frames=1),
        Case("status", "STATUS while streaming, with overruns and dropped scans")
        .send(status(overruns=3, dropped_scans=70000, board_temp_cc=-1250), 42).done(frames=1),
        Case("status_safe", "STATUS after the watchdog tripped; supply and temperature not measured")
        .send(status(supply_mv=0, board_temp_cc=-32768, state=2, uptime_ms=0xFFFFFFFF), 7).done(frames=1),
        Case("reply_ok", "REPLY OK with an empty detail").send(reply(2, 0), 1).done(frames=1),
        Case("reply_out_of_range", "REPLY OUT_OF_RANGE with a UTF-8 detail")
        .send(reply(0xFFFF, 4, "rate 5000 Hz > 2000 Hz; α servo ±20°"), 2).done(frames=1),
        Case("log", "LOG at level 30").send(log(30, "watchdog: no host frame for 1000 ms"), 9).done(frames=1),
        Case("start", "START 1000 Hz, channels 0–7, device chooses scans per frame")
        .send(start(2, 1000.0, 0xFF, 0), 0).done(frames=1),
        Case("start_full", "START 0.25 Hz, channels 0 and 5, 16 scans per frame")
        .send(start(0x1234, 0.25, 0x21, 16), 1).done(frames=1),
        Case("stop", "STOP").send(req_only(0x82, 4), 3).done(frames=1),
        Case("set_actuator", "SET_ACTUATOR fan to 0.625").send(set_actuator(3, 1, 0.625), 2).done(frames=1),
        Case("set_actuator_negative", "SET_ACTUATOR angle to -4.5 degrees")
        .send(set_actuator(5, 2, -4.5), 4).done(frames=1),
        Case("heartbeat", "HEARTBEAT").send(req_only(0x84, 0), 5).done(frames=1),
        Case("describe", "DESCRIBE").send(req_only(0x85, 1), 0).done(frames=1),
        Case("reset", "RESET").send(req_only(0x86, 9), 6).done(frames=1),
        Case("allow_moves", "ALLOW_MOVES (protocol 1.1)").send(req_only(0x87, 0x0102), 7).done(frames=1),
    ]
    return cases


def hand_assembled() -> list[dict]:
    """Frames written out byte by byte (header, body, CRC-32, COBS blocks), checked against the encoder above."""
    # HEARTBEAT req 1, seq 0. Decoded: 84 00 02 00 | 00 00 00 00 | 01 00 | crc 0x575AF731 → 31 F7 5A 57.
    # COBS blocks: [84] [02] [] [] [] [] [01] [31 F7 5A 57]
    heartbeat = bytes.fromhex("0284" "0202" "01" "01" "01" "01" "0201" "0531f75a57" "00")
    # STOP req 0x0102, seq 7. Decoded: 82 00 02 00 | 07 00 00 00 | 02 01 | crc 0x1B6BD49B → 9B D4 6B 1B.
    stop = bytes.fromhex("0282" "0202" "0207" "01" "01" "0702019bd46b1b" "00")
    # REPLY req 2 OK "", seq 3. Decoded: 04 00 04 00 | 03 00 00 00 | 02 00 00 00 | crc 0x55BE9202 → 02 92 BE 55.
    reply_ok = bytes.fromhex("0204" "0204" "0203" "01" "01" "0202" "01" "01" "050292be55" "00")
    assert heartbeat == wire(0x84, 0, b"\x01\x00")
    assert stop == wire(0x82, 7, b"\x02\x01")
    assert reply_ok == wire(0x04, 3, b"\x02\x00\x00\x00")
    return [
        Case("hand_heartbeat", "HEARTBEAT req 1 seq 0, assembled by hand")
        .send(req_only(0x84, 1), 0, as_sent=heartbeat).done(frames=1),
        Case("hand_stop", "STOP req 0x0102 seq 7, assembled by hand")
        .send(req_only(0x82, 0x0102), 7, as_sent=stop).done(frames=1),
        Case("hand_reply", "REPLY req 2 OK, empty detail, seq 3, assembled by hand")
        .send(reply(2, 0), 3, as_sent=reply_ok).done(frames=1),
    ]


def sample_cases() -> list[dict]:
    """SAMPLES of each encoding and a mixed set; every case starts with the DESCRIPTION of CHANNELS8 (seq 0)."""
    f32_max = 3.4028234663852886e38  # largest finite binary32, exact in binary64
    rows = {
        "i16": (0b01000001, [(-32768, 32767), (0, -1), (1234, -4321)]),
        "u16": (0b00000010, [(0,), (65535,), (16383,)]),
        "i32": (0b00100100, [(-2147483648, 2147483647), (-8388608, 8388607), (0, -1)]),
        "u32": (0b00001000, [(0,), (4294967295,), (123456789,)]),
        "f32": (0b10010000, [(0.0, -0.0), (1.5, -1024.25), (f32_max, 2.0 ** -149)]),
        "mixed": (0xFF, [(-2, 65535, -70000, 4000000000, 21.5, 70000, 3, -0.125),
                         (-32768, 0, 2147483647, 1, -273.0, -2147483648, 32767, 65504.0)]),
    }
    cases = []
    for name, (mask, data) in rows.items():
        period = 500_000  # 2 kHz
        t_us = 1_000_000
        case = Case(f"samples_{name}", f"DESCRIPTION, then SAMPLES of channel mask {mask:#04x} ({name})")
        case.send(DESC8, 0, BOOT).send(samples(t_us, period, 0, mask, data, t0_ns=t_us * 1000, scan0=0), 1)
        cases.append(case.done(frames=2, resets=1))
    merge = Case("samples_merge", "three consecutive SAMPLES of one channel set (a decoder may merge them)")
    merge.send(DESC8, 0, BOOT)
    for i in range(3):
        data = [(100 * i + k, -100 * i - k) for k in range(2)]
        merge.send(samples(10_000 + 2000 * i, 1_000_000, 2 * i, 0b01000001, data, (10_000 + 2000 * i) * 1000,
                           2 * i), 1 + i)
    cases.append(merge.done(frames=4, resets=1))
    return cases


def sequence_cases() -> list[dict]:
    """Sequence, scan and time accounting (§5, §6)."""
    st = status()
    gap = Case("sequence_gap", "seq 5, 6, 9, 10: joined mid-stream at 5 (no gap for that), then 7 and 8 missing")
    for seq in (5, 6, 9, 10):
        gap.send(st, seq)
    dup = Case("duplicate", "seq 3, 4, 4, 5: the repeated 4 is counted and not delivered")
    for seq, delivered in ((3, True), (4, True), (4, False), (5, True)):
        dup.send(st, seq, delivered=delivered)
    late = Case("late", "seq 10, 11, 14, 12, 15: a gap of 2 at 14, then 12 arrives late (delivered), 15 in order")
    for seq in (10, 11, 14, 12, 15):
        late.send(st, seq)
    wrap = Case("seq_wrap", "seq 0xFFFFFFFE, 0xFFFFFFFF, 0, 1: the u32 wrap is not a gap")
    for seq in (0xFFFFFFFE, 0xFFFFFFFF, 0, 1):
        wrap.send(st, seq)
    reset = Case("boot_reset", "a stream, then the board reboots: DESCRIPTION with BOOT and seq 0 again; "
                 "sequence, scan and time accounting restart")
    reset.send(DESC8, 0, BOOT).send(samples(5_000_000, 1_000_000, 0, 1, [(1,), (2,)], 5_000_000_000, 0), 1)
    reset.send(samples(5_002_000, 1_000_000, 2, 1, [(3,), (4,)], 5_002_000_000, 2), 2).send(st, 3)
    reset.send(DESC8, 0, BOOT).send(samples(800, 1_000_000, 0, 1, [(5,)], 800_000, 0), 1)
    scan_gap = Case("scan_gap", "SAMPLES first_scan 0, 4, 12 (4 scans each): scans 8–11 lost, seq in order")
    scan_gap.send(DESC8, 0, BOOT)
    for i, first in enumerate((0, 4, 12)):
        data = [(first + k,) for k in range(4)]
        scan_gap.send(samples(first * 1000, 1_000_000, first, 0b1000, data, first * 1_000_000, first), 1 + i)
    restart = Case("scan_restart", "SAMPLES 0, 3, then REPLY to a new START and SAMPLES from first_scan 0 again: "
                   "a new stream, no scans lost")
    restart.send(DESC8, 0, BOOT).send(samples(0, 2_000_000, 0, 2, [(1,), (2,), (3,)], 0, 0), 1)
    restart.send(samples(6000, 2_000_000, 3, 2, [(4,), (5,), (6,)], 6_000_000, 3), 2).send(reply(7, 0), 3)
    restart.send(samples(50_000, 2_000_000, 0, 2, [(7,), (8,), (9,)], 50_000_000, 0), 4)
    t_wrap = Case("t_us_wrap", "t_us 4294960000, 4294964000, then 704 (= 4294968000 − 2³²): unwrapped by 2³² µs")
    t_wrap.send(DESC8, 0, BOOT)
    for i, (raw, unwrapped) in enumerate(((4294960000, 4294960000), (4294964000, 4294964000), (704, 4294968000))):
        data = [(i * 4 + k,) for k in range(4)]
        t_wrap.send(samples(raw, 1_000_000, 4 * i, 1, data, unwrapped * 1000, 4 * i), 1 + i)
    return [
        gap.done(frames=4, gaps=1, frames_lost=2),
        dup.done(frames=4, duplicates=1),
        late.done(frames=5, gaps=1, frames_lost=2, late=1),
        wrap.done(frames=4),
        reset.done(frames=6, resets=2),
        scan_gap.done(frames=4, resets=1, scans_lost=4),
        restart.done(frames=5, resets=1),
        t_wrap.done(frames=4, resets=1),
    ]


def bad_cases() -> list[dict]:
    """Frames a decoder must skip and count."""
    st = status()
    good = wire(0x03, 0, st[1])
    crc = bytearray(decoded_frame(0x03, 1, st[1]))
    crc[-1] ^= 0x40  # last CRC byte; the frame stays valid COBS once encoded
    bad_crc = Case("bad_crc", "STATUS seq 0, the same with a flipped CRC bit as seq 1, STATUS seq 2")
    bad_crc.send(st, 0).raw(cobs_encode(bytes(crc)) + b"\x00").send(st, 2)

    encoded = good[:-1]
    inside, boundary = truncation_points(encoded)
    truncated = Case("truncated", "STATUS cut inside a COBS block (invalid COBS), STATUS cut at a block end "
                     "(decodes to ≥ 12 bytes, CRC fails), then a whole STATUS")
    truncated.raw(encoded[:inside] + b"\x00").raw(encoded[:boundary] + b"\x00").send(st, 0)

    oversize = Case("oversize", "4113 bytes 0xFF (longest legal run; invalid COBS: last block short), "
                    "4114 bytes 0xFF (oversize), 9000 bytes 0x55 (oversize), then a STATUS")
    oversize.raw(b"\xff" * 4113 + b"\x00" + b"\xff" * 4114 + b"\x00" + b"\x55" * 9000 + b"\x00").send(st, 0)

    unknown = Case("unknown_type", "well-formed frames of types 0x7E, 0xC0 and reserved 0x00, then a STATUS",
                   receiver="host")
    unknown.raw(wire(0x7E, 0, b"abc") + wire(0xC0, 1, b"") + wire(0x00, 2, b"\x01")).send(st, 3)

    boot_text = b"taprig-ref booting\r\nclock ok\r\n"  # 't' = 0x74 promises 115 bytes: invalid COBS
    garbage = Case("garbage_between_frames", "boot text, 0x00, DESCRIPTION (BOOT), line noise FF 13 37, 0x00, "
                   "STATUS, a lone run of delimiters")
    garbage.raw(boot_text + b"\x00").send(DESC8, 0, BOOT).raw(b"\xff\x13\x37\x00").send(st, 1).raw(b"\x00" * 3)

    short = Case("body_too_short", "well-formed frames whose bodies are too short: STATUS of 10 bytes, SAMPLES of "
                 "20 bytes, REPLY whose detail runs past the end, LOG without its level byte; all after a "
                 "DESCRIPTION")
    short.send(DESC8, 0, BOOT).raw(wire(0x03, 1, st[1][:10]) + wire(0x02, 2, bytes(20)))
    short.raw(wire(0x04, 3, b"\x01\x00\x00\x05abc") + wire(0x05, 4, b""))
    short_cmd = Case("command_body_too_short", "at a device: START of 13 bytes and HEARTBEAT with an empty body "
                     "(both malformed), then a good STOP", receiver="device")
    short_cmd.raw(wire(0x81, 0, bytes(13)) + wire(0x84, 1, b"")).send(req_only(0x82, 4), 2)

    samples_bad = Case("samples_malformed", "SAMPLES whose n_scans (3) disagrees with its data (2 scans), "
                       "one with n_scans 0, one with channel mask 0, then a good one")
    two = [(1, 2), (3, 4)]
    samples_bad.send(DESC8, 0, BOOT)
    samples_bad.raw(wire(0x02, 1, samples(0, 1000, 0, 0b01000001, two, 0, 0, n_scans=3)[1]))
    samples_bad.raw(wire(0x02, 2, samples(0, 1000, 0, 0b01000001, [], 0, 0)[1]))
    samples_bad.raw(wire(0x02, 3, struct.pack("<IIIHHQ", 0, 1000, 0, 1, 0, 0)))
    samples_bad.send(samples(0, 1000, 0, 0b01000001, two, 0, 0), 4)

    undecodable = Case("samples_undecodable", "SAMPLES before any DESCRIPTION, then DESCRIPTION, then SAMPLES "
                       "naming channel 9 of 8, then a good SAMPLES")
    undecodable.raw(wire(0x02, 0, samples(0, 1000, 0, 1, [(1,)], 0, 0)[1]))
    undecodable.send(DESC8, 1)
    bad_mask = struct.pack("<IIIHHQ", 0, 1000, 0, 1, 0, 1 << 9) + b"\x00\x00\x00\x00"
    undecodable.raw(wire(0x02, 2, bad_mask)).send(samples(0, 1000, 0, 1, [(1,)], 0, 0), 3)

    length = Case("length_mismatch", "CRC-valid frames whose header length disagrees with the body, then a STATUS")
    length.raw(cobs_encode(decoded_frame(0x03, 0, st[1], length=18)) + b"\x00")
    length.raw(cobs_encode(decoded_frame(0x03, 1, st[1], length=20)) + b"\x00").send(st, 2)

    empty = Case("empty_body", "REPLY with an empty body (malformed), an unknown type with an empty body, "
                 "a LOG with empty text (valid), an 11-byte decoded frame (too short)")
    empty.raw(wire(0x04, 0, b"") + wire(0x70, 1, b"")).send(log(20, ""), 2)
    empty.raw(cobs_encode(decoded_frame(0x05, 3, b"")[:11]) + b"\x00")
    return [
        bad_crc.done(frames=2, crc_errors=1, gaps=1, frames_lost=1),
        truncated.done(frames=1, framing_errors=1, crc_errors=1),
        oversize.done(frames=1, framing_errors=1, oversize=2),
        unknown.done(frames=4, unknown_types=3),
        garbage.done(frames=2, framing_errors=2, resets=1),
        short.done(frames=5, framing_errors=4, resets=1),
        short_cmd.done(frames=3, framing_errors=2),
        samples_bad.done(frames=5, framing_errors=3, resets=1),
        undecodable.done(frames=4, undecodable=2),
        length.done(frames=1, framing_errors=2),
        empty.done(frames=3, framing_errors=2, unknown_types=1),
    ]


def decision_cases() -> list[dict]:
    """One case per rule of PROTOCOL.md that an implementer could otherwise read two ways (its §8 lists them)."""
    st = status()
    # §3: SET_ACTUATOR's second field is `actuator_id` (the cases set_actuator and set_actuator_negative carry it).
    # §5: a late SAMPLES block (first_scan behind the scan expected next) is delivered with its own indices and does
    # not move the expectation; the scans it holds were already counted lost when the block after them came.
    late = Case("samples_late", "SAMPLES of scans 0–3 (seq 1), 8–11 (seq 3: one frame and scans 4–7 missing), "
                "then 4–7 arrive late (seq 2), then 12–15 (seq 4): nothing more is lost")
    late.send(DESC8, 0, BOOT)
    for seq, first in ((1, 0), (3, 8), (2, 4), (4, 12)):
        data = [(first + k,) for k in range(4)]
        late.send(samples(first * 1000, 1_000_000, first, 0b1000, data, first * 1_000_000, first), seq)
    # §5: first_scan is unwrapped like seq: a block that reaches 2^32 continues at first_scan 0 (not a new START)
    wrap = Case("scan_wrap", "SAMPLES first_scan 0xFFFFFFF8 and 0xFFFFFFFC (4 scans each), then 0: the index goes "
                "on past 2^32 (4294967296) without a loss or a restart")
    wrap.send(DESC8, 0, BOOT)
    for i, (first, unwrapped) in enumerate(((0xFFFFFFF8, 0xFFFFFFF8), (0xFFFFFFFC, 0xFFFFFFFC), (0, 1 << 32))):
        data = [(i * 4 + k,) for k in range(4)]
        wrap.send(samples(i * 4000, 1_000_000, first, 0b1000, data, i * 4_000_000, unwrapped), 1 + i)
    # §2: an encoding code the receiver does not know (9) leaves the description usable; only blocks that include
    # that channel are undecodable
    three = [("p_a", 2), ("future", 9), ("p_b", 1)]
    desc3 = description(three, [])
    unknown = Case("unknown_encoding", "DESCRIPTION whose channel 1 has encoding 9 (unknown), SAMPLES of channels "
                   "0 and 2 (decoded), SAMPLES of channels 0–2 (undecodable), SAMPLES of channels 0 and 2 again")
    unknown.send(desc3, 0, BOOT)
    unknown.send(samples(0, 1_000_000, 0, 0b101, [(100, -100)], 0, 0, channels=three), 1)
    unknown.raw(wire(0x02, 2, struct.pack("<IIIHHQ", 1000, 1_000_000, 1, 1, 0, 0b111) + struct.pack("<H", 7)
                     + bytes(4) + struct.pack("<h", 7)))
    unknown.send(samples(2000, 1_000_000, 2, 0b101, [(102, -102)], 2_000_000, 2, channels=three), 3)
    # §1: a host → device type arriving at the host is counted as unknown, never interpreted; its seq counts
    echo = Case("host_type_from_device", "at a host: STATUS seq 0, a well-formed HEARTBEAT seq 1 (a host type), "
                "STATUS seq 2: the HEARTBEAT is an unknown type, not a gap", receiver="host")
    echo.send(st, 0).raw(wire(0x84, 1, b"\x01\x00")).send(st, 2)
    # §1: BOOT marks the first frame after a boot whatever its type (here a LOG before the DESCRIPTION); the
    # receiver restarts its accounting there
    boot = Case("boot_on_log", "DESCRIPTION (BOOT), SAMPLES 0–1 (seq 1), then the board reboots and says so first "
                "in a LOG with BOOT (seq 0), then DESCRIPTION (seq 1, no BOOT) and SAMPLES from first_scan 0 at "
                "t_us 900 (seq 2): one reset, no gap, no scans lost, time from 900 µs")
    boot.send(DESC8, 0, BOOT).send(samples(7_000_000, 1_000_000, 0, 1, [(1,), (2,)], 7_000_000_000, 0), 1)
    boot.send(log(30, "reset by brown-out"), 0, BOOT).send(DESC8, 1)
    boot.send(samples(900, 1_000_000, 0, 1, [(3,), (4,)], 900_000, 0), 2)
    # §2, §4 (protocol 1.1): after a watchdog trip the device holds its safe state; it refuses a SET_ACTUATOR that
    # would move an actuator away from its safe value with BUSY (a code a 1.0 host already reads) until the host
    # sends ALLOW_MOVES (0x87, a new host → device type: a minor addition); a host learns whether a board has the
    # hold from proto_minor in its DESCRIPTION (a 1.0 board has not)
    held = Case("safe_hold_refusal", "at a device: SET_ACTUATOR fan 0.5 (refused with BUSY while in the safe hold), "
                "ALLOW_MOVES (req 8), SET_ACTUATOR fan 0.5 again", receiver="device")
    held.send(set_actuator(7, 1, 0.5), 20).send(req_only(0x87, 8), 21).send(set_actuator(9, 1, 0.5), 22)
    busy = Case("reply_busy_safe_hold", "at a host: REPLY BUSY to a SET_ACTUATOR refused in the safe hold, then REPLY "
                "OK to ALLOW_MOVES")
    busy.send(reply(7, 5, "safe hold after a watchdog trip: ALLOW_MOVES first"), 40).send(reply(8, 0), 41)
    old = Case("description_protocol_1_0", "DESCRIPTION of a protocol 1.0 board (proto_minor 0): no safe hold, no "
               "ALLOW_MOVES; a 1.1 host keeps its own guard and does not send ALLOW_MOVES to it")
    old.send(description([("p", 2)], [ACTUATORS2[0]], proto_minor=0), 0, BOOT)
    return [
        late.done(frames=5, resets=1, gaps=1, frames_lost=1, late=1, scans_lost=4),
        wrap.done(frames=4, resets=1),
        unknown.done(frames=4, resets=1, undecodable=1),
        echo.done(frames=3, unknown_types=1),
        boot.done(frames=5, resets=2),
        held.done(frames=3),
        busy.done(frames=2),
        old.done(frames=1, resets=1),
    ]


def truncation_points(encoded: bytes) -> tuple[int, int]:
    """Return a cut inside a COBS block (invalid COBS) and a cut at a block end leaving ≥ 12 decoded bytes."""
    starts, pos = [], 0
    while pos < len(encoded):
        starts.append(pos)
        pos += encoded[pos]
    inside = next(s + 2 for s in starts if encoded[s] >= 3)  # the code byte and one of its ≥ 2 data bytes
    boundary = next(s for s in starts[1:] if len(cobs_decode(encoded[:s])) >= 12)
    assert cobs_decode(encoded[:inside]) is None
    assert zlib.crc32(cobs_decode(encoded[:boundary])) != 0x2144DF1C  # CRC-32 residue: the CRC does not match
    return inside, boundary


def cobs_cases() -> list[dict]:
    """Zero-free runs around the 254-byte COBS block limit, in LOG frames (seq < 2²⁴ keeps a zero before the body)."""
    case = Case("cobs_254_run", "LOG frames whose decoded bytes end in zero-free runs of 253, 254 and 255 bytes, "
                "one whose 254-byte body run is followed by a zero CRC byte, and the 254 case again sent with "
                "the optional trailing 0x01 code (frames[].wire holds the canonical form)")
    for seq, text_len in enumerate((248, 249, 250)):  # run = 1 level byte + text + 4 CRC bytes
        text = zero_free_crc_text(0x05, seq, text_len)
        case.send(log(20, text), seq)
    case.send(log(20, crc_starting_with_zero(3)), 3)
    text = zero_free_crc_text(0x05, 4, 249)
    canonical = wire(0x05, 4, bytes((20,)) + text.encode())
    assert canonical[-256] == 0xFF
    case.send(log(20, text), 4, as_sent=canonical[:-1] + b"\x01\x00")
    return [case.done(frames=5)]


def zero_free_crc_text(msg_type: int, seq: int, length: int) -> str:
    """Printable text of ``length`` bytes whose frame's CRC has no zero byte."""
    for variant in range(26):
        text = "q" * (length - 1) + chr(ord("a") + variant)
        if 0 not in decoded_frame(msg_type, seq, bytes((20,)) + text.encode())[-4:]:
            return text
    raise AssertionError("no zero-free CRC found")


def crc_starting_with_zero(seq: int) -> str:
    """Text for a LOG of 254 non-zero body bytes (level + 253 text) whose CRC begins with 0x00."""
    letters = "abcdefghijklmnopqrstuvwxyz"
    for a in letters:
        for b in letters:
            for c in letters:
                text = "r" * 250 + a + b + c
                if decoded_frame(0x05, seq, bytes((20,)) + text.encode())[-4] == 0:
                    return text
    raise AssertionError("no CRC with a zero first byte found")


def build() -> dict:
    """Return the whole vectors document."""
    cases = (message_cases() + hand_assembled() + sample_cases() + sequence_cases() + bad_cases() + cobs_cases()
             + decision_cases())
    names = [c["name"] for c in cases]
    assert len(names) == len(set(names)), "case names must be unique"
    return {"format": FORMAT, "protocol": "1.1", "counters": list(COUNTERS), "cases": cases}


def main(argv: list[str]) -> int:
    text = json.dumps(build(), indent=1, ensure_ascii=False) + "\n"
    if "--check" in argv:
        if not OUT.exists() or OUT.read_text(encoding="utf-8") != text:
            print(f"{OUT} is stale: run python {Path(__file__).name}", file=sys.stderr)
            return 1
        return 0
    OUT.write_text(text, encoding="utf-8")
    print(f"wrote {OUT} ({len(build()['cases'])} cases)")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
