"""``taprig replay FILE``: play a recorded session through the decoder and reducer again.

Paced at real time × ``--speed`` (on the recorded host times) or ``--fast`` (as fast as possible); ``--seek S``
starts S seconds into the session; ``--calibration CAL`` re-reduces the run with another calibration. Prints one
line per second of session time (means over that second: q, V, Cl or the venturi flow, and the counters) and a
final summary. The helpers here (session errors as one line, the progress bar) serve ``taprig export`` and
``taprig info`` too.
"""

from __future__ import annotations

import contextlib
import sys
import time

import numpy as np

from taprig.cli import UserError, finite_nonnegative, finite_positive
from taprig.cli.runopts import add_accept_failed_option, load_calibration_arg, one_line


def register(sub) -> None:
    p = sub.add_parser("replay", help="replay a session file through the decoder and reducer",
                       description="Replay a recorded session: the stored bytes through a fresh decoder and the "
                                   "run's reducer, at real time × SPEED or as fast as possible.")
    p.add_argument("file", metavar="FILE", help="session file (.taprig)")
    pace = p.add_mutually_exclusive_group()
    pace.add_argument("--speed", type=finite_positive, default=1.0, metavar="X",
                      help="play at X × real time (default 1)")
    pace.add_argument("--fast", action="store_true", help="play as fast as possible")
    p.add_argument("--calibration", metavar="CAL", help="re-reduce with this calibration file instead of the session's")
    add_accept_failed_option(p)
    p.add_argument("--seek", type=finite_nonnegative, default=0.0, metavar="S",
                   help="start S seconds after the session start (decoding still starts at the first byte)")
    p.add_argument("--quiet", action="store_true", help="only the final summary, no line per second")
    p.set_defaults(func=run)


# -- helpers shared by replay, export and info -----------------------------------------------------------------

@contextlib.contextmanager
def session_errors():
    """Turn session, replay and export errors into one-line UserErrors."""
    from taprig.session.store import SessionError

    try:
        yield
    except SessionError as exc:
        raise UserError(one_line(str(exc))) from None


@contextlib.contextmanager
def progress_bar(description: str, total: int):
    """A progress bar on stderr (only when stderr is a terminal); yields ``update(done, total)``."""
    if not sys.stderr.isatty():
        yield None
        return
    from rich.console import Console
    from rich.progress import BarColumn, Progress, TextColumn, TimeRemainingColumn

    with Progress(TextColumn("{task.description}"), BarColumn(), TextColumn("{task.percentage:>3.0f}%"),
                  TimeRemainingColumn(), console=Console(stderr=True), transient=True) as progress:
        task = progress.add_task(description, total=max(total, 1))
        yield lambda done, of: progress.update(task, completed=done, total=max(of, 1))


# -- the per-second summary ---------------------------------------------------------------------------------------

class SecondLines:
    """Means over each second of session time, printed when the second is complete: the same flow part as the
    live line of ``record``/``live`` (:func:`taprig.cli.live.flow_parts`), so a second with the fan off says
    "no flow" and shows no V, Re or coefficient."""

    QUANTITIES = ("q_pa", "v_ms", "re", "alpha_rad", "cl", "cd_p", "cm_qc", "scan_flags", "mass_flow_kg_s",
                  "cl_balance")

    def __init__(self, start_ns: int, out):
        self.start_ns, self.out = start_ns, out
        self.second: int | None = None
        self._parts: dict[str, list[np.ndarray]] = {}
        self._notes: dict[str, str] = {}

    def add(self, step, counters) -> None:
        """Take a replay step's blocks; print the lines of every second that ends before its last scan."""
        for block in step.blocks:
            seconds = (block.host_ns - self.start_ns) // 1_000_000_000
            for sec in np.unique(seconds):
                if self.second is not None and sec != self.second:
                    self.flush(counters)
                self.second = int(sec)
                rows = seconds == sec
                for name in self.QUANTITIES:
                    value = getattr(block.reduced, name)
                    if value is not None:
                        self._parts.setdefault(name, []).append(value[rows])
                self._notes = {"reference_note": block.reduced.reference_note,
                               "calibration_warning": block.reduced.calibration_warning}

    def flush(self, counters) -> None:
        """Print the line of the current second (if it has scans)."""
        if self.second is None or not self._parts:
            return
        from types import SimpleNamespace

        from taprig.cli.live import flow_parts  # here, not at import: `taprig --help` should not load the reducer

        arrays = {name: np.concatenate(self._parts[name]) if name in self._parts else None
                  for name in self.QUANTITIES}
        line = [f"t {self.second:5d} s", *flow_parts(SimpleNamespace(**arrays, **self._notes))]
        c = counters.as_dict()
        line.append(f"frames {c['frames']} crc {c['crc_errors']} gaps {c['gaps']} lost {c['scans_lost']} scans")
        print("  ".join(line), file=self.out, flush=True)
        self._parts = {}


def _final(replay, scans: int, played_s: float, wall_s: float, calibration: str | None) -> str:
    c = replay.counters.as_dict()
    pace = f" ({played_s / wall_s:,.0f}× real time)" if wall_s > 0 and played_s > 0 else ""
    source = calibration or ("the session's calibration" if replay.reducer.calibration else "nominal sensor transfer")
    return (f"replayed {played_s:.2f} s of session ({scans} scans, {c['frames']} frames) in {wall_s:.2f} s{pace}; "
            f"crc errors {c['crc_errors']}, gaps {c['gaps']}, scans lost {c['scans_lost']}, resets {c['resets']}; "
            f"reduced with {source}")


def run(args) -> int:
    from taprig.session.replay import Replay

    calibration = load_calibration_arg(args.calibration, accept_failed=args.accept_failed_calibration)
    with session_errors():
        replay = Replay(args.file, calibration=calibration, speed=None if args.fast else args.speed,
                        seek_s=args.seek)
    with replay, session_errors(), progress_bar("replaying", replay.total_chunks) as update:
        lines = None if args.quiet else SecondLines(replay.start_ns or 0, sys.stdout)
        scans, first, last = 0, None, None
        t0 = time.monotonic()
        for step in replay:
            scans += step.n_scans
            if step.blocks:
                first = first if first is not None else int(step.blocks[0].host_ns[0])
                last = int(step.blocks[-1].host_ns[-1])
            if lines is not None:
                lines.add(step, replay.counters)
            if update is not None:
                update(step.chunks_done, replay.total_chunks)
        if lines is not None:
            lines.flush(replay.counters)
        wall = time.monotonic() - t0
    played = 0.0 if first is None else (last - first) / 1e9
    print(_final(replay, scans, played, wall, args.calibration))
    return 0
