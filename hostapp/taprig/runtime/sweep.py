"""Sweeps: set each point's angle and fan (a :class:`taprig.runtime.plan.SweepPlan`), let the flow and the
tubing settle, capture an averaged point.

Everything is timed on *device* time, the scans' own timestamps (:class:`Timeline`): each wait ends at a device
time the sweep chose, each point averages the scans of an exact device-time window, and each command is meant to
act at a device time the sweep chose too (``DECISION_S`` after the scans it was decided on). A board that can be
paced (the simulated one) acts at exactly that time and, in compressed time, waits there for the host; so the
same seed gives the same points in real and in compressed time. A real board (or one not paced) acts when the
command arrives: usually a moment before that time, after it when the host was slow; the waits after a command
count from the later of its time and a device time by which the board had acted (:meth:`Timeline.set`), so a
sweep is not fooled by a slow host either way.

Every point's record carries what the analysis needs besides the reduced mean (docs/session-format.md, Points):
the plan's index, leg and group, the commanded angle and fan setting, whether the angle was set by hand, and each
tap's Cp fluctuation (the unsteadiness indicator's input).
"""

from __future__ import annotations

import math
import threading
import time
from dataclasses import dataclass, replace
from typing import Callable, Mapping, Protocol, Sequence

import numpy as np

from taprig.protocol import ActuatorKind
from taprig.reduce import ReducedMean
from taprig.reduce.polar import LiftCurve, lift_curve
from taprig.reduce.steady import Steadiness, SteadyCriteria, block_steadiness
from taprig.runtime.acquisition import DECISION_S, Acquisition, AcquisitionError
from taprig.runtime.plan import PlanError, PlanPoint, SweepPlan, point_record_keys


@dataclass(frozen=True)
class SweepPoint:
    """One point of a sweep: the angle [rad] (commanded, or set by hand; None when the rig has none), the
    averaged, reduced result, and its plan point and record (None for a point of :func:`run_sweep`)."""

    alpha_rad: float | None
    mean: ReducedMean
    plan: PlanPoint | None = None
    record: Mapping | None = None


class HandOperator(Protocol):
    """Whoever sets the angle of a rig with no servo: the terminal, or the dashboard's page."""

    def set_angle(self, point: PlanPoint) -> float | None:
        """Ask for the model at ``point.alpha_rad``; return the angle the operator set [rad], or None to stop the
        sweep there. May raise :class:`AcquisitionError` (the run is ending)."""


def _angle_actuator(acq: Acquisition) -> str:
    servo = acq.rig.actuator_of_kind(ActuatorKind.ANGLE)
    if servo is None:
        raise AcquisitionError(f"rig {acq.rig.id!r} has no angle actuator; a sweep needs one")
    return servo.name


class Timeline:
    """A sweep's clock in device time [ns on the board's clock]: ``cursor`` is when its next command acts; ``end``
    the end of its last wait, where the windows it averages end.

    :meth:`wait_until` moves the board's horizon to ``end + DECISION_S`` (the next command's time) and waits for
    the scans up to ``end``; so on a paced board the next command acts exactly ``DECISION_S`` after the scans it
    was decided on, whatever the host's speed.
    On a board that is not paced the windows end at the newest scan once the wait is over (the board did not wait
    for the host), as close to the end asked for as the host's speed allows.
    """

    def __init__(self, acq: Acquisition, cursor_ns: int, timeout_s: float = 30.0):
        self.acq, self.timeout_s = acq, timeout_s
        self.cursor = int(cursor_ns)
        self.end = int(cursor_ns)
        acq.pace(self.cursor)

    @classmethod
    def begin(cls, acq: Acquisition, timeout_s: float = 30.0) -> Timeline:
        """A timeline from the start of a paced stream that has not begun yet (the same device time in every mode),
        or ``DECISION_S`` after the board's time now on a paced board that runs already; else from the newest scan
        (waiting for the first)."""
        start = None
        if acq.paced:
            now, first = acq.board_time_ns(), acq.stream_start_ns
            start = first if now is not None and first is not None and now <= first else None
            if start is None and now is not None:
                start = now + round(DECISION_S * 1e9)
        if start is None:
            acq.wait_through(-(1 << 62), timeout_s)  # any scan at all
            start = acq.newest_t_ns
        return cls(acq, start, timeout_s)

    def wait(self, seconds: float, timeout_s: float | None = None) -> None:
        """Wait until ``seconds`` of device time after the cursor."""
        self.wait_until(self.cursor + round(seconds * 1e9), timeout_s)

    def wait_until(self, end_ns: int, timeout_s: float | None = None) -> None:
        """Wait for the scans up to device time ``end_ns``; the next command acts ``DECISION_S`` after it."""
        self.cursor = int(end_ns) + round(DECISION_S * 1e9)
        self.acq.pace(self.cursor)
        self.acq.wait_through(int(end_ns), self.timeout_s if timeout_s is None else timeout_s)
        self.end = int(end_ns)
        if not self.acq.paced:  # the board ran on meanwhile (a real one a moment, an unpaced compressed one far):
            self.end = max(self.end, self.acq.newest_t_ns or self.end)  # its newest scans, not ones long gone
            self.cursor = self.end + round(DECISION_S * 1e9)

    def window(self, seconds: float) -> tuple[int, int]:
        """The device-time window [start, end) of ``seconds`` ending where the last wait ended; on a board that is
        not paced, ending with the newest scan now (an unpaced compressed board may have run on by more than the
        scans kept since the wait ended)."""
        end = self.end
        if not self.acq.paced:
            newest = self.acq.newest_t_ns
            end = max(end, newest + 1) if newest is not None else end
        return end - round(seconds * 1e9), end

    def set(self, name: str, value: float) -> None:
        """Set an actuator, to act at the cursor (a paced board; a real one acts on arrival); the waits after it
        count from when the board acted, if that was later (a command that arrived after its time: a slow host,
        a board that is not paced), so no settle is shorter than asked and no window averages scans from before
        the move (:meth:`Acquisition.acted_by_ns`)."""
        self.acq.set_actuator(name, value, at_t_ns=self.cursor if self.acq.paced else None)
        acted = self.acq.acted_by_ns(name, self.timeout_s)
        if acted is not None and acted > self.cursor:
            self.cursor = acted

    def after_operator(self) -> None:
        """The operator set something by hand just now: the next wait starts from now, not from before."""
        newest = self.acq.newest_t_ns
        if newest is not None:
            self.cursor = max(self.cursor, newest + round(DECISION_S * 1e9))
            self.acq.pace(self.cursor)

    def steady(self, criteria: SteadyCriteria, fan_changed: tuple[int, float] | None = None) -> Steadiness:
        """Wait, from the end of the last wait on, until q and the coefficients of the ``criteria.hold_s`` before
        the end are steady (:mod:`taprig.reduce.steady`); with ``fan_changed`` (the fan command's device time
        [ns], q before it [Pa]) also until the bound on the approach still to come is within q's tolerance
        (:func:`~taprig.reduce.steady.approach_bound`, over up to 8 holds since the change). AcquisitionError
        saying what moved when ``criteria.timeout_s`` of device time pass first (after a fan change:
        ``criteria.spin_up_timeout_s`` from the change, if later)."""
        acq, first = self.acq, self.end
        step = round(criteria.hold_s / criteria.windows * 1e9)
        limit = first + round(criteria.timeout_s * 1e9)
        since, q_before = fan_changed if fan_changed is not None else (None, 0.0)
        if since is not None:
            limit = max(limit, int(since) + round(criteria.spin_up_timeout_s * 1e9))
        while True:
            span = criteria.hold_s
            if since is not None:
                span = max(span, min((self.end - since) / 1e9, 8 * criteria.hold_s))
            block = acq.scans_between(*self.window(span))
            verdict = block_steadiness(acq.reducer.reduce(block, alpha_rad=acq.alpha_rad), criteria, since,
                                       q_before) \
                if block is not None and block.n_scans >= 2 else Steadiness(False, reason="no data yet")
            if verdict.steady:
                return verdict
            if self.end >= limit:
                raise AcquisitionError(f"the flow did not settle within {(limit - first) / 1e9:g} s: "
                                       f"{verdict.reason}")
            self.wait_until(self.end + step)

    def q_now(self, seconds: float = 0.5) -> float:
        """The mean q of the ``seconds`` before the end of the last wait [Pa] (0 with no flow or no scans)."""
        block = self.acq.scans_between(*self.window(seconds))
        if block is None or block.n_scans < 1:
            return 0.0
        q = self.acq.reducer.reduce(block, alpha_rad=self.acq.alpha_rad).q_pa
        return float(np.nanmean(q)) if np.isfinite(q).any() else 0.0


def wait_device_time(acq: Acquisition, seconds: float, timeout_s: float) -> None:
    """Block until ``seconds`` of device time have passed, counting only time that scans cover.

    Device time restarts when the board reboots (a reset or a replug), so progress is summed block by block
    rather than taken as a difference from the start. Only scans that reached the host after the call count: the
    blocks still queued for reduction were on their way before (a command just sent has not acted on them).
    """
    started_ns = time.time_ns()
    previous = None
    elapsed = 0
    deadline = time.monotonic() + timeout_s
    with acq.hub.subscribe() as sub:
        while time.monotonic() < deadline:
            acq.check_running()  # the board went safe, or the run is ending: stop waiting, say why
            state = sub.get(timeout=min(0.5, max(0.0, deadline - time.monotonic())))
            if state is None or state.block is None or state.host_ns < started_ns:
                continue
            first, last = int(state.block.t_ns[0]), int(state.block.t_ns[-1])
            if previous is None or last < previous:  # the first block seen, or the board restarted
                previous = first
            elapsed += last - previous
            previous = last
            if elapsed >= seconds * 1e9:
                return
    acq.check_running()
    raise AcquisitionError(f"no data for {timeout_s:g} s while waiting for the flow to settle (link {acq.link_state})")


def run_sweep(acq: Acquisition, angles_rad: Sequence[float], settle_s: float = 1.0, average_s: float = 1.0,
              timeout_s: float = 30.0, on_point: Callable[[SweepPoint], None] | None = None,
              stop: threading.Event | None = None,
              steady: SteadyCriteria | None = None) -> list[SweepPoint]:
    """Step the angle actuator through ``angles_rad``, capturing a point of ``average_s`` after ``settle_s`` each,
    and with ``steady`` (``taprig sweep`` passes the default criteria) only once q and the coefficients are steady
    over at least ``average_s``.

    ``stop``, when set (by the operator, from another thread), ends the sweep before its next step; the points
    taken so far are returned and nothing more is sent.

    When the board goes safe on its own (a halt: watchdog, reset, lost link) or the run is asked to end, the sweep
    stops at once, sends nothing more, keeps the points already taken (``on_point`` has seen each) and raises
    :class:`AcquisitionError` with the cause.
    """
    name = _angle_actuator(acq)
    points = []
    acq.check_running()
    acq.event("sweep", {"angles_rad": list(map(float, angles_rad)), "settle_s": settle_s, "average_s": average_s})
    clock = Timeline.begin(acq, timeout_s)
    clock.wait_until(clock.cursor)  # from the newest scan, or the start of a paced stream
    try:
        for alpha in angles_rad:
            if stop is not None and stop.is_set():
                acq.event("sweep stopped", {"by": "operator", "points": len(points)})
                break
            acq.check_running()
            clock.set(name, float(alpha))
            clock.wait(settle_s + average_s)
            acq.check_flow(average_s, clock.window(average_s))  # points without flow would be numbers without meaning
            extra = {"plan_index": len(points), "leg": "up", "plan_alpha_rad": float(alpha),
                     "fan": _fan_setting(acq), "by_hand": False}
            if steady is not None:
                extra["steady"] = clock.steady(replace(steady, hold_s=max(steady.hold_s, average_s))).as_record()
            mean = acq.capture_point(f"alpha {math.degrees(alpha):+.1f} deg", average_s, extra,
                                     window=clock.window(average_s))
            point = SweepPoint(float(alpha), mean, None, acq.last_record)
            points.append(point)
            if on_point is not None:
                on_point(point)
    finally:
        acq.pace(None)
    return points


def _fan_setting(acq: Acquisition) -> float | None:
    fan = acq.rig.actuator_of_kind(ActuatorKind.FAN)
    return None if fan is None else float(acq.setpoints[fan.name])


def check_plan(rig, plan: SweepPlan) -> None:
    """Refuse a plan the rig cannot run (:class:`PlanError` naming the value and the limit), before anything
    opens or moves: angles and fan settings outside the actuators' limits are refused, never clipped."""
    servo, fan = rig.actuator_of_kind(ActuatorKind.ANGLE), rig.actuator_of_kind(ActuatorKind.FAN)
    if plan.angles_rad and not plan.by_hand:
        if servo is None:
            raise PlanError(f"rig {rig.id!r} has no angle actuator: set the angles by hand (by-hand sweep), or "
                            "sweep the fan")
        lo, hi = min(plan.angles_rad), max(plan.angles_rad)
        if lo < servo.min - 1e-9 or hi > servo.max + 1e-9:
            raise PlanError(f"angles {math.degrees(lo):g}…{math.degrees(hi):g}° reach outside the servo's limits "
                            f"{math.degrees(servo.min):g}…{math.degrees(servo.max):g}°; a sweep refuses them "
                            "rather than clip")
    if plan.by_hand and servo is not None:
        raise PlanError(f"rig {rig.id!r} sets its angle with its servo; a by-hand sweep is for a rig without one")
    if plan.fans:
        if fan is None:
            raise PlanError(f"rig {rig.id!r} has no fan actuator to set")
        lo, hi = min(plan.fans), max(plan.fans)
        if lo < fan.min - 1e-12 or hi > fan.max + 1e-12:
            raise PlanError(f"fan settings {lo:g}…{hi:g} reach outside the fan's range {fan.min:g} … {fan.max:g} "
                            f"({fan.unit}); a sweep refuses them rather than clip")
        if any(abs(f - fan.safe) < 1e-12 for f in plan.fans):
            raise PlanError(f"fan setting {fan.safe:g} is the fan's safe (off) value: a point needs flow")


def run_plan(acq: Acquisition, plan: SweepPlan, settle_s: float = 1.0, average_s: float = 1.0,
             timeout_s: float = 30.0, on_point: Callable[[SweepPoint], None] | None = None,
             stop: threading.Event | None = None, steady: SteadyCriteria | None = None,
             done: Sequence[Mapping] = (), spin_up_s: float = 4.0, operator: HandOperator | None = None,
             safe_at_end: bool = True, start_ns: int | None = None) -> list[SweepPoint]:
    """Take the points of ``plan`` after the records ``done`` (empty, or an interrupted sweep's), in order.

    Each point: set the fan when its setting changes (then wait ``spin_up_s``), set the angle (the servo, or
    ``operator`` for a sweep by hand), wait ``settle_s`` + ``average_s`` of device time, check for flow, wait
    for steady flow with ``steady``, capture ``average_s`` (recorded with the plan's fields, module docstring).

    Timing is on device time (module docstring): the first command acts at device time ``start_ns`` (default:
    ``DECISION_S`` after the newest scan), each wait and window follows from it.

    ``stop`` (set from another thread) ends the sweep before its next point; the operator may stop it too. When
    the plan is complete or stopped, and ``safe_at_end``, every actuator the plan drove goes back to its safe
    value. A halt of the board or the run ending raises :class:`AcquisitionError` at once (the points taken are
    kept, ``on_point`` has seen each); nothing more is sent then: the run's shutdown sends the safe values.
    """
    check_plan(acq.rig, plan)
    if plan.by_hand and operator is None:
        raise AcquisitionError("a sweep by hand needs an operator to set the angles")
    servo, fan = acq.rig.actuator_of_kind(ActuatorKind.ANGLE), acq.rig.actuator_of_kind(ActuatorKind.FAN)
    records, points = list(done), []
    acq.check_running()
    acq.event("sweep plan", {"plan": plan.to_dict(), "settle_s": settle_s, "average_s": average_s,
                             "spin_up_s": spin_up_s, "resumed_after": len(records)})
    driven, fan_changed = set(), None
    if start_ns is None:
        clock = Timeline.begin(acq, timeout_s)
        clock.wait_until(clock.cursor)
    else:
        clock = Timeline(acq, start_ns, timeout_s)
    try:
        while (target := plan.next_point(records)) is not None:
            if stop is not None and stop.is_set():
                acq.event("sweep stopped", {"by": "operator", "points": len(records)})
                break
            acq.check_running()
            if target.fan is not None and acq.setpoints[fan.name] != target.fan:
                q_before = clock.q_now()
                clock.set(fan.name, target.fan)
                fan_changed = (clock.cursor, q_before)  # the first point after it waits for its approach
                driven.add(fan.name)
                clock.wait(spin_up_s, timeout_s + spin_up_s)
            if target.alpha_rad is not None:
                if plan.by_hand:
                    angle = operator.set_angle(target)
                    if angle is None:
                        acq.event("sweep stopped", {"by": "operator", "points": len(records)})
                        break
                    acq.set_angle_by_hand(angle)
                    clock.after_operator()
                else:
                    clock.set(servo.name, target.alpha_rad)
                    driven.add(servo.name)
            clock.wait(settle_s + average_s)
            acq.check_flow(average_s, clock.window(average_s))  # points without flow would be numbers without meaning
            extra = point_record_keys(target)
            if steady is not None:
                extra["steady"] = clock.steady(replace(steady, hold_s=max(steady.hold_s, average_s)),
                                               fan_changed).as_record()
            fan_changed = None
            mean = acq.capture_point(target.label(), average_s, extra, window=clock.window(average_s))
            records.append(acq.last_record)
            point = SweepPoint(acq.alpha_rad, mean, target, acq.last_record)
            points.append(point)
            if on_point is not None:
                on_point(point)
    finally:
        acq.pace(None)  # the board runs free again (a paced one waits for nobody now)
    if safe_at_end:
        for actuator in acq.rig.actuators:
            if actuator.name in driven:
                acq.set_actuator(actuator.name, actuator.safe)
    return points


def sweep_lift_curve(points: Sequence[SweepPoint], corrected: bool = True) -> LiftCurve:
    """The lift curve of a sweep from each point's default (shape-aware, wall-corrected if asked) coefficients."""
    alphas, cls = [], []
    for p in points:
        coeffs = (p.mean.corrected if corrected and p.mean.corrected is not None else p.mean.default)
        if coeffs is None:
            continue
        alpha = p.mean.wall.alpha if corrected and p.mean.corrected is not None and p.mean.wall is not None else p.alpha_rad
        alphas.append(alpha)
        cls.append(coeffs.cl)
    return lift_curve(alphas, cls)


@dataclass(frozen=True)
class Resumable:
    """What an interrupted sweep's session holds to go on from: its ``plan``, its pacing (``settle_s``,
    ``average_s``, ``spin_up_s``), the ``records`` of its points in order, its ``session_id`` and ``rig_id``."""

    plan: SweepPlan
    settle_s: float
    average_s: float
    spin_up_s: float
    records: tuple
    session_id: str
    rig_id: str

    @property
    def complete(self) -> bool:
        """True when the plan has no point left to take."""
        return self.plan.next_point(self.records) is None


def read_resumable(path) -> Resumable:
    """The sweep recorded in the session file ``path``, to resume (:class:`PlanError` when it holds none, or
    points of another plan; :class:`taprig.session.store.SessionError` when it cannot be read)."""
    from taprig.session.store import SessionReader

    with SessionReader(path) as reader:
        meta = dict(reader.meta)
        plans = [e for e in reader.events() if e.kind == "sweep plan" and isinstance(e.data, dict)]
        entries = reader.points()
    if not plans:
        raise PlanError(f"{path}: holds no sweep plan (recorded by `taprig sweep` of this version) to resume")
    stored = plans[-1].data
    plan = SweepPlan.from_dict(stored.get("plan") or {})
    records = tuple(e.data for e in entries if isinstance(e.data, dict) and "plan_index" in e.data)
    settings = []
    for key, default in (("settle_s", 1.0), ("average_s", 1.0), ("spin_up_s", 4.0)):
        value = stored.get(key, default)
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value) or value < 0:
            raise PlanError(f"{path}: the sweep plan's {key} is {value!r}, expected a number of seconds")
        settings.append(float(value))
    plan.next_point(records)  # the points must be this plan's, in its order
    return Resumable(plan, *settings, records, str(meta.get("session_id", "")), str(meta.get("rig_id", "")))
