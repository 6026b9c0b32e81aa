"""Options shared by the commands that run a rig live (``record``, ``demo``): rig, port, calibration, ambient.

User units at this edge only: ambient pressure in hPa, temperature in °C, humidity in %, converted to SI here.
"""

from __future__ import annotations

import argparse
import math
from pathlib import Path

from typing import TYPE_CHECKING

from taprig.cli import UserError

if TYPE_CHECKING:  # the heavy imports wait until a command runs, so `taprig --help` stays quick
    from taprig.reduce import Ambient, Reducer
    from taprig.rig import Calibration, Rig


def add_rig_options(p: argparse.ArgumentParser, rig_required: bool = True) -> None:
    """Add ``--rig``, ``--calibration`` and the ambient options."""
    p.add_argument("--rig", required=rig_required, metavar="RIG", help="rig file (TOML), see docs/rig-file.md")
    p.add_argument("--calibration", metavar="CAL", help="calibration file from `taprig calibrate`")
    add_accept_failed_option(p)
    p.add_argument("--pressure-hpa", type=float, metavar="HPA", help="room barometric pressure [hPa]")
    p.add_argument("--temperature-c", type=float, metavar="C",
                   help="air temperature (the water temperature on a water rig) [°C]")
    p.add_argument("--humidity-pct", type=float, metavar="PCT", help="relative humidity of the room air [%%]")


def add_accept_failed_option(p: argparse.ArgumentParser) -> None:
    """``--accept-failed-calibration``: use a calibration that failed its own checks (every output is marked)."""
    p.add_argument("--accept-failed-calibration", action="store_true",
                   help="use a calibration that failed its own checks; every output then says so")


def load_rig_arg(path: str) -> Rig:
    """Load the rig file named on the command line, as a one-line error when it is wrong."""
    from taprig.rig import RigError, load_rig

    try:
        return load_rig(path)
    except RigError as exc:
        raise UserError(str(exc)) from None
    except OSError as exc:
        raise UserError(f"{path}: cannot read the rig file ({exc.strerror or exc})") from None


def one_line(message: str) -> str:
    """A message on one line (a rig or calibration error lists its issues on several)."""
    return "; ".join(part.strip() for part in str(message).splitlines() if part.strip())


def load_calibration_arg(path: str | None, rig: Rig | None = None, accept_failed: bool = False) -> Calibration | None:
    """Load ``--calibration`` (None when not given) as a one-line error when it is wrong; with ``rig``, also
    check it belongs to that rig (replay and export leave that to the session's reducer). A calibration whose own
    checks failed (a channel flagged out of tolerance) is refused unless ``accept_failed``; the reducer then marks
    every output."""
    from taprig.rig import RigError, load_calibration

    if path is None:
        return None
    try:
        calibration = load_calibration(path)  # an unreadable file is a RigError too
    except (RigError, ValueError) as exc:
        raise UserError(one_line(str(exc))) from None
    problems = [] if rig is None else calibration.problems_with(rig)
    if problems:
        raise UserError(f"{path}: does not fit rig {rig.id!r}: " + "; ".join(problems))
    if calibration.flagged and not accept_failed:
        found = "; ".join(f"{name}: {', '.join(flags)}" for name, flags in calibration.flagged.items())
        raise UserError(f"{path}: the calibration failed its own checks ({found}); redo it, or pass "
                        "--accept-failed-calibration to use it anyway (every output is then marked)")
    return calibration


#: Room pressures anywhere people run a bench tunnel [hPa]: the highest habitation to below sea level, with margin
#: (common practice: 1013.25 hPa at sea level, about 330 hPa at 8800 m).
ROOM_HPA = (300.0, 1100.0)
#: Room air temperatures a bench rig runs in [°C] (common practice).
ROOM_C = (-30.0, 60.0)


def pressure_slip(hpa: float) -> str:
    """Why a room pressure in hPa is implausible, naming the likely unit slip; "" when it is plausible."""
    low, high = ROOM_HPA
    if low <= hpa <= high:
        return ""
    if 100 * low <= hpa <= 100 * high:
        return f"no room is at that pressure ({low:g}–{high:g} hPa); this looks like pascals typed as hPa: " \
               f"--pressure-hpa {hpa / 100:g}"
    if low / 10 <= hpa <= high / 10:
        return f"no room is at that pressure ({low:g}–{high:g} hPa); this looks like kilopascals: " \
               f"--pressure-hpa {hpa * 10:g}"
    return f"no room is at that pressure: expected {low:g}–{high:g} hPa (1013 at sea level)"


def air_temperature_slip(celsius: float) -> str:
    """Why a room air temperature in °C is implausible, naming the likely unit slip; "" when it is plausible."""
    low, high = ROOM_C
    if low <= celsius <= high:
        return ""
    if 273.15 + low <= celsius <= 273.15 + high:
        return f"a room is at {low:g} to {high:g} °C; this looks like kelvin: --temperature-c {celsius - 273.15:.2f}"
    if 32 + 1.8 * low <= celsius <= 32 + 1.8 * high:
        return f"a room is at {low:g} to {high:g} °C; this looks like Fahrenheit: " \
               f"--temperature-c {(celsius - 32) / 1.8:.1f}"
    return f"expected a room air temperature of {low:g} to {high:g} °C"


def check_ambient_options(args: argparse.Namespace, rig: Rig) -> None:
    """Refuse ambient options out of range, in the units they were typed in (exit 2: a bad command line)."""
    from taprig.physics.constants import ZERO_CELSIUS
    from taprig.physics.water import WATER_MAX_TEMPERATURE, WATER_MIN_TEMPERATURE
    from taprig.rig import Medium

    if args.pressure_hpa is not None and not (args.pressure_hpa > 0 and math.isfinite(args.pressure_hpa)):
        raise UserError(f"--pressure-hpa {args.pressure_hpa:g} hPa: expected a room pressure > 0 hPa", 2)
    if args.pressure_hpa is not None:
        slip = pressure_slip(args.pressure_hpa)
        if slip:
            raise UserError(f"--pressure-hpa {args.pressure_hpa:g} hPa: {slip}", 2)
    t = args.temperature_c
    if t is not None and not (t > -ZERO_CELSIUS and math.isfinite(t)):
        raise UserError(f"--temperature-c {t:g} °C: expected a temperature above absolute zero "
                        f"({-ZERO_CELSIUS:g} °C)", 2)
    if t is not None and rig.fluid.medium is Medium.AIR:
        slip = air_temperature_slip(t)
        if slip:
            raise UserError(f"--temperature-c {t:g} °C: {slip}", 2)
    low, high = WATER_MIN_TEMPERATURE - ZERO_CELSIUS, WATER_MAX_TEMPERATURE - ZERO_CELSIUS
    if t is not None and rig.fluid.medium is Medium.WATER and not low <= t <= high:
        raise UserError(f"--temperature-c {t:g} °C: the water properties are known for {low:g} to {high:g} °C "
                        f"(rig {rig.id!r} is a water rig)", 2)
    h = args.humidity_pct
    if h is not None and not 0 <= h <= 100:
        raise UserError(f"--humidity-pct {h:g} %: expected a relative humidity from 0 to 100 %", 2)


def ambient_arg(args: argparse.Namespace, rig: Rig) -> Ambient:
    """The ambient conditions from the options, defaulting to the rig file's fluid table."""
    from taprig.physics.units import Unit, to_si
    from taprig.reduce import ambient_for

    check_ambient_options(args, rig)
    overrides = {}
    if args.pressure_hpa is not None:
        overrides["pressure"] = float(to_si(args.pressure_hpa, Unit.parse("hPa")))
    if args.temperature_c is not None:
        overrides["temperature"] = float(to_si(args.temperature_c, Unit.parse("degC")))
    if args.humidity_pct is not None:
        overrides["relative_humidity"] = args.humidity_pct / 100.0
    try:
        return ambient_for(rig, **overrides)
    except ValueError as exc:
        raise UserError(f"ambient conditions: {exc}") from None


def build_reducer(rig: Rig, calibration: Calibration | None, ambient: Ambient) -> Reducer:
    """The run's reducer, as a one-line error when the rig and calibration cannot be reduced together."""
    from taprig.reduce import ReduceError, Reducer

    try:
        return Reducer(rig, calibration, ambient)
    except ReduceError as exc:
        raise UserError(str(exc)) from None


#: The file name suffix of a session file (docs/session-format.md).
SESSION_SUFFIX = ".taprig"


def new_output_path(path: str | None, default_dir: str, stem: str) -> Path:
    """The session file to write: ``path`` if given (must not exist), else a new name under ``default_dir``."""
    from datetime import datetime

    if path:
        out = Path(path)
        if out.suffix.lower() != SESSION_SUFFIX and not out.is_dir():
            better = out.with_suffix(SESSION_SUFFIX) if out.suffix else Path(f"{out}{SESSION_SUFFIX}")
            raise UserError(f"{out}: a session is an SQLite file and is named *{SESSION_SUFFIX}; write it as "
                            f"{better} (and `taprig export {better} --format csv -o {out.with_suffix('.csv')}` makes "
                            "the CSV)" if out.suffix.lower() in (".csv", ".parquet", ".json", ".txt", ".tsv", ".xlsx")
                            else f"{out}: session files are named *{SESSION_SUFFIX}; write it as {better}", 2)
        if out.is_dir():
            raise UserError(f"{out}: is a directory; give a file name for the session, such as {out / 'run.taprig'}")
        if out.exists():
            raise UserError(f"{out}: already exists; sessions are never overwritten, choose another name")
    else:
        out = Path(default_dir) / f"{stem}-{datetime.now():%Y%m%d-%H%M%S}.taprig"
    if not out.parent.exists():
        try:
            out.parent.mkdir(parents=True)
        except OSError as exc:
            raise UserError(f"{out.parent}: cannot create the output folder ({exc.strerror or exc})") from None
    return out
