"""Compact forms of a rig file's channel and tap tables, unrolled into the long form before validation.

A rig file may write

* a **channel group**: one ``[[channels]]`` entry with ``count = N`` stands for N channels with consecutive device
  indices from ``index``, all sharing the entry's other keys; ``name`` is a pattern where ``{index}`` is the
  device index and ``{n}`` the number in the group (1 .. N), each with an optional zero-padded width
  (``"p{index:02}"`` → ``p03``, ``p04`` …), or a list of the N names;
* a **tap table**: ``[taps]`` (one table, not ``[[taps]]``) whose keys are tap keys holding one array each, a row
  per tap (``name = ["U1", "U2"]``, ``x_c = [0.02, 0.15]``); a key given as a single value (``surface = "upper"``)
  holds for every row, and ``""`` in an array leaves that key out for that row (``y_c = ["", 0.08]``);
* a **tap CSV**: ``[taps] file = "NAME.csv"``, a file beside the rig file whose header line names the tap keys
  (``name,channel,x_c,surface``), one line per tap; an empty cell leaves the key out for that tap.

:func:`unroll` turns these into the long form (one table per channel, one per tap) so the one validated model
is built from either; the :class:`Places` it returns translates a key path of the long form (``taps[36].x_c``)
back to where it is written (``taps.x_c[36] (tap 'U37')``, ``taps.csv line 38, x_c (tap 'U37')``), so every
message points at the row to fix. Pure: the CSV's text comes in ``attachments``.
"""

from __future__ import annotations

import csv
import io
import re
from collections.abc import Mapping
from dataclasses import dataclass, field

from taprig.rig.errors import RigIssue

TAP_FILE_KEY = "taps.file"
# Tap keys as written in the file (model field aliases); the tap table's columns are these.
TAP_KEYS = ("name", "channel", "x_c", "y_c", "surface", "x_mm", "area_mm2", "theta_deg")
NUMERIC_TAP_KEYS = frozenset({"x_c", "y_c", "x_mm", "area_mm2", "theta_deg"})
MAX_GROUP = 64  # a board has at most 64 channels (PROTOCOL.md §3)
_FIELD = re.compile(r"\{(index|n)(?::(0?)([1-9]))?\}")
_MODEL_KEY = re.compile(r"^(channels|taps)\[(\d+)\](?:\.(\w+))?(.*)$")


def _ordinal(n: int) -> str:
    suffix = "th" if 10 <= n % 100 <= 20 else {1: "st", 2: "nd", 3: "rd"}.get(n % 10, "th")
    return f"{n}{suffix}"


def fill_pattern(pattern: str, index: int, n: int) -> str:
    """A group member's name: ``{index}`` / ``{n}`` replaced, ``{index:02}`` zero-padded to 2 digits.

    >>> fill_pattern("p{index:02}", 3, 1), fill_pattern("tap{n}", 9, 7)
    ('p03', 'tap7')
    """

    def one(m: re.Match) -> str:
        value = index if m.group(1) == "index" else n
        return f"{value:0{m.group(3)}d}" if m.group(3) else str(value)

    return _FIELD.sub(one, pattern)


@dataclass
class Places:
    """Where each unrolled channel and tap is written in the file, to name it in messages.

    ``channels[i]`` and ``taps[i]`` hold, per position in the long form, a function of the key (``"x_c"``) giving
    the key path as written. Positions past the lists keep their long-form path.
    """

    channels: list = field(default_factory=list)
    taps: list = field(default_factory=list)

    def key(self, key: str) -> str:
        """The long-form key path ``key`` (``taps[3].x_c``) as written in the file."""
        m = _MODEL_KEY.match(key)
        if not m:
            return key
        table, pos, name, rest = m.group(1), int(m.group(2)), m.group(3), m.group(4)
        places = getattr(self, table)
        if pos >= len(places):
            return key
        return places[pos](name) + rest

    def issue(self, issue: RigIssue) -> RigIssue:
        """The issue with its key path as written in the file."""
        return RigIssue(self.key(issue.key), issue.message, issue.value)


def _long(table: str, pos: int):
    return lambda name: f"{table}[{pos}]" + (f".{name}" if name else "")


def _as_int(value) -> int | None:
    return value if isinstance(value, int) and not isinstance(value, bool) else None


def _unroll_group(g: int, row: dict, out: list, places: Places, issues: list[RigIssue]) -> None:
    """Append the channels of the group at ``channels[g]`` to ``out`` (or record why it cannot be unrolled)."""
    key = f"channels[{g}]"
    count, first, pattern = _as_int(row.get("count")), _as_int(row.get("index")), row.get("name")
    problems = []
    if count is None or not 1 <= count <= MAX_GROUP:
        problems.append(RigIssue(f"{key}.count", f"expected a whole number of channels, 1 to {MAX_GROUP}", row.get("count")))
    if first is None:
        problems.append(RigIssue(f"{key}.index", "a channel group needs the device index of its first channel (a whole number)",
                                 row.get("index")))
    if isinstance(pattern, list):
        if count is not None and len(pattern) != count:
            problems.append(RigIssue(f"{key}.name", f"{len(pattern)} names for count = {count} channels"))
    elif not isinstance(pattern, str):
        problems.append(RigIssue(f"{key}.name", "a channel group needs a name pattern such as \"p{index:02}\" "
                                 "or a list of its names", pattern))
    elif count is not None and count > 1 and not _FIELD.search(pattern):
        problems.append(RigIssue(f"{key}.name", "the names of a group must differ: put {index} or {n} in the pattern "
                                 "(e.g. \"p{index:02}\")", pattern))
    if problems:
        issues += problems
        return
    for k in range(count):
        member = dict(row)
        del member["count"]
        member["index"] = first + k
        member["name"] = pattern[k] if isinstance(pattern, list) else fill_pattern(pattern, first + k, k + 1)

        def place(name, k=k, member=member):
            if name in ("index", "name"):  # the keys that differ along the group: say which member
                return f"{key} ({_ordinal(k + 1)} of {count}: index {member['index']}, {member['name']!r}).{name}"
            return f"{key}.{name}" if name else f"{key} ({_ordinal(k + 1)} of {count}, {member['name']!r})"

        out.append(member)
        places.channels.append(place)


def _unroll_channels(data: dict, places: Places, issues: list[RigIssue]) -> None:
    rows = data.get("channels")
    if not isinstance(rows, list):
        return  # pydantic names the wrong type
    out: list = []
    for g, row in enumerate(rows):
        if isinstance(row, dict) and "count" in row:
            _unroll_group(g, row, out, places, issues)
        else:
            out.append(row)
            places.channels.append(_long("channels", g))
    data["channels"] = out


def _column_rows(table: dict, issues: list[RigIssue]) -> list[dict] | None:
    """The rows of an inline tap table (or None, with issues, when its columns do not line up)."""
    names = table.get("name")
    if not isinstance(names, list) or not names:
        issues.append(RigIssue("taps.name", "a tap table needs name = [...], one name per tap", names if not isinstance(names, list) else None))
        return None
    n = len(names)
    ok = True
    for key, column in table.items():
        if isinstance(column, list) and len(column) != n:
            short = len(column) < n
            where = (f"the row of tap {names[len(column)]!r} (row {len(column)}) and after have none" if short
                     else f"value {column[n]!r} (row {n}) and after have no tap name")
            issues.append(RigIssue(f"taps.{key}", f"{len(column)} values for {n} taps (taps.name): {where}"))
            ok = False
    if not ok:
        return None
    rows = []
    for r in range(n):
        row = {}
        for key, column in table.items():
            value = column[r] if isinstance(column, list) else column
            if value != "":
                row[key] = value
        rows.append(row)
    return rows


def _inline_place(table: dict, r: int, tap_name):
    label = f" (tap {tap_name!r})" if isinstance(tap_name, str) else ""

    def place(name):
        if not name:
            return f"taps row {r}{label}"
        if isinstance(table.get(name), list):
            return f"taps.{name}[{r}]{label}"
        if name in table:
            return f"taps.{name}"
        return f"taps.{name} (row {r}{label})"

    return place


def parse_tap_csv(text: str, name: str, required: tuple[str, ...] = ("name",),
                  allowed: tuple[str, ...] = TAP_KEYS) -> tuple[list[tuple[int, dict]], list[RigIssue]]:
    """Rows of a tap CSV as (line number, {tap key: value}); a header line names the columns.

    The header must name each of ``required`` and only keys of ``allowed``, each once.

    Numbers are converted (``x_c``, ``y_c``, ``x_mm``, ``area_mm2``, ``theta_deg``); empty cells are left out;
    blank lines and lines starting with ``#`` are skipped. Each problem names the file, line and column.

    >>> rows, issues = parse_tap_csv("name,channel,x_c\\nU1,p01,0.1\\n", "t.csv")
    >>> rows, issues
    ([(2, {'name': 'U1', 'channel': 'p01', 'x_c': 0.1})], [])
    """
    issues: list[RigIssue] = []
    rows: list[tuple[int, dict]] = []
    header: list[str] | None = None
    for lineno, raw in enumerate(csv.reader(io.StringIO(text)), start=1):
        cells = [c.strip() for c in raw]
        if not any(cells) or cells[0].startswith("#"):
            continue
        where = f"{name} line {lineno}"
        if header is None:
            unknown = [c for c in cells if c not in allowed]
            if unknown or not set(required) <= set(cells) or len(set(cells)) != len(cells):
                issues.append(RigIssue(TAP_FILE_KEY, f"{where}: expected a header line naming each column once, "
                                       f"{' and '.join(required)} among them (columns: {', '.join(allowed)})",
                                       ",".join(raw)))
                return [], issues
            header = cells
            continue
        if len(cells) != len(header):
            issues.append(RigIssue(f"{where}", f"expected {len(header)} cells ({','.join(header)}), found {len(cells)}", ",".join(raw)))
            continue
        row: dict = {}
        for key, cell in zip(header, cells):
            if cell == "":
                continue
            if key in NUMERIC_TAP_KEYS:
                try:
                    row[key] = float(cell)
                except ValueError:
                    issues.append(RigIssue(f"{where}, {key}", "expected a number", cell))
                    continue
            else:
                row[key] = cell
        rows.append((lineno, row))
    if header is None:
        issues.append(RigIssue(TAP_FILE_KEY, f"{name}: no header line (expected e.g. name,channel,x_c,surface)"))
    elif not rows and not issues:
        issues.append(RigIssue(TAP_FILE_KEY, f"{name}: no taps after the header line"))
    return rows, issues


def _unroll_taps(data: dict, attachments: Mapping[str, str], places: Places, issues: list[RigIssue]) -> None:
    table = data.get("taps")
    if isinstance(table, list):  # the long form
        places.taps += [_long("taps", i) for i in range(len(table))]
        return
    if not isinstance(table, dict):
        return  # pydantic names the wrong type
    if "file" in table:
        name = table["file"]
        if len(table) > 1:
            issues.append(RigIssue(TAP_FILE_KEY, "give the taps in a file or as arrays, not both "
                                   f"(found also {', '.join(k for k in table if k != 'file')})", name))
            return
        if not isinstance(name, str) or name not in attachments:
            issues.append(RigIssue(TAP_FILE_KEY, "tap file not found (expected a CSV beside the rig file)", name))
            return
        rows, problems = parse_tap_csv(attachments[name], name)
        issues += problems
        if problems:
            return
        data["taps"] = [row for _, row in rows]
        for lineno, row in rows:
            label = f" (tap {row['name']!r})" if isinstance(row.get("name"), str) else ""
            places.taps.append(lambda key, lineno=lineno, label=label:
                               f"{name} line {lineno}" + (f", {key}" if key else "") + label)
        return
    rows = _column_rows(table, issues)
    if rows is None:
        return
    data["taps"] = rows
    places.taps += [_inline_place(table, r, row.get("name")) for r, row in enumerate(rows)]


def unroll(data: dict, attachments: Mapping[str, str]) -> tuple[Places, list[RigIssue]]:
    """Unroll channel groups and tap tables of a parsed rig file in place → (where things are written, issues)."""
    places = Places()
    issues: list[RigIssue] = []
    _unroll_channels(data, places, issues)
    _unroll_taps(data, attachments, places, issues)
    return places, issues


def tap_file_name(data: dict) -> str | None:
    """The tap CSV a parsed rig file names (``[taps] file``), if any."""
    taps = data.get("taps")
    name = taps.get("file") if isinstance(taps, dict) else None
    return name if isinstance(name, str) else None
