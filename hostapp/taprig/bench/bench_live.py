"""Benchmark ``live``: the whole live path at 64 channels × 2 kHz, and memory over an hour in compressed time.

1. CPU: ``taprig sim`` runs the 64-channel bench rig on a pseudo-terminal in its own process, in real time. This
   process opens the pty with :class:`taprig.link.Link` and runs the real acquisition loop (decoder, reducer,
   session writer in WAL/FULL mode, hub) for a few seconds; its CPU time over wall time is the host's load, in % of
   one core. In the same run a naive host reads the same stream the usual way — ``read_until(b"\\x00")`` per frame,
   one decode per frame, one ``INSERT`` per frame, a commit every 250 ms — and its CPU load and the scans it kept
   up with are reported beside ours.
2. Memory: the simulated bench rig in compressed time (``speed=max``), with the acquisition loop recording to a
   temporary session file, for one simulated hour (five minutes with ``--quick``); the resident set size is sampled
   each simulated minute. Flat means no growth after the first minute.
"""

from __future__ import annotations

import os
import sqlite3
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from taprig.bench import Record

RIG = Path(__file__).resolve().parents[3] / "rigs" / "bench-64.toml"
RATE_HZ = 2000.0
TARGET_CPU_PCT = 15.0


def _start_sim(*flags: str) -> tuple[subprocess.Popen, str]:
    proc = subprocess.Popen([sys.executable, "-m", "taprig", "sim", "--rig", str(RIG), *flags],
                            stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True)
    line = proc.stdout.readline()
    path = next((w for w in line.split() if w.startswith("/dev/")), None)
    if path is None:
        proc.kill()
        raise RuntimeError(f"taprig sim printed no device path: {line!r}")
    return proc, path


def _cpu_share(fn, seconds: float) -> tuple[float, object]:
    """Run ``fn(seconds)``; return (this process's CPU time / wall time in % of one core, fn's result)."""
    c0, t0 = time.process_time(), time.perf_counter()
    result = fn(seconds)
    return 100.0 * (time.process_time() - c0) / (time.perf_counter() - t0), result


def _taprig_host(path: str, seconds: float, out: Path) -> int:
    from taprig.link import Link
    from taprig.reduce import Reducer
    from taprig.rig import load_rig
    from taprig.runtime.acquisition import Acquisition, session_meta
    from taprig.session.store import SessionWriter

    rig = load_rig(RIG)
    reducer = Reducer(rig)
    writer = SessionWriter(out, session_meta(rig, path, reducer.ambient))
    acq = Acquisition(Link(path, baudrate=rig.link.baud), rig, reducer, writer)
    acq.open(RATE_HZ)
    deadline = time.monotonic() + seconds
    with acq.hub.subscribe() as sub:
        while time.monotonic() < deadline:
            sub.get(timeout=0.5)
    acq.close()
    return acq.scans


def _naive_host(path: str, seconds: float, out: Path) -> int:
    """The usual logger loop: a frame at a time off ``read_until``, decoded and inserted one by one."""
    import serial

    from taprig.protocol import Describe, RawBlock, Start, StreamDecoder, encode_message

    port = serial.Serial(path, timeout=0.1)
    con = sqlite3.connect(out, isolation_level=None)
    con.execute("PRAGMA journal_mode = WAL")
    con.execute("PRAGMA synchronous = FULL")
    con.execute("CREATE TABLE frames (t REAL, data BLOB)")
    port.write(encode_message(Describe(req=1), 0))
    decoder, scans, seq = StreamDecoder(), 0, 1
    deadline = time.monotonic() + seconds
    started = False
    last_commit = time.monotonic()
    con.execute("BEGIN")
    while time.monotonic() < deadline:
        frame = port.read_until(b"\x00")
        if not started and decoder.description is not None:
            n = len(decoder.description.channels)
            port.write(encode_message(Start(req=2, rate_hz=RATE_HZ, channel_mask=(1 << n) - 1, scans_per_frame=0), seq))
            started, seq = True, seq + 1
        if started and time.monotonic() - last_commit > 0.1:
            port.write(encode_message(__import__("taprig.protocol", fromlist=["Heartbeat"]).Heartbeat(req=0), seq))
            seq += 1
        con.execute("INSERT INTO frames VALUES (?, ?)", (time.time(), frame))
        for item in decoder.feed(frame):
            if isinstance(item, RawBlock):
                scans += item.n_scans
        if time.monotonic() - last_commit > 0.25:
            con.execute("COMMIT")
            con.execute("BEGIN")
            last_commit = time.monotonic()
    con.execute("COMMIT")
    con.close()
    port.close()
    return scans


def _live_cpu(quick: bool) -> list[Record]:
    if os.name != "posix":
        return [Record("live 64 ch × 2 kHz: needs a POSIX pseudo-terminal", float("nan"), "skipped")]
    seconds = 3.0 if quick else 10.0
    results = {}
    with tempfile.TemporaryDirectory() as tmp:
        for name, host in (("taprig", _taprig_host), ("naive", _naive_host)):
            proc, path = _start_sim("--seconds", str(seconds + 20))
            try:
                results[name] = _cpu_share(lambda s: host(path, s, Path(tmp) / f"{name}.db"), seconds)
            finally:
                proc.kill()
                proc.wait(10)
    (ours, scans), (naive, naive_scans) = results["taprig"], results["naive"]
    expected = RATE_HZ * seconds
    return [
        Record("live 64 ch × 2 kHz over a pty: host CPU (link, decoder, reducer, recorder)", ours,
               "% of one core", naive, naive / ours if ours else None, f"≤ {TARGET_CPU_PCT:g} %"),
        Record("live: scans taken, taprig vs naive read_until logger (of the stream's)", scans, "scans",
               naive_scans, scans / naive_scans if naive_scans else None, f"≈ {expected:,.0f}"),
    ]


def _rss_mb() -> float:
    try:
        import psutil  # optional: the extra "bench" (and "test", for the soak tests)
    except ImportError:
        from taprig.cli import UserError

        raise UserError("the live benchmark's memory figure needs psutil: pip install 'taprig[bench]'") from None

    return psutil.Process().memory_info().rss / 2**20


def _memory_flat(quick: bool) -> list[Record]:
    from taprig.link import Link
    from taprig.reduce import Reducer
    from taprig.rig import load_rig
    from taprig.runtime.acquisition import Acquisition, session_meta
    from taprig.runtime.sweep import wait_device_time
    from taprig.session.store import SessionWriter
    from taprig.sim import sim_url

    minutes = 5 if quick else 60
    rig = load_rig(RIG)
    reducer = Reducer(rig)
    samples = []
    with tempfile.TemporaryDirectory() as tmp:
        writer = SessionWriter(Path(tmp) / "hour.taprig", session_meta(rig, "sim", reducer.ambient))
        url = sim_url(RIG.as_posix(), "seed=9&speed=max&watchdog_ms=0")
        acq = Acquisition(Link(url, heartbeat=False), rig, reducer, writer)
        t0 = time.perf_counter()
        acq.open(RATE_HZ)
        acq.set_actuator("fan", 0.6)
        try:
            for _ in range(minutes):
                wait_device_time(acq, 60.0, timeout_s=600)
                samples.append(_rss_mb())
        finally:
            acq.close()
        wall = time.perf_counter() - t0
    first, peak, last = samples[0], max(samples), samples[-1]
    return [
        Record(f"memory over {minutes} simulated min (64 ch × 2 kHz, recording): RSS after the first minute",
               first, "MB"),
        Record("memory: peak RSS over the run", peak, "MB"),
        Record("memory: growth from the first minute to the last", last - first, "MB", target="≈ 0 (flat)"),
        Record("memory run: compressed time achieved with the full host path", minutes * 60 / wall, "× real time"),
    ]


def run(quick: bool) -> list[Record]:
    """CPU of the live path at 64 ch × 2 kHz, and memory over a compressed simulated hour."""
    return _live_cpu(quick) + _memory_flat(quick)
