"""Command handling, REPLY codes, boot and the watchdog, on a fake clock; commands are encoded and the device's
output decoded by the host package (taprig.protocol), so both sides of PROTOCOL.md meet here."""

import struct

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from taprig.protocol import (
    AllowMoves,
    Describe,
    Description,
    DeviceState,
    Heartbeat,
    Log,
    Reply,
    ReplyCode,
    Reset,
    SetActuator,
    Start,
    Status,
    Stop,
    encode_frame,
)

import board_config
from fw_device import FIRMWARE, Device
from fw_testkit import Bench, of_type
from hw_fake import FakeReboot

ALL_CHANNELS = (1 << len(board_config.CHANNELS)) - 1
TIMEOUT_US = board_config.SETTINGS["heartbeat_timeout_ms"] * 1000


def reply_of(items):
    (reply,) = of_type(items, Reply)
    return reply


# ------------------------------------------------------------------------------------------------------- boot


def test_boot_sends_description_with_boot_flag_and_seq_zero(bench):
    out = bench.boot_items
    assert len(out) == 1 and isinstance(out[0], Description)
    counters = bench.decoder.counters
    assert counters.resets == 1 and counters.framing_errors == 0  # BOOT flag seen (PROTOCOL.md §5 resets)
    desc = out[0]
    assert (desc.proto_major, desc.proto_minor, desc.firmware, desc.uid) == (1, 1, FIRMWARE, bench.hw.uid())
    assert [(c.name, int(c.encoding)) for c in desc.channels] == [
        (entry["name"], {"analog": 2, "i2c_bridge14": 2, "bridge24": 3}[entry["kind"]])
        for entry in board_config.CHANNELS]
    assert [(a.id, int(a.kind), a.min, a.max, a.safe, a.unit) for a in desc.actuators] == [
        (1, 1, 0.0, 1.0, 0.0, "duty"), (2, 2, -10.0, 20.0, 0.0, "deg")]
    assert (desc.rate_min_hz, desc.rate_max_hz, desc.max_frame, desc.heartbeat_timeout_ms) == (1.0, 500.0, 2048, 1000)


def test_boot_flushes_the_receiver_first():
    rig = Bench()
    rig.device.boot()
    assert rig.hw.take_output()[:1] == b"\x00"


def test_power_up_is_safe(bench):
    assert bench.device.state == DeviceState.SAFE
    assert bench.hw.pwms[16].duty == 0  # fan off
    assert bench.hw.pwms[18].duty == round(1333.333 / 20000 * 65535)  # servo at its safe 0°


# --------------------------------------------------------------------------------------------------- commands


def test_describe_sends_description_then_ok(bench):
    out = bench.command(Describe(req=11))
    assert [type(item) for item in out] == [Description, Reply]
    assert (out[1].req, out[1].code) == (11, ReplyCode.OK)


@pytest.mark.parametrize("start, code", [
    (Start(req=5, rate_hz=501.0, channel_mask=1, scans_per_frame=0), ReplyCode.OUT_OF_RANGE),
    (Start(req=6, rate_hz=0.5, channel_mask=1, scans_per_frame=0), ReplyCode.OUT_OF_RANGE),
    (Start(req=7, rate_hz=float("nan"), channel_mask=1, scans_per_frame=0), ReplyCode.OUT_OF_RANGE),
    (Start(req=8, rate_hz=100.0, channel_mask=0, scans_per_frame=0), ReplyCode.BAD_ARGUMENT),
    (Start(req=9, rate_hz=100.0, channel_mask=1 << len(board_config.CHANNELS), scans_per_frame=0),
     ReplyCode.BAD_ARGUMENT),
    (Start(req=10, rate_hz=100.0, channel_mask=ALL_CHANNELS, scans_per_frame=1000), ReplyCode.OUT_OF_RANGE),
    (Start(req=12, rate_hz=100.0, channel_mask=ALL_CHANNELS, scans_per_frame=5), ReplyCode.OK),
    (Start(req=13, rate_hz=500.0, channel_mask=1, scans_per_frame=0), ReplyCode.OK),
    (Start(req=14, rate_hz=1.0, channel_mask=ALL_CHANNELS, scans_per_frame=0), ReplyCode.OK),
])
def test_start_checks_rate_mask_and_block_size(bench, start, code):
    reply = reply_of(bench.command(start))
    assert (reply.req, reply.code) == (start.req, code)
    assert bench.hw.timer_running == (code == ReplyCode.OK)
    assert (code == ReplyCode.OK) or reply.detail  # a refusal says why


def test_start_with_a_missing_sensor_is_a_hardware_fault(bench):
    bench.sensors["bridge1"].absent = True
    reply = reply_of(bench.command(Start(req=3, rate_hz=100.0, channel_mask=ALL_CHANNELS, scans_per_frame=0)))
    assert reply.code == ReplyCode.HARDWARE_FAULT and "bridge1" in reply.detail
    assert not bench.hw.timer_running
    assert reply_of(bench.command(Start(req=4, rate_hz=100.0, channel_mask=0b111, scans_per_frame=0))).code == 0


def test_refused_start_leaves_a_running_stream_alone(bench):
    bench.command(Start(req=1, rate_hz=100.0, channel_mask=1, scans_per_frame=0))
    assert reply_of(bench.command(Start(req=2, rate_hz=9999.0, channel_mask=1, scans_per_frame=0))).code == 4
    assert bench.hw.timer_starts == [10_000]
    assert bench.hw.timer_running


def test_stop_is_ok_whether_streaming_or_not(bench):
    assert reply_of(bench.command(Stop(req=21))).code == ReplyCode.OK
    bench.command(Start(req=22, rate_hz=100.0, channel_mask=1, scans_per_frame=0))
    assert reply_of(bench.command(Stop(req=23))).code == ReplyCode.OK
    assert not bench.hw.timer_running


@pytest.mark.parametrize("act_id, value, code", [
    (1, 0.6, ReplyCode.OK),
    (1, 1.0, ReplyCode.OK),
    (1, 1.5, ReplyCode.OUT_OF_RANGE),
    (1, -0.01, ReplyCode.OUT_OF_RANGE),
    (1, float("nan"), ReplyCode.OUT_OF_RANGE),
    (2, -10.0, ReplyCode.OK),
    (2, 20.5, ReplyCode.OUT_OF_RANGE),
    (7, 0.0, ReplyCode.BAD_ARGUMENT),
])
def test_set_actuator_checks_id_and_range(bench, act_id, value, code):
    reply = reply_of(bench.command(SetActuator(req=31, actuator_id=act_id, value=value)))
    assert (reply.req, reply.code) == (31, code)
    if code == ReplyCode.OK:
        assert bench.device.state == DeviceState.IDLE  # an accepted SET_ACTUATOR leaves the safe state
        as_sent = struct.unpack("<f", struct.pack("<f", value))[0]  # the wire carries an f32
        assert [a.value for a in bench.actuators if a.id == act_id] == [as_sent]
    else:
        assert bench.device.state == DeviceState.SAFE  # a refused one changes nothing
        assert bench.hw.pwms[16].duties == [0]


def test_heartbeat_gets_no_reply(bench):
    assert bench.command(Heartbeat(req=1)) == []


@pytest.mark.parametrize("msg_type, body, req", [
    (0x81, struct.pack("<Hf", 41, 100.0), 41),  # START cut after the rate
    (0x83, struct.pack("<HB", 42, 1), 42),  # SET_ACTUATOR without the value
    (0x82, b"\x2b", 0),  # STOP with one byte: its req cannot be read
    (0x85, b"", 0),
    (0x84, b"", 0),  # a HEARTBEAT too short is still refused (PROTOCOL.md §3: a short body gets MALFORMED)
])
def test_short_bodies_get_malformed(bench, msg_type, body, req):
    bench.hw.host_send(encode_frame(msg_type, 0, body))
    bench.device.step()
    reply = reply_of(bench.collect())
    assert (reply.req, reply.code) == (req, ReplyCode.MALFORMED)


@pytest.mark.parametrize("msg_type", [0x88, 0xFF, 0x80, 0x00])
def test_unknown_host_types_get_unknown_command_with_req_zero(bench, msg_type):
    bench.hw.host_send(encode_frame(msg_type, 0, b"\x05\x00\x01\x02\x03"))
    bench.device.step()
    reply = reply_of(bench.collect())
    assert (reply.req, reply.code) == (0, ReplyCode.UNKNOWN_COMMAND)


@pytest.mark.parametrize("msg_type", [0x01, 0x03, 0x04, 0x7F])
def test_device_types_coming_back_are_an_echo_not_the_host(bench, msg_type):
    bench.command(SetActuator(req=1, actuator_id=1, value=0.5))
    for _ in range(12):  # 1.2 s of our own frames echoed: no reply storm, and the watchdog still trips
        bench.hw.host_send(encode_frame(msg_type, 0, b"\x05\x00\x00\x00"))
        bench.run(100_000, step_us=1000)
    assert of_type(bench.items, Reply) == [Reply(req=1, code=ReplyCode.OK, detail="")]
    assert bench.device.state == DeviceState.SAFE
    assert any("is the port echoing" in log.text for log in of_type(bench.items, Log))


def test_longer_bodies_are_read_up_to_the_known_fields(bench):
    # a later minor version may append fields (PROTOCOL.md §2)
    bench.hw.host_send(encode_frame(0x83, 0, struct.pack("<HBf", 51, 1, 0.25) + b"future"))
    bench.device.step()
    assert reply_of(bench.collect()).code == ReplyCode.OK
    assert bench.actuators[0].value == 0.25


@settings(deadline=None, max_examples=100)
@given(garbage=st.binary(max_size=600), split=st.integers(min_value=1, max_value=64))
def test_garbage_before_a_command_is_survived(garbage, split):
    rig = Bench()
    rig.boot()
    stream = garbage + b"\x00" + encode_frame(0x85, 0, struct.pack("<H", 77))
    for start in range(0, len(stream), split):
        rig.hw.host_send(stream[start : start + split])
        rig.device.step()
    rig.device.step()
    replies = of_type(rig.collect(), Reply)
    assert [(r.req, r.code) for r in replies][-1] == (77, ReplyCode.OK)
    assert rig.decoder.counters.framing_errors == rig.decoder.counters.crc_errors == 0


def test_bad_host_frames_are_skipped_reported_and_do_not_feed_the_watchdog(bench):
    bench.command(SetActuator(req=1, actuator_id=1, value=0.5))
    bad = bytearray(encode_frame(0x84, 1, b"\x02\x00"))
    bad[3] ^= 0x01  # one flipped bit: the CRC no longer matches
    for _ in range(3):
        bench.hw.host_send(bytes(bad))
        bench.run(400_000, step_us=1000)
    assert bench.device.state == DeviceState.SAFE  # 1.2 s of corrupt frames only: the watchdog tripped
    assert bench.device.reader.crc_errors == 3
    logs = [log.text for log in of_type(bench.items, Log)]
    assert any("skipped" in text and "bad host frames" in text for text in logs)


def test_run_serves_until_a_maintenance_request():
    rig = Bench()
    rig.hw.host_send(encode_frame(0x85, 0, b"\x09\x00"))
    rig.hw.maintenance = True  # checked once a second
    rig.device.run()
    out = rig.collect()
    assert [type(item) for item in out] == [Description, Description, Reply]
    assert 1_000_000 <= rig.hw.now_us() <= 1_100_000  # the idle passes let the fake clock run
    assert rig.device.state == DeviceState.SAFE


def test_reset_replies_then_reboots_and_boots_with_seq_zero(bench):
    bench.command(Start(req=1, rate_hz=100.0, channel_mask=1, scans_per_frame=0))
    bench.run(50_000)
    bench.send(Reset(req=61))
    with pytest.raises(FakeReboot):
        bench.device.step()
    assert reply_of(bench.collect()) == Reply(req=61, code=ReplyCode.OK, detail="")
    assert not bench.hw.timer_running
    device = Device(bench.hw, bench.settings, bench.channels, bench.actuators)  # what main.py does after a reset
    device.boot()
    out = bench.collect()
    assert isinstance(out[0], Description)
    assert bench.decoder.counters.resets == 2 and bench.decoder.counters.gaps == 0


# --------------------------------------------------------------------------------------------------- watchdog


def test_watchdog_trips_within_50_ms_after_the_timeout(bench):
    bench.command(SetActuator(req=1, actuator_id=1, value=0.6))
    bench.command(SetActuator(req=2, actuator_id=2, value=15.0))
    fan, servo = bench.hw.pwms[16], bench.hw.pwms[18]
    assert fan.duty == round(0.6 * 65535)
    bench.collect()
    bench.run(TIMEOUT_US - 1000, step_us=1000)
    assert bench.device.state == DeviceState.IDLE and fan.duty == round(0.6 * 65535)
    out = bench.run(51_000, step_us=1000)  # PROTOCOL.md §4: within a further 50 ms
    assert bench.device.state == DeviceState.SAFE
    assert fan.duty == 0 and servo.duty == round(1333.333 / 20000 * 65535)
    status = of_type(out, Status)
    logs = of_type(out, Log)
    assert status and status[0].state == DeviceState.SAFE
    assert logs and logs[0].level == 30
    assert out.index(status[0]) < out.index(logs[0])


def test_heartbeats_keep_the_watchdog_fed_and_only_allow_moves_ends_the_safe_hold(bench):
    bench.command(SetActuator(req=1, actuator_id=1, value=0.3))
    for req in range(2, 14):  # 12 × 250 ms, the host's pace (PROTOCOL.md §4: at least every timeout / 4)
        bench.run(250_000, step_us=1000)
        bench.command(Heartbeat(req=req))
    assert bench.device.state == DeviceState.IDLE
    bench.run(TIMEOUT_US + 50_000, step_us=1000)
    assert bench.device.state == DeviceState.SAFE and bench.device.held
    refused = reply_of(bench.command(SetActuator(req=20, actuator_id=1, value=0.2)))
    assert (refused.req, refused.code) == (20, ReplyCode.BUSY) and "ALLOW_MOVES" in refused.detail
    assert bench.device.state == DeviceState.SAFE and bench.hw.pwms[16].duty == 0  # nothing moved
    assert reply_of(bench.command(AllowMoves(req=21))).code == ReplyCode.OK
    assert bench.device.state == DeviceState.SAFE and bench.hw.pwms[16].duty == 0  # ALLOW_MOVES moves nothing
    assert reply_of(bench.command(SetActuator(req=22, actuator_id=1, value=0.2))).code == ReplyCode.OK
    assert bench.device.state == DeviceState.IDLE and bench.hw.pwms[16].duty == round(0.2 * 65535)


def test_a_move_waiting_in_the_port_past_the_deadline_is_refused_and_nothing_moves(bench):
    # The race of PROTOCOL.md §4: the host decided a move, froze past the watchdog time, and its frame reaches the
    # board only then (here it waits in the port while the main loop was away): the board trips first and refuses.
    fan, servo = bench.hw.pwms[16], bench.hw.pwms[18]
    bench.command(SetActuator(req=1, actuator_id=1, value=0.6))
    bench.command(SetActuator(req=2, actuator_id=2, value=15.0))
    safe_servo = round(1333.333 / 20000 * 65535)
    bench.hw.advance(TIMEOUT_US + 5000)  # no loop pass meanwhile
    bench.send(SetActuator(req=3, actuator_id=1, value=0.9))
    bench.send(SetActuator(req=4, actuator_id=2, value=-5.0))
    duties = []
    for _ in range(3):
        bench.device.step()
        duties.append((fan.duty, servo.duty))
    out = bench.collect()
    assert [(r.req, r.code) for r in of_type(out, Reply)] == [(3, ReplyCode.BUSY), (4, ReplyCode.BUSY)]
    assert set(duties) == {(0, safe_servo)}  # at its safe values from the first pass on, never the stale move
    assert of_type(out, Status)[0].state == DeviceState.SAFE  # the trip's STATUS comes before the refusals
    assert out.index(of_type(out, Status)[0]) < out.index(of_type(out, Reply)[0])


def test_safe_values_are_taken_in_the_hold_and_the_hold_goes_on(bench):
    bench.command(SetActuator(req=1, actuator_id=1, value=0.6))
    bench.run(TIMEOUT_US + 50_000, step_us=1000)
    assert bench.device.held
    safe = {act.id: act.safe for act in bench.actuators}
    for req, (act_id, value) in enumerate(sorted(safe.items()), 10):  # a host ending its run: OK, not BUSY
        assert reply_of(bench.command(SetActuator(req=req, actuator_id=act_id, value=value))).code == ReplyCode.OK
    assert bench.device.held and bench.device.state == DeviceState.SAFE
    assert reply_of(bench.command(SetActuator(req=20, actuator_id=1, value=0.1))).code == ReplyCode.BUSY
    assert bench.hw.pwms[16].duty == 0


def test_power_up_and_reset_are_safe_but_not_held(bench):
    # PROTOCOL.md §4: the hold starts only at a trip, so a 1.0 host's first SET_ACTUATOR after power-up still works
    assert not bench.device.held
    assert reply_of(bench.command(AllowMoves(req=1))).code == ReplyCode.OK  # no hold: OK all the same
    assert reply_of(bench.command(SetActuator(req=2, actuator_id=1, value=0.4))).code == ReplyCode.OK


def test_allow_moves_feeds_the_watchdog_and_the_next_trip_holds_again(bench):
    bench.command(SetActuator(req=1, actuator_id=1, value=0.6))
    bench.run(TIMEOUT_US + 50_000, step_us=1000)
    bench.command(AllowMoves(req=2))
    bench.command(SetActuator(req=3, actuator_id=1, value=0.5))
    assert not bench.device.held and bench.hw.pwms[16].duty == round(0.5 * 65535)
    bench.run(TIMEOUT_US + 50_000, step_us=1000)
    assert bench.device.held and bench.hw.pwms[16].duty == 0
    assert reply_of(bench.command(SetActuator(req=4, actuator_id=1, value=0.5))).code == ReplyCode.BUSY


def test_watchdog_keeps_streaming_after_it_trips(bench):
    bench.command(SetActuator(req=1, actuator_id=1, value=0.6))
    bench.command(Start(req=2, rate_hz=100.0, channel_mask=1, scans_per_frame=0))
    bench.run(TIMEOUT_US + 60_000, step_us=1000)
    assert bench.device.state == DeviceState.SAFE and bench.hw.timer_running
    before = bench.decoder.counters.frames
    bench.run(200_000, step_us=1000)
    assert bench.decoder.counters.frames > before
    statuses = of_type(bench.items, Status)
    assert statuses and statuses[-1].state == DeviceState.SAFE
