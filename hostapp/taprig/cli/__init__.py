"""Command line entry point: ``taprig SUBCOMMAND ...``.

Each subcommand lives in its own module under ``taprig.cli.commands`` and exposes
``register(subparsers)``, which adds its parser and sets ``func`` to a callable
``func(args) -> int``. Modules are found by name, so adding a command touches no
shared file. Errors meant for a user are raised as :class:`UserError` and printed
on stderr as one line, with exit code 1 for bad data and 2 for a bad command line (as argparse does); the rule
is in DEVELOPERS.md under Habits. The argparse types below check option values where they are parsed, so a bad
value is a usage error (exit 2) naming the option, before any file or port is opened.
"""

from __future__ import annotations

import os

# One BLAS thread, set before numpy loads: the live path's matrices are small (at most channels × channels), where
# a second BLAS thread only adds synchronisation and fights the reader, writer and reduction threads for the
# cores (seen: a 500 × 65 covariance 17 times slower with two threads on a busy two-core machine). A value the
# user set is kept.
for _name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_name, "1")

import argparse  # noqa: E402
import importlib  # noqa: E402
import math  # noqa: E402
import pkgutil  # noqa: E402
import sys  # noqa: E402

from taprig import __version__


class UserError(Exception):
    """An error with a message fit for the person at the terminal (no traceback)."""

    def __init__(self, message: str, exit_code: int = 1):
        super().__init__(message)
        self.exit_code = exit_code


def _number(text: str) -> float:
    """``text`` as a float, or NaN when it is not a number (the callers' range checks then refuse it)."""
    try:
        return float(text)
    except ValueError:
        return math.nan


def bounded(low: float, high: float, unit: str, low_open: bool = False):
    """An argparse type: a finite number in ``[low, high]`` (``(low, high]`` with ``low_open``), in ``unit``.

    The message gives the range and the value as typed, in the user's unit, e.g. ``expected a number in
    [-90, 90] deg, got '100'``.
    """
    def parse(text: str) -> float:
        value = _number(text)
        inside = (low < value if low_open else low <= value) and value <= high
        if not (inside and math.isfinite(value)):
            bracket = "(" if low_open else "["
            raise argparse.ArgumentTypeError(f"expected a number in {bracket}{low:g}, {high:g}] {unit}, got {text!r}")
        return value

    return parse


def finite(text: str) -> float:
    """An argparse type: any finite number (``inf`` and ``nan`` are refused)."""
    value = _number(text)
    if not math.isfinite(value):
        raise argparse.ArgumentTypeError(f"expected a finite number, got {text!r}")
    return value


def finite_nonnegative(text: str) -> float:
    """An argparse type: a finite number >= 0 (``inf`` and ``nan`` are refused)."""
    value = _number(text)
    if not (value >= 0 and math.isfinite(value)):
        raise argparse.ArgumentTypeError(f"expected a finite number >= 0, got {text!r}")
    return value


def finite_positive(text: str) -> float:
    """An argparse type: a finite number > 0."""
    value = _number(text)
    if not (value > 0 and math.isfinite(value)):
        raise argparse.ArgumentTypeError(f"expected a finite number > 0, got {text!r}")
    return value


def positive_int(text: str) -> int:
    """An argparse type: a whole number > 0 (a baud rate, a count)."""
    try:
        value = int(text)
    except ValueError:
        value = 0
    if value <= 0:
        raise argparse.ArgumentTypeError(f"expected a whole number > 0, got {text!r}")
    return value


def celsius(text: str) -> float:
    """An argparse type: a finite temperature above absolute zero [°C]."""
    from taprig.physics.constants import ZERO_CELSIUS

    value = _number(text)
    if not (value > -ZERO_CELSIUS and math.isfinite(value)):
        raise argparse.ArgumentTypeError(f"expected a temperature above absolute zero ({-ZERO_CELSIUS:g} °C), "
                                         f"got {text!r}")
    return value


#: The largest IEEE 754 binary32 number: a scan rate travels as f32 in START (PROTOCOL.md §3).
_F32_MAX = (2 - 2**-23) * 2.0**127


def scan_rate(text: str) -> float:
    """An argparse type: a scan rate > 0 [Hz] that fits START's f32 field (the board checks its own limits)."""
    value = _number(text)
    if not (0 < value <= _F32_MAX):
        raise argparse.ArgumentTypeError(f"expected a scan rate > 0 Hz and at most {_F32_MAX:.3g} Hz (START carries "
                                         f"it as a 32-bit float; the board states its own limit), got {text!r}")
    return value


#: Latitude in degrees, for local gravity.
latitude = bounded(-90.0, 90.0, "deg")


def program_name() -> str:
    """How the person ran taprig, for hints they can paste: ``taprig``, or ``.venv/bin/taprig`` when not on PATH."""
    import shutil

    invoked = sys.argv[0] if sys.argv and sys.argv[0] else "taprig"
    if os.path.basename(invoked) != "taprig" or shutil.which("taprig") == os.path.abspath(invoked):
        return "taprig"
    relative = os.path.relpath(invoked)
    return relative if not relative.startswith("..") else invoked


def build_parser() -> argparse.ArgumentParser:
    """Build the top-level parser with every subcommand module registered."""
    from taprig.cli import commands

    parser = argparse.ArgumentParser(
        prog="taprig",
        description="Host side of bench airflow rigs: acquire, reduce, record, replay.",
    )
    parser.add_argument("--version", action="version", version=f"taprig {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for info in sorted(pkgutil.iter_modules(commands.__path__), key=lambda m: m.name):
        module = importlib.import_module(f"{commands.__name__}.{info.name}")
        module.register(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Run the command line; return the process exit code."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help(sys.stderr)
        return 2
    try:
        return int(args.func(args) or 0)
    except UserError as exc:
        print(f"taprig {args.command}: {exc}", file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt:
        print(f"taprig {args.command}: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return 0
    except Exception as exc:  # a defect: one line for the person, the traceback only on request
        if os.environ.get("TAPRIG_DEBUG"):
            raise
        print(f"taprig {args.command}: internal error: {type(exc).__name__}: {exc} "
              "(a defect in taprig: please report it; TAPRIG_DEBUG=1 shows the traceback)", file=sys.stderr)
        return 3
