"""Command line entry point: ``taprig SUBCOMMAND ...``.

Each subcommand lives in its own module under ``taprig.cli.commands`` and exposes
``register(subparsers)``, which adds its parser and sets ``func`` to a callable
``func(args) -> int``. Modules are found by name, so adding a command touches no
shared file. Errors meant for a user are raised as :class:`UserError` and printed
on stderr as one line, with exit code 1 (2 for usage errors, as argparse does).
"""

from __future__ import annotations

import argparse
import importlib
import os
import pkgutil
import sys

from taprig import __version__


class UserError(Exception):
    """An error with a message fit for the person at the terminal (no traceback)."""

    def __init__(self, message: str, exit_code: int = 1):
        super().__init__(message)
        self.exit_code = exit_code


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
