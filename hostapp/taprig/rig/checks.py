"""Cross-checks between a rig's tables, the rig against a device's self-description, the tap arrays the reducer
integrates over, and what a rig can compute.

:func:`cross_check` returns every issue it finds (it never stops at the first), each naming the key path in the
file. It runs inside :class:`taprig.rig.model.Rig` validation, after each table has passed its own checks.

:func:`compare_with_description` checks a rig against the board it is about to talk to (the runtime refuses a
mismatch with its messages). The board's self-description (PROTOCOL.md §3) lists its channels by index with their
encodings, and its actuators with limits in the board's own unit (degrees for an angle actuator). A rig may use a
subset of the board's channels and actuators; everything it does use must match.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass

import numpy as np

from taprig.protocol import ActuatorKind, Description, encoding_name
from taprig.rig.errors import RigIssue
from taprig.rig.model import Actuator, Measures, Medium, Rig, RigKind, Surface
from taprig.rig.sensors import Quantity

SECTION_KINDS = (RigKind.AIRFOIL, RigKind.BUMP)
NAMED_REFERENCES = ("static", "total")
# Tap keys each kind uses (the file keys); a tap key outside its kind's set is an error, not ignored.
TAP_KEYS = {
    RigKind.AIRFOIL: ({"x_c", "surface"}, {"y_c"}),
    RigKind.BUMP: ({"x_c", "surface"}, {"y_c"}),
    RigKind.VENTURI: ({"x_mm"}, {"area_mm2"}),
    RigKind.CYLINDER: ({"theta_deg"}, set()),
}
MIN_TAPS = {RigKind.AIRFOIL: 3, RigKind.BUMP: 3, RigKind.VENTURI: 2, RigKind.CYLINDER: 3, RigKind.OTHER: 0}


def _a(word: str) -> str:
    return f"an {word}" if word[0] in "aeiou" else f"a {word}"


def _repeats(values: Iterable) -> list[tuple[int, object]]:
    """(position, value) of every value that already occurred earlier in the sequence."""
    seen: set = set()
    out = []
    for i, v in enumerate(values):
        if v in seen:
            out.append((i, v))
        seen.add(v)
    return out


def _check_channels(rig: Rig) -> list[RigIssue]:
    issues = []
    for i, dup in _repeats(c.index for c in rig.channels):
        issues.append(RigIssue(f"channels[{i}].index", "device index already used by an earlier channel", dup))
    for i, dup in _repeats(c.name for c in rig.channels):
        issues.append(RigIssue(f"channels[{i}].name", "channel name already used by an earlier channel", dup))
    names = {c.name for c in rig.channels}
    for i, ch in enumerate(rig.channels):
        key = f"channels[{i}]"
        sensor = rig.sensors.get(ch.sensor)
        if sensor is None:
            issues.append(RigIssue(f"{key}.sensor", f"no [sensors.{ch.sensor}] table; defined: {', '.join(rig.sensors)}", ch.sensor))
            continue
        if sensor.quantity is Quantity.PRESSURE and ch.measures is None:
            issues.append(RigIssue(f"{key}.measures", "a pressure channel must say what it measures: absolute, gauge or differential"))
        if sensor.quantity is Quantity.FORCE and ch.measures is not None:
            issues.append(RigIssue(f"{key}.measures", "only pressure channels take 'measures' (this sensor measures force)", ch.measures.value))
        if ch.measures is Measures.DIFFERENTIAL:
            if ch.relative_to is None:
                issues.append(RigIssue(f"{key}.relative_to", "a differential channel needs relative_to: 'static', 'total' or a channel name"))
            elif ch.relative_to not in names and ch.relative_to not in NAMED_REFERENCES:
                issues.append(RigIssue(f"{key}.relative_to", "expected 'static', 'total' or the name of a channel", ch.relative_to))
        elif ch.relative_to is not None:
            issues.append(RigIssue(f"{key}.relative_to", "only a differential channel has a reference", ch.relative_to))
    refers = {c.name: c.relative_to for c in rig.channels if c.measures is Measures.DIFFERENTIAL and c.relative_to}
    for i, ch in enumerate(rig.channels):
        chain, name = [ch.name], refers.get(ch.name)
        while name in refers and name not in chain:
            chain.append(name)
            name = refers[name]
        if name == ch.name:  # reported once per loop, at its first channel in file order
            if min(chain, key=[c.name for c in rig.channels].index) == ch.name:
                issues.append(RigIssue(f"channels[{i}].relative_to", "channels refer to each other in a loop: "
                                       + " → ".join(chain + [ch.name]), ch.relative_to))
    return issues


def _pressure_channel(rig: Rig, key: str, name: str | None, issues: list[RigIssue], quantity=Quantity.PRESSURE) -> bool:
    """Check that ``name`` is a channel of the given quantity; record an issue and return False if not."""
    if name is None:
        return False
    if name not in {c.name for c in rig.channels}:
        issues.append(RigIssue(key, f"no channel of that name; channels: {', '.join(c.name for c in rig.channels)}", name))
        return False
    sensor = rig.sensors.get(rig.channel(name).sensor)
    if sensor is not None and sensor.quantity is not quantity:
        issues.append(RigIssue(key, f"channel must measure {quantity.value}, its sensor measures {sensor.quantity.value}", name))
        return False
    return True


def _check_references(rig: Rig) -> list[RigIssue]:
    issues: list[RigIssue] = []
    ref = rig.reference
    for field in ("static", "total", "pitot", "atmosphere"):
        _pressure_channel(rig, f"reference.{field}", getattr(ref, field), issues)
    if ref.pitot is not None and ref.pitot in {c.name for c in rig.channels}:
        if rig.channel(ref.pitot).measures is not Measures.DIFFERENTIAL:
            issues.append(RigIssue("reference.pitot", "the pitot channel must be a differential channel (total − static)", ref.pitot))
    if ref.atmosphere is not None and ref.atmosphere in {c.name for c in rig.channels}:
        if rig.channel(ref.atmosphere).measures is not Measures.ABSOLUTE:
            issues.append(RigIssue("reference.atmosphere", "the atmosphere channel must be an absolute channel", ref.atmosphere))
    if ref.inlet is not None and ref.inlet not in {t.name for t in rig.taps}:
        issues.append(RigIssue("reference.inlet", "no tap of that name", ref.inlet))
    issues += _check_static_source(rig)
    needs_q = rig.kind in (RigKind.AIRFOIL, RigKind.CYLINDER, RigKind.BUMP)
    if needs_q and ref.pitot is None and (ref.static is None or ref.total is None):
        issues.append(RigIssue("reference", f"{_a(rig.kind.value)} rig needs a dynamic-pressure source: pitot, or static and total"))
    if rig.balance is not None:
        for field in ("lift", "drag"):
            _pressure_channel(rig, f"balance.{field}", getattr(rig.balance, field), issues, Quantity.FORCE)
    return issues


def _ends_at_room(rig: Rig, name: str, depth: int = 0) -> bool:
    """True when channel ``name``'s reading is referred (through differential chains) to the room or vacuum, so
    referring it to the freestream needs the freestream static as a pressure, not as a port."""
    names = {c.name for c in rig.channels}
    if name not in names or depth > 8:
        return False
    ch = rig.channel(name)
    if ch.measures in (Measures.GAUGE, Measures.ABSOLUTE):
        return True
    if ch.measures is Measures.DIFFERENTIAL and ch.relative_to not in (None, *NAMED_REFERENCES):
        return _ends_at_room(rig, ch.relative_to, depth + 1)
    return False


def needs_static_source(rig: Rig) -> bool:
    """True when no channel gives the freestream static but the taps need it: the rig must say where it comes from."""
    if rig.reference.static is not None or rig.kind is RigKind.VENTURI:
        return False
    return any(_ends_at_room(rig, t.channel) for t in rig.taps)


_SOURCE_KEYS = {"suction": ("inlet_loss", "inlet_loss_u"), "factor": ("static_factor", "static_factor_u"),
                "room": (), "channel": ()}


def _check_static_source(rig: Rig) -> list[RigIssue]:
    ref = rig.reference
    issues: list[RigIssue] = []
    source = ref.static_source.value if ref.static_source is not None else None
    if ref.static is not None and source not in (None, "channel"):
        issues.append(RigIssue("reference.static_source", f"reference.static = {ref.static!r} is the freestream "
                               "static; static_source must then be 'channel' or left out", source))
    if source == "channel" and ref.static is None:
        issues.append(RigIssue("reference.static_source", "'channel' needs reference.static = the channel whose "
                               "port is the freestream static", source))
    for key in ("inlet_loss", "inlet_loss_u", "static_factor", "static_factor_u"):
        if getattr(ref, key) is not None and key not in _SOURCE_KEYS.get(source, ()):
            issues.append(RigIssue(f"reference.{key}", f"only used with static_source = "
                                   f"{'suction' if key.startswith('inlet') else 'factor'!r}", getattr(ref, key)))
    for key in _SOURCE_KEYS.get(source, ()):
        if getattr(ref, key) is None:
            issues.append(RigIssue(f"reference.{key}", f"static_source = {source!r} needs {key} "
                                   "(a value and its standard uncertainty, docs/rig-file.md)"))
    if source in ("suction", "factor") and ref.pitot is None:
        issues.append(RigIssue("reference.static_source", f"{source!r} refers the static to the room through q, "
                               "which needs a pitot differential channel (reference.pitot)", source))
    if source is None and needs_static_source(rig):
        issues.append(RigIssue(
            "reference.static_source",
            "no channel measures the freestream static pressure and the taps are referred to the room: say where "
            "it comes from: static_source = 'suction' (open-circuit suction tunnel, with inlet_loss and "
            "inlet_loss_u), 'factor' (measured with the empty tunnel, with static_factor and static_factor_u; "
            "docs/calibration.md) or 'room' (an open jet discharging into the room)"))
    return issues


def _tap_keys(tap) -> set[str]:
    return {type(tap).model_fields[n].alias or n for n in tap.model_fields_set} - {"name", "channel"}


def _check_taps(rig: Rig) -> list[RigIssue]:
    issues = []
    for i, dup in _repeats(t.name for t in rig.taps):
        issues.append(RigIssue(f"taps[{i}].name", "tap name already used by an earlier tap", dup))
    for i, dup in _repeats(t.channel for t in rig.taps):
        issues.append(RigIssue(f"taps[{i}].channel", "channel already read by an earlier tap", dup))
    for i, tap in enumerate(rig.taps):
        _pressure_channel(rig, f"taps[{i}].channel", tap.channel, issues)
        if rig.kind in TAP_KEYS:
            needed, optional = TAP_KEYS[rig.kind]
            keys = _tap_keys(tap)
            for k in sorted(needed - keys):
                issues.append(RigIssue(f"taps[{i}].{k}", f"missing: {_a(rig.kind.value)} tap needs {', '.join(sorted(needed))}"))
            for k in sorted(keys - needed - optional):
                issues.append(RigIssue(f"taps[{i}].{k}", f"not used by {_a(rig.kind.value)} rig", getattr(tap, k, None)))
    if len(rig.taps) < MIN_TAPS[rig.kind]:
        issues.append(RigIssue("taps", f"{_a(rig.kind.value)} rig needs at least {MIN_TAPS[rig.kind]} taps, found {len(rig.taps)}"))
    return issues


def _check_geometry(rig: Rig) -> list[RigIssue]:
    issues = []
    g = rig.geometry
    if rig.kind in SECTION_KINDS:
        if rig.section is None:
            issues.append(RigIssue("section", f"{_a(rig.kind.value)} rig needs a [section] (naca or coordinates)"))
        if g.chord is None:
            issues.append(RigIssue("geometry.chord_mm", f"{_a(rig.kind.value)} rig needs the chord"))
    if rig.kind is RigKind.CYLINDER and g.diameter is None:
        issues.append(RigIssue("geometry.diameter_mm", "a cylinder rig needs the diameter"))
    if rig.kind is RigKind.VENTURI:
        for i, tap in enumerate(rig.taps):
            if tap.area is None and g.area_table is None:
                issues.append(RigIssue(f"taps[{i}].area_mm2", "missing: give area_mm2 or a [geometry.area_table]"))
            elif tap.area is None and tap.x is not None and not g.area_table.x[0] <= tap.x <= g.area_table.x[-1]:
                issues.append(RigIssue(f"taps[{i}].x_mm", "station outside the area table", round(tap.x * 1e3, 6)))
    return issues


def _check_surface(rig: Rig) -> list[RigIssue]:
    if rig.kind not in SECTION_KINDS or rig.section is None:
        return []
    shape, tol = rig.section.shape, rig.section.surface_tolerance_c
    issues = []
    for i, tap in enumerate(rig.taps):
        if tap.x_c is None or tap.surface is None or tap.y_c is None:
            continue
        try:
            y_shape = float(shape.surface_y(tap.x_c, tap.surface is Surface.UPPER))
        except ValueError as exc:
            issues.append(RigIssue(f"taps[{i}].x_c", str(exc), tap.x_c))
            continue
        if abs(tap.y_c - y_shape) > tol:
            issues.append(RigIssue(f"taps[{i}].y_c", f"{abs(tap.y_c - y_shape):.4f} chord off the {tap.surface.value} "
                                   f"surface (shape y/c = {y_shape:.4f} at x/c = {tap.x_c:g}; tolerance {tol:g})", tap.y_c))
    return issues


def _check_actuators(rig: Rig) -> list[RigIssue]:
    issues = [RigIssue(f"actuators[{i}].id", "actuator id already used by an earlier actuator", d)
              for i, d in _repeats(a.id for a in rig.actuators)]
    for i, a in enumerate(rig.actuators):
        keys = ("min_deg", "max_deg", "safe_deg") if a.kind is ActuatorKind.ANGLE else ("min", "max", "safe")
        shown = [round(a.to_device(v), 9) for v in (a.min, a.max, a.safe)]  # as written in the file
        if not a.min < a.max:
            issues.append(RigIssue(f"actuators[{i}].{keys[0]}", f"must be below {keys[1]} = {shown[1]:g}", shown[0]))
        elif not a.min <= a.safe <= a.max:
            issues.append(RigIssue(f"actuators[{i}].{keys[2]}", f"must lie within [{shown[0]:g}, {shown[1]:g}]", shown[2]))
    return issues


def cross_check(rig: Rig) -> list[RigIssue]:
    """Every inconsistency between the rig's tables (empty list when the rig is consistent)."""
    return (
        _check_channels(rig) + _check_references(rig) + _check_taps(rig)
        + _check_geometry(rig) + _check_surface(rig) + _check_actuators(rig)
    )


@dataclass(frozen=True, eq=False)
class TapLayout:
    """Tap arrays in the order the reducer integrates them.

    Sections: contour order (upper surface trailing edge → leading edge, then lower leading edge → trailing edge),
    with ``y_c`` from the shape where the file gave none. Venturi: increasing station. Cylinder: increasing θ.
    Arrays a kind does not use are None.
    """

    names: tuple[str, ...]
    channels: np.ndarray  # device channel index per tap (int)
    x_c: np.ndarray | None = None
    y_c: np.ndarray | None = None
    upper: np.ndarray | None = None  # bool
    x: np.ndarray | None = None  # [m]
    area: np.ndarray | None = None  # [m²]
    theta: np.ndarray | None = None  # [rad]


def _section_layout(rig: Rig, taps, channels) -> TapLayout:
    x_c = np.array([t.x_c for t in taps])
    upper = np.array([t.surface is Surface.UPPER for t in taps])
    order = np.lexsort((np.where(upper, -x_c, x_c), ~upper))  # upper first by falling x, then lower by rising x
    shape = rig.section.shape
    y_c = np.array([t.y_c if t.y_c is not None else float(shape.surface_y(t.x_c, t.surface is Surface.UPPER)) for t in taps])
    return TapLayout(tuple(taps[i].name for i in order), channels[order], x_c[order], y_c[order], upper[order])


def tap_layout(rig: Rig) -> TapLayout:
    """The rig's taps as arrays, ordered for integration (see :class:`TapLayout`)."""
    taps = list(rig.taps)
    channels = np.array([rig.index_of(t.channel) for t in taps], dtype=int)
    if rig.kind in SECTION_KINDS:
        return _section_layout(rig, taps, channels)
    if rig.kind is RigKind.VENTURI:
        x = np.array([t.x for t in taps])
        area = np.array([t.area if t.area is not None else rig.geometry.area_table.area_at(t.x) for t in taps])
        order = np.argsort(x, kind="stable")
        return TapLayout(tuple(taps[i].name for i in order), channels[order], x=x[order], area=area[order])
    if rig.kind is RigKind.CYLINDER:
        theta = np.array([t.theta for t in taps])
        order = np.argsort(theta, kind="stable")
        return TapLayout(tuple(taps[i].name for i in order), channels[order], theta=theta[order])
    return TapLayout(tuple(t.name for t in taps), channels)


def capabilities(rig: Rig) -> tuple[str, ...]:
    """Names of what the rig can compute, in the words ``taprig check`` prints."""
    ref = rig.reference
    has_q = ref.pitot is not None or (ref.static is not None and ref.total is not None)
    out = []
    if has_q:
        out += ["q (dynamic pressure)", "flow speed"]
        if rig.geometry.chord or rig.geometry.diameter:
            out.append("Reynolds number")
        if rig.taps:
            out.append("Cp per tap")
    if rig.kind is RigKind.AIRFOIL and has_q:
        upper = sum(t.surface is Surface.UPPER for t in rig.taps)
        if upper >= 2 and len(rig.taps) - upper >= 2:
            out.append("Cl/Cd/Cm (pressure integral)")
        if rig.geometry.tunnel_height is not None:
            out.append("wall corrections")
    if rig.kind is RigKind.CYLINDER and has_q:
        out.append("Cd (pressure integral)")
    if rig.kind is RigKind.VENTURI and len({round(a, 12) for a in tap_layout(rig).area}) >= 2:
        out += ["venturi Cp against Bernoulli", "venturi flow rate"]
    if rig.balance is not None:
        out += [f"balance {f}" for f in ("lift", "drag") if getattr(rig.balance, f)]
    if rig.fluid.medium is Medium.WATER:
        out.append("water properties from temperature")
    return tuple(out)

# Unit words a board may send for an angle actuator, which PROTOCOL.md §3 fixes to degrees.
DEGREE_WORDS = frozenset({"deg", "degree", "degrees", "°", ""})
# Relative slack when comparing limits that crossed the wire as f32 (≈ 6e-8 rounding) or went through radians.
LIMIT_RTOL = 1e-5


def _close(a: float, b: float) -> bool:
    return math.isclose(a, b, rel_tol=LIMIT_RTOL, abs_tol=LIMIT_RTOL)


def _channel_differences(rig: Rig, description: Description) -> list[str]:
    n = len(description.channels)
    out = []
    if n != len(rig.channels):
        # A board streaming channels the rig file does not describe is a wrong rig file (or a wrong board):
        # every channel must be accounted for, so a mix-up is caught before a run, not in the numbers.
        unknown = sorted(set(range(n)) - {ch.index for ch in rig.channels})
        extra = f"; the rig file does not describe device channel(s) {unknown}" if unknown else ""
        out.append(f"the device has {n} channel(s), the rig file describes {len(rig.channels)}{extra}")
    missing = [ch for ch in rig.channels if ch.index >= n]
    if len(missing) > 3:  # one sentence, not one per tap, when the rig file is plainly for another board
        out.append(f"{len(missing)} of the rig's channels ({missing[0].name!r} … {missing[-1].name!r}, indices "
                   f"{missing[0].index}–{missing[-1].index}) are not on the device, which has {n} channel(s)")
    else:
        out += [f"channel {ch.name!r} (index {ch.index}) is not on the device, which has {n} channel(s)"
                for ch in missing]
    for ch in rig.channels:
        if ch.index >= n:
            continue
        sent = description.channels[ch.index].encoding
        if sent != ch.encoding:
            out.append(
                f"channel {ch.name!r} (index {ch.index}): the rig expects {ch.encoding.name.lower()}, "
                f"the device sends {encoding_name(sent)} "
                f"(device name {description.channels[ch.index].name!r})"
            )
    return out


def _actuator_differences(act: Actuator, info) -> list[str]:
    label = f"actuator {act.name!r} (id {act.id})"
    if info.kind != act.kind:
        return [f"{label}: the rig says {act.kind.name.lower()}, the device says {ActuatorKind(info.kind).name.lower()}"]
    out = []
    if act.kind is ActuatorKind.ANGLE:
        if info.unit.strip().lower() not in DEGREE_WORDS:
            out.append(f"{label}: an angle actuator's unit must be degrees, the device says {info.unit!r}")
    elif act.unit and info.unit and act.unit.strip().lower() != info.unit.strip().lower():
        out.append(f"{label}: the rig's unit is {act.unit!r}, the device's {info.unit!r}")
    lo, hi, safe = (act.to_device(v) for v in (act.min, act.max, act.safe))
    if lo < info.min and not _close(lo, info.min) or hi > info.max and not _close(hi, info.max):
        out.append(f"{label}: the rig's range [{lo:g}, {hi:g}] is not within the device's [{info.min:g}, {info.max:g}]")
    if not _close(safe, info.safe):
        out.append(f"{label}: the rig's safe value {safe:g} differs from the device's {info.safe:g}")
    return out


def compare_with_description(rig: Rig, description: Description) -> list[str]:
    """Differences between a rig and a device's self-description, one sentence each (empty if they match).

    Checks the device has exactly the rig's channels, each rig channel's index exists on the device with the
    expected encoding, and each rig actuator's
    id exists with the same kind, a compatible unit, limits within the device's and the same safe value
    (compared in the device's unit: degrees for an angle actuator).
    """
    out = _channel_differences(rig, description)
    by_id = {a.id: a for a in description.actuators}
    for act in rig.actuators:
        info = by_id.get(act.id)
        if info is None:
            known = ", ".join(str(i) for i in sorted(by_id)) or "none"
            out.append(f"actuator {act.name!r} (id {act.id}) is not on the device (its actuator ids: {known})")
        else:
            out += _actuator_differences(act, info)
    return out
