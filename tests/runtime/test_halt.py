"""The halt and the one shutdown path, on the simulated rig in this process (compressed time).

What the board received is read from the simulated board's own record of commands (``SimulatedDevice.commands``).
The rule (README, Safety): once the board has gone safe on its own, an automated sequence sends it nothing but
safe values, keeps the points it took, and says the true cause; every ending leaves the actuators at safe values.
"""

from __future__ import annotations

import dataclasses
import math
import threading
from pathlib import Path

import numpy as np
import pytest

from taprig.link import Link
from taprig.protocol import ActuatorKind, DeviceState, ReplyCode, SetActuator, Stop
from taprig.reduce import Reducer
from taprig.rig import load_rig
from taprig.runtime.acquisition import Acquisition, AcquisitionError, session_meta
from taprig.runtime.sweep import run_sweep, wait_device_time
from taprig.session.store import SessionReader, SessionWriter

RIGS = Path(__file__).resolve().parents[2] / "rigs"
AIRFOIL = RIGS / "naca0012-20tap.toml"


def start(tmp_path, query: str, heartbeat: bool = False) -> Acquisition:
    rig = load_rig(AIRFOIL)
    reducer = Reducer(rig)
    writer = SessionWriter(tmp_path / "run.taprig", session_meta(rig, "sim", reducer.ambient))
    acq = Acquisition(Link(f"sim://{AIRFOIL}?{query}", heartbeat=heartbeat), rig, reducer, writer)
    acq.open(500)
    acq.board = acq.link._port.device  # the simulated board behind the port, for its record of commands
    return acq


def moves_after(acq: Acquisition, t_ns: float) -> list:
    """SET_ACTUATOR commands the board received from ``t_ns`` on with a value other than the actuator's safe one."""
    safe = {a.id: a.to_device(a.safe) for a in acq.rig.actuators}
    return [m for t, _, m in acq.board.commands
            if t >= t_ns and isinstance(m, SetActuator) and not math.isclose(m.value, safe[m.actuator_id], abs_tol=1e-6)]


def events(tmp_path) -> list:
    with SessionReader(tmp_path / "run.taprig") as r:
        return r.events()


def press_reset(acq: Acquisition) -> None:
    """Reboot the simulated board now, as its reset button would (under the port's lock, as its reader)."""
    with acq.link._port._lock:
        acq.board.press_reset()


def test_a_watchdog_trip_stops_a_sweep_and_nothing_more_moves(tmp_path):
    # No heartbeat from the host (as when it freezes): the board trips 1 s after the last command, in the first
    # step's settling time.
    acq = start(tmp_path, "seed=2&speed=1&watchdog_ms=1000")
    taken = []
    try:
        with pytest.raises(AcquisitionError, match="watchdog tripped") as caught:
            acq.set_actuator("fan", 0.8)
            run_sweep(acq, np.radians(np.arange(-4.0, 12.0, 2.0)), settle_s=1.0, average_s=0.3,
                      on_point=taken.append)
    finally:
        report = acq.close()
    assert "check the fan" not in str(caught.value)
    assert acq.halted.is_set() and acq.halt_reason == str(caught.value)
    trip_ns = next(t for t, state, m in acq.board.commands if state is DeviceState.SAFE)
    assert moves_after(acq, trip_ns) == []  # the first command after the trip, and all after it, are safe values
    assert all(o.acknowledged for o in report.actuators)
    kinds = [e.kind for e in events(tmp_path)]
    assert kinds.count("halt") == 1 and kinds[-1] == "shutdown"
    assert len([e for e in events(tmp_path) if e.kind == "setpoint" and e.data.get("by") == "board"]) == 2
    assert taken == []


def test_a_board_reset_stops_a_sweep_keeping_its_points(tmp_path):
    acq = start(tmp_path, "seed=4&speed=max&watchdog_ms=0")
    taken = []

    def on_point(point):
        taken.append(point)
        if len(taken) == 2:
            press_reset(acq)
            assert acq.halted.wait(10)  # the reboot reaches the host while the sweep is between steps

    try:
        acq.set_actuator("fan", 0.8)
        wait_device_time(acq, 3.0, timeout_s=30)
        with pytest.raises(AcquisitionError, match="the board restarted"):
            run_sweep(acq, np.radians(np.arange(-4.0, 16.0, 1.0)), settle_s=0.3, average_s=0.3, on_point=on_point)
        boot_ns = acq.board._boot_ns
        with pytest.raises(AcquisitionError, match="the board restarted"):
            acq.set_actuator("fan", 0.5)  # nothing but a safe value until the operator resumes
        acq.set_actuator("alpha", 0.0)  # a safe value may always be sent
    finally:
        acq.close()
    assert len(taken) == 2
    assert moves_after(acq, boot_ns) == []
    with SessionReader(tmp_path / "run.taprig") as r:
        assert len(r.points()) == 2
        assert r.meta["stop_reason"] == "run ended"


def test_clear_halt_lets_the_operator_resume(tmp_path):
    acq = start(tmp_path, "seed=4&speed=max&watchdog_ms=0")
    try:
        acq.set_actuator("fan", 0.5)
        wait_device_time(acq, 0.5, timeout_s=30)
        press_reset(acq)
        with pytest.raises(AcquisitionError, match="restarted"):
            wait_device_time(acq, 5.0, timeout_s=30)
        acq.clear_halt()
        acq.set_actuator("fan", 0.5)
        assert not acq.halted.is_set()
    finally:
        acq.close()
    kinds = [e.kind for e in events(tmp_path)]
    assert kinds.index("halt") < kinds.index("halt_cleared")


def test_shutdown_is_one_path_called_once_from_any_thread(tmp_path):
    acq = start(tmp_path, "seed=2&speed=max&watchdog_ms=0")
    acq.set_actuator("fan", 0.6)
    wait_device_time(acq, 0.5, timeout_s=30)
    reports = []
    threads = [threading.Thread(target=lambda: reports.append(acq.shutdown(f"caller {k}"))) for k in range(3)]
    for t in threads:
        t.start()
    reports.append(acq.close())
    for t in threads:
        t.join(30)
    assert len(reports) == 4 and all(r is reports[0] for r in reports)  # one shutdown, one report
    commands = [m for _, _, m in acq.board.commands]
    tail = commands[-3:]
    assert [type(m) for m in tail] == [SetActuator, SetActuator, Stop]
    assert tail[0].actuator_id == acq.rig.actuator_of_kind(ActuatorKind.FAN).id  # the fan first
    assert sum(isinstance(m, Stop) for m in commands) == 1
    with pytest.raises(AcquisitionError, match="ending"):
        acq.set_actuator("fan", 0.5)
    session = tmp_path / "run.taprig"
    assert not Path(f"{session}-wal").exists() and not Path(f"{session}-shm").exists()
    kinds = [e.kind for e in events(tmp_path)]
    assert kinds.count("shutdown") == 1 and "caller" in events(tmp_path)[-1].data["reason"] + "run ended"


def test_a_dead_link_is_said_plainly(tmp_path):
    acq = start(tmp_path, "seed=5&speed=1&watchdog_ms=500&disconnect=0.5", heartbeat=True)
    acq.link.reconnect = False
    try:
        acq.set_actuator("fan", 0.4)
        with pytest.raises(AcquisitionError, match="link to the board .* was lost") as caught:
            wait_device_time(acq, 5.0, timeout_s=20)
    finally:
        report = acq.close()
    assert not report.link_up and not any(o.sent for o in report.actuators)
    text = " ".join(report.lines())
    assert "watchdog" in text and "within 500 ms" in text
    for word in ("SetActuator", "Error", "Exception"):
        assert word not in text and word not in str(caught.value)
    shutdown = [e for e in events(tmp_path) if e.kind == "shutdown"][0].data
    assert shutdown["link_up"] is False and "lost" in shutdown["halt_reason"]


def test_a_setpoint_that_reaches_the_board_after_its_trip_is_refused_and_the_run_halts_with_the_cause(
        tmp_path, monkeypatch):
    # The race the board's safe hold closes (PROTOCOL.md §4): the host froze between its last look at its quiet
    # time and the write, so neither its own check nor the trip's STATUS/LOG (not read yet) stops the setpoint.
    # Played deterministically: the host's two views of the trip are switched off, the board trips, then the
    # setpoint goes out. The board refuses it (BUSY), nothing moves, and the run halts saying why.
    acq = start(tmp_path, "seed=2&speed=1&watchdog_ms=400")
    try:
        acq.set_actuator("fan", 0.6)
        monkeypatch.setattr(acq, "_watch_safety", lambda items, host_ns: None)  # the trip's news not read yet
        monkeypatch.setattr(acq, "_check_host_stall", lambda: None)  # frozen after the host's own look
        done = threading.Event()
        while not acq.board.held:
            done.wait(0.02)
        assert not acq.halted.is_set()
        fan = acq.rig.actuator_of_kind(ActuatorKind.FAN)
        with pytest.raises(AcquisitionError, match="watchdog tripped.*refused fan 0.8 and nothing moved"):
            acq.set_actuator("fan", 0.8)
        assert acq.halted.is_set() and "operator" in acq.halt_reason
        assert acq.board.actuators[fan.id].setpoint == fan.to_device(fan.safe)
        refused = [(m, acq.board.command_codes[i]) for i, (_, _, m) in enumerate(acq.board.commands)
                   if isinstance(m, SetActuator) and m.value == pytest.approx(0.8)]
        assert [code for _, code in refused] == [ReplyCode.BUSY]
        with pytest.raises(AcquisitionError, match="watchdog tripped"):
            acq.set_actuator("fan", 0.8)  # halted: not even sent
        acq.clear_halt()  # the operator checked the rig and resumes: ALLOW_MOVES, then moves are taken again
        assert not acq.board.held
        acq.set_actuator("fan", 0.5)
        assert acq.board.actuators[fan.id].setpoint == pytest.approx(0.5)
    finally:
        report = acq.close()
    assert all(o.acknowledged for o in report.actuators)
    sent = [type(m).__name__ for _, _, m in acq.board.commands]
    assert sent.count("AllowMoves") == 2  # one at the start of the run, one on the operator's resume
    assert sent.index("AllowMoves", 1) > max(i for i, (_, _, m) in enumerate(acq.board.commands)
                                              if isinstance(m, SetActuator) and m.value == pytest.approx(0.8))
    kinds = [e.kind for e in events(tmp_path)]
    assert kinds.index("halt") < kinds.index("allow_moves") < kinds.index("halt_cleared")
    refused_events = [e for e in events(tmp_path) if e.kind == "setpoint" and e.data.get("refused")]
    assert refused_events and refused_events[0].data["value"] == pytest.approx(0.6)  # back to what it was


def test_a_board_of_protocol_1_0_is_sent_no_allow_moves_and_the_operator_is_told(tmp_path, monkeypatch):
    # PROTOCOL.md §2, §4: a 1.0 board has no safe hold and knows no ALLOW_MOVES; the host keeps its own check and
    # says the board cannot refuse a stale move after a trip.
    import taprig.sim.device as sim_device

    real = sim_device.build_description
    monkeypatch.setattr(sim_device, "build_description",
                        lambda rig, options: dataclasses.replace(real(rig, options), proto_minor=0))
    acq = start(tmp_path, "seed=4&speed=max&watchdog_ms=0")
    try:
        assert not acq.link.board_holds_safe
        (notice,) = acq.notices
        assert "protocol 1.0" in notice and "update the firmware" in notice
        acq.set_actuator("fan", 0.5)
        press_reset(acq)
        with pytest.raises(AcquisitionError, match="restarted"):
            wait_device_time(acq, 5.0, timeout_s=30)
        acq.clear_halt()
        acq.set_actuator("fan", 0.5)
    finally:
        acq.close()
    assert not any(type(m).__name__ == "AllowMoves" for _, _, m in acq.board.commands)
    assert "board without safe hold" in [e.kind for e in events(tmp_path)]


def test_a_halt_noted_while_a_setpoint_is_decided_never_follows_the_setpoint_record(tmp_path, monkeypatch):
    # A host frozen between its look at the halt and the setpoint's record wakes to both at once: the halt (the
    # reader thread) and the setpoint (the sweep). The record must never show a move decided after a halt the
    # host had seen: either the halt comes first and the move is refused, or the move is recorded before the halt.
    acq = start(tmp_path, "seed=11")
    try:
        looked = threading.Event()
        real_check = acq.check_running

        def check_then_halt():  # the sweep's look passes; the reader notes a halt right after it
            real_check()
            threading.Thread(target=acq._halt, args=("the board's watchdog tripped (test)",)).start()
            looked.set()
            threading.Event().wait(0.2)  # the halting thread runs meanwhile, as after a freeze

        monkeypatch.setattr(acq, "check_running", check_then_halt)
        try:
            acq.set_actuator("alpha", math.radians(2.0))
        except AcquisitionError:
            pass
        assert looked.is_set() and acq.halted.wait(2.0)
    finally:
        acq.close()
    recorded = [e for e in events(tmp_path) if e.kind in ("halt", "setpoint")]
    halt = next(i for i, e in enumerate(recorded) if e.kind == "halt")
    moves = [e.data for e in recorded if e.kind == "setpoint" and e.data["actuator"] == "alpha"
             and e.data.get("by") != "board" and not e.data.get("refused") and e.data["value"] != 0.0]
    after = [e.data for e in recorded[halt + 1:] if e.data in moves]
    assert moves and after == []  # the 2° move was recorded, and before the halt
