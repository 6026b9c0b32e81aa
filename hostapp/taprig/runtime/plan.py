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


# -- a plan from what the operator typed: the terminal's options and the page's form alike -------------------------
#: The words a message uses for each field of :class:`SweepRequest`: the terminal names its options.
CLI_NAMES = {"fans": "--fans", "fan": "--fan", "from_deg": "--from-deg", "to_deg": "--to-deg",
             "step_deg": "--step-deg", "at_deg": "--at-deg", "up_and_down": "--up-and-down",
             "past_stall": "--past-stall", "by_hand": "--by-hand"}

#: Most angles, or fan settings, one range may give (a guard against a step typed in the wrong unit).
MAX_VALUES = 1000


class FieldError(PlanError):
    """A value the operator gave that cannot make a plan: ``field`` names it (a key of :data:`CLI_NAMES`), the
    message says what was expected."""

    def __init__(self, field: str, message: str):
        super().__init__(message)
        self.field = field


def parse_fan_settings(text: str, name: str = "fan settings") -> tuple[float, ...]:
    """Fan settings typed as a list (``0.3,0.5,0.8``) or a range ``FROM:TO:STEP`` (``0.3:0.9:0.2``, TO included
    when a step lands on it), each a finite number, rising. :class:`FieldError` (field ``fans``) otherwise;
    ``name`` is how the message names the field."""
    text = str(text).strip()
    said = f"{name} {text!r}".strip()
    expected = FieldError("fans", f"{said}: expected fan settings as 0.3,0.5,0.8 or FROM:TO:STEP")
    try:
        parts = tuple(float(part) for part in text.split(":" if ":" in text else ","))
    except ValueError:
        raise expected from None
    if ":" in text:
        if len(parts) != 3 or not all(map(math.isfinite, parts)) or parts[2] <= 0:
            raise expected
        start, stop, step = parts
        if stop < start:
            raise FieldError("fans", f"{said}: the range runs down (FROM {start:g} above TO {stop:g}); give it "
                                     "from the lower setting up (up and down adds the way back)")
        n = int(math.floor((stop - start) / step + 1e-9)) + 1
        if n > MAX_VALUES:
            raise FieldError("fans", f"{said} is more than {MAX_VALUES} fan settings")
        values = tuple(round(start + k * step, 12) for k in range(n))
    else:
        values = parts
    if not all(map(math.isfinite, values)):
        raise FieldError("fans", f"{said}: expected finite fan settings")
    if any(b <= a for a, b in zip(values, values[1:])):
        raise FieldError("fans", f"{said}: the settings must rise from first to last (up and down adds the way "
                                 "back)")
    return values


@dataclass(frozen=True)
class SweepRequest:
    """A sweep as the operator asks for it, at the terminal (``taprig sweep``'s options) or on the page's form.

    ``fans``: fan settings to sweep (None: none); ``fan``: the fan setting held during an angle sweep (None: the
    plan leaves the fan as it is); ``from_deg``/``to_deg``/``step_deg``: the angles (``to_deg`` None: the servo's
    upper limit); ``at_deg``: hold this angle and sweep the fan. Which sweep it makes: an angle sweep where the rig
    has an angle servo and no ``at_deg`` is given, or ``by_hand`` (nested when ``fans`` are given too); else a fan
    sweep (at ``at_deg`` on a rig with a servo). ``inner`` ("angle" or "fan"), when given, says which instead:
    a fan sweep on a rig with a servo then needs ``at_deg``, and an angle sweep on a rig without one ``by_hand``.
    """

    fans: tuple[float, ...] | None = None
    fan: float | None = 0.8
    from_deg: float = -4.0
    to_deg: float | None = None
    step_deg: float = 2.0
    at_deg: float | None = None
    up_and_down: bool = False
    past_stall: int | None = None
    by_hand: bool = False
    inner: str | None = None


def _limits_deg(actuator) -> tuple[float, float]:
    return math.degrees(actuator.min), math.degrees(actuator.max)


def request_angles(rig, req: SweepRequest, names: Mapping[str, str] = CLI_NAMES) -> tuple[float, ...]:
    """The angles [rad] of ``req`` on ``rig``: ``from_deg`` to ``to_deg`` in ``step_deg`` steps, at least 3, all
    within the servo's limits (refused, not clipped); a range that runs down says so. :class:`FieldError`."""
    from taprig.protocol import ActuatorKind

    n_ = names
    for key in ("from_deg", "step_deg") + (("to_deg",) if req.to_deg is not None else ()):
        value = getattr(req, key)
        if not isinstance(value, (int, float)) or not math.isfinite(value):
            raise FieldError(key, f"{n_[key]} must be a finite number, got {value}")
    if req.step_deg <= 0:
        raise FieldError("step_deg", f"{n_['step_deg']} must be positive, got {req.step_deg:g}")
    servo = rig.actuator_of_kind(ActuatorKind.ANGLE)
    if servo is None and not req.by_hand:
        raise FieldError("by_hand", f"an angle sweep steps the angle of attack, but this rig has no angle actuator "
                                    f"({n_['by_hand']}: the operator sets each angle; {n_['fans']}: sweep the fan)")
    if req.to_deg is None and servo is None:
        raise FieldError("to_deg", f"{n_['to_deg']} is needed for a sweep by hand (there is no servo whose limit "
                                   "to go to)")
    start = float(req.from_deg)
    stop = _limits_deg(servo)[1] if req.to_deg is None else float(req.to_deg)
    if stop < start:
        raise FieldError("from_deg", f"{n_['from_deg']} {start:g} is above {n_['to_deg']} {stop:g}: the range runs "
                                     f"down; give it from the lower angle up ({n_['up_and_down']} adds the way back)")
    if (stop - start) / req.step_deg > MAX_VALUES:
        raise FieldError("step_deg", f"{n_['from_deg']} {start:g} to {stop:g} in steps of {req.step_deg:g}° is "
                                     f"more than {MAX_VALUES} angles; take a larger {n_['step_deg']}")
    n = int(math.floor((stop - start) / req.step_deg + 1e-9)) + 1
    if servo is not None:
        lo, hi = _limits_deg(servo)
        if start < lo - 1e-9 or stop > hi + 1e-9:
            raise FieldError("from_deg" if start < lo - 1e-9 else "to_deg",
                             f"{n_['from_deg']} {start:g} … {n_['to_deg']} {stop:g} reaches outside the servo's "
                             f"limits {lo:g}…{hi:g}°: angles outside them are refused, not clipped (a sweep needs "
                             "at least 3 angles within the servo's limits)")
    if n < 3:
        raise FieldError("step_deg", f"{n_['from_deg']} {start:g} to {stop:g} in steps of {req.step_deg:g}° makes "
                                     f"{n} angle{'s' if n != 1 else ''}; a sweep needs at least 3")
    return tuple(math.radians(start + k * req.step_deg) for k in range(n))


def _check_fans(fan, values: Sequence[float], key: str, names: Mapping[str, str]) -> None:
    """Fan settings within the fan's range and, for a swept setting, not its safe (off) value."""
    for value in values:
        if not fan.min - 1e-12 <= value <= fan.max + 1e-12:
            raise FieldError(key, f"{names[key]} {value:g} is outside the fan's range {fan.min:g} … {fan.max:g} "
                                  f"({fan.unit}); a sweep refuses it rather than clip")
    if key == "fans" and any(abs(v - fan.safe) < 1e-12 for v in values):
        raise FieldError(key, f"{names[key]}: {fan.safe:g} is the fan's safe (off) value: a point needs flow")


def plan_from_request(rig, req: SweepRequest, names: Mapping[str, str] = CLI_NAMES) -> SweepPlan:
    """The :class:`SweepPlan` of ``req`` on ``rig``, every value checked against the rig's actuators before
    anything opens or moves: :class:`FieldError` naming the field (as ``names`` calls it) and what was expected.
    The terminal and the page both make their plans here."""
    from taprig.protocol import ActuatorKind

    servo, fan = rig.actuator_of_kind(ActuatorKind.ANGLE), rig.actuator_of_kind(ActuatorKind.FAN)
    n_ = names
    if fan is None:
        raise FieldError("fans", "this rig has no fan actuator for the sweep to start")
    if req.fans is None and req.fan is not None:
        if not isinstance(req.fan, (int, float)) or not math.isfinite(req.fan):
            raise FieldError("fan", f"{n_['fan']} must be a finite number, got {req.fan}")
        if not fan.min <= req.fan <= fan.max:
            raise FieldError("fan", f"{n_['fan']} {req.fan:g} is outside the fan's range {fan.min:g} … {fan.max:g} "
                                    f"({fan.unit})")
    if req.by_hand and servo is not None:
        raise FieldError("by_hand", f"{n_['by_hand']} is for a rig with no angle servo; this rig sets its angle "
                                    f"with {servo.name!r}")
    if req.by_hand and req.at_deg is not None:
        raise FieldError("at_deg", f"{n_['by_hand']} and {n_['at_deg']} exclude each other (a sweep by hand steps "
                                   "the angle)")
    if req.past_stall is not None and (isinstance(req.past_stall, bool) or req.past_stall < 0):
        raise FieldError("past_stall", f"{n_['past_stall']} counts points: a whole number 0 or more")
    if req.inner not in (None, "angle", "fan"):
        raise FieldError("inner", f"a sweep steps the angle or the fan, not {req.inner!r}")
    if req.inner == "fan" and req.by_hand:
        raise FieldError("by_hand", f"a fan sweep sets no angle by hand ({n_['by_hand']} steps the angle)")
    if req.inner == "fan" and servo is not None and req.at_deg is None:
        raise FieldError("at_deg", f"{n_['at_deg']}: a fan sweep of this rig holds the model at one angle; give it "
                                   "in degrees")
    angle_sweep = req.by_hand or (servo is not None and req.at_deg is None)
    if req.inner == "angle" or (req.inner is None and angle_sweep):
        angles = request_angles(rig, req, names)
        if req.fans is not None:
            _check_fans(fan, req.fans, "fans", names)
        fans = req.fans or (() if req.fan is None else (float(req.fan),))
        try:
            return SweepPlan("angle", angles, tuple(fans), req.up_and_down, req.past_stall, req.by_hand)
        except PlanError as exc:
            raise FieldError("fans" if req.fans else "from_deg", str(exc)) from None
    if req.fans is None:
        what = "this rig has no angle servo" if servo is None else f"{n_['at_deg']} holds the angle"
        raise FieldError("fans", f"{what}: give the fan settings to sweep with {n_['fans']} (0.3,0.5,0.8 or "
                                 "FROM:TO:STEP)" + (f", or {n_['by_hand']} to set angles by hand" if rig.section else ""))
    if len(req.fans) < 2:
        raise FieldError("fans", f"{n_['fans']} gives {len(req.fans)} setting; a fan sweep needs at least 2")
    if req.past_stall is not None:
        raise FieldError("past_stall", f"{n_['past_stall']} ends an angle sweep past its stall; this is a fan sweep")
    held: tuple[float, ...] = ()
    if req.at_deg is not None:
        if servo is None:
            raise FieldError("at_deg", f"{n_['at_deg']} holds the servo's angle, but this rig has no angle servo")
        lo, hi = _limits_deg(servo)
        if not (isinstance(req.at_deg, (int, float)) and math.isfinite(req.at_deg)
                and lo - 1e-9 <= req.at_deg <= hi + 1e-9):
            raise FieldError("at_deg", f"{n_['at_deg']} {req.at_deg:g}° is outside the servo's limits {lo:g}…{hi:g}°; "
                                       "a sweep refuses it rather than clip")
        held = (math.radians(req.at_deg),)
    _check_fans(fan, req.fans, "fans", names)
    try:
        return SweepPlan("fan", held, tuple(req.fans), req.up_and_down)
    except PlanError as exc:
        raise FieldError("fans", str(exc)) from None
