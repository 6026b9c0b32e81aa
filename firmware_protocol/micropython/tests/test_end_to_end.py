"""START → SAMPLES → STOP on a fake clock, decoded by the host's StreamDecoder: values, times, scan indices and
every loss counter, including the device's overrun and transmit-drop paths."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from taprig.protocol import (
    Describe,
    DeviceState,
    Heartbeat,
    Log,
    RawBlock,
    Reply,
    ReplyCode,
    SetActuator,
    Start,
    Status,
    Stop,
)

import board_config
from fw_testkit import Bench, of_type

ALL_CHANNELS = (1 << len(board_config.CHANNELS)) - 1
LOSS_COUNTERS = ("framing_errors", "crc_errors", "oversize", "unknown_types", "gaps", "frames_lost", "scans_lost",
                 "duplicates", "late", "undecodable")
LOAD_PERIOD_US = 12_500  # the simulated load-cell converter runs at 80 conversions/s


def losses(rig):
    counters = rig.decoder.counters.as_dict()
    return {name: counters[name] for name in LOSS_COUNTERS if counters[name]}


def wire_signals(rig):
    """Simulated sensors whose readings encode the time they were taken at, so the host can check both."""
    rig.sensors["adc0"].value = lambda t: (t // 1000) % 65536
    rig.sensors["adc1"].value = 12345
    rig.sensors["adc2"].value = lambda t: 65535 - (t // 1000) % 65536
    rig.sensors["bridge1"].counts, rig.sensors["bridge1"].status = 3000, 2  # "already read": still valid
    rig.sensors["load"].convert(0)

    def on_step(now_us):
        rig.sensors["bridge0"].counts = (now_us // 1000) % 16384
        if now_us % LOAD_PERIOD_US == 0:
            rig.sensors["load"].convert(-(now_us // 1000))

    return on_step


def expected_counts(t_us):
    ms = t_us // 1000
    load = -((t_us // LOAD_PERIOD_US * LOAD_PERIOD_US) // 1000)
    return np.stack([ms % 65536, np.full_like(ms, 12345), 65535 - ms % 65536, ms % 16384, np.full_like(ms, 3000),
                     load], axis=1)


def test_a_session_decodes_with_zero_errors_and_the_right_values():
    rig = Bench()
    rig.boot()
    on_step = wire_signals(rig)
    rig.run(1000, step_us=500, on_step=on_step)
    rig.command(Describe(req=1))
    rig.command(SetActuator(req=2, actuator_id=1, value=0.6))
    rig.command(Start(req=3, rate_hz=200.0, channel_mask=ALL_CHANNELS, scans_per_frame=0))
    for req in range(10, 20):  # 2.5 s with a heartbeat every 250 ms
        rig.run(250_000, step_us=500, on_step=on_step)
        rig.command(Heartbeat(req=req))
    rig.command(Stop(req=4))

    assert losses(rig) == {}
    assert rig.decoder.counters.resets == 1
    replies = of_type(rig.items, Reply)
    assert [(r.req, r.code) for r in replies] == [(n, ReplyCode.OK) for n in (1, 2, 3, 4)]
    block = RawBlock.concat(of_type(rig.items, RawBlock))
    # START at 1000 µs, 200 Hz: scan k at 1000 + 5000 (k + 1) µs; 2.5 s hold 500 scans
    assert block.channels == tuple(range(len(board_config.CHANNELS)))
    np.testing.assert_array_equal(block.scan_index, np.arange(500))
    t_us = 1000 + 5000 * (np.arange(500) + 1)
    np.testing.assert_array_equal(block.t_ns, t_us * 1000)
    np.testing.assert_array_equal(block.counts, expected_counts(t_us))
    # the device chose 10 scans per frame (50 ms blocks): 50 SAMPLES frames besides the other messages
    others = len(rig.items) - len(of_type(rig.items, RawBlock))
    assert rig.decoder.counters.frames - others == 50

    statuses = of_type(rig.items, Status)
    assert [s.uptime_ms for s in statuses] == [1001, 2001]  # about once a second while streaming
    assert all((s.state, s.overruns, s.dropped_scans, s.supply_mv, s.board_temp_cc) ==
               (DeviceState.STREAMING, 0, 0, 5012, 2350) for s in statuses)
    assert any("streaming 6 channels" in log.text for log in of_type(rig.items, Log))


def test_device_time_wraps_at_two_to_the_32_and_the_host_unwraps_it():
    start = (1 << 32) - 200_000
    rig = Bench(start_us=start)
    rig.boot()
    rig.command(SetActuator(req=1, actuator_id=1, value=0.1))
    rig.command(Start(req=2, rate_hz=1000.0 / 2, channel_mask=0b1, scans_per_frame=0))
    rig.run(400_000, step_us=1000)
    rig.command(Stop(req=3))
    block = RawBlock.concat(of_type(rig.items, RawBlock))
    assert losses(rig) == {}
    np.testing.assert_array_equal(block.t_ns, (start + 2000 * (np.arange(block.n_scans) + 1)) * 1000)
    assert block.t_ns[-1] > (1 << 32) * 1000  # the stream crossed the wrap


def test_overrun_skips_the_missed_scans_and_keeps_the_timing():
    rig = Bench()
    rig.boot()
    rig.command(Start(req=1, rate_hz=100.0, channel_mask=0b1, scans_per_frame=0))  # 5 scans per frame
    rig.run(100_000, step_us=1000)  # ticks 1–10 served
    rig.hw.advance(35_000)  # the loop stalls for 3.5 periods: ticks 11, 12, 13 pile up
    rig.device.step()
    rig.run(1_000_000, step_us=1000)
    rig.command(Stop(req=2))
    assert rig.device.streamer.overruns == 2
    assert losses(rig) == {"scans_lost": 2}  # the host sees the hole where scans 10 and 11 would be
    status = of_type(rig.items, Status)[0]
    assert status.overruns == 2
    block = RawBlock.concat(of_type(rig.items, RawBlock))
    index = np.concatenate([np.arange(10), np.arange(12, block.n_scans + 2)])
    np.testing.assert_array_equal(block.scan_index, index)
    np.testing.assert_array_equal(block.t_ns, 10_000_000 * (index + 1))  # scan k still at (k + 1) periods


def test_a_lost_timer_callback_is_an_overrun_not_a_time_shift():
    rig = Bench()
    rig.boot()
    rig.command(Start(req=1, rate_hz=100.0, channel_mask=0b1, scans_per_frame=5))
    rig.run(52_000, step_us=1000)  # scans 0–4
    rig.hw.drop_callbacks = 1  # the callback of boundary 6 (scan 5) never runs
    rig.run(100_000, step_us=1000)
    rig.command(Stop(req=2))
    assert rig.device.streamer.overruns == 1
    assert losses(rig) == {"scans_lost": 1}
    block = RawBlock.concat(of_type(rig.items, RawBlock))
    index = np.concatenate([np.arange(5), np.arange(6, 15)])
    np.testing.assert_array_equal(block.scan_index, index)
    np.testing.assert_array_equal(block.t_ns, 10_000_000 * (index + 1))


def test_a_frame_the_port_cannot_take_counts_as_dropped_scans():
    rig = Bench()
    rig.boot()
    rig.command(Start(req=1, rate_hz=100.0, channel_mask=0b1, scans_per_frame=5))
    rig.run(95_000, step_us=1000)  # scans 0–4 sent, 5–8 in the block
    rig.hw.tx_limit = 10  # the frame of scans 5–9 leaves cut after 10 bytes
    rig.run(10_000, step_us=1000)
    rig.hw.tx_limit = None
    rig.run(1_000_000, step_us=1000)
    status = of_type(rig.items, Status)[0]
    assert status.dropped_scans == 5 and rig.device.streamer.dropped_scans == 5
    # one broken frame, closed by the device's extra delimiter, so the next frame arrives whole
    assert losses(rig) == {"framing_errors": 1, "gaps": 1, "frames_lost": 1, "scans_lost": 5}


def test_start_while_streaming_restarts_from_scan_zero():
    rig = Bench()
    rig.boot()
    rig.command(Start(req=1, rate_hz=100.0, channel_mask=0b1, scans_per_frame=4))
    rig.run(62_000, step_us=1000)  # six scans: one frame of 4 sent, 2 in progress
    rig.command(Start(req=2, rate_hz=200.0, channel_mask=0b11, scans_per_frame=0))
    rig.run(100_000, step_us=1000)
    rig.command(Stop(req=3))
    assert losses(rig) == {}
    blocks = of_type(rig.items, RawBlock)
    first = RawBlock.concat([b for b in blocks if b.channels == (0,)])
    second = RawBlock.concat([b for b in blocks if b.channels == (0, 1)])
    np.testing.assert_array_equal(first.scan_index, np.arange(6))  # the partial block was sent, not lost
    np.testing.assert_array_equal(second.scan_index, np.arange(20))
    assert rig.hw.timer_starts == [10_000, 5_000]


@settings(deadline=None, max_examples=25)
@given(rate=st.floats(min_value=1.0, max_value=500.0), mask=st.integers(min_value=1, max_value=ALL_CHANNELS),
       spf=st.integers(min_value=0, max_value=12), n_scans=st.integers(min_value=1, max_value=40))
def test_any_accepted_start_streams_cleanly(rate, mask, spf, n_scans):
    rig = Bench()
    rig.boot()
    rig.sensors["load"].convert(-3)
    rig.command(SetActuator(req=1, actuator_id=2, value=0.0))
    (reply,) = of_type(rig.command(Start(req=2, rate_hz=rate, channel_mask=mask, scans_per_frame=spf)), Reply)
    assert reply.code == ReplyCode.OK
    period_us = rig.hw.timer_starts[-1]
    assert period_us == int(1e6 / float(np.float32(rate)) + 0.5)  # the rate as the wire carried it (f32)
    for _ in range(n_scans):  # one loop pass per period, a heartbeat every one of them
        rig.run(period_us, step_us=period_us)
        rig.command(Heartbeat(req=3))
    rig.command(Stop(req=4))
    assert losses(rig) == {}
    block = RawBlock.concat(of_type(rig.items, RawBlock))
    assert block.channels == tuple(i for i in range(len(board_config.CHANNELS)) if mask >> i & 1)
    np.testing.assert_array_equal(block.scan_index, np.arange(n_scans))
    np.testing.assert_array_equal(np.diff(block.t_ns), np.full(n_scans - 1, period_us * 1000))
    if mask >> 5 & 1:
        assert set(block.counts[:, -1]) == {-3}  # the load cell's one conversion, held


def test_scans_per_frame_limits_follow_max_frame():
    rig = Bench(settings={"max_frame": 64})  # 64 − 12 − 24 = 28 bytes: 14 scans of one u16 channel
    rig.boot()
    ok = of_type(rig.command(Start(req=1, rate_hz=10.0, channel_mask=0b1, scans_per_frame=14)), Reply)[0]
    too_many = of_type(rig.command(Start(req=2, rate_hz=10.0, channel_mask=0b1, scans_per_frame=15)), Reply)[0]
    assert (ok.code, too_many.code) == (ReplyCode.OK, ReplyCode.OUT_OF_RANGE)
    tiny = Bench(settings={"max_frame": 40})  # 4 bytes after the heads: one u16 fits, all six channels do not
    tiny.boot()
    assert of_type(tiny.command(Start(req=3, rate_hz=10.0, channel_mask=0b1, scans_per_frame=0)), Reply)[0].code == 0
    refused = of_type(tiny.command(Start(req=4, rate_hz=10.0, channel_mask=ALL_CHANNELS, scans_per_frame=0)), Reply)
    assert refused[0].code == ReplyCode.OUT_OF_RANGE and "max_frame 40" in refused[0].detail


@pytest.mark.parametrize("rate_hz", [1.0, 3.0, 500.0])
def test_device_chosen_block_is_about_50_ms(rate_hz):
    rig = Bench()
    rig.boot()
    rig.command(Start(req=1, rate_hz=rate_hz, channel_mask=ALL_CHANNELS, scans_per_frame=0))
    assert rig.device.streamer.describe_stream().endswith("%d scans per frame" % max(1, int(rate_hz * 0.05)))
