"""The acquisition loop on the simulated rig: record, reduce, events, points, zero, mismatch, and link loss.

The simulated board runs in compressed time (``speed=max``) so seconds of device time take a fraction of that;
its watchdog is off (``watchdog_ms=0``) because in compressed time the host's wall-clock heartbeat cannot keep
pace with the simulated clock.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from taprig.link import Link
from taprig.protocol import RawBlock, StreamDecoder
from taprig.reduce import Reducer
from taprig.rig import load_rig
from taprig.runtime.acquisition import Acquisition, AcquisitionError, session_meta
from taprig.runtime.sweep import run_sweep, sweep_lift_curve, wait_device_time
from taprig.session.store import SessionReader, SessionWriter

RIGS = Path(__file__).resolve().parents[2] / "rigs"
AIRFOIL = RIGS / "naca0012-20tap.toml"


def start(tmp_path, rig_path=AIRFOIL, query="seed=2&speed=max&watchdog_ms=0", host_rig=None, record=True):
    rig = load_rig(host_rig or rig_path)
    reducer = Reducer(rig)
    writer = SessionWriter(tmp_path / "run.taprig", session_meta(rig, "sim", reducer.ambient)) if record else None
    acq = Acquisition(Link(f"sim://{rig_path}?{query}", heartbeat=False), rig, reducer, writer)
    return acq


def test_records_every_byte_and_reduces(tmp_path):
    acq = start(tmp_path)
    acq.open(500)
    try:
        acq.set_actuator("fan", 0.6)
        wait_device_time(acq, 3.0, timeout_s=30)
        acq.note("steady")
        point = acq.capture_point("steady", seconds=1.0)
    finally:
        acq.close()
    assert acq.link.counters.crc_errors == 0 and acq.link.counters.gaps == 0
    assert point.q_pa > 20 and point.n_scans >= 400
    with SessionReader(tmp_path / "run.taprig") as r:
        data = b"".join(c.data for c in r.chunks())
        assert len(data) == acq.link.bytes_received  # nothing lost between the link and the file
        kinds = [e.kind for e in r.events()]
        assert kinds[:3] == ["start", "setpoint", "note"]
        assert [p.kind for p in r.points()] == ["steady"]
        assert r.points()[0].data["q_pa"] == pytest.approx(point.q_pa)
        assert "counters" in r.meta and "device_description" in r.meta
    # The recorded bytes decode to exactly the scans that were reduced live.
    blocks = [i for i in StreamDecoder().feed(data) if isinstance(i, RawBlock)]
    assert sum(b.n_scans for b in blocks) == acq.scans


def test_zero_removes_the_wind_off_offsets(tmp_path):
    acq = start(tmp_path, record=False)
    acq.open(500)
    try:
        wait_device_time(acq, 1.5, timeout_s=30)
        acq.zero(1.0)
        wait_device_time(acq, 1.0, timeout_s=30)
        after = acq.reducer.reduce(acq.recent(0.5))
    finally:
        acq.close()
    gauge = [k for k, ch in enumerate(after.channels) if acq.rig.channel(ch).measures.value != "absolute"]
    # Wind off, a zeroed gauge sensor reads only its noise: common practice is a few counts' worth.
    assert np.all(np.abs(np.nanmean(after.p_pa[:, gauge], axis=0)) < 5.0)


def test_sweep_finds_the_simulated_stall(tmp_path):
    acq = start(tmp_path, record=False, query="seed=4&speed=max&watchdog_ms=0&stall_deg=10")
    acq.open(500)
    try:
        acq.set_actuator("fan", 0.8)
        wait_device_time(acq, 5.0, timeout_s=30)
        points = run_sweep(acq, np.radians(np.arange(-2.0, 15.0, 2.0)), settle_s=1.0, average_s=0.5)
    finally:
        acq.close()
    curve = sweep_lift_curve(points, corrected=False)
    # Lift grows with angle up to the stall and then falls (common practice); the simulated stall is set at 10°.
    assert curve.stalled and 8.0 <= math.degrees(curve.alpha_stall) <= 13.0
    assert 0.07 < curve.slope * math.pi / 180 < 0.125  # per degree, around thin-airfoil 0.1097 (thin-airfoil theory)


def test_board_that_does_not_match_the_rig_is_refused(tmp_path):
    acq = start(tmp_path, rig_path=RIGS / "venturi-8.toml", host_rig=AIRFOIL, record=False)
    with pytest.raises(AcquisitionError, match="does not match rig 'naca0012-20tap'"):
        acq.open(500)
    assert not acq.link.connected


def test_bad_setpoint_is_refused_before_the_board(tmp_path):
    acq = start(tmp_path, record=False)
    acq.open(200)
    try:
        with pytest.raises(AcquisitionError, match="outside its range"):
            acq.set_actuator("fan", 1.5)
        with pytest.raises(AcquisitionError, match="no actuator 'pump'"):
            acq.set_actuator("pump", 0.1)
    finally:
        acq.close()


def test_unplug_mid_run_is_a_recorded_gap_and_the_run_goes_on(tmp_path):
    acq = start(tmp_path, query="seed=5&speed=1&watchdog_ms=0&disconnect=1.0")
    acq.link.backoff_initial_s = 0.05
    acq.open(200)
    try:
        # A lost link halts every automated step, with the cause; the recording goes on through the reconnect.
        with pytest.raises(AcquisitionError, match="link to the board .* was lost"):
            wait_device_time(acq, 2.5, timeout_s=20)
        acq.clear_halt()  # the operator resumes
        wait_device_time(acq, 0.3, timeout_s=20)  # device time runs on after the reconnect (a new boot)
    finally:
        acq.close()
    with SessionReader(tmp_path / "run.taprig") as r:
        kinds = [e.kind for e in r.link_events()]
        events = [e.kind for e in r.events()]
    assert "lost" in kinds and "restored" in kinds and kinds.index("lost") < kinds.index("restored")
    assert events.index("halt") < events.index("halt_cleared") < events.index("shutdown")


def test_replay_of_a_live_run_is_bit_identical(tmp_path):
    """Record live (zero, fan, angle changes), then replay: every reduced array must be equal, NaN for NaN."""
    from taprig.session.replay import Replay

    live = []
    rig = load_rig(AIRFOIL)
    reducer = Reducer(rig)
    writer = SessionWriter(tmp_path / "run.taprig", session_meta(rig, "sim", reducer.ambient))
    writer.add_snapshot("rig", str(AIRFOIL), rig.source_text)
    acq = Acquisition(Link(f"sim://{AIRFOIL}?seed=8&speed=max&watchdog_ms=0&ber=2e-6", heartbeat=False), rig,
                      reducer, writer, on_block=lambda host_ns, block: live.append(block), reduce_backlog=100_000)
    acq.open(500)
    try:
        wait_device_time(acq, 1.0, timeout_s=30)
        acq.zero(0.5)
        acq.set_actuator("fan", 0.7)
        for degrees in (2.0, 6.0, -3.0):
            acq.set_actuator("alpha", math.radians(degrees))
            wait_device_time(acq, 0.7, timeout_s=30)
    finally:
        acq.close()
    assert acq.link.counters.crc_errors > 0  # the link was noisy, so identity is not trivial
    assert acq.display_skipped == 0
    replayed = [b.reduced for step in Replay(tmp_path / "run.taprig") for b in step.blocks]
    fields = ("t_ns", "scan_index", "p_pa", "cp", "q_pa", "v_ms", "re", "alpha_rad", "cl", "cd_p", "cm_qc",
              "scan_flags", "channel_flags")
    for name in fields:
        a = np.concatenate([getattr(b, name) for b in live])
        b = np.concatenate([getattr(b, name) for b in replayed])
        assert np.array_equal(a, b, equal_nan=a.dtype.kind == "f"), name
    alphas = np.unique(np.concatenate([b.alpha_rad for b in live]))
    assert len(alphas) >= 4  # safe 0, then three setpoints


def test_the_newest_seconds_are_exactly_those_scans_whatever_blocks_they_came_in():
    # A point of "the last second" at 500 Hz is 500 scans, also when the blocks are larger than the window (a
    # compressed board's big chunks) or a block began before it: before, such a block was left out whole.
    from taprig.runtime.acquisition import _Window

    def block(first_scan, n):
        idx = np.arange(first_scan, first_scan + n)
        return RawBlock(np.zeros((n, 2), dtype=np.int32), (0, 1), idx * 2_000_000, idx)

    window = _Window(10.0)
    for first in (0, 700, 1400):  # 1.4 s blocks of 700 scans
        window.add(block(first, 700))
    last = window.last(1.0)
    assert last.n_scans == 500 and last.t_ns[-1] == 2099 * 2_000_000 and last.t_ns[0] == 1600 * 2_000_000
    window.add(block(0, 100))  # the board restarted: its clock begins again, older scans are of another clock
    assert window.last(1.0).n_scans == 100
