"""``taprig new RIG.toml``: write a commented rig file for an airfoil section from a few answers.

Asked at the terminal, one question at a time with a default in brackets, unless options give the answers
(``--taps``, ``--section``, ``--chord-mm``, ``--tunnel-mm``, ``--tap-count``, the sensor ranges): then nothing is
asked and what is not given takes its default. The file written is validated as ``taprig check`` would, so it
loads at once, on a board or on ``sim://``.
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Callable
from pathlib import Path

from taprig.cli import UserError, bounded, finite_positive, positive_int
from taprig.physics.sections import naca4
from taprig.rig import RigError, parse_rig
from taprig.rig.loader import parse_coordinates_csv, read_text_file
from taprig.rig.starter import (
    TAP_SENSORS,
    StarterAnswers,
    check_id,
    id_from_filename,
    spread_taps,
    starter_text,
    taps_from_csv,
)

ANSWER_OPTIONS = ("taps", "tap_count", "section", "chord_mm", "tunnel_mm", "tap_range_pa", "pitot_range_pa",
                  "tap_sensor", "no_actuators", "rig_id", "name")


def tunnel_size(text: str) -> tuple[float, float]:
    """An argparse type: ``HEIGHTxWIDTH`` in mm (``300x300``), or one number for a square test section."""
    parts = text.lower().replace("×", "x").split("x")
    try:
        values = [float(p) for p in parts]
    except ValueError:
        values = []
    if len(values) == 1:
        values *= 2
    if len(values) != 2 or not all(0 < v < 1e5 for v in values):
        raise argparse.ArgumentTypeError(f"expected HEIGHTxWIDTH in mm, e.g. 300x300, got {text!r}")
    return values[0], values[1]


def rig_id_arg(text: str) -> str:
    """An argparse type: a rig id (lower case, digits, '-', '_', '.')."""
    why = check_id(text)
    if why:
        raise argparse.ArgumentTypeError(f"{text!r}: {why}")
    return text


def tap_count(text: str) -> int:
    """An argparse type: a number of taps, 3 to 63 (channel 0 is the probe's)."""
    value = positive_int(text)
    if not 3 <= value <= 63:
        raise argparse.ArgumentTypeError(f"expected 3 to 63 taps (channel 0 is the probe's), got {text!r}")
    return value


def register(sub) -> None:
    p = sub.add_parser("new", help="write a commented rig file for an airfoil section from a few answers",
                       description="Write a new rig file (compact form, commented) for an airfoil section: asked at "
                                   "the terminal, or from options such as a CSV of tap positions. The file passes "
                                   "`taprig check` and runs on sim:// at once.")
    p.add_argument("output", metavar="RIG.toml", help="rig file to write (refused if it exists, unless --force)")
    p.add_argument("--taps", metavar="CSV", help="tap positions: a CSV with a header naming x_c and surface "
                                                  "(name and y_c optional)")
    p.add_argument("--tap-count", type=tap_count, metavar="N",
                   help="no CSV: N taps spread over both surfaces, closer near the leading edge (default 16)")
    p.add_argument("--section", metavar="NACA|CSV", help="NACA 4 digits (0012) or a coordinate CSV (default 0012)")
    p.add_argument("--chord-mm", type=bounded(1, 10000, "mm", low_open=True), metavar="MM", help="chord (default 150)")
    p.add_argument("--tunnel-mm", type=tunnel_size, metavar="HxW", help="test section height x width (default 300x300)")
    p.add_argument("--tap-sensor", choices=TAP_SENSORS, help="bridge: 14-bit digital; analog: ratiometric on a "
                                                             "12-bit ADC (default bridge)")
    p.add_argument("--tap-range-pa", type=finite_positive, metavar="PA", help="tap sensors' range ± (default 2500)")
    p.add_argument("--pitot-range-pa", type=finite_positive, metavar="PA", help="pitot sensor's range ± (default 1000)")
    p.add_argument("--no-actuators", action="store_true", help="no fan or angle servo on the board")
    p.add_argument("--id", dest="rig_id", type=rig_id_arg, metavar="ID", help="rig id (default: from the file name)")
    p.add_argument("--name", metavar="TEXT", help="a name for people (default: from the section and taps)")
    p.add_argument("--force", action="store_true", help="write over an existing file")
    p.set_defaults(func=run)


class _Questions:
    """Asks at the terminal; each answer is parsed, and asked again (up to 3 times) when it does not parse."""

    def __init__(self, ask: Callable[[str], str]):
        self.ask = ask

    def __call__(self, question: str, default: str, parse: Callable[[str], object]):
        for _ in range(3):
            try:
                text = self.ask(f"{question} [{default}]: ").strip()
            except EOFError:
                raise UserError(f"no answer to {question!r}: give the answers as options (taprig new --help)") from None
            try:
                return parse(text or default)
            except (ValueError, argparse.ArgumentTypeError, UserError, RigError) as exc:
                print(f"  {exc}", file=sys.stderr)
        raise UserError(f"no usable answer to {question!r}")


def _section(text: str, folder: Path, out_dir: Path) -> tuple[str | None, str | None, dict[str, str], str]:
    """(naca, coordinates file name relative to the rig file, attachments, source) from a NACA code or a CSV."""
    code = text.strip().upper().removeprefix("NACA").strip()
    if code.isdigit() and len(code) == 4:
        naca4(code)  # raises ValueError for a designation it cannot build
        return code, None, {}, f"NACA {code}"
    path = (folder / text).resolve() if not Path(text).is_absolute() else Path(text)
    if not path.is_file():
        raise ValueError(f"{text}: expected NACA 4 digits (0012) or a coordinate CSV file that exists")
    csv_text = read_text_file(path, "coordinate file", "CSV")
    try:
        parse_coordinates_csv(csv_text, str(path))
    except ValueError as exc:
        raise ValueError(str(exc)) from None
    name = Path(_relative(path, out_dir)).as_posix()
    return None, name, {name: csv_text}, path.name


def _relative(path: Path, start: Path) -> str:
    import os

    return os.path.relpath(path, start.resolve())


def _taps(text: str, folder: Path):
    """Taps from a count (``16``) or a CSV file of positions."""
    if text.strip().isdigit():
        count = tap_count(text.strip())
        return spread_taps(count), f"{count} taps spread over both surfaces"
    path = folder / text
    if not path.is_file():
        raise ValueError(f"{text}: expected a number of taps or a CSV file of tap positions that exists")
    taps, issues = taps_from_csv(read_text_file(path, "tap file", "CSV"), str(path))
    if issues:
        raise RigError(str(path), issues)
    if not 3 <= len(taps) <= 63:
        raise ValueError(f"{path}: expected 3 to 63 taps (channel 0 is the probe's), the file has {len(taps)}")
    return taps, path.name


def _answers(args, ask) -> StarterAnswers:
    out = Path(args.output)
    here = Path.cwd()
    questions = any(getattr(args, k) not in (None, False) for k in ANSWER_OPTIONS)
    q = _Questions(ask)

    def rig_id(text: str) -> str:
        why = check_id(text)
        if why:
            raise ValueError(f"{text!r}: {why}")
        return text

    def positive(unit: str):
        def parse(text: str) -> float:
            try:
                value = float(text)
            except ValueError:
                value = float("nan")
            if not 0 < value < 1e6:
                raise ValueError(f"expected a number > 0 in {unit}, got {text!r}")
            return value
        return parse

    default_id = args.rig_id or id_from_filename(out.stem)
    if questions:  # options given: nothing asked
        rid = rig_id(default_id)
        naca, coords, attach, shape = _section(args.section or "0012", here, out.parent)
        taps, tap_source = _taps(args.taps or str(args.tap_count or 16), here)
        chord = args.chord_mm or 150.0
        height, width = args.tunnel_mm or (300.0, 300.0)
        sensor = args.tap_sensor or "bridge"
        tap_range, pitot_range = args.tap_range_pa or 2500.0, args.pitot_range_pa or 1000.0
        actuators = not args.no_actuators
    else:
        print("A new rig file for an airfoil section. Press Enter to take the value in brackets.")
        rid = q("Rig id (lower case, digits, - _ .)", default_id, rig_id)
        naca, coords, attach, shape = q("Section: NACA 4 digits, or a coordinate CSV file", "0012",
                                        lambda t: _section(t, here, out.parent))
        chord = q("Chord [mm]", "150", positive("mm"))
        height, width = q("Test section height x width [mm]", "300x300", tunnel_size)
        taps, tap_source = q("Taps: how many (spread over both surfaces), or a CSV of tap positions (x_c, surface)",
                             "16", lambda t: _taps(t, here))
        sensor = q("Tap sensors: bridge (14-bit digital) or analog (ratiometric, 12-bit ADC)", "bridge",
                   lambda t: t if t in TAP_SENSORS else (_ for _ in ()).throw(ValueError("expected bridge or analog")))
        tap_range = q("Tap sensor range ± [Pa]", "2500", positive("Pa"))
        pitot_range = q("Pitot-static sensor range ± [Pa]", "1000", positive("Pa"))
        actuators = q("Fan and angle-of-attack servo on the board? (y/n)", "y",
                      lambda t: t.lower().startswith("y") if t.lower()[:1] in ("y", "n") else
                      (_ for _ in ()).throw(ValueError("expected y or n")))
    name = args.name or f"{shape} section, {len(taps)} taps"
    answers = StarterAnswers(rid, name, taps, naca, coords, chord, height, width, sensor, tap_range, pitot_range,
                             actuators, (tap_source, shape), out.name)
    return answers, attach


def run(args, ask: Callable[[str], str] = input) -> int:
    out = Path(args.output)
    if out.suffix.lower() != ".toml":
        raise UserError(f"{out}: a rig file is written as .toml", 2)
    if out.is_dir():
        raise UserError(f"{out} is a directory; give a file name such as {out / 'my-rig.toml'}")
    if out.exists() and not args.force:
        raise UserError(f"{out} already exists (--force writes over it)")
    try:
        answers, attachments = _answers(args, ask)
    except (ValueError, RigError) as exc:
        raise UserError(str(exc)) from None
    text = starter_text(answers)
    try:
        rig = parse_rig(text, str(out), attachments)  # the file is refused here, not at first use
    except RigError as exc:
        raise UserError(str(exc)) from None
    try:
        out.parent.mkdir(parents=True, exist_ok=True)
        out.write_text(text, encoding="utf-8")
    except OSError as exc:
        raise UserError(f"{out}: cannot write: {exc.strerror or exc}") from None
    n = len(rig.taps)
    print(f"wrote {out}: {answers.name}; the pitot-static probe on channel 0, {n} taps on channels 1-{n}")
    print(f"look at it:  taprig check {out} --draw {out.with_suffix('.png')}")
    print(f"try it:      taprig record --rig {out} --port sim:// --duration 5")
    print("then replace the values marked CHECK with your rig's (docs/rig-file.md)")
    return 0
