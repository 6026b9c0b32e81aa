"""``taprig record``: acquire from a board (or ``sim://``), reduce live, and record a session file."""

from __future__ import annotations

import sys
import time
from pathlib import Path

from taprig.cli import UserError, finite_positive, scan_rate
from taprig.cli.dashboard import add_dashboard_options
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
    add_dashboard_options(p)
    p.set_defaults(func=run)


def open_run(args, port: str, default_dir: str, stem: str | None = None, rig=None, record: bool = True,
             paced: bool = False):
    """Build and open an acquisition from the common options: returns (acquisition, output path).

    ``rig`` is the already loaded ``--rig`` when the caller needed it first (it is parsed only once). With
    ``record=False`` nothing is recorded yet (the path is None): recording can start later on demand. ``paced``: a
    run timed in device time (a sweep; :meth:`taprig.runtime.acquisition.Acquisition.open`).
    """
    from taprig.cli.runopts import ambient_arg, build_reducer, load_calibration_arg, load_rig_arg, new_output_path
    from taprig.link import Link
    from taprig.runtime.acquisition import Acquisition, AcquisitionError
    from taprig.sim import with_rig

    rig = rig or load_rig_arg(args.rig)
    calibration = load_calibration_arg(args.calibration, rig, getattr(args, "accept_failed_calibration", False))
    ambient = ambient_arg(args, rig)
    reducer = build_reducer(rig, calibration, ambient)
    url = with_rig(port, args.rig)
    out = new_output_path(args.output, default_dir, stem or rig.id) if record else None
    writer = new_writer(args, rig, calibration, ambient, url, out) if record else None
    link = Link(url, baudrate=rig.link.baud, keep_dtr_rts=not rig.link.touch_control_lines)
    acquisition = Acquisition(link, rig, reducer, writer)
    try:
        acquisition.open(args.rate, paced=paced)
    except AcquisitionError as exc:
        if writer is not None:
            writer.close()
            _remove_unused(out)
        raise UserError(str(exc)) from None
    for notice in acquisition.notices:
        print(f"taprig: note: {notice}", file=sys.stderr)
    return acquisition, out


def new_writer(args, rig, calibration, ambient, url: str, out):
    """A session writer for ``out`` with the run's metadata and the rig (and calibration) snapshots written."""
    from taprig.runtime.recording import new_session
    from taprig.session.store import SessionError

    try:
        return new_session(out, rig, url, ambient, calibration, args.rig, args.calibration or "calibration")
    except SessionError as exc:
        raise UserError(str(exc)) from None


def _remove_unused(out) -> None:
    """Remove a session file that never got past its header (the run did not start), so the name is free."""
    from pathlib import Path

    for path in (Path(out), Path(f"{out}-wal"), Path(f"{out}-shm")):
        path.unlink(missing_ok=True)


def run_problems(acquisition) -> list[str]:
    """What went wrong in a run that a summary must say: recording or reduction stopped, the link lost."""
    problems = []
    failure = acquisition.failure
    if failure:
        problems.append(failure)
    lost_since = acquisition.link.lost_since_ns
    if lost_since is not None:
        problems.append(f"the run ended with the link to the board lost (for {(time.time_ns() - lost_since) / 1e9:.1f} s;"
                        f" no data since): check the cable, then record again")
    return problems


def print_summary(acquisition, out, stream=None) -> int:
    """The last lines of a run: what the file holds, counters, link outages and any failure; returns the exit
    code the run deserves (1 when recording stopped, reduction stopped or the run ended with the link lost)."""
    from taprig.cli.ending import emit

    stream = stream or sys.stdout  # looked up now: a default bound at import would outlive a replaced stdout
    c = acquisition.link.counters.as_dict()
    writer = acquisition.writer
    held = writer.committed_scans if writer is not None else acquisition.scans
    emit(f"recorded {held} scans to {out}", stream)
    if writer is not None and held != acquisition.scans:
        emit(f"  {acquisition.scans} scans were acquired; {acquisition.scans - held} of them are NOT in the file",
             stream)
    emit("counters: " + ", ".join(f"{k} {v}" for k, v in c.items() if k != "bytes"), stream)
    gaps = acquisition.link.gaps
    if gaps:
        total = sum(g.duration_s for g in gaps)
        emit(f"link lost {len(gaps)} time(s), {total:.1f} s without data in all "
             f"(longest {max(g.duration_s for g in gaps):.1f} s)", stream)
    other = getattr(acquisition.link, "other_board_bytes", 0)
    if other:
        emit(f"{other} bytes from a different board on the same port were ignored, not recorded", stream)
    problems = run_problems(acquisition)
    for problem in problems:
        emit(f"taprig: {problem}", sys.stderr)
    return 1 if problems else 0


def run(args) -> int:
    from taprig.cli.dashboard import serving
    from taprig.cli.ending import RunEnding, report_ending
    from taprig.cli.live import follow

    with RunEnding() as ending:
        acquisition, out = open_run(args, args.port, "sessions")
        ending.attach(acquisition)
        with serving(args, acquisition, Path(out).parent):
            follow(acquisition, args.duration, args.quiet)  # until the duration, a signal or Ctrl-C
        report = acquisition.shutdown(ending.reason or "duration reached")
    report_ending("record", report, ending.reason)
    run_code = print_summary(acquisition, out)
    if ending.exit_code is not None:
        return ending.exit_code
    return run_code
