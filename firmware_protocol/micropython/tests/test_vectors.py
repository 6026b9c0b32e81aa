"""The firmware against every golden vector in firmware_protocol/vectors/ (schema in its README.md).

Both directions: the firmware's `FrameReader` cuts each case's byte stream into frames (and counts what it must
skip), its command parser reads the host → device bodies, and its encoder rebuilds every delivered frame from the
vector's fields byte for byte.
"""

import json
import struct
from pathlib import Path
from types import SimpleNamespace

import pytest

import fw_wire
from fw_wire import COMMAND_LAYOUT, FrameReader, encode_frame, parse_command
from fw_testkit import Bench, of_type
from taprig.protocol import Reply

VECTORS = Path(__file__).resolve().parents[2] / "vectors" / "vectors.json"
CASES = json.loads(VECTORS.read_text(encoding="utf-8"))["cases"]
HOST_TYPES = set(COMMAND_LAYOUT)

# The vector's field names of each host command, in body order (PROTOCOL.md §3).
COMMAND_FIELDS = {
    fw_wire.START: ("req", "rate_hz", "channel_mask", "scans_per_frame"),
    fw_wire.STOP: ("req",),
    fw_wire.SET_ACTUATOR: ("req", "actuator_id", "value"),
    fw_wire.HEARTBEAT: ("req",),
    fw_wire.DESCRIBE: ("req",),
    fw_wire.RESET: ("req",),
    fw_wire.ALLOW_MOVES: ("req",),
}


def by_name(name):
    return next(case for case in CASES if case["name"] == name)


def test_every_vector_group_is_present():
    names = {case["name"] for case in CASES}
    assert {"description_boot", "start", "set_actuator", "samples_mixed", "cobs_254_run", "oversize"} <= names


def _reader_frames(case, chunk):
    reader = FrameReader(fw_wire.MAX_FRAME)
    stream = bytes.fromhex(case["hex"])
    frames = []
    for start in range(0, len(stream), chunk):
        frames.extend(reader.feed(stream[start : start + chunk]))
    return reader, frames


@pytest.mark.parametrize("chunk", [1, 7, 1 << 20])
@pytest.mark.parametrize("case", CASES, ids=[case["name"] for case in CASES])
def test_reader_finds_the_delivered_frames_and_counts_the_rest(case, chunk):
    reader, frames = _reader_frames(case, chunk)
    counters = case["counters"]
    assert reader.frames == counters["frames"] == len(frames)
    assert reader.crc_errors == counters["crc_errors"]
    assert reader.oversize == counters["oversize"]
    # The reader checks frames only (§1); a host also counts a known type's malformed body as a framing error.
    # Well-formed frames the vector does not deliver are exactly: duplicates, unknown types, undecodable SAMPLES
    # and malformed bodies (README of the vectors), which gives the body-level share of framing_errors.
    delivered = case["frames"]
    malformed_bodies = (counters["frames"] - len(delivered) - counters["duplicates"] - counters["unknown_types"]
                        - counters["undecodable"])
    assert reader.framing_errors == counters["framing_errors"] - malformed_bodies
    # every delivered frame is among the reader's, in order, with the same header fields
    headers = iter([(t, f, s) for t, f, s, _ in frames])
    for frame in delivered:
        assert (frame["type_code"], frame["flags"], frame["seq"]) in headers


def _command_cases():
    for case in CASES:
        for frame in case["frames"]:
            if frame["type_code"] in HOST_TYPES:
                yield case["name"], frame


@pytest.mark.parametrize("name, frame", list(_command_cases()), ids=lambda v: v if isinstance(v, str) else "")
def test_command_bodies_parse_to_the_vector_fields(name, frame):
    reader = FrameReader(fw_wire.MAX_FRAME)
    ((msg_type, flags, seq, body),) = reader.feed(bytes.fromhex(frame["wire"]))
    status, req, fields = parse_command(msg_type, body)
    assert status == fw_wire.OK
    expected = tuple(frame["fields"][key] for key in COMMAND_FIELDS[msg_type])
    assert fields == expected
    assert req == frame["fields"]["req"]


def _body_from_fields(frame, encodings):
    """The firmware's body for a delivered frame, built from the vector's fields alone."""
    f = frame["fields"]
    code = frame["type_code"]
    if code == fw_wire.DESCRIPTION:
        channels = [SimpleNamespace(**c) for c in f["channels"]]
        actuators = [SimpleNamespace(**a) for a in f["actuators"]]
        return fw_wire.description_body(f, channels, actuators)
    if code == fw_wire.SAMPLES:
        fmt = fw_wire.scan_format([encodings[i] for i in f["channels"]])
        head = bytearray(fw_wire.SAMPLES_HEADER_SIZE)
        fw_wire.pack_samples_header(head, f["t_us"], f["period_ns"], f["first_scan"], f["n_scans"], f["channel_mask"])
        return bytes(head) + b"".join(struct.pack(fmt, *row) for row in f["data"])
    if code == fw_wire.STATUS:
        return fw_wire.status_body(f["supply_mv"], f["board_temp_cc"], f["uptime_ms"], f["overruns"],
                                   f["dropped_scans"], f["state"])
    if code == fw_wire.REPLY:
        return fw_wire.reply_body(f["req"], f["code"], f["detail"])
    if code == fw_wire.LOG:
        return fw_wire.log_body(f["level"], f["text"])
    fmt = COMMAND_LAYOUT[code][0]
    return struct.pack(fmt, *[f[key] for key in COMMAND_FIELDS[code]])


@pytest.mark.parametrize("case", CASES, ids=[case["name"] for case in CASES])
def test_firmware_encodes_every_delivered_frame_byte_identically(case):
    encodings = None
    for frame in case["frames"]:
        if frame["type_code"] == fw_wire.DESCRIPTION:
            encodings = [c["encoding"] for c in frame["fields"]["channels"]]
        body = _body_from_fields(frame, encodings)
        wire = encode_frame(frame["type_code"], frame["seq"], body, frame["flags"])
        assert wire.hex() == frame["wire"]
    if len(case["frames"]) == 1 and case["frames"][0]["wire"] == case["hex"]:
        assert wire.hex() == case["hex"]  # a single good frame: the whole vector


def _replies_to(stream):
    rig = Bench()
    rig.boot()
    rig.hw.host_send(stream)
    for _ in range(len(stream) // 256 + 2):
        rig.device.step()
    return [(reply.req, int(reply.code)) for reply in of_type(rig.collect(), Reply)]


def test_short_command_bodies_in_the_vectors_get_malformed():
    # command_body_too_short: a START of 13 zero bytes (needs 16) and an empty HEARTBEAT: MALFORMED with req 0
    # (under two bytes, or zeros), then the STOP (req 4) is answered OK
    replies = _replies_to(bytes.fromhex(by_name("command_body_too_short")["hex"]))
    assert replies == [(0, fw_wire.MALFORMED), (0, fw_wire.MALFORMED), (4, fw_wire.OK)]


def test_device_to_host_types_in_the_vectors_are_skipped():
    # PROTOCOL.md §1: a device does not act on a device → host type. empty_body (an empty REPLY, type 0x70, a LOG,
    # an 11-byte frame) and body_too_short (all device → host types) get no reply at all.
    assert _replies_to(bytes.fromhex(by_name("empty_body")["hex"])) == []
    assert _replies_to(bytes.fromhex(by_name("body_too_short")["hex"])) == []
    # unknown_type: 0x7E (device range) skipped, 0xC0 and the reserved 0x00 get UNKNOWN_COMMAND with req 0
    assert _replies_to(bytes.fromhex(by_name("unknown_type")["hex"])) == [(0, fw_wire.UNKNOWN_COMMAND)] * 2


def test_hand_assembled_heartbeat_feeds_the_watchdog():
    rig = Bench()
    rig.boot()
    device = rig.device
    rig.hw.host_send(bytes.fromhex(by_name("set_actuator")["frames"][0]["wire"]))  # fan 0.625
    device.step()
    assert device.state == fw_wire.STATE_IDLE
    for _ in range(8):  # 8 × 900 ms with a heartbeat each time: never a 1000 ms silence
        rig.run(900_000, step_us=1000)
        rig.hw.host_send(bytes.fromhex(by_name("hand_heartbeat")["hex"]))
    assert device.state == fw_wire.STATE_IDLE
    rig.run(1_100_000, step_us=1000)
    assert device.state == fw_wire.STATE_SAFE


def test_the_safe_hold_vector_after_a_trip_gets_busy_then_ok_and_moves_only_after_allow_moves():
    # safe_hold_refusal (PROTOCOL.md §4, §8): SET_ACTUATOR fan 0.5 after a watchdog trip is refused with BUSY
    # and moves nothing; ALLOW_MOVES gets OK; the same SET_ACTUATOR then gets OK and moves the fan
    rig = Bench()
    rig.boot()
    rig.hw.host_send(encode_frame(fw_wire.SET_ACTUATOR, 0, struct.pack("<HBf", 1, 1, 0.25)))
    rig.device.step()
    rig.run(rig.settings["heartbeat_timeout_ms"] * 1000 + 60_000, step_us=1000)
    assert rig.device.held and rig.hw.pwms[16].duty == 0
    rig.collect()
    stream = bytes.fromhex(by_name("safe_hold_refusal")["hex"])
    first_end = stream.index(b"\x00") + 1
    rig.hw.host_send(stream[:first_end])
    rig.device.step()
    assert rig.hw.pwms[16].duty == 0
    rig.hw.host_send(stream[first_end:])
    for _ in range(2):
        rig.device.step()
    replies = [(reply.req, int(reply.code)) for reply in of_type(rig.collect(), Reply)]
    assert replies == [(7, fw_wire.BUSY), (8, fw_wire.OK), (9, fw_wire.OK)]
    assert rig.hw.pwms[16].duty == round(0.5 * 65535)
