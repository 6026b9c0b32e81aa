"""``taprig calibrate RIG``: wind-off zero and span against a liquid manometer, written as a calibration file.

Two ways in:

- ``--from FILE`` (TOML or CSV): the readings and the counts of every step are in the file; nothing is asked.
- guided (no ``--from``): the terminal walks the operator through the zero, each manometer point and an optional
  end zero, asking for the readings. The counts of each step come from a counts file (``--counts FILE``, same
  formats), taken in order; :func:`guided` takes any :data:`taprig.rig.CountsSource`, so a script can feed it
  averages from a live board instead.

The output must end in ``.toml`` or ``.json`` and is never overwritten unless ``--force`` is given. A calibration
that fails its own checks (a gain far from nominal, a linearity out of tolerance, a zero that drifted) is not
written unless ``--accept-failed`` is given; it is then refused wherever it is used unless
``--accept-failed-calibration`` is given, and every output made with it says so.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import replace
from datetime import datetime, timezone
from pathlib import Path

from taprig.cli import UserError, bounded, celsius, finite_positive, latitude
from taprig.physics.constants import STANDARD_GRAVITY, ZERO_CELSIUS
from taprig.physics.hydrostatics import normal_gravity
from taprig.physics.water import WATER_MAX_TEMPERATURE, WATER_MIN_TEMPERATURE
from taprig.rig import (
    Calibration,
    CalibrationInput,
    CountsSource,
    Manometer,
    RigError,
    calibrate,
    calibration_to_text,
    load_rig,
    manometer_pressure,
    parse_input_csv,
    parse_input_toml,
)


def register(sub) -> None:
    p = sub.add_parser("calibrate", help="wind-off zero and manometer span calibration → calibration file")
    p.add_argument("rig", metavar="RIG", help="rig file (TOML)")
    src = p.add_mutually_exclusive_group(required=True)
    src.add_argument("--from", dest="from_file", metavar="FILE", help="readings and counts of every step (TOML or CSV)")
    src.add_argument("--counts", metavar="FILE", help="guided mode: counts of each step (TOML or CSV); readings are asked")
    src.add_argument("--static-factor", metavar="CSV",
                     help="fit the tunnel's static factor from q_pa, room_minus_static_pa pairs (empty tunnel)")
    p.add_argument("-o", "--output", metavar="FILE", help="calibration file to write (.toml or .json; default RIGID.cal.toml)")
    p.add_argument("--force", action="store_true", help="replace an output file that already exists")
    p.add_argument("--note", default=None, help="operator note stored in the calibration")
    p.add_argument("--date", default=None, help="calibration date-time, ISO 8601 (default: now, UTC)")
    p.add_argument("--angle-deg", type=bounded(0.0, 90.0, "deg", low_open=True), default=90.0,
                   help="manometer tube angle above horizontal (CSV input, guided) [deg]")
    p.add_argument("--liquid-temp-c", type=celsius, default=20.0, help="water temperature in the manometer [°C]")
    p.add_argument("--liquid-density", type=finite_positive, default=None,
                   help="manometer liquid density if not water [kg/m³]")
    p.add_argument("--latitude-deg", type=latitude, default=None,
                   help="local gravity from latitude, -90 to 90 (default standard gravity) [deg]")
    p.add_argument("--strict", action="store_true", help="exit 1 if any channel is out of tolerance")
    p.add_argument("--accept-failed", action="store_true",
                   help="write the calibration even when it fails its own checks (it is then marked wherever used)")
    p.set_defaults(func=run)


def manometer_from_args(args) -> Manometer:
    """The manometer set-up given on the command line (operator units → SI).

    The argparse types have checked each value; here the water temperature is checked against the range of the
    water-density formula, in °C as typed (with ``--liquid-density`` the temperature is not used).
    """
    low, high = WATER_MIN_TEMPERATURE - ZERO_CELSIUS, WATER_MAX_TEMPERATURE - ZERO_CELSIUS
    if args.liquid_density is None and not low <= args.liquid_temp_c <= high:
        raise UserError(f"--liquid-temp-c {args.liquid_temp_c:g} °C: the water density is known for {low:g} to "
                        f"{high:g} °C; give --liquid-density for a liquid outside that range", 2)
    gravity = STANDARD_GRAVITY if args.latitude_deg is None else float(normal_gravity(math.radians(args.latitude_deg)))
    return Manometer(angle=math.radians(args.angle_deg), liquid_density=args.liquid_density,
                     liquid_temperature=ZERO_CELSIUS + args.liquid_temp_c, gravity=gravity)


def read_input(path: str, rig, args) -> CalibrationInput:
    """Parse a calibration input file, by suffix: ``.csv`` or TOML."""
    try:
        text = Path(path).read_text(encoding="utf-8")
    except UnicodeDecodeError:
        raise UserError(f"{path} is not a text TOML or CSV calibration input (a session? try taprig info)") from None
    except OSError as exc:
        raise UserError(f"cannot read {path}: {exc.strerror or exc}") from None
    if path.lower().endswith(".csv"):
        return parse_input_csv(text, path, rig, manometer_from_args(args))
    return parse_input_toml(text, path, rig)


def guided(plan: CalibrationInput, counts_source: CountsSource, ask: Callable[[str], str],
           say: Callable[[str], None]) -> tuple[CalibrationInput, CountsSource]:
    """Walk the operator through zero → manometer points → end zero; return the plan with the readings typed.

    ``counts_source(label)`` gives the counts of the step just set up (from the counts file, or whatever source a
    caller passes); the returned source maps the steps onto it in the order they were taken.
    """
    say(f"Channels on the manifold: {', '.join(plan.channels)}")
    ask("Wind off, every sensor port open to the room. Press Enter to take the zero. ")
    taken: dict[str, object] = {"zero": counts_source("zero")}
    refs, labels = [], []
    while True:
        text = ask(f"Point {len(labels) + 1}: set the manometer and type its reading in mm (Enter to finish): ").strip()
        if not text:
            break
        try:
            reading_m = float(text) * 1e-3
        except ValueError:
            say(f"  not a number: {text!r}")
            continue
        label = f"point {len(labels) + 1}"
        refs.append(manometer_pressure(plan.manometer.reading(reading_m)))
        labels.append(label)
        taken[label] = counts_source(label)
        say(f"  {text} mm → {refs[-1]:.3f} Pa")
    if ask("Take an end zero for the drift check? [y/N] ").strip().lower().startswith("y"):
        taken["end_zero"] = counts_source("end_zero")
    return replace(plan, references=tuple(refs), labels=tuple(labels)), taken.get


def _report(cal: Calibration, say: Callable[[str], None]) -> None:
    say(f"{'channel':<14} {'zero [counts]':>14} {'± s.e.':>8} {'gain':>8} {'lin. % FS':>9}  flags")
    for name, c in cal.channels.items():
        se = "-" if c.zero_std_error is None else f"{c.zero_std_error:.3g}"
        lin = "-" if c.linearity_pct_fs is None else f"{c.linearity_pct_fs:.3g}"
        say(f"{name:<14} {c.zero_counts:>14.2f} {se:>8} {c.gain:>8.5f} {lin:>9}  {'; '.join(c.flags)}")


def _date(text: str | None) -> datetime:
    if text is None:
        return datetime.now(timezone.utc).replace(microsecond=0)
    try:
        return datetime.fromisoformat(text)
    except ValueError:
        raise UserError(f"--date: expected an ISO 8601 date-time such as 2024-05-01T10:30, got {text!r}", 2) from None


def output_path(args, rig_id: str) -> Path:
    """The calibration file to write: ``.toml`` or ``.json`` (exit 2 otherwise), new unless ``--force``.

    Checked before any step is taken, so an operator never does a guided calibration that cannot be saved.
    """
    out = Path(args.output or f"{rig_id}.cal.toml")
    if out.suffix.lower() not in (".toml", ".json"):
        raise UserError(f"{out}: a calibration is written as .toml or .json; give a name with one of those", 2)
    if out.is_dir():
        raise UserError(f"{out}: is a directory; give a file name for the calibration")
    if out.exists() and not args.force:
        raise UserError(f"{out}: already exists; choose another name or pass --force to replace it")
    if not out.parent.is_dir():
        raise UserError(f"{out.parent}: no such directory to write {out.name} into")
    return out


def static_factor(path: str, rig, say: Callable[[str], None]) -> int:
    """Fit f = (p_room − p∞)/q from a CSV of pairs and print the rig-file lines (docs/calibration.md)."""
    import csv

    from taprig.reduce import ReduceError
    from taprig.reduce.tunnel import fit_static_factor

    try:
        with open(path, encoding="utf-8", newline="") as fh:
            rows = list(csv.DictReader(fh))
    except OSError as exc:
        raise UserError(f"cannot read {path}: {exc.strerror or exc}") from None
    except UnicodeDecodeError:
        raise UserError(f"{path}: not a text CSV of q_pa, room_minus_static_pa pairs") from None
    try:
        q = [float(r["q_pa"]) for r in rows]
        d = [float(r["room_minus_static_pa"]) for r in rows]
    except (KeyError, TypeError, ValueError):
        raise UserError(f"{path}: expected a CSV with the columns q_pa and room_minus_static_pa, numbers in "
                        "every row") from None
    try:
        fit = fit_static_factor(q, d)
    except ReduceError as exc:
        raise UserError(f"{path}: {exc}") from None
    say(f"static factor f = {fit.factor:.4f} ± {fit.u_factor:.4f} from {fit.n_points} points "
        f"(residual rms {fit.residual_rms:.3g} Pa); put in [reference] of {rig.id!r}:")
    say(fit.rig_lines())
    return 0


def run(args, ask: Callable[[str], str] = input, say: Callable[[str], None] = print) -> int:
    if getattr(args, "static_factor", None):
        try:
            rig = load_rig(args.rig)
        except RigError as exc:
            raise UserError(str(exc)) from None
        return static_factor(args.static_factor, rig, say)
    try:
        rig = load_rig(args.rig)
        out = output_path(args, rig.id)
        plan = read_input(args.from_file or args.counts, rig, args)
    except RigError as exc:
        raise UserError(str(exc)) from None
    if args.note is not None:
        plan = replace(plan, operator_note=args.note)
    source: CountsSource = plan.blocks.get
    if args.counts:
        by_order = {"zero": plan.blocks.get("zero"), "end_zero": plan.blocks.get("end_zero")}
        by_order |= {f"point {k + 1}": plan.blocks[label] for k, label in enumerate(plan.labels)}
        try:
            plan, source = guided(plan, by_order.get, ask, say)
        except EOFError:
            raise UserError("the input ended before the calibration was complete; nothing was written") from None
    elif any(r is None for r in plan.references):
        raise UserError(f"{args.from_file}: every point needs reading_mm (or use --counts for guided mode)")
    try:
        cal = calibrate(rig, plan, source, _date(args.date))
    except ValueError as exc:
        raise UserError(str(exc)) from None
    if cal.flagged and not args.accept_failed:
        _report(cal, say)
        found = "; ".join(f"{name}: {', '.join(flags)}" for name, flags in cal.flagged.items())
        raise UserError(f"the calibration fails its own checks ({found}); nothing was written. Check the "
                        "manometer's connection and redo it, or pass --accept-failed to write it anyway")
    try:
        out.write_text(calibration_to_text(cal, "json" if out.suffix.lower() == ".json" else "toml"), encoding="utf-8")
    except OSError as exc:
        raise UserError(f"cannot write {out}: {exc}") from None
    _report(cal, say)
    say(f"wrote {out}")
    if cal.flagged:
        say(f"WARNING: {len(cal.flagged)} channel(s) out of tolerance: {', '.join(cal.flagged)}")
        return 1 if args.strict else 0
    return 0
