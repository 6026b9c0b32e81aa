"""Reading a rig file: TOML text → validated :class:`~taprig.rig.model.Rig`, or a :class:`RigError` listing every problem.

:func:`parse_rig` is pure (the texts of files the rig names come in ``attachments``); :func:`load_rig` is the one
function in the model layer that reads files.
"""

from __future__ import annotations

import csv
import io
import os
import stat
import tomllib
from collections.abc import Mapping
from pathlib import Path

from pydantic import ValidationError

from taprig.rig.checks import cross_check
from taprig.rig.compact import tap_file_name, unroll
from taprig.rig.errors import CrossCheckFailed, RigError, RigIssue, issues_from_validation
from taprig.rig.model import Rig
from taprig.rig.sensors import SENSOR_KINDS

COORDINATES_KEY = "section.coordinates_file"


class WrongKindOfFile(RigError):
    """A file of another kind than the one expected (binary, or a rig file given as a calibration).

    ``str()`` is one sentence, ``"FILE what"``, instead of a list of issues: the keys of the wrong file would only
    bury the one thing to say.
    """

    def __init__(self, source: str, what: str):
        super().__init__(source, [RigIssue("", what)])
        self.args = (f"{source} {what}",)


def read_text_file(path: Path, what: str, formats: str) -> str:
    """The text of ``path`` for a loader; RigError when it cannot be read, WrongKindOfFile when it is not text.

    ``what`` names the file kind ("rig file") and ``formats`` the text formats it may be in ("TOML"), for the
    messages. A NUL byte means binary even when the bytes
    happen to decode (TOML and JSON forbid it in a document; an SQLite session starts with one).
    """
    try:
        data = read_limited(path, what)
    except OSError as exc:
        raise RigError(str(path), [RigIssue("", f"cannot read the {what}: {exc.strerror or exc}")]) from None
    except ValueError as exc:
        raise RigError(str(path), [RigIssue("", str(exc))]) from None
    if b"\x00" in data:
        raise WrongKindOfFile(str(path), f"is not a text {formats} {what} (a session? try taprig info)")
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        printable = sum(32 <= b < 127 or b in b"\t\r\n" for b in data[:4096])
        if printable < 0.9 * min(len(data), 4096):  # mostly not text: a binary file
            raise WrongKindOfFile(str(path), f"is not a text {formats} {what} (a session? try taprig info)") from None
        raise RigError(str(path), [RigIssue("", f"is not UTF-8 text (byte 0x{data[exc.start]:02X} at offset "
                                                f"{exc.start}); save the {what} as UTF-8")]) from None
    return text.removeprefix("\ufeff")  # a byte-order mark some editors write is not part of the text


#: The largest rig file, coordinate table or calibration read [bytes]: far above any real one.
MAX_TEXT_BYTES = 16 * 2**20


def read_limited(path: Path, what: str) -> bytes:
    """The bytes of a regular file of at most :data:`MAX_TEXT_BYTES`; ValueError naming the file otherwise
    (a device such as /dev/zero, a pipe, a huge file), OSError when it cannot be read."""
    with open(path, "rb") as fh:
        st = os.fstat(fh.fileno())
        if not stat.S_ISREG(st.st_mode):
            raise ValueError(f"the {what} {path} is not a regular file")
        data = fh.read(MAX_TEXT_BYTES + 1)
    if len(data) > MAX_TEXT_BYTES:
        raise ValueError(f"the {what} {path} is larger than {MAX_TEXT_BYTES // 2**20} MiB; expected a small text file")
    return data


def _clean_loc(loc: tuple) -> tuple:
    """Drop the union tag pydantic puts after ``sensors.NAME`` (``sensors.tap.ratiometric.b`` → ``sensors.tap.b``)."""
    if len(loc) > 2 and loc[0] == "sensors" and loc[2] in SENSOR_KINDS:
        return loc[:2] + loc[3:]
    return loc


def parse_coordinates_csv(text: str, name: str) -> tuple[list[float], list[float]]:
    """Parse a two-column ``x, y`` coordinate table (an optional header line; ``#`` comments) → (x, y) lists.

    Raises ValueError naming the file and line of the first bad row.
    """
    xs: list[float] = []
    ys: list[float] = []
    header_seen = False
    for lineno, row in enumerate(csv.reader(io.StringIO(text)), start=1):
        cells = [c.strip() for c in row]
        if not cells or not any(cells) or cells[0].startswith("#"):
            continue
        try:
            if len(cells) != 2:
                raise ValueError
            x, y = float(cells[0]), float(cells[1])
        except ValueError:
            if not xs and not header_seen:
                header_seen = True  # one header line ("x,y") is allowed before the numbers
                continue
            raise ValueError(f"{name} line {lineno}: expected two numbers 'x, y', got {','.join(row)!r}") from None
        xs.append(x)
        ys.append(y)
    return xs, ys


def _attach_coordinates(data: dict, attachments: Mapping[str, str]) -> list[RigIssue]:
    """Replace ``section.coordinates_file`` by its table (in place), or return the issues found doing so."""
    section = data.get("section")
    if not isinstance(section, dict) or "coordinates_file" not in section:
        return []
    name = section["coordinates_file"]
    if "coordinates" in section:
        return [RigIssue(COORDINATES_KEY, "give coordinates or coordinates_file, not both", name)]
    if not isinstance(name, str) or name not in attachments:
        return [RigIssue(COORDINATES_KEY, "coordinate file not found (expected a CSV beside the rig file)", name)]
    try:
        x, y = parse_coordinates_csv(attachments[name], name)
    except ValueError as exc:
        return [RigIssue(COORDINATES_KEY, str(exc), name)]
    section["coordinates"] = {"x": x, "y": y}
    return []


def parse_rig(text: str, source: str = "<string>", attachments: Mapping[str, str] | None = None) -> Rig:
    """Validate a rig file's text into a :class:`Rig`.

    Parameters
    ----------
    text : str
        The TOML text, in the long or the compact form (channel groups, a tap table; :mod:`taprig.rig.compact`).
    source : str
        Name of the file, used in error messages.
    attachments : mapping, optional
        Texts of the files the rig names (``section.coordinates_file``, ``taps.file``), by the name used in the rig.

    Raises
    ------
    RigError
        Listing every problem found, each with its key path as written in the file (down to the row of a tap
        table or the line of a tap CSV), value and what was expected.
    """
    return _parse(text, source, attachments, checks=True)[0]


def parse_rig_unchecked(text: str, source: str = "<string>",
                        attachments: Mapping[str, str] | None = None) -> tuple[Rig, RigError | None]:
    """Like :func:`parse_rig`, but a rig whose tables are each valid is returned even when they disagree.

    Returns the rig and a RigError of the cross-check problems (None when there are none), so a drawing can show
    a rig with, say, two taps on one channel and mark the mistake. Raises RigError like :func:`parse_rig` when a
    table itself is invalid.
    """
    rig, issues = _parse(text, source, attachments, checks=False)
    return rig, (RigError(source, issues) if issues else None)


def _parse(text: str, source: str, attachments: Mapping[str, str] | None, checks: bool) -> tuple[Rig, list[RigIssue]]:
    attachments = dict(attachments or {})
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise RigError(source, [RigIssue("", f"not valid TOML: {exc}")]) from None
    except RecursionError:
        raise RigError(source, [RigIssue("", "not a usable rig file: arrays or tables nested too deeply")]) from None
    places, issues = unroll(data, attachments)
    issues += _attach_coordinates(data, attachments)
    if issues:
        raise RigError(source, issues)
    try:
        rig = Rig.model_validate(data, context={"cross_check": checks})
    except ValidationError as exc:
        raise RigError(source, _unique(places.issue(i) for i in issues_from_validation(exc, _clean_loc))) from None
    except CrossCheckFailed as exc:
        raise RigError(source, _unique(places.issue(i) for i in exc.issues)) from None
    rig._source_text = text
    rig._attachments = attachments
    return rig, ([] if checks else _unique(places.issue(i) for i in cross_check(rig)))


def _unique(issues) -> list[RigIssue]:
    """Issues in order, each once (a group's shared key reports once, not once per member)."""
    seen: dict = {}
    for issue in issues:
        seen.setdefault((issue.key, issue.message, repr(issue.value)), issue)
    return list(seen.values())


def _named_files(text: str) -> list[str]:
    """File names a rig text refers to (the coordinate table, the tap table); [] if the text does not parse."""
    try:
        data = tomllib.loads(text)
    except (tomllib.TOMLDecodeError, RecursionError):
        return []  # parse_rig reports the syntax error
    section = data.get("section", {})
    name = section.get("coordinates_file") if isinstance(section, dict) else None
    return [n for n in (name, tap_file_name(data)) if isinstance(n, str)]


def _section_file(text: str) -> str | None:
    try:
        section = tomllib.loads(text).get("section", {})
    except (tomllib.TOMLDecodeError, RecursionError):
        return None
    return section.get("coordinates_file") if isinstance(section, dict) else None


def load_rig(path: str | Path) -> Rig:
    """Read and validate a rig file (and the coordinate or tap CSV it names, looked up beside it).

    Raises
    ------
    RigError
        If the file cannot be read or does not validate; the message names the file. A
        :class:`WrongKindOfFile` if it is not text (a session file, a capture).
    """
    text, attachments = _read_rig_files(Path(path))
    return parse_rig(text, str(path), attachments)


def load_rig_unchecked(path: str | Path) -> tuple[Rig, RigError | None]:
    """Read a rig file as :func:`parse_rig_unchecked` does: the rig and its cross-check problems, to draw it."""
    text, attachments = _read_rig_files(Path(path))
    return parse_rig_unchecked(text, str(path), attachments)


def _read_rig_files(path: Path) -> tuple[str, dict[str, str]]:
    """The rig file's text and the texts of the files it names, found beside it (missing ones left out)."""
    text = read_text_file(path, "rig file", "TOML")
    attachments = {}
    for name in _named_files(text):
        try:
            attachments[name] = read_limited(path.parent / name, "file named by the rig").decode("utf-8")
        except ValueError as exc:  # a device, a huge file, not UTF-8: say so, naming the file
            key = COORDINATES_KEY if name == _section_file(text) else ""
            raise RigError(str(path), [RigIssue(key, str(exc), name)]) from None
        except OSError:
            continue  # parse_rig reports the missing attachment with its key
    return text, attachments
