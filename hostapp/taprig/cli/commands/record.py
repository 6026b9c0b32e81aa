"""``taprig record``: acquire from a board (or ``sim://``), reduce live, and record a session file."""

from __future__ import annotations

import sys
import time

from taprig.cli import UserError, finite_positive, scan_rate
from taprig.cli.runopts import add_rig_options


def register(sub) -> None:
    p = sub.add_parser("record", help="acquire, reduce live and record a session file",
                       description="Open a board by port path or URL (sim://… for the simulated rig), check it "
                                   "against the rig file, stream, and record every byte into a session file.")
    add_rig_options(p)
    p.add_argument("--port", required=True, metavar="PORT_OR_URL",
                   help="serial port (/dev/ttyACM0, COM5) or URL (sim://?seed=1 simulates the --rig)")
    p.add_argument("--duration", type=finite_positive, metavar="S", help="stop after S seconds (default: until Ctrl-C)")
    p.add_argument("--rate", type=scan_rate, default=500.0, metavar="HZ", help="scan rate [Hz] (default 500)")
    p.add_argument("-o", "--output", metavar="FILE", help="session file to write (default: sessions/<rig>-<time>.taprig)")
    p.add_argument("--quiet", action="store_true", help="no live line, only the final summary")
    p.set_defaults(func=run)


def open_run(args, port: str, default_dir: str, stem: str | None = None, rig=None):
    """Build and open an acquisition from the common options: returns (acquisition, output path).

    ``rig`` is the already loaded ``--rig`` when the caller needed it first (it is parsed only once).
    """
    from taprig.cli.runopts import ambient_arg, build_reducer, load_calibration_arg, load_rig_arg, new_output_path
    from taprig.link import Link
    from taprig.runtime.acquisition import Acquisition, AcquisitionError, session_meta
    from taprig.session.store import SessionError, SessionWriter
    from taprig.sim import with_rig

    rig = rig or load_rig_arg(args.rig)
    calibration = load_calibration_arg(args.calibration, rig, getattr(args, "accept_failed_calibration", False))
    ambient = ambient_arg(args, rig)
    reducer = build_reducer(rig, calibration, ambient)
    out = new_output_path(args.output, default_dir, stem or rig.id)
    url = with_rig(port, args.rig)
    try:
        writer = SessionWriter(out, session_meta(rig, url, ambient))
    except SessionError as exc:
        raise UserError(str(exc)) from None
    writer.add_snapshot("rig", args.rig, rig.source_text)
    for name, text in (rig.attachments or {}).items():
        writer.add_snapshot("section", name, text)
    if calibration is not None:
        from taprig.rig import calibration_to_text

        writer.add_snapshot("calibration", args.calibration, calibration_to_text(calibration))
    link = Link(url, baudrate=rig.link.baud, keep_dtr_rts=not rig.link.touch_control_lines)
    acquisition = Acquisition(link, rig, reducer, writer)
    try:
        acquisition.open(args.rate)
    except AcquisitionError as exc:
        writer.close()
        _remove_unused(out)
        raise UserError(str(exc)) from None
    return acquisition, out


def _remove_unused(out) -> None:
    """Remove a session file that never got past its header (the run did not start), so the name is free."""
    from pathlib import Path

    for path in (Path(out), Path(f"{out}-wal"), Path(f"{out}-shm")):
        path.unlink(missing_ok=True)


def print_summary(acquisition, out, stream=None) -> None:
    """The last lines of a run: counters, where the session is, and any recording error."""
    stream = stream or sys.stdout  # looked up now: a default bound at import would outlive a replaced stdout
    c = acquisition.link.counters.as_dict()
    print(f"recorded {acquisition.scans} scans to {out}", file=stream)
    print("counters: " + ", ".join(f"{k} {v}" for k, v in c.items() if k != "bytes"), file=stream)
    if acquisition.writer is not None and acquisition.writer.error:
        print(acquisition.writer.error, file=sys.stderr)


def run(args) -> int:
    from taprig.cli.live import live_line

    acquisition, out = open_run(args, args.port, "sessions")
    sub = acquisition.hub.subscribe()
    deadline = None if args.duration is None else time.monotonic() + args.duration
    tty = sys.stderr.isatty()
    last_print = 0.0
    try:
        while deadline is None or time.monotonic() < deadline:
            state = sub.get(timeout=0.5)
            if state is None or args.quiet or time.monotonic() - last_print < 1.0:
                continue
            last_print = time.monotonic()
            print(("\r" if tty else "") + live_line(state), end="" if tty else "\n", file=sys.stderr, flush=True)
    except KeyboardInterrupt:
        pass
    finally:
        if tty and not args.quiet:
            print(file=sys.stderr)
        acquisition.close()
    print_summary(acquisition, out)
    return 1 if acquisition.writer.error else 0
