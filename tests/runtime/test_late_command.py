"""A sweep's command that reaches the board later than the device time it was meant for (a loaded host, a board
that is not paced: the dashboard's station, a real board) must not let a point average scans from before the move.

The board is the simulated one, not paced, at twice real time; every setpoint is held back on the host until the
board has streamed ``LATE_S`` of device time past the newest scan (a host that took that long to decide), so each
command acts long after the ``DECISION_S`` the sweep allows. The reference for when each move began is the
simulated board's own record of when it took each command; each point's averaging window must begin at least
``settle_s`` after that. Both ways the host learns when the board acted are run: the simulated board's clock read
after the reply, and, for a board whose clock the port cannot read (a real one), the first block of scans after
the reply.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from taprig.link import Link
from taprig.protocol import ActuatorKind, SetActuator
from taprig.reduce import Reducer
from taprig.reduce.steady import SteadyCriteria
from taprig.rig import load_rig
from taprig.runtime.acquisition import DECISION_S, Acquisition, session_meta
from taprig.runtime.plan import SweepPlan
from taprig.runtime.sweep import run_plan
from taprig.session.store import SessionWriter

RIG = Path(__file__).resolve().parents[2] / "rigs" / "naca0012-20tap.toml"
#: How far past the newest scan the board runs before each setpoint reaches it [s of device time].
LATE_S = 1.5
SETTLE_S, AVERAGE_S = 0.3, 0.3


@pytest.mark.parametrize("clock", ["readable", "not readable"])
def test_a_late_command_does_not_let_a_point_average_scans_from_before_the_move(tmp_path, monkeypatch, clock):
    rig = load_rig(RIG)
    reducer = Reducer(rig)
    link = Link(f"sim://{RIG}?seed=7&fan_tau=0.1&fan_rate=0&speed=2&watchdog_ms=0", heartbeat=False)
    acq = Acquisition(link, rig, reducer, SessionWriter(tmp_path / "s.taprig",
                                                        session_meta(rig, "sim", reducer.ambient)))
    acq.open(500)  # not paced: each command acts when it arrives, as on the dashboard's station or a real board
    device = link.pacing.device  # the simulated board: its own record of when it took each command
    if clock == "not readable":  # as a real board: the port cannot tell the board's clock
        monkeypatch.setattr(type(link), "pacing", property(lambda self: None))
    sent = link.set_actuator

    def late(actuator_id, value, **kwargs):
        acq.wait_through(acq.newest_t_ns + round(LATE_S * 1e9), 30)
        return sent(actuator_id, value, **kwargs)

    monkeypatch.setattr(link, "set_actuator", late)
    try:
        assert not acq.paced
        plan = SweepPlan("angle", tuple(np.radians([0.0, 2.0, 4.0])), (0.6,))
        points = run_plan(acq, plan, settle_s=SETTLE_S, average_s=AVERAGE_S, spin_up_s=1.0,
                          steady=SteadyCriteria(hold_s=0.6, timeout_s=10.0), safe_at_end=False)
    finally:
        monkeypatch.setattr(link, "set_actuator", sent)  # the safe values at the end go out at once
        acq.close()
    servo = rig.actuator_of_kind(ActuatorKind.ANGLE)
    servo_id = next(a.id for a in device.description.actuators if a.name == servo.name)
    moves = [device._dev_ns(t) for t, _, msg in device.commands
             if isinstance(msg, SetActuator) and msg.actuator_id == servo_id][:3]  # (then the safe value at the end)
    assert len(points) == len(moves) == 3
    for point, moved_ns in zip(points, moves):
        start, end = point.record["window_ns"]
        assert start >= moved_ns + SETTLE_S * 1e9, (start - moved_ns) / 1e9  # the settle, whole, after the move
        assert end - start == pytest.approx(AVERAGE_S * 1e9)
    # and the command was late indeed: the move began well after the DECISION_S allowed
    assert all(b - a > (LATE_S + SETTLE_S + AVERAGE_S) * 1e9 for a, b in zip(moves, moves[1:]))
    assert DECISION_S < LATE_S
    # thin-airfoil theory: 0.1097 per degree (docs/REFERENCES.md); each 2° step must show at least half of it
    cl = [p.mean.default.cl for p in points]
    assert all(b - a > 0.11 for a, b in zip(cl, cl[1:])), cl
