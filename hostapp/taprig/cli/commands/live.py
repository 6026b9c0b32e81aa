"""``taprig live``: run any rig from the dashboard, with no script: connect, zero, fan and angle, points, record.

The board streams from the start; nothing moves until the operator sets it on the page (on a real board the first
actuator command asks for confirmation there), and recording starts and stops on demand. Ctrl-C ends the run with
every actuator at its safe value.
"""

from __future__ import annotations

import sys

from taprig.cli import scan_rate
from taprig.cli.dashboard import add_dashboard_options
from taprig.cli.runopts import add_rig_options


def register(sub) -> None:
    p = sub.add_parser("live", help="run a rig from the dashboard: fan, angle, zero, points, record on demand",
                       description="Connect to a board (or sim://), stream, and serve the dashboard to run the rig "
                                   "from the page: wind-off zero, fan and angle setpoints within the rig's limits, "
                                   "points, sweeps, recording on demand, and a stop that sends every actuator to "
                                   "its safe value. Any rig kind: airfoil, venturi, cylinder, bump.")
    add_rig_options(p)
    p.add_argument("--port", required=True, metavar="PORT_OR_URL",
                   help="serial port (/dev/ttyACM0, COM5) or URL (sim://?seed=1 simulates the --rig)")
    p.add_argument("--rate", type=scan_rate, default=500.0, metavar="HZ", help="scan rate [Hz] (default 500)")
    p.add_argument("--sessions", default="sessions", metavar="DIR",
                   help="folder for recordings started from the page, also listed there (default sessions/)")
    p.add_argument("--quiet", action="store_true", help="no live line in the terminal")
    add_dashboard_options(p, serve_by_default=False)
    p.set_defaults(func=run, output=None)


def run(args) -> int:
    from taprig.cli.commands.record import new_writer, open_run
    from taprig.cli.commands.sweep import SAFETY
    from taprig.cli.dashboard import serving
    from taprig.cli.ending import RunEnding, emit, report_ending
    from taprig.cli.live import follow
    from taprig.cli.runopts import new_output_path

    print(SAFETY, file=sys.stderr)
    with RunEnding() as ending:
        acquisition, _ = open_run(args, args.port, args.sessions, record=False)
        ending.attach(acquisition)
        rig, url = acquisition.rig, acquisition.link.port_name

        def writer():
            out = new_output_path(None, args.sessions, rig.id)
            return new_writer(args, rig, acquisition.reducer.calibration, acquisition.reducer.ambient, url, out)

        with serving(args, acquisition, args.sessions, new_writer=writer):
            emit(f"{rig.name!r} on {url}: run it from the page; Ctrl-C here ends the run (actuators to safe values)",
                 sys.stderr)
            follow(acquisition, None, args.quiet)  # until a signal or Ctrl-C
        recording = acquisition.writer
        report = acquisition.shutdown(ending.reason or "run ended")
    report_ending("live", report, ending.reason)
    if recording is not None:
        emit(f"the recording in progress was closed: {recording.path}")
    return 0 if ending.exit_code in (None, 130) else ending.exit_code
