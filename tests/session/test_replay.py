"""Replay: bit-identical to the live reduction, pacing on an injected clock, seek, re-reduction, bad sessions."""

from __future__ import annotations

import math
from dataclasses import fields
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from taprig.bench.bench_replay import HOST_EPOCH_NS, Setpoint, record_simulated
from taprig.protocol import RawBlock, StreamDecoder
from taprig.reduce import ReducedBlock, Reducer
from taprig.rig import Calibration, ChannelCalibration, apply_calibration, calibration_to_text, load_rig
from taprig.session.meta import ambient_from_meta
from taprig.session.replay import MAX_PACED_WAIT_S, AngleSchedule, Replay, ReplayError
from taprig.session.store import SessionReader, SessionWriter
from taprig.sim import SimOptions

RIGS = Path(__file__).resolve().parents[2] / "rigs"
AIRFOIL = RIGS / "naca0012-20tap.toml"
SECONDS = 2.0
RATE_HZ = 500.0
SETPOINTS = (Setpoint(0.0, "fan", 0.8), Setpoint(0.7, "alpha", math.radians(4.0)),
             Setpoint(1.4, "alpha", math.radians(-3.0)))
# A faulty link (bit errors and burst drops) so the identity also covers CRC errors, gaps and lost scans.
FAULTY = SimOptions(seed=11, ber=2e-5, burst_rate=1.0, burst_frames=2)


def a_calibration(rig, zero_shift: float, gain: float) -> Calibration:
    """Every channel's nominal zero shifted by ``zero_shift`` counts, its gain scaled by ``gain``."""
    channels = {}
    for c in rig.channels:
        sensor = rig.sensors[c.sensor]
        channels[c.name] = ChannelCalibration(zero_counts=-sensor.intercept / sensor.slope + zero_shift, gain=gain)
    return Calibration(rig_id=rig.id, date=datetime(2024, 6, 1, tzinfo=timezone.utc), channels=channels)


class LiveRun:
    """What the acquisition loop does with each chunk: decode it, reduce every block with the angle in force."""

    def __init__(self, rig, calibration, ambient):
        self.reducer = Reducer(rig, calibration, ambient)
        self.angles = AngleSchedule(rig)
        for sp in SETPOINTS:
            if sp.actuator == "alpha":
                self.angles.add(HOST_EPOCH_NS + round(sp.t_s / 0.01) * 10_000_000, sp.value)
        self.blocks: list[ReducedBlock] = []
        self.raw: list[RawBlock] = []

    def __call__(self, host_ns: int, data: bytes, items: list) -> None:
        for item in items:
            if isinstance(item, RawBlock):
                self.raw.append(item)
                self.blocks.append(self.reducer.reduce(item, alpha_rad=self.angles.at(host_ns)))


@pytest.fixture(scope="module")
def recorded(tmp_path_factory):
    """A faulty-link airfoil session with a calibration snapshot, and the live run's reduced blocks."""
    rig = load_rig(AIRFOIL)
    calibration = a_calibration(rig, 3.0, 1.02)
    path = tmp_path_factory.mktemp("replay") / "run.taprig"
    # the ambient the recorder stores (from the simulator's room) is what the live reducer used
    from taprig.reduce import Ambient

    live = LiveRun(rig, calibration, Ambient(FAULTY.ambient_pa, FAULTY.ambient_c + 273.15, FAULTY.humidity))
    counters = record_simulated(AIRFOIL, path, SECONDS, RATE_HZ, FAULTY, SETPOINTS, calibration, on_chunk=live).counters
    return path, live, counters, rig


def stacked(blocks, name: str) -> np.ndarray:
    return np.concatenate([getattr(b, name) for b in blocks])


def assert_identical(live_blocks, replay_blocks) -> None:
    """Every array field of the reduced blocks, concatenated over scans, bit-identical (NaN equal to NaN)."""
    for f in fields(ReducedBlock):
        first = getattr(live_blocks[0], f.name)
        if not isinstance(first, np.ndarray) or f.name == "cp_ideal":
            assert all(getattr(b, f.name) == first for b in replay_blocks), f.name
            continue
        a, b = stacked(live_blocks, f.name), stacked(replay_blocks, f.name)
        assert a.dtype == b.dtype and a.shape == b.shape, f.name
        assert np.array_equal(a, b, equal_nan=a.dtype.kind == "f"), f.name


def test_the_recording_exercises_faults_and_angles(recorded):
    path, live, counters, _ = recorded
    # the identity below is only worth something if the stream had errors and the angle changed
    assert counters["crc_errors"] > 0 and counters["gaps"] > 0 and counters["scans_lost"] > 0
    alpha = stacked(live.blocks, "alpha_rad")
    assert set(np.round(np.degrees(np.unique(alpha)), 9)) == {0.0, 4.0, -3.0}


def test_fast_replay_is_bit_identical_to_live(recorded):
    path, live, counters, _ = recorded
    with Replay(path) as replay:
        steps = list(replay)
        assert replay.counters.as_dict() == counters
    assert_identical(live.blocks, [b.reduced for s in steps for b in s.blocks])
    raw = [b.raw for s in steps for b in s.blocks]
    assert np.array_equal(stacked(live.raw, "counts"), stacked(raw, "counts"))


class FakeClock:
    """A simulated clock: sleeping moves it on at once and records the wait."""

    def __init__(self):
        self.now, self.sleeps = 100.0, []

    def monotonic(self) -> float:
        return self.now

    def sleep(self, seconds: float) -> None:
        self.sleeps.append(seconds)
        self.now += seconds


def test_paced_replay_is_bit_identical_and_keeps_the_pace(recorded):
    path, live, _, _ = recorded
    clock = FakeClock()
    with Replay(path, speed=4.0, clock=clock) as replay:
        steps = []
        for step in replay:
            steps.append((step, clock.now))
    assert_identical(live.blocks, [b.reduced for s, _ in steps for b in s.blocks])
    first_host, first_wall = steps[0][0].host_ns, steps[0][1]
    for step, wall in steps:
        # each chunk is handed out when it is due at 4 × real time (the clock never sleeps past that)
        assert wall == pytest.approx(first_wall + (step.host_ns - first_host) / 1e9 / 4.0, abs=1e-9)
    assert sum(clock.sleeps) == pytest.approx((steps[-1][0].host_ns - first_host) / 4e9)


def test_a_long_pause_in_the_recording_is_played_short(tmp_path, recorded):
    path, _, _, _ = recorded
    gapped = tmp_path / "gap.taprig"
    with SessionReader(path) as src:
        writer = SessionWriter(gapped, src.meta)
        for kind, name, text in src.snapshots():
            writer.add_snapshot(kind, name, text, HOST_EPOCH_NS)
        for i, chunk in enumerate(src.chunks()):
            writer.append_chunk(chunk.data, chunk.host_ns + (3600 * 10**9 if i >= 50 else 0))
        writer.close()
    clock = FakeClock()
    with Replay(gapped, speed=1.0, clock=clock) as replay:
        list(replay)
    assert max(clock.sleeps) == MAX_PACED_WAIT_S
    assert sum(clock.sleeps) < SECONDS + MAX_PACED_WAIT_S


def test_seek_reduces_from_the_offset_with_the_decoder_state_of_a_full_replay(recorded):
    path, live, counters, _ = recorded
    with Replay(path, seek_s=1.0) as replay:
        blocks = [b for s in replay for b in s.blocks]
        assert replay.counters.as_dict() == counters
    host = np.concatenate([b.host_ns for b in blocks])
    assert host.min() >= HOST_EPOCH_NS + 10**9
    with Replay(path) as full:
        every = [b for s in full for b in s.blocks]
    full_host = np.concatenate([b.host_ns for b in every])
    tail = full_host >= HOST_EPOCH_NS + 10**9
    for name in ("q_pa", "cp", "cl", "scan_index", "scan_flags"):
        a = np.concatenate([getattr(b.reduced, name) for b in every])[tail]
        b = np.concatenate([getattr(b.reduced, name) for b in blocks])
        assert np.array_equal(a, b, equal_nan=a.dtype.kind == "f"), name


def test_replay_uses_the_stored_rig_calibration_and_ambient(recorded):
    path, _, _, rig = recorded
    with Replay(path) as replay:
        assert replay.rig.id == rig.id and replay.rig.source_text == rig.source_text
        assert replay.reducer.calibration.channels["p_total"].gain == 1.02
        assert replay.ambient == ambient_from_meta(replay.meta)


def test_re_reduction_with_another_calibration(recorded):
    path, _, _, rig = recorded
    other = a_calibration(rig, -5.0, 0.97)
    with Replay(path, calibration=other) as replay:
        blocks = [b for s in replay for b in s.blocks]
    for block in blocks[:5]:
        # p = gain · slope · (counts − zero) per channel: the calibration's own definition (taprig.rig)
        expected = apply_calibration(block.raw.counts, rig, block.raw.channels, other)
        assert np.array_equal(block.reduced.p_pa, expected)


def test_calibration_snapshots_apply_from_their_host_time(tmp_path, recorded):
    path, _, _, rig = recorded
    later = a_calibration(rig, 40.0, 1.0)
    switch_ns = HOST_EPOCH_NS + 10**9
    copy = tmp_path / "rezeroed.taprig"
    with SessionReader(path) as src:
        writer = SessionWriter(copy, src.meta)
        for kind, name, text in src.snapshots():
            writer.add_snapshot(kind, name, text, HOST_EPOCH_NS)
        writer.add_snapshot("calibration", "wind-off zero", calibration_to_text(later), switch_ns)
        for chunk in src.chunks():
            writer.append_chunk(chunk.data, chunk.host_ns)
        writer.close()
    with Replay(copy) as replay:
        blocks = [b for s in replay for b in s.blocks]
        first_cal = replay.reducer.calibration
    for block in blocks:
        assert np.all(block.host_ns < switch_ns) or np.all(block.host_ns >= switch_ns)
        cal = later if block.host_ns[0] >= switch_ns else first_cal
        assert np.array_equal(block.reduced.p_pa, apply_calibration(block.raw.counts, rig, block.raw.channels, cal))
    assert any(b.host_ns[0] >= switch_ns for b in blocks) and any(b.host_ns[0] < switch_ns for b in blocks)


@pytest.fixture(scope="module")
def stream(recorded):
    """The recorded bytes in one piece, and a reducer of the session."""
    path, _, _, _ = recorded
    with Replay(path) as replay:
        data = b"".join(c.data for c in replay.reader.chunks())
        return data, replay.reducer


@settings(max_examples=25)
@given(cuts=st.lists(st.integers(min_value=1, max_value=60000), min_size=1, max_size=40))
def test_reduction_does_not_depend_on_where_the_stream_was_cut(stream, cuts):
    # why a fast replay may reduce several chunks' blocks in one call: results are per scan
    data, reducer = stream
    bounds = sorted({0, len(data), *(c % len(data) for c in cuts)})
    decoder = StreamDecoder()
    pieces = [b for i in range(len(bounds) - 1) for b in decoder.feed(data[bounds[i]:bounds[i + 1]])
              if isinstance(b, RawBlock)]
    whole = [b for b in StreamDecoder().feed(data) if isinstance(b, RawBlock)]
    split = [reducer.reduce(b) for b in pieces]
    merged = [reducer.reduce(b) for b in whole]
    assert_identical(merged, split)


def test_no_rig_snapshot_is_refused(tmp_path):
    path = tmp_path / "bare.taprig"
    SessionWriter(path, {"rig_id": "x"}).close()
    with pytest.raises(ReplayError, match="no rig snapshot"):
        Replay(path)


def test_a_calibration_of_another_rig_is_refused(recorded):
    path, _, _, rig = recorded
    foreign = a_calibration(rig, 0.0, 1.0).model_copy(update={"rig_id": "another-rig"})
    with pytest.raises(ReplayError, match="another-rig"):
        Replay(path, calibration=foreign)


@pytest.mark.parametrize("kwargs", [{"speed": 0.0}, {"speed": -1.0}, {"seek_s": -2.0}])
def test_bad_replay_options(recorded, kwargs):
    with pytest.raises(ValueError):
        Replay(recorded[0], **kwargs)


def test_a_replay_can_be_iterated_again(recorded):
    path, live, counters, _ = recorded
    with Replay(path) as replay:
        first = [b.reduced for s in replay for b in s.blocks]
        second = [b.reduced for s in replay for b in s.blocks]
        assert replay.counters.as_dict() == counters
    assert_identical(first, second)


def test_a_seek_past_the_last_chunk_is_refused(recorded):
    path = recorded[0]
    with Replay(path, seek_s=SECONDS / 2) as replay:  # inside the session: replays its second half
        assert sum(s.n_scans for s in replay) > 0
    with pytest.raises(ReplayError, match=r"seek 50 s is past the end of the session \(its last bytes arrived"):
        Replay(path, seek_s=50.0)
    with pytest.raises(ReplayError, match="past the end"):  # too far for nanoseconds in a float: still refused
        Replay(path, seek_s=1e300)


def test_an_endless_seek_is_a_value_error(recorded):
    with pytest.raises(ValueError, match="finite"):
        Replay(recorded[0], seek_s=math.inf)
