"""The text of a new rig file, commented, from a few answers: what ``taprig new`` writes.

Pure: :func:`starter_text` turns a :class:`StarterAnswers` into TOML in the compact form (a channel group for the
taps, the taps as a table). The rig it describes is an airfoil section in a closed test section: a pitot-static
probe on one differential sensor (total − static) and one differential sensor per tap referred to the probe's
static line, so every tap reads p − p∞ directly; optionally a fan and an angle-of-attack servo on the board.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field

from taprig.rig.compact import parse_tap_csv
from taprig.rig.errors import RigIssue

TAP_SENSORS = ("bridge", "analog")
ID_PATTERN = re.compile(r"^[a-z0-9][a-z0-9_.-]{0,63}$")


@dataclass(frozen=True)
class StarterTap:
    """One tap of a new rig: its name, chordwise place, side, and optionally a height to check."""

    name: str
    x_c: float
    surface: str  # "upper" or "lower"
    y_c: float | None = None


@dataclass(frozen=True)
class StarterAnswers:
    """What the starter asks. Lengths in mm and pressures in Pa, as the person types them."""

    rig_id: str
    name: str
    taps: tuple[StarterTap, ...]
    naca: str | None = "0012"
    coordinates_file: str | None = None  # a CSV beside the rig file (its name relative to the rig file)
    chord_mm: float = 150.0
    tunnel_height_mm: float = 300.0
    tunnel_width_mm: float = 300.0
    tap_sensor: str = "bridge"
    tap_range_pa: float = 2500.0
    pitot_range_pa: float = 1000.0
    actuators: bool = True
    sources: tuple[str, ...] = field(default=())  # where the answers came from, for the header comment
    file_name: str = ""  # the rig file's name, for the commands in the header comment (default: ID.toml)


def spread_taps(count: int) -> tuple[StarterTap, ...]:
    """``count`` taps over both surfaces, closer together near the leading edge (half-cosine spacing).

    The upper surface gets the odd one; stations x/c = (1 − cos φ)/2 with φ equally spaced over (0, 0.9 π], so
    no tap sits in the thin trailing edge where it cannot be drilled (common practice).

    >>> [(t.name, round(t.x_c, 3)) for t in spread_taps(4)]
    [('U01', 0.422), ('U02', 0.976), ('L01', 0.422), ('L02', 0.976)]
    """
    if count < 3:
        raise ValueError(f"a section needs at least 3 taps, got {count}")
    n_upper = (count + 1) // 2
    out = []
    for side, n in (("upper", n_upper), ("lower", count - n_upper)):
        for k in range(n):
            phi = 0.9 * math.pi * (k + 1) / n
            out.append(StarterTap(f"{side[0].upper()}{k + 1:02d}", round((1 - math.cos(phi)) / 2, 4), side))
    return tuple(out)


def taps_from_csv(text: str, name: str) -> tuple[tuple[StarterTap, ...], list[RigIssue]]:
    """Taps from a CSV of positions: a header naming ``x_c`` and ``surface`` (``name``, ``y_c`` optional).

    Unnamed taps are called U01.. / L01.. in their order on each surface. Problems name the file and line.
    """
    rows, issues = parse_tap_csv(text, name, required=("x_c", "surface"), allowed=("name", "x_c", "y_c", "surface"))
    taps = []
    counts = {"upper": 0, "lower": 0}
    for lineno, row in rows:
        surface = str(row.get("surface", "")).lower()
        if surface not in counts:
            issues.append(RigIssue(f"{name} line {lineno}, surface", "expected upper or lower", row.get("surface")))
            continue
        if "x_c" not in row:
            issues.append(RigIssue(f"{name} line {lineno}, x_c", "expected the tap's x/c (0 to 1)"))
            continue
        if not 0.0 <= row["x_c"] <= 1.0:
            issues.append(RigIssue(f"{name} line {lineno}, x_c", "expected x/c from 0 (leading edge) to 1 (trailing edge)",
                                   row["x_c"]))
            continue
        counts[surface] += 1
        tap_name = row.get("name") or f"{surface[0].upper()}{counts[surface]:02d}"
        taps.append(StarterTap(tap_name, row["x_c"], surface, row.get("y_c")))
    return tuple(taps), issues


def _array(values: list[str], width: int, per_line: int = 10, indent: int = 11) -> str:
    """A TOML array of the (already quoted) values in columns ``width`` wide, ``per_line`` a line."""
    cells = [(v + ("," if i < len(values) - 1 else "")).ljust(width + 1) for i, v in enumerate(values)]
    lines = ["".join(cells[i:i + per_line]).rstrip() for i in range(0, len(cells), per_line)]
    return "[" + ("\n" + " " * indent).join(lines) + "]"


def _dim(x: float) -> str:
    """A length or pressure for a comment: ``150``, ``0.5``."""
    return f"{x:g}"


def _num(x: float) -> str:
    """A number as TOML: ``150.0``, ``0.0054`` (at most 10 significant digits)."""
    return f"{x:.1f}" if x == int(x) else format(x, ".10g")


def _sensor(name: str, kind: str, range_pa: float, what: str) -> list[str]:
    r = _num(range_pa)
    if kind == "bridge":
        return [f"# {what}: ±{_dim(range_pa)} Pa differential, 14-bit digital bridge, 10-90 % output.",
                "# CHECK each value against your sensor's datasheet (docs/rig-file.md, sensors).",
                f"[sensors.{name}]", 'kind = "digital_bridge"', f"pmin_pa = -{r}", f"pmax_pa = {r}", 'output = "10-90"',
                "accuracy_pct_fs = 0.25        # CHECK: the datasheet's total error band, % of full scale", ""]
    slope = 0.8 / (2 * range_pa)
    return [f"# {what}: ±{_dim(range_pa)} Pa differential, ratiometric analog output 0.5-4.5 V on a 5 V supply,",
            "# read by a 12-bit ADC on the same supply. CHECK each value against your sensor's datasheet.",
            f"[sensors.{name}]", 'kind = "ratiometric"', "supply_v = 5.0", f"a_per_pa = {slope:.6g}", "b = 0.5",
            "adc_bits = 12", "adc_ref_v = 5.0", f"range_pa = [-{r}, {r}]",
            "accuracy_pct_fs = 1.5         # CHECK: the datasheet's total error band, % of full scale", ""]


def _tap_columns(taps: tuple[StarterTap, ...]) -> list[str]:
    """The tap table's columns, tap k in the same place on every line."""
    columns = {"name": [f'"{t.name}"' for t in taps], "channel": [f'"p{i + 1:02d}"' for i in range(len(taps))],
               "x_c": [_num(t.x_c) for t in taps], "surface": [f'"{t.surface}"' for t in taps]}
    if any(t.y_c is not None for t in taps):
        columns["y_c"] = ['""' if t.y_c is None else _num(t.y_c) for t in taps]
    width = max(len(v) for values in columns.values() for v in values) + 1
    return [f"{key:<7} = " + _array(values, width) for key, values in columns.items()]


def starter_text(a: StarterAnswers) -> str:
    """The commented rig file (TOML, compact form) for the answers ``a``."""
    n = len(a.taps)
    file = a.file_name or f"{a.rig_id}.toml"
    section = (f'naca = "{a.naca}"' if a.naca is not None else f'coordinates_file = "{a.coordinates_file}"')
    shape = f"NACA {a.naca}" if a.naca is not None else f"the section in {a.coordinates_file}"
    out = [f"# {a.name}",
           f"# {shape}, {_dim(a.chord_mm)} mm chord, in a {_dim(a.tunnel_height_mm)} x {_dim(a.tunnel_width_mm)} mm "
           "test section. Written by `taprig new`" + (f" from {' and '.join(a.sources)}" if a.sources else "") + ";",
           "# lines marked CHECK hold starting values to replace with your rig's. Every key: docs/rig-file.md.",
           f"# Look at it:  taprig check {file} --draw {file.removesuffix('.toml')}.png",
           f"# Try it now:  taprig record --rig {file} --port sim:// --duration 5",
           "format = 1", f'id = "{a.rig_id}"', f'name = "{a.name}"',
           f'description = "{shape}, {n} taps on differential sensors referred to the pitot-static probe\'s static line."',
           'kind = "airfoil"', "", "[fluid]", 'medium = "air"            # air properties come live from the run', ""]
    out += _sensor("tap", a.tap_sensor, a.tap_range_pa, "Tap sensors")
    out += _sensor("pitot", a.tap_sensor, a.pitot_range_pa, "Pitot-static sensor (total − static, gives q)")
    encoding = "u16"
    out += ["# Channels: the index is the channel's place in the board's self-description (0-63); the board",
            "# must send the encoding given. CHECK them against the board (taprig decode PORT shows its description).",
            "[[channels]]", "index = 0", 'name = "pitot_dp"', f'encoding = "{encoding}"', 'sensor = "pitot"',
            'measures = "differential"', 'relative_to = "static"', "",
            f"# A group: channels 1-{n}, named p01 .. p{n:02d}, one per tap, each referred to the probe's static line.",
            "[[channels]]", "index = 1", f"count = {n}", 'name = "p{index:02}"', f'encoding = "{encoding}"',
            'sensor = "tap"', 'measures = "differential"', 'relative_to = "static"', ""]
    out += ["# Taps: one column per key, one row per tap (tap k on channel p{k}). x_c is from the leading edge;",
            '# y_c, where given, is checked against the shape ("" takes it from the shape).',
            "[taps]",
            *_tap_columns(a.taps)]
    out += ["", "[reference]", 'pitot = "pitot_dp"          # q = pitot_coefficient × (total − static)',
            "pitot_coefficient = 1.0     # CHECK: from the probe's calibration, if it has one", "",
            "[geometry]", f"chord_mm = {_num(a.chord_mm)}",
            f"span_mm = {_num(max(a.tunnel_width_mm - 2.0, 1.0))}".ljust(28) + "# CHECK: the model spans the test section, 1 mm gap each side",
            f"tunnel_height_mm = {_num(a.tunnel_height_mm)}", f"tunnel_width_mm = {_num(a.tunnel_width_mm)}",
            "pivot_x_c = 0.25            # CHECK: where the angle-of-attack pivot is, from the leading edge", "",
            "[section]", section, ""]
    if a.actuators:
        out += ["# Actuators as the board announces them: CHECK ids, limits and safe values against its description.",
                "[[actuators]]", "id = 0", 'kind = "fan"', 'name = "fan"', 'unit = "duty"', "min = 0.0", "max = 1.0",
                "safe = 0.0", "", "[[actuators]]", "id = 1", 'kind = "angle"', 'name = "alpha"', "min_deg = -15.0",
                "max_deg = 15.0", "safe_deg = 0.0", ""]
    out += ["[link]", "touch_control_lines = false   # leave DTR/RTS alone so opening the port does not reset the board"]
    return "\n".join(out) + "\n"


def check_id(rig_id: str) -> str | None:
    """Why ``rig_id`` cannot be a rig id, or None when it can."""
    if ID_PATTERN.match(rig_id):
        return None
    return "expected lower-case letters, digits, '-', '_' or '.', up to 64, starting with a letter or digit"


def id_from_filename(stem: str) -> str:
    """A rig id made from a file name (``My Rig`` → ``my-rig``).

    >>> id_from_filename("My Rig 2")
    'my-rig-2'
    """
    rig_id = re.sub(r"[^a-z0-9_.-]+", "-", stem.lower()).strip("-._")[:64]
    return rig_id or "new-rig"
