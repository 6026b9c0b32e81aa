"""Going on with an interrupted sweep: which sessions hold one, whether it can go on on this rig, and carrying its
points into the new session. ``taprig sweep --resume`` and the dashboard's resume use these same functions (the
plan and its points are read by :func:`taprig.runtime.sweep.read_resumable`)."""

from __future__ import annotations

from pathlib import Path

from taprig.runtime.plan import PlanError
from taprig.runtime.sweep import Resumable, check_plan, read_resumable
from taprig.session.store import SessionError


def open_resumable(path, rig) -> Resumable:
    """The interrupted sweep of the session ``path``, checked to go on on ``rig``: :class:`PlanError` saying why
    not (no sweep in it, unreadable, another rig, complete, outside this rig's limits)."""
    try:
        resumed = read_resumable(path)
    except SessionError as exc:
        raise PlanError(str(exc)) from None
    except OSError as exc:
        raise PlanError(f"{path}: cannot read the session ({exc.strerror or exc})") from None
    if resumed.rig_id != rig.id:
        raise PlanError(f"{path}: its sweep ran on rig {resumed.rig_id!r}, not {rig.id!r}")
    if resumed.complete:
        raise PlanError(f"{path}: its sweep is complete ({len(resumed.records)} points); nothing to resume")
    try:
        check_plan(rig, resumed.plan)
    except PlanError as exc:
        raise PlanError(f"{path}: {exc}") from None
    return resumed


def carry_points(acq, resumed: Resumable, source) -> list[dict]:
    """Record that this session goes on with the sweep of ``source`` and copy its points into this session (when
    recording), each marked ``carried_from`` with the first session's id; returns the carried records in order."""
    acq.event("sweep resumed", {"session_id": resumed.session_id, "file": str(source),
                                "points": len(resumed.records)})
    carried = []
    for record in resumed.records:
        copy = dict(record, carried_from=resumed.session_id)
        if acq.writer is not None:
            acq.writer.add_point(str(record.get("label") or "sweep point"), copy)
        carried.append(copy)
    return carried


def describe_resumable(resumed: Resumable) -> dict:
    """What an operator needs to decide on resuming: the points taken, the most the plan can take, the next point
    (its number from 1, label, leg, commanded angle [°] and fan setting) and the plan's own description."""
    import math

    nxt = resumed.plan.next_point(resumed.records)
    plan = resumed.plan
    return {"taken": len(resumed.records), "at_most": plan.size_bound(), "inner": plan.inner,
            "fans": list(plan.fans), "angles_deg": [math.degrees(a) for a in plan.angles_rad],
            "up_and_down": plan.up_and_down, "past_stall": plan.past_stall, "by_hand": plan.by_hand,
            "settle_s": resumed.settle_s, "average_s": resumed.average_s, "spin_up_s": resumed.spin_up_s,
            "next": None if nxt is None else {
                "number": nxt.index + 1, "label": nxt.label(), "leg": nxt.leg, "fan": nxt.fan,
                "alpha_deg": None if nxt.alpha_rad is None else math.degrees(nxt.alpha_rad)}}


def resumable_sessions(folder, rig, limit: int = 50) -> list[dict]:
    """The sessions of ``folder`` (newest first, at most ``limit`` looked at) whose sweep on ``rig`` was
    interrupted and can go on here: ``{"name", "session_id", **describe_resumable}`` each. Sessions with no sweep,
    a complete one, another rig's, an unreadable one, and one whose sweep another session of the folder went on
    with are left out."""
    files = sorted(Path(folder).glob("*.taprig"), key=lambda p: p.stat().st_mtime, reverse=True)[:limit]
    found, carried_on = [], set()
    for path in files:
        carried_on.update(_resumed_by(path))
        try:
            found.append((path, open_resumable(path, rig)))
        except PlanError:
            continue
    return [{"name": path.name, "session_id": r.session_id, **describe_resumable(r)}
            for path, r in found if r.session_id not in carried_on]


def _resumed_by(path) -> set[str]:
    """The ids of the sessions whose sweep the session ``path`` went on with (its ``sweep resumed`` events)."""
    from taprig.session.store import SessionReader

    try:
        with SessionReader(path) as reader:
            return {str(e.data.get("session_id")) for e in reader.events()
                    if e.kind == "sweep resumed" and isinstance(e.data, dict)}
    except (SessionError, OSError):
        return set()
