"""Sweep plans: which setpoints a sweep visits, in what order, and where it turns back. Pure (no I/O, no clock).

A :class:`SweepPlan` sweeps one variable, the *inner* one (the angle of attack, or the fan), through ascending
values, at each value of the *outer* one (the fan settings of an angle sweep: several make a nested sweep; the one
fixed angle of a fan sweep, or none). Each inner run is a leg ``"up"``; with ``up_and_down`` a leg ``"down"``
follows through the same values in reverse (the top one is not repeated), so the hysteresis loop pairs points by
their commanded value. With ``past_stall = n`` the up leg of an angle sweep ends once ``n`` points lie beyond the
stall detected in the points so far (:func:`taprig.analysis.find_stall`: the lift fell below its maximum by more
than its tolerance), and the down leg starts from the highest angle reached.

The next point depends on the points already taken (the stall), so the plan is asked one point at a time:
:meth:`SweepPlan.next_point` of the point records taken so far, in order. The same records give the same next
point, so a sweep resumed from the records of an interrupted session visits exactly the points that an
uninterrupted run would have.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Mapping, Sequence

from taprig.analysis import find_stall, point_table

#: Point records a plan reads from (besides what :func:`taprig.analysis.point_table` reads).
PLAN_INDEX = "plan_index"

#: Most points one sweep may plan (a guard against a step typed in the wrong unit).
MAX_POINTS = 2000


class PlanError(ValueError):
    """A plan that cannot be run as asked (the message names the value and what was expected)."""


@dataclass(frozen=True)
class PlanPoint:
    """One planned point: its ``index`` in the whole sweep (from 0), the commanded ``alpha_rad`` [rad] and ``fan``
    (in the fan's unit; None when the plan leaves that actuator alone), the ``leg`` (``"up"``/``"down"``), the
    ``group`` (index of the outer value) and ``by_hand`` (the operator sets the angle and confirms)."""

    index: int
    alpha_rad: float | None
    fan: float | None
    leg: str
    group: int
    by_hand: bool = False

    def label(self) -> str:
        """A short label for the point's record: ``α +4.0° fan 0.60 up``."""
        parts = []
        if self.alpha_rad is not None:
            parts.append(f"α {math.degrees(self.alpha_rad):+.1f}°{' (by hand)' if self.by_hand else ''}")
        if self.fan is not None:
            parts.append(f"fan {self.fan:.3g}")
        parts.append(self.leg)
        return " ".join(parts)


@dataclass(frozen=True)
class SweepPlan:
    """What a sweep visits (see the module docstring).

    ``inner`` is ``"angle"`` or ``"fan"``; ``angles_rad`` the angles [rad] (ascending; one fixed angle, or none,
    for a fan sweep); ``fans`` the fan settings (ascending; empty: the plan leaves the fan as it is);
    ``up_and_down`` adds the way back; ``past_stall`` (angle sweeps) ends each up leg that many points past the
    detected stall; ``by_hand`` the operator sets each angle by hand.
    """

    inner: str
    angles_rad: tuple[float, ...] = ()
    fans: tuple[float, ...] = ()
    up_and_down: bool = False
    past_stall: int | None = None
    by_hand: bool = False
    stall_tolerance: float = field(default=0.05)

    def __post_init__(self):
        if self.inner not in ("angle", "fan"):
            raise PlanError(f"a sweep's inner variable is 'angle' or 'fan', got {self.inner!r}")
        values = self.angles_rad if self.inner == "angle" else self.fans
        if len(values) < 2:
            raise PlanError(f"a {self.inner} sweep needs at least 2 {self.inner} values, got {len(values)}")
        for name, seq in (("angles", self.angles_rad), ("fan settings", self.fans)):
            if any(not math.isfinite(v) for v in seq):
                raise PlanError(f"the sweep's {name} must be finite numbers")
            if any(b <= a for a, b in zip(seq, seq[1:])):
                raise PlanError(f"the sweep's {name} must rise from first to last (a leg down is added by "
                                "up-and-down)")
        if self.inner == "fan" and len(self.angles_rad) > 1:
            raise PlanError("a fan sweep holds one angle (or none)")
        if self.past_stall is not None and (self.inner != "angle" or self.past_stall < 0):
            raise PlanError("points past the stall apply to an angle sweep, and count 0 or more")
        if self.by_hand and not self.angles_rad:
            raise PlanError("a sweep by hand needs the angles the operator is to set")
        if self.size_bound() > MAX_POINTS:
            raise PlanError(f"the sweep plans up to {self.size_bound()} points, more than {MAX_POINTS}; take "
                            "larger steps")

    # -- shape -----------------------------------------------------------------------------------------------
    def _outer(self) -> tuple:
        if self.inner == "angle":
            return self.fans or (None,)
        return self.angles_rad or (None,)

    def _inner(self) -> tuple:
        return self.angles_rad if self.inner == "angle" else self.fans

    def size_bound(self) -> int:
        """The most points the plan can visit (every up leg to its end, and back down when asked)."""
        n = len(self._inner())
        return len(self._outer()) * (n + (n - 1 if self.up_and_down else 0))

    def _point(self, index: int, group: int, outer, value, leg: str) -> PlanPoint:
        if self.inner == "angle":
            return PlanPoint(index, float(value), None if outer is None else float(outer), leg, group, self.by_hand)
        return PlanPoint(index, None if outer is None else float(outer), float(value), leg, group, self.by_hand)

    # -- walking -----------------------------------------------------------------------------------------------
    def next_point(self, done: Sequence[Mapping]) -> PlanPoint | None:
        """The point to take after the records ``done`` (in the order taken), or None when the sweep is complete.

        Raises :class:`PlanError` when a record does not belong to this plan where it stands (a resumed session
        whose points were taken by another plan).
        """
        index = 0
        for group, outer in enumerate(self._outer()):
            reached: list[float] = []
            for value in self._inner():
                point = self._point(index, group, outer, value, "up")
                if index >= len(done):
                    return point
                self._check(point, done[index])
                reached.append(value)
                index += 1
                if self._ended_past_stall(done[index - len(reached): index]):
                    break
            if self.up_and_down:
                for value in reversed(reached[:-1]):
                    point = self._point(index, group, outer, value, "down")
                    if index >= len(done):
                        return point
                    self._check(point, done[index])
                    index += 1
        return None

    def planned(self) -> list[PlanPoint]:
        """Every point of a plan whose turns do not depend on the points' results (no ``past_stall``), in order."""
        if self.past_stall is not None:
            raise PlanError("a plan that turns at the stall is known only as its points are taken")
        out: list[PlanPoint] = []
        records: list[dict] = []
        while (p := self.next_point(records)) is not None:
            out.append(p)
            records.append(point_record_keys(p))
        return out

    def _ended_past_stall(self, leg: Sequence[Mapping]) -> bool:
        if self.past_stall is None or len(leg) < 3:
            return False
        table = point_table(leg, "shape")  # the commanded angle: the turn must not depend on wall corrections
        try:
            stall = find_stall(table.alpha_set_rad, table.cl, table.u_cl, tolerance=self.stall_tolerance)
        except ValueError:  # fewer than 3 points with a Cl (no flow at some): go on to the end of the range
            return False
        if not stall.stalled:
            return False
        beyond = sum(1 for a in table.alpha_set_rad if a > stall.alpha_cl_max + 1e-12)
        return beyond >= max(self.past_stall, 1)

    @staticmethod
    def _check(point: PlanPoint, record: Mapping) -> None:
        got = record.get(PLAN_INDEX)
        same = got == point.index and str(record.get("leg") or "") == point.leg
        for key, want in (("plan_alpha_rad", point.alpha_rad), ("fan", point.fan)):
            value = record.get(key)
            if want is None:
                continue
            same = same and isinstance(value, (int, float)) and math.isclose(float(value), want, abs_tol=1e-9)
        if not same:
            raise PlanError(f"point {point.index + 1} of the session ({record.get('label', '?')!r}) is not the "
                            f"plan's point {point.index + 1} ({point.label()}): the session's points were taken "
                            "by another sweep")

    # -- storage ---------------------------------------------------------------------------------------------
    def to_dict(self) -> dict:
        """The plan as JSON-able data (the ``sweep plan`` event of a session; docs/session-format.md)."""
        return {"inner": self.inner, "angles_rad": list(self.angles_rad), "fans": list(self.fans),
                "up_and_down": self.up_and_down, "past_stall": self.past_stall, "by_hand": self.by_hand,
                "stall_tolerance": self.stall_tolerance}

    @classmethod
    def from_dict(cls, data: Mapping) -> SweepPlan:
        """The plan stored by :meth:`to_dict`; :class:`PlanError` naming the field when it is not one."""
        try:
            past = data.get("past_stall")
            return cls(str(data["inner"]), tuple(float(a) for a in data.get("angles_rad") or ()),
                       tuple(float(f) for f in data.get("fans") or ()), bool(data.get("up_and_down", False)),
                       None if past is None else int(past), bool(data.get("by_hand", False)),
                       float(data.get("stall_tolerance", 0.05)))
        except (KeyError, TypeError, ValueError, AttributeError) as exc:
            if isinstance(exc, PlanError):
                raise
            raise PlanError(f"the stored sweep plan is not one ({type(exc).__name__}: {exc})") from None


def point_record_keys(point: PlanPoint) -> dict:
    """The fields a sweep adds to a point's record for ``point`` (docs/session-format.md, Points)."""
    return {PLAN_INDEX: point.index, "leg": point.leg, "group": point.group, "plan_alpha_rad": point.alpha_rad,
            "fan": point.fan, "by_hand": point.by_hand}
