"""A picture of a rig as plain geometry: the model to scale in its test section, every tap where it is with its
name and channel, the reference ports, the walls, the angle-of-attack pivot, and whatever looks wrong.

:func:`rig_picture` is pure and returns plain data (:class:`RigPicture`, ``to_dict()`` for JSON), so the same
picture can be drawn by ``taprig check RIG --draw`` (matplotlib) and in a browser (with each tap's live value
beside it). Lengths are metres; x points downstream, y up. The origin is

* airfoil: the pivot on the test-section centreline (the section is turned about it by ``alpha``);
* cylinder: the cylinder's centre on the centreline;
* bump: the floor at the bump's leading edge;
* venturi: the axis at the inlet flange (x as the rig file's ``x_mm``);
* other: the first tap (taps in a row, the rig file gives no geometry).

Suspicious things are marked, not refused, so a rig that ``taprig check`` rejects can still be looked at: a tap
off the surface (or where the shape has no surface), two taps on one channel, a tap on a channel that is not
there or does not measure pressure, a channel that no tap, reference or balance reads.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np

from taprig.rig.model import Measures, Rig, RigKind, Surface
from taprig.rig.sensors import Quantity

Point = tuple[float, float]
PIVOT_DEFAULT_C = 0.25  # pivot at the quarter chord when the rig file does not give it (common practice)
SCHEMATIC = "the pitot-static probe is drawn at a schematic place (the rig file does not give it)"


@dataclass(frozen=True)
class TapMark:
    """One tap: where it is [m], which way is out of the surface, what reads it, and what is wrong with it."""

    name: str
    channel: str  # channel name, as in the rig file
    index: int | None  # device channel index; None when the channel does not exist
    x: float | None  # [m]; None when the tap cannot be placed
    y: float | None
    nx: float  # outward unit normal (the side its label goes)
    ny: float
    surface: str | None  # "upper", "lower" or None
    problems: tuple[str, ...] = ()

    @property
    def label(self) -> str:
        """``U01 ch3``: the tap's name and its device channel (``ch ?`` when there is none)."""
        return f"{self.name} ch{'?' if self.index is None else self.index}"


@dataclass(frozen=True)
class Port:
    """A reference pressure port or reading: its role, the channels on it and where it is drawn [m]."""

    role: str  # "total", "static", "pitot" (a total − static differential), "room", "inlet", "balance", "static_source"
    label: str  # e.g. "total port: p_total ch1"
    channels: tuple[str, ...]
    indices: tuple[int, ...]
    x: float | None  # None: not in the tunnel (the room), drawn beside it
    y: float | None


@dataclass(frozen=True)
class Problem:
    """Something suspicious, in words; ``tap`` or ``channel`` says what it is about."""

    text: str
    tap: str | None = None
    channel: str | None = None


@dataclass(frozen=True)
class RigPicture:
    """Everything a drawing of the rig needs, in metres (see the module docstring for the origin)."""

    rig_id: str
    title: str
    kind: str
    alpha: float  # [rad] angle the section is drawn at (airfoil)
    outline: tuple[Point, ...]  # the model's contour, closed (empty for a venturi or other rig)
    walls: tuple[tuple[Point, ...], ...]  # polylines of the test-section or duct walls
    flow: tuple[Point, Point]  # an arrow showing the flow direction, start → end
    taps: tuple[TapMark, ...]
    ports: tuple[Port, ...]
    pivot: Point | None
    extent: tuple[float, float, float, float]  # xmin, xmax, ymin, ymax of everything drawn
    problems: tuple[Problem, ...]
    notes: tuple[str, ...]  # assumptions a reader should know (schematic probe place, assumed pivot)

    def to_dict(self) -> dict:
        """The picture as JSON-ready dicts and lists (taps with their ``label``)."""
        out = asdict(self)
        for tap, mark in zip(out["taps"], self.taps):
            tap["label"] = mark.label
        return out


def _channel_index(rig: Rig, name: str) -> int | None:
    found = [c.index for c in rig.channels if c.name == name]
    return found[0] if found else None


def _rotate(x: np.ndarray, y: np.ndarray, alpha: float) -> tuple[np.ndarray, np.ndarray]:
    """Turn points about the origin by −alpha (a positive angle of attack lifts the nose into the flow)."""
    c, s = math.cos(alpha), math.sin(alpha)
    return x * c + y * s, -x * s + y * c


def _pts(x, y) -> tuple[Point, ...]:
    return tuple((float(a), float(b)) for a, b in zip(x, y))


@dataclass
class _Placed:
    x: float | None
    y: float | None
    nx: float
    ny: float
    problems: list


def _section_tap(rig: Rig, tap, chord: float, x0: float, alpha: float) -> _Placed:
    """Place a section tap (x0: x of the leading edge [m] before turning by alpha)."""
    shape, tol = rig.section.shape, rig.section.surface_tolerance_c
    if tap.x_c is None or tap.surface is None:
        return _Placed(None, None, 0.0, 1.0, ["cannot be placed: it needs x_c and surface"])
    upper = tap.surface is Surface.UPPER
    problems = []
    try:
        y_shape = float(shape.surface_y(tap.x_c, upper))
    except ValueError as exc:
        return _Placed(None, None, 0.0, 1.0 if upper else -1.0, [f"not on the section: {exc}"])
    y_c = y_shape if tap.y_c is None else tap.y_c
    if tap.y_c is not None and abs(tap.y_c - y_shape) > tol:
        problems.append(f"off the {tap.surface.value} surface by {abs(tap.y_c - y_shape):.4f} chord "
                        f"(y/c {tap.y_c:g} given, the shape has {y_shape:.4f} at x/c {tap.x_c:g}; tolerance {tol:g})")
    h = 1e-4
    try:
        slope = float((shape.surface_y(min(tap.x_c + h, 1.0), upper) - shape.surface_y(max(tap.x_c - h, 0.0), upper))
                      / (min(tap.x_c + h, 1.0) - max(tap.x_c - h, 0.0)))
    except ValueError:
        slope = 0.0
    sign = 1.0 if upper else -1.0
    nx, ny = -slope * sign, sign
    norm = math.hypot(nx, ny)
    x, y = _rotate(np.array([x0 + tap.x_c * chord]), np.array([y_c * chord]), alpha)
    nxr, nyr = _rotate(np.array([nx / norm]), np.array([ny / norm]), alpha)
    return _Placed(float(x[0]), float(y[0]), float(nxr[0]), float(nyr[0]), problems)


def _section_body(rig: Rig, alpha: float, notes: list) -> tuple[tuple[Point, ...], float, float, Point | None, callable]:
    """Outline, chord, leading-edge x, pivot and tap placer of an airfoil or bump."""
    chord = rig.geometry.chord or 0.1
    if rig.geometry.chord is None:
        notes.append("the chord is not given: drawn as 100 mm")
    if rig.kind is RigKind.AIRFOIL:
        pivot_c = rig.geometry.pivot_x_c
        if pivot_c is None:
            pivot_c = PIVOT_DEFAULT_C
            notes.append("pivot drawn at the quarter chord (the rig file does not give geometry.pivot_x_c)")
        x0, pivot = -pivot_c * chord, (0.0, 0.0)
    else:
        x0, pivot, alpha = 0.0, None, 0.0
    if rig.section is None:
        return (), chord, x0, pivot, lambda tap: _Placed(None, None, 0.0, 1.0, ["cannot be placed: the rig has no [section]"])
    shape = rig.section.shape
    ox, oy = _rotate(x0 + shape.x * chord, shape.y * chord, alpha)
    outline = _pts(np.append(ox, ox[0]), np.append(oy, oy[0]))
    return outline, chord, x0, pivot, lambda tap: _section_tap(rig, tap, chord, x0, alpha)


def _airfoil(rig: Rig, alpha: float, notes: list):
    outline, chord, x0, pivot, place = _section_body(rig, alpha, notes)
    h = rig.geometry.tunnel_height
    xa, xb = x0 - 1.4 * chord, x0 + 1.8 * chord
    if h is None:
        notes.append("the tunnel height is not given: no walls drawn")
        walls, half = (), 0.75 * chord
    else:
        half = h / 2
        walls = (((xa, half), (xb, half)), ((xa, -half), (xb, -half)))
    probe = (x0 - 1.1 * chord, min(half * 0.55, 0.45 * chord + 0.35 * half))
    flow = ((xa + 0.05 * chord, -0.8 * half), (xa + 0.45 * chord, -0.8 * half))
    return outline, walls, flow, pivot, place, probe, (xa, xb, -half, half)


def _bump(rig: Rig, notes: list):
    outline, chord, x0, _, place = _section_body(rig, 0.0, notes)
    h = rig.geometry.tunnel_height or chord * 0.8
    if rig.geometry.tunnel_height is None:
        notes.append("the channel height is not given: the ceiling is drawn at 0.8 bump lengths")
    xa, xb = -1.0 * chord, 2.0 * chord
    walls = (((xa, 0.0), (xb, 0.0)), ((xa, h), (xb, h)))
    probe = (xa + 0.35 * chord, 0.6 * h)
    flow = ((xa + 0.05 * chord, 0.2 * h), (xa + 0.4 * chord, 0.2 * h))
    return outline, walls, flow, None, place, probe, (xa, xb, 0.0, h)


def _cylinder(rig: Rig, notes: list):
    d = rig.geometry.diameter or 0.04
    if rig.geometry.diameter is None:
        notes.append("the diameter is not given: drawn as 40 mm")
    r = d / 2
    t = np.linspace(0.0, 2 * math.pi, 121)
    outline = _pts(r * np.cos(t), r * np.sin(t))
    h = rig.geometry.tunnel_height
    half = h / 2 if h is not None else 3 * d
    if h is None:
        notes.append("the tunnel height is not given: no walls drawn")
    span = min(half * 1.6, 8 * d)
    xa, xb = -span, span
    walls = () if h is None else (((xa, half), (xb, half)), ((xa, -half), (xb, -half)))

    def place(tap) -> _Placed:
        if tap.theta is None:
            return _Placed(None, None, 0.0, 1.0, ["cannot be placed: it needs theta_deg"])
        # θ from the front stagnation point (facing the flow, at −x), drawn round the upper side
        nx, ny = -math.cos(tap.theta), math.sin(tap.theta)
        return _Placed(r * nx, r * ny, nx, ny, [])

    probe = (xa + 0.35 * (xb - xa) / 2, min(0.55 * half, 2.5 * d))
    flow = ((xa + 0.05 * span, -0.8 * half), (xa + 0.35 * span, -0.8 * half))
    return outline, walls, flow, None, place, probe, (xa, xb, -half, half)


def _venturi(rig: Rig, notes: list):
    table = rig.geometry.area_table
    radius = lambda area: math.sqrt(area / math.pi)  # noqa: E731 - equivalent round duct [m]
    stations = [(t.x, t.area) for t in rig.taps if t.x is not None and t.area is not None]
    if table is not None:
        xs, rs = np.array(table.x), np.sqrt(np.array(table.area) / math.pi)
    elif len(stations) >= 2:
        stations.sort()
        xs, rs = np.array([s[0] for s in stations]), np.array([radius(s[1]) for s in stations])
        notes.append("walls joined between the taps' own areas (no [geometry.area_table])")
    else:
        xs, rs = np.array([0.0, 0.1]), np.array([0.025, 0.025])
        notes.append("no areas to draw the walls from")
    notes.append("drawn as a round duct of the same flow area (radius √(A/π))")
    walls = (_pts(xs, rs), _pts(xs, -rs))
    length = float(xs[-1] - xs[0]) or 0.1

    def place(tap) -> _Placed:
        if tap.x is None:
            return _Placed(None, None, 0.0, 1.0, ["cannot be placed: it needs x_mm"])
        problems = []
        if tap.area is not None:
            r = radius(tap.area)
            if table is not None and table.x[0] <= tap.x <= table.x[-1]:
                r_table = math.sqrt(table.area_at(tap.x) / math.pi)
                if abs(r - r_table) > 0.05 * r_table:
                    problems.append(f"its area_mm2 ({tap.area * 1e6:g}) differs from the area table's "
                                    f"({table.area_at(tap.x) * 1e6:.6g}) by {abs(tap.area / table.area_at(tap.x) - 1):.0%}")
        elif table is not None and table.x[0] <= tap.x <= table.x[-1]:
            r = math.sqrt(table.area_at(tap.x) / math.pi)
        else:
            return _Placed(tap.x, None, 0.0, 1.0, [f"station {tap.x * 1e3:g} mm is outside the area table"])
        return _Placed(tap.x, r, 0.0, 1.0, problems)

    rmax = float(rs.max())
    flow = ((float(xs[0]) - 0.15 * length, 0.0), (float(xs[0]) - 0.02 * length, 0.0))
    return (), walls, flow, None, place, None, (float(xs[0]) - 0.2 * length, float(xs[-1]) + 0.05 * length, -rmax, rmax)


def _other(rig: Rig, notes: list):
    notes.append("a rig of kind 'other' has no geometry: its taps are drawn in a row")
    spacing = 0.02
    order = {t.name: i for i, t in enumerate(rig.taps)}
    n = max(len(rig.taps), 1)
    place = lambda tap: _Placed(order[tap.name] * spacing, 0.0, 0.0, 1.0, [])  # noqa: E731
    return (), (), ((-0.03, -0.02), (-0.01, -0.02)), None, place, None, (-0.04, n * spacing, -0.03, 0.03)


def _channel_problems(rig: Rig, marks: list[TapMark]) -> list[Problem]:
    """Channels no tap, reference or balance reads (a tap may be missing, or the channel is spare)."""
    used = {t.channel for t in rig.taps}
    ref = rig.reference
    used |= {getattr(ref, k) for k in ("static", "total", "pitot", "atmosphere")}
    used |= {c.relative_to for c in rig.channels if c.relative_to}
    if rig.balance is not None:
        used |= {rig.balance.lift, rig.balance.drag}
    out = []
    by_index: dict[int, str] = {}
    for c in rig.channels:
        if c.index in by_index:
            out.append(Problem(f"channels {by_index[c.index]} and {c.name} are both on ch{c.index}", channel=c.name))
        by_index.setdefault(c.index, c.name)
    for c in sorted(rig.channels, key=lambda c: c.index):
        if c.name in used:
            continue
        sensor = rig.sensors.get(c.sensor)
        what = "no tap reads it" if sensor is None or sensor.quantity is Quantity.PRESSURE else "the balance does not use it"
        out.append(Problem(f"channel {c.name} (ch{c.index}): {what}, nor any reference", channel=c.name))
    return out


def _ports(rig: Rig, probe: Point | None, taps: dict[str, TapMark]) -> list[Port]:
    """The reference ports: on the pitot-static probe, the room, a venturi's inlet station."""
    ref = rig.reference
    out = []

    def port(role: str, what: str, names: list[str], where: Point | None) -> None:
        names = [n for n in names if n]
        if not names:
            return
        idx = [_channel_index(rig, n) for n in names]
        chans = ", ".join(f"{n} ch{'?' if i is None else i}" for n, i in zip(names, idx))
        out.append(Port(role, f"{what}: {chans}", tuple(names), tuple(i for i in idx if i is not None),
                        None if where is None else where[0], None if where is None else where[1]))

    if probe is not None:
        px, py = probe
        port("total", "total port", [ref.total], (px, py))
        port("static", "static port", [ref.static], (px, py))
        port("pitot", "pitot-static Δp", [ref.pitot], (px, py))
    room = [ref.atmosphere] if ref.atmosphere else []
    gauge = [c.name for c in rig.channels if c.measures is Measures.GAUGE]
    port("room", "room (barometer)", room, None)
    if gauge and not room:
        out.append(Port("room", f"room: {len(gauge)} gauge channel(s) read against it", (), (), None, None))
    stated = ref.static_offset()
    if stated is not None and ref.static is None:
        f, u = stated
        how = {"suction": "suction tunnel", "factor": "empty-tunnel factor", "room": "open jet"}.get(
            getattr(ref.static_source, "value", ""), "stated")
        out.append(Port("static_source", f"freestream static = room − {f:.3g} q (u {u:.2g} q; {how}, no static port)",
                        (), (), None, None))
    if rig.balance is not None:
        port("balance", "balance lift", [rig.balance.lift], None)
        port("balance", "balance drag", [rig.balance.drag], None)
    if ref.inlet and ref.inlet in taps and taps[ref.inlet].x is not None:
        mark = taps[ref.inlet]
        out.append(Port("inlet", f"reference station: tap {ref.inlet}", (mark.channel,),
                        () if mark.index is None else (mark.index,), mark.x, mark.y))
    return out


def rig_picture(rig: Rig, alpha: float = 0.0) -> RigPicture:
    """The rig as plain geometry to draw (see the module docstring); ``alpha`` [rad] turns an airfoil section.

    Works on a rig from :func:`taprig.rig.parse_rig_unchecked` too, marking what the cross-checks would refuse.
    """
    notes: list[str] = []
    probe = None
    if rig.kind is RigKind.AIRFOIL:
        outline, walls, flow, pivot, place, probe, extent = _airfoil(rig, alpha, notes)
    elif rig.kind is RigKind.BUMP:
        outline, walls, flow, pivot, place, probe, extent = _bump(rig, notes)
    elif rig.kind is RigKind.CYLINDER:
        outline, walls, flow, pivot, place, probe, extent = _cylinder(rig, notes)
    elif rig.kind is RigKind.VENTURI:
        outline, walls, flow, pivot, place, probe, extent = _venturi(rig, notes)
    else:
        outline, walls, flow, pivot, place, probe, extent = _other(rig, notes)
    has_probe = any(getattr(rig.reference, k) for k in ("static", "total", "pitot"))
    if not has_probe:
        probe = None
    elif probe is not None:
        notes.append(SCHEMATIC)

    channels = {c.name: c for c in rig.channels}
    refs = {getattr(rig.reference, k): k for k in ("static", "total", "pitot", "atmosphere") if getattr(rig.reference, k)}
    readers: dict[str, list[str]] = {}
    for tap in rig.taps:
        readers.setdefault(tap.channel, []).append(tap.name)
    names_seen: set[str] = set()
    marks = []
    for tap in rig.taps:
        p = place(tap)
        problems = list(p.problems)
        ch = channels.get(tap.channel)
        if ch is None:
            problems.append(f"its channel {tap.channel!r} is not in the rig")
        elif rig.sensors.get(ch.sensor) is not None and rig.sensors[ch.sensor].quantity is not Quantity.PRESSURE:
            problems.append(f"its channel {tap.channel} (ch{ch.index}) does not measure pressure")
        others = [n for n in readers[tap.channel] if n != tap.name]
        if others:
            problems.append(f"shares channel {tap.channel} with tap {', '.join(others)}")
        if tap.channel in refs:
            problems.append(f"its channel {tap.channel} is also the {refs[tap.channel]} reference")
        if tap.name in names_seen:
            problems.append("a tap of the same name comes earlier")
        names_seen.add(tap.name)
        marks.append(TapMark(tap.name, tap.channel, None if ch is None else ch.index, p.x, p.y, p.nx, p.ny,
                             None if tap.surface is None else tap.surface.value, tuple(problems)))

    problems = [Problem(f"tap {m.name}: {text}", tap=m.name) for m in marks for text in m.problems]
    problems += _channel_problems(rig, marks)
    ports = _ports(rig, probe, {m.name: m for m in marks})
    xs = [p[0] for line in (outline, *walls) for p in line] + [m.x for m in marks if m.x is not None]
    ys = [p[1] for line in (outline, *walls) for p in line] + [m.y for m in marks if m.y is not None]
    xs += [extent[0], extent[1]]
    ys += [extent[2], extent[3]]
    if probe is not None:
        xs.append(probe[0])
        ys.append(probe[1])
    title = f"{rig.name} ({rig.id}, {rig.kind.value})"
    return RigPicture(rig.id, title, rig.kind.value, float(alpha), outline, tuple(walls), flow, tuple(marks),
                      tuple(ports), pivot, (min(xs), max(xs), min(ys), max(ys)), tuple(problems), tuple(notes))
