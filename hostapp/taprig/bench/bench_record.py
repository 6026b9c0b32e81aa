"""``taprig bench record``: what the session recorder sustains, beside a naive recorder measured in the same run.

The recorder (:class:`~taprig.session.store.SessionWriter`, WAL, ``synchronous=FULL``, a commit at least every
250 ms) is fed chunks of 5,120 bytes (10 ms of 64 channels × 2 kHz of i32 SAMPLES) as fast as it takes them; the
figure is MB/s committed to disk, with the commit interval and the worst delay from a chunk's arrival to the end
of its commit. Baseline: the naive recorder, one ``INSERT`` and one commit per chunk with the same durability. The
live stream it must keep up with is 0.53 MB/s (64 ch × 2 kHz × 4 bytes plus framing).
"""

from __future__ import annotations

import sqlite3
import tempfile
import time
from pathlib import Path

from taprig.bench import Record
from taprig.session.store import SessionWriter

CHUNK = bytes(range(256)) * 20  # 5,120 bytes
#: The live stream of the 64 ch × 2 kHz rig [MB/s]: 64 × 4 bytes × 2000 scans/s plus about 3 % of framing.
STREAM_MB_S = 64 * 4 * 2000 * 1.03 / 1e6


def _ours(path: Path, n: int) -> tuple[float, float, float]:
    writer = SessionWriter(path, {"rig_id": "bench"})
    t0 = time.perf_counter()
    for i in range(n):
        writer.append_chunk(CHUNK, i, scans=20)
    writer.close(timeout=600)
    elapsed = time.perf_counter() - t0
    if writer.error is not None or writer.committed_chunks != n:
        raise RuntimeError(writer.error or f"{writer.committed_chunks} of {n} chunks committed")
    return n * len(CHUNK) / elapsed / 1e6, writer.commit_interval_s, writer.max_commit_delay_s


def _naive(path: Path, n: int) -> float:
    con = sqlite3.connect(path, isolation_level=None)
    con.execute("PRAGMA journal_mode = WAL")
    con.execute("PRAGMA synchronous = FULL")
    con.execute("CREATE TABLE chunks (id INTEGER PRIMARY KEY, host_ns INTEGER NOT NULL, data BLOB NOT NULL)")
    t0 = time.perf_counter()
    for i in range(n):
        con.execute("INSERT INTO chunks (host_ns, data) VALUES (?, ?)", (i, CHUNK))  # autocommit: one per chunk
    elapsed = time.perf_counter() - t0
    con.close()
    return n * len(CHUNK) / elapsed / 1e6


def run(quick: bool) -> list[Record]:
    """Recorder throughput and commit delay against one commit per chunk."""
    n, n_naive = (2_000, 300) if quick else (20_000, 2_000)
    with tempfile.TemporaryDirectory(prefix="taprig-bench-record-") as tmp:
        ours, interval, delay = _ours(Path(tmp) / "ours.taprig", n)
        naive = _naive(Path(tmp) / "naive.db", n_naive)
    return [
        Record(f"recorder: MB/s committed (commit every {interval * 1000:g} ms) vs a commit per chunk", ours, "MB/s",
               naive, ours / naive, f"≥ {STREAM_MB_S:.2f} MB/s (64 ch × 2 kHz)", met=ours >= STREAM_MB_S),
        Record("recorder: worst delay from arrival to committed, at full throughput", delay * 1000, "ms",
               target=f"≈ {interval * 1000:g} ms plus the disk's commit time"),
    ]
