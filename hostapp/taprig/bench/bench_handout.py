"""``taprig bench handout``: the time to write the PDF handout of a 20-point angle sweep.

The session is a real ``taprig sweep`` of the simulated cambered section with its balance (``rigs/
cambered-balance.toml``, −4…15° in 1° steps, compressed time). The figure is the wall time of
:func:`taprig.report.write_handout` (read the session, decode it for the counters, analyse, draw every page,
write the PDF). Baseline, measured in the same run: merely replaying the same session as fast as possible (decode
and reduce every scan, nothing drawn), the least a report that recomputed its points from the scans would do.
The ratio is baseline / handout (above 1: the handout costs less than that replay).
"""

from __future__ import annotations

import tempfile
import time
from pathlib import Path

from taprig.bench import Record

RIG = Path(__file__).resolve().parents[3] / "rigs" / "cambered-balance.toml"
POINTS = 20


def make_sweep(path: Path) -> Path:
    """A 20-point sweep session of the simulated cambered section at ``path`` (compressed time, no dashboard)."""
    import contextlib
    import io

    from taprig.cli import main

    argv = ["sweep", "--rig", str(RIG), "--port", "sim://?seed=2&speed=max&watchdog_ms=0", "--from-deg", "-4",
            "--to-deg", str(-4 + POINTS - 1), "--step-deg", "1", "--settle", "0.3", "--average", "0.5",
            "--no-dashboard", "-o", str(path)]
    with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(io.StringIO()):
        code = main(argv)
    if code != 0:
        raise RuntimeError(f"the benchmark's sweep failed (exit {code})")
    return path


def _time(fn, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return sorted(times)[len(times) // 2]


def run(quick: bool = False) -> list[Record]:
    from taprig.report import write_handout
    from taprig.session.replay import Replay

    repeats = 1 if quick else 3
    with tempfile.TemporaryDirectory() as tmp:
        session = make_sweep(Path(tmp) / "sweep.taprig")
        pdf = Path(tmp) / "sweep.pdf"
        pages = write_handout([session], pdf)  # warm: imports, fonts

        def replay() -> None:
            with Replay(session) as r:
                for _ in r:
                    pass

        t_handout = _time(lambda: write_handout([session], pdf), repeats)
        t_replay = _time(replay, repeats)
    return [Record(f"handout: PDF of a {POINTS}-point sweep ({pages} pages)", t_handout, "s", t_replay,
                   t_replay / t_handout)]
