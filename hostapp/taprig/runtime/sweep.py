"""Angle-of-attack sweeps: set each angle, let the flow and the tubing settle, capture an averaged point.

Waiting is on *device* time (the scans' own timestamps), so a sweep on the simulated rig in compressed time takes
as long as the data does, and a sweep on a real board is not fooled by a slow host.
"""

from __future__ import annotations

import math
import threading
import time
from dataclasses import dataclass, replace
from typing import Callable, Sequence

from taprig.protocol import ActuatorKind
from taprig.reduce import ReducedMean
from taprig.reduce.polar import LiftCurve, lift_curve
from taprig.reduce.steady import Steadiness, SteadyCriteria, block_steadiness
from taprig.runtime.acquisition import Acquisition, AcquisitionError


@dataclass(frozen=True)
class SweepPoint:
    """One point of a sweep: the commanded angle [rad] and the averaged, reduced result."""

    alpha_rad: float
    mean: ReducedMean


def _angle_actuator(acq: Acquisition) -> str:
    servo = acq.rig.actuator_of_kind(ActuatorKind.ANGLE)
    if servo is None:
        raise AcquisitionError(f"rig {acq.rig.id!r} has no angle actuator; a sweep needs one")
    return servo.name


def wait_device_time(acq: Acquisition, seconds: float, timeout_s: float) -> None:
    """Block until ``seconds`` of device time have passed, counting only time that scans cover.

    Device time restarts when the board reboots (a reset or a replug), so progress is summed block by block
    rather than taken as a difference from the start.
    """
    latest = acq.hub.latest
    previous = latest.block.t_ns[-1] if latest is not None and latest.block is not None else None
    elapsed = 0
    deadline = time.monotonic() + timeout_s
    with acq.hub.subscribe() as sub:
        while time.monotonic() < deadline:
            acq.check_running()  # the board went safe, or the run is ending: stop waiting, say why
            state = sub.get(timeout=min(0.5, max(0.0, deadline - time.monotonic())))
            if state is None or state.block is None:
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


def wait_steady(acq: Acquisition, criteria: SteadyCriteria, timeout_s: float = 30.0) -> Steadiness:
    """Wait until q and the coefficients of the newest ``criteria.hold_s`` are steady (:mod:`taprig.reduce.steady`);
    AcquisitionError saying what moved when ``criteria.timeout_s`` of device time pass first."""
    waited, step = 0.0, criteria.hold_s / criteria.windows
    while True:
        block = acq.recent(criteria.hold_s + 1.0)  # whole blocks: ask for more, the detector keeps the last hold_s
        verdict = block_steadiness(acq.reducer.reduce(block, alpha_rad=acq.alpha_rad), criteria) \
            if block is not None and block.n_scans >= 2 else Steadiness(False, reason="no data yet")
        if verdict.steady:
            return verdict
        if waited >= criteria.timeout_s:
            raise AcquisitionError(f"the flow did not settle within {criteria.timeout_s:g} s: {verdict.reason}")
        wait_device_time(acq, step, timeout_s)
        waited += step


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
    for alpha in angles_rad:
        if stop is not None and stop.is_set():
            acq.event("sweep stopped", {"by": "operator", "points": len(points)})
            break
        acq.check_running()
        acq.set_actuator(name, float(alpha))
        wait_device_time(acq, settle_s + average_s, timeout_s)
        acq.check_flow(average_s)  # a sweep of points without flow would be numbers without meaning
        if steady is not None:
            wait_steady(acq, replace(steady, hold_s=max(steady.hold_s, average_s)), timeout_s)
        mean = acq.capture_point(f"alpha {math.degrees(alpha):+.1f} deg", average_s)
        point = SweepPoint(float(alpha), mean)
        points.append(point)
        if on_point is not None:
            on_point(point)
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
