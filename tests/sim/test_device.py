"""The simulated board speaks PROTOCOL.md: boot, replies, streaming, status, watchdog, reset, clock, determinism."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from taprig.protocol import (
    FLAG_BOOT,
    AllowMoves,
    Describe,
    Description,
    DeviceState,
    Heartbeat,
    Log,
    ReplyCode,
    Reset,
    Samples,
    SetActuator,
    Start,
    Status,
    Stop,
    StreamDecoder,
    encode_frame,
    encode_message,
)
from taprig.protocol.framing import decode_frame
from taprig.sim import SimOptions, SimulatedDevice



def _all_channels(h) -> int:
    return (1 << len(h.device.description.channels)) - 1


def test_boot_sends_a_flush_then_the_description_with_boot_set(host, rigs):
    h = host("cambered-balance")
    raw = h.device.read()
    assert raw[0] == 0  # the flush delimiter before the first frame (PROTOCOL.md §1)
    first = decode_frame(raw[1 : raw.index(b"\x00", 1)])
    assert first.flags & FLAG_BOOT and first.seq == 0
    items = h.decoder.feed(raw)
    assert isinstance(items[0], Description)
    assert rigs("cambered-balance").differences(items[0]) == []


def test_describe_replies_description_then_ok(host):
    h = host("cylinder")
    h.step(0.01)
    h.send(Describe(7))
    new = h.step(0.01)
    assert isinstance(new[0], Description)
    assert (new[1].req, new[1].code) == (7, ReplyCode.OK)


@pytest.mark.parametrize(
    ("command", "code"),
    [
        (Start(5, 0.1, 1, 0), ReplyCode.OUT_OF_RANGE),  # below rate_min_hz
        (Start(5, 1e6, 1, 0), ReplyCode.OUT_OF_RANGE),
        (Start(5, 100.0, 0, 0), ReplyCode.BAD_ARGUMENT),  # empty mask
        (Start(5, 100.0, 1 << 40, 0), ReplyCode.BAD_ARGUMENT),  # a channel the board lacks
        (SetActuator(5, 9, 0.5), ReplyCode.BAD_ARGUMENT),  # no actuator 9
        (SetActuator(5, 0, 1.5), ReplyCode.OUT_OF_RANGE),
        (SetActuator(5, 1, float("nan")), ReplyCode.OUT_OF_RANGE),
        (Stop(5), ReplyCode.OK),
    ],
)
def test_commands_are_answered_with_the_protocol_codes(host, command, code):
    h = host("cambered-balance")
    h.send(command)
    reply = h.replies() or [i for i in h.step(0.01) if hasattr(i, "code")]
    assert (reply[-1].req, reply[-1].code) == (5, code)


def test_unknown_command_type_gets_unknown_command_with_req_zero(host):
    h = host("cylinder")
    h.device.receive(encode_frame(0xC0, 0, b"\x05\x00"))
    new = h.step(0.01)
    assert [(r.req, r.code) for r in new if hasattr(r, "code")] == [(0, ReplyCode.UNKNOWN_COMMAND)]


def test_streams_the_mask_at_the_rate_with_consecutive_scans(host):
    h = host("cambered-balance")
    h.send(Start(3, 500.0, 0b1_0000_0011, 0))
    h.step(1.0, chunk_s=0.037)
    block = h.blocks()
    assert block.channels == (0, 1, 8)
    np.testing.assert_array_equal(block.scan_index, np.arange(block.n_scans))
    assert np.all(np.diff(block.t_ns) == 2_000_000)
    assert 490 <= block.n_scans <= 500  # whole frames of ~20 ms only
    assert h.decoder.counters.gaps == 0 and h.decoder.counters.scans_lost == 0


def test_status_about_once_a_second_while_streaming(host):
    h = host("cylinder", watchdog_ms=0)
    h.send(Start(3, 100.0, 1, 0))
    h.step(3.5, chunk_s=0.25)
    statuses = [i for i in h.items if isinstance(i, Status)]
    assert len(statuses) == 3 and all(s.state == DeviceState.STREAMING for s in statuses)
    assert [s.uptime_ms for s in statuses] == pytest.approx([1000, 2000, 3000], abs=20)


def test_watchdog_brings_the_fan_to_safe_and_keeps_streaming(host):
    h = host("cambered-balance", base=SimOptions(seed=3), watchdog_ms=400, fan_rate=0.0, fan_tau=0.4)
    h.send(SetActuator(1, 0, 0.8), Start(2, 200.0, _all_channels(h), 0))
    for _ in range(10):  # heartbeats every 100 ms keep it running
        h.step(0.1)
        h.send(Heartbeat(0))
    assert h.device.state == DeviceState.STREAMING and h.device.actuators[0].setpoint == pytest.approx(0.8)
    speed_before = h.device.stream_speed
    quiet_from = h.device.now_ns
    h.step(0.6, chunk_s=0.01)
    status = [i for i in h.items if isinstance(i, Status) and i.state == DeviceState.SAFE]
    warnings = [i for i in h.items if isinstance(i, Log) and i.level == 30]
    assert status and warnings
    assert h.device.actuators[0].setpoint == 0.0 and h.device.actuators[1].setpoint == 0.0
    # PROTOCOL.md §4: within 50 ms after the timeout; the SAFE status is the first frame after it
    trip_frame = next(i for i, item in enumerate(h.items) if item is status[0])
    later_scans = h.blocks(h.items[trip_frame:])
    assert later_scans.n_scans > 0  # streaming goes on
    samples_before = h.blocks(h.items[:trip_frame])
    tripped_at = samples_before.t_ns[-1]
    assert tripped_at - quiet_from <= 400e6 + 50e6
    h.step(3.0, chunk_s=0.1)
    assert h.device.stream_speed < 0.2 * speed_before  # the fan runs down
    assert h.device.state == DeviceState.SAFE and h.device.held
    h.send(SetActuator(9, 0, 0.3))  # PROTOCOL.md §4 (1.1): the safe hold refuses a move until ALLOW_MOVES
    h.step(0.01)
    assert h.replies()[-1].req == 9 and h.replies()[-1].code == ReplyCode.BUSY
    assert h.device.state == DeviceState.SAFE and h.device.actuators[0].setpoint == 0.0
    h.send(AllowMoves(10))
    assert h.device.state == DeviceState.SAFE and h.device.actuators[0].setpoint == 0.0  # moves nothing itself
    h.send(SetActuator(11, 0, 0.3))
    h.step(0.01)
    assert [(r.req, r.code) for r in h.replies()[-2:]] == [(10, ReplyCode.OK), (11, ReplyCode.OK)]
    assert h.device.state == DeviceState.STREAMING  # leaves state 2 on the next SET_ACTUATOR after ALLOW_MOVES


def test_a_move_that_arrives_after_the_trip_is_refused_and_nothing_moves(host):
    # The race the safe hold closes (PROTOCOL.md §4): the host decided a move and froze past the watchdog time;
    # the move reaches the board after it tripped. It is refused with BUSY and no actuator leaves its safe value.
    h = host("naca0012-20tap", base=SimOptions(seed=5), watchdog_ms=300, fan_rate=0.0, fan_tau=0.0,
             angle_rate_deg=0.0)
    h.send(SetActuator(1, 0, 0.7), SetActuator(2, 1, 6.0))
    h.step(0.5, chunk_s=0.01)  # frozen host: nothing sent for longer than the watchdog time
    assert h.device.state == DeviceState.SAFE
    safe = {act_id: act.info.safe for act_id, act in h.device.actuators.items()}
    trip_ns = h.device.now_ns
    h.send(SetActuator(3, 0, 0.9), SetActuator(4, 1, 8.0))  # the stale moves, late
    h.step(0.5, chunk_s=0.01)
    assert [(r.req, r.code) for r in h.replies()[-2:]] == [(3, ReplyCode.BUSY), (4, ReplyCode.BUSY)]
    t = np.array([trip_ns, h.device.now_ns])
    for act_id, act in h.device.actuators.items():
        assert act.setpoint == safe[act_id]
        assert np.all(act.position_at(t) == safe[act_id])
    codes = [h.device.command_codes[i] for i, (_, _, m) in enumerate(h.device.commands) if m.req in (3, 4)]
    assert codes == [ReplyCode.BUSY, ReplyCode.BUSY]  # what the command log reports


def test_safe_values_are_taken_in_the_hold_and_power_up_is_not_held(host):
    h = host("naca0012-20tap", base=SimOptions(seed=5), watchdog_ms=300)
    assert not h.device.held  # power-up is safe but not held: a 1.0 host's first move still works
    h.send(SetActuator(1, 0, 0.7))
    h.step(0.5, chunk_s=0.01)
    assert h.device.held
    h.send(*(SetActuator(10 + i, act_id, act.info.safe) for i, (act_id, act) in enumerate(h.device.actuators.items())))
    h.step(0.01)
    assert all(r.code == ReplyCode.OK for r in h.replies()[-len(h.device.actuators):])
    assert h.device.held and h.device.state == DeviceState.SAFE
    h.send(Reset(30))
    h.step(0.01)
    assert not h.device.held


def test_reset_replies_then_reboots_with_sequence_zero(host):
    h = host("cylinder")
    h.send(Start(1, 100.0, 1, 0))
    h.step(0.5)
    h.send(Reset(2))
    h.raw.clear()
    new = h.step(0.5)
    assert (new[0].req, new[0].code) == (2, ReplyCode.OK)
    assert isinstance(new[1], Description)
    boot = h.raw.index(b"\x00")  # reply frame, then the flush, then the DESCRIPTION with BOOT and seq 0
    frame = decode_frame(bytes(h.raw[boot + 2 : h.raw.index(b"\x00", boot + 2)]))
    assert frame.flags & FLAG_BOOT and frame.seq == 0
    assert h.device.state == DeviceState.IDLE and h.blocks(new[1:]) is None
    assert h.decoder.counters.resets == 2 and h.device.tally.resets == 1


def test_clock_drift_stretches_device_time(host):
    ppm = 200.0
    h = host("cylinder", clock_ppm=ppm, watchdog_ms=0)
    h.send(Start(1, 1000.0, 1, 1))  # one scan per frame, so the count is not rounded to whole frames
    h.step(10.0, chunk_s=1.0)
    block = h.blocks()
    # the board's crystal runs fast: by 10 s of true time it has taken the scans of 10 s · (1 + 200e-6)
    assert block.n_scans == int(10.0 * 1000.0 * (1 + ppm * 1e-6)) + 1
    np.testing.assert_array_equal(np.diff(block.t_ns), 1_000_000)  # stamped on the board's own clock


def _recording(rigs, seed: int, chunk_s: float) -> bytes:
    options = SimOptions(seed=seed, ber=2e-5, burst_rate=0.5, watchdog_ms=0)
    dev = SimulatedDevice(rigs("cambered-balance"), options)
    dev.receive(encode_message(SetActuator(1, 0, 0.6), 0) + encode_message(Start(2, 1000.0, 0x1FF, 0), 1))
    out = bytearray()
    t = 0.0
    while t < 3.0:
        t = min(3.0, t + chunk_s)
        dev.produce_until(int(t * 1e9))
        out += dev.read(4096)
        out += dev.read()
    return bytes(out)


def test_same_seed_same_bytes_whatever_the_chunking(rigs):
    a = _recording(rigs, 11, 0.1)
    assert a == _recording(rigs, 11, 0.0137)
    assert a != _recording(rigs, 12, 0.1)


def test_fast_sample_encoder_matches_the_protocol_encoder(host):
    h = host("bench-64", base=SimOptions(seed=2))
    h.device.read()
    h.send(Start(1, 2000.0, _all_channels(h), 0))
    h.device.read()
    h.device.produce_until(h.device.now_ns + 50_000_000)
    raw = h.device.read()
    frames = [f for f in raw.split(b"\x00") if f]
    encodings = [c.encoding for c in h.device.description.channels]
    decoder = StreamDecoder(h.device.description)
    for encoded in frames:
        frame = decode_frame(encoded)
        if frame.msg_type != 0x02:
            continue
        block = decoder.feed(encoded + b"\x00")[0]
        t_us, period_ns, first_scan = (int.from_bytes(frame.body[i : i + 4], "little") for i in (0, 4, 8))
        # the same Samples through taprig.protocol's own encoder gives the very same frame
        msg = Samples(t_us, period_ns, first_scan, (1 << 64) - 1, block.counts)
        assert encode_message(msg, frame.seq, 0, encodings) == encoded + b"\x00"


@settings(max_examples=50)
@given(noise=st.binary(max_size=300))
def test_random_host_bytes_never_break_the_board(rigs, noise):
    dev = SimulatedDevice(rigs("cylinder"), SimOptions(watchdog_ms=0))
    dev.receive(noise)
    dev.receive(b"\x00" + encode_message(Describe(4), 0))  # a delimiter, then a good command still works
    decoder = StreamDecoder()
    replies = [i for i in decoder.feed(dev.read()) if hasattr(i, "code")]
    assert replies and (replies[-1].req, replies[-1].code) == (4, ReplyCode.OK)


def test_short_command_body_gets_malformed(host):
    h = host("cylinder")
    h.device.receive(encode_frame(0x83, 0, b"\x01\x00\x00"))  # SET_ACTUATOR needs 7 body bytes
    assert [(r.req, r.code) for r in h.step(0.01) if hasattr(r, "code")] == [(0, ReplyCode.MALFORMED)]


def test_an_echoed_device_frame_gets_no_reply_and_does_not_feed_the_watchdog(host):
    # PROTOCOL.md §1 and §4: a device → host type at the board is an echo; an unknown host type still gets one
    h = host("cylinder")
    fed = h.device.host_frames
    samples = Samples(0, 1_000_000, 0, 1, np.zeros((2, 1)))
    h.device.receive(encode_message(samples, 0, 0, [h.device.description.channels[0].encoding]))
    h.device.receive(encode_message(Status(5000, 2000, 1, 0, 0, DeviceState.IDLE), 1))
    assert [r for r in h.step(0.01) if hasattr(r, "code")] == [] and h.device.host_frames == fed
    h.device.receive(encode_frame(0xC0, 2, b""))  # a host → device type it does not know
    assert [(r.req, r.code) for r in h.step(0.01) if hasattr(r, "code")] == [(0, ReplyCode.UNKNOWN_COMMAND)]
    assert h.device.host_frames == fed + 1


def test_full_fan_never_passes_the_top_speed_the_rig_states(rigs):
    # the simulated stream at full fan: 20 m/s in air, 0.5 m/s in water, capped at [operating] max_speed_m_s
    from taprig.sim.device import default_max_speed

    venturi, naca, water = rigs("venturi-8"), rigs("naca0012-20tap"), rigs("water-hydrofoil")
    assert venturi.operating.max_speed < 20.0 and default_max_speed(venturi) == venturi.operating.max_speed
    assert naca.operating.max_speed > 20.0 and default_max_speed(naca) == 20.0
    assert default_max_speed(water) == min(0.5, water.operating.max_speed)
    no_top = naca.model_copy(update={"operating": naca.operating.model_copy(update={"max_speed": None})})
    assert default_max_speed(no_top) == 20.0
