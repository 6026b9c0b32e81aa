"""``taprig review``: recorded sessions in the dashboard: play, pause, speed, seek, re-reduce, export."""

from __future__ import annotations

import sys
from pathlib import Path

from taprig.cli import UserError
from taprig.cli.dashboard import add_dashboard_options


def register(sub) -> None:
    p = sub.add_parser("review", help="replay recorded sessions in the dashboard (play, seek, recalibrate, export)",
                       description="Serve the dashboard over a folder of session files (default sessions/) or one "
                                   "session: the same views as a live run, replayed through the same decoder and "
                                   "reducer, with play, pause, speed, seek, another calibration file, and export "
                                   "to CSV or Parquet.")
    p.add_argument("path", nargs="?", default="sessions", help="a session file or a folder of them (default sessions/)")
    add_dashboard_options(p, serve_by_default=False)
    p.set_defaults(func=run)


def run(args) -> int:
    from taprig.cli.dashboard import start_dashboard

    path = Path(args.path)
    if not path.exists():
        raise UserError(f"{path}: no such file or folder")
    folder = path if path.is_dir() else path.parent
    dashboard = start_dashboard(args, None, sessions_dir=folder, replay=None if path.is_dir() else path)
    print(f"sessions in {folder}; Ctrl-C ends", file=sys.stderr)
    try:
        dashboard.thread.join()
    except KeyboardInterrupt:
        pass
    finally:
        dashboard.close()
    return 0
