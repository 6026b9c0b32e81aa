"""Session files: one SQLite database per recorded run (format in docs/session-format.md).

The recorder stores the bytes exactly as they came off the link, in chunks stamped with the host time they
arrived, beside snapshots of the rig file and the calibration, the operator's events, link events, captured points
and ambient readings. One thread owns the write connection (:class:`SessionWriter`); everyone else hands it work
through a queue, so a slow disk never blocks acquisition. It commits at least every ``commit_interval_s``
(250 ms by default) in WAL mode with ``synchronous=FULL``: whatever was committed survives ``kill -9`` or a
pulled power cord.

Reading (:class:`SessionReader`) never writes, so a file can be studied while another process records it.
"""

from __future__ import annotations

import json
import queue
import sqlite3
import threading
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterator

FORMAT_NAME = "taprig-session"
FORMAT_VERSION = 1
#: The first 16 bytes of every SQLite database, so of every session file (sqlite.org/fileformat.html §1.3.1).
SQLITE_HEADER = b"SQLite format 3\x00"

_SCHEMA = """
CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS snapshots (
    id INTEGER PRIMARY KEY, host_ns INTEGER NOT NULL, kind TEXT NOT NULL, name TEXT NOT NULL, text TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS chunks (id INTEGER PRIMARY KEY, host_ns INTEGER NOT NULL, data BLOB NOT NULL);
CREATE TABLE IF NOT EXISTS link_events (
    id INTEGER PRIMARY KEY, host_ns INTEGER NOT NULL, kind TEXT NOT NULL, detail TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS events (
    id INTEGER PRIMARY KEY, host_ns INTEGER NOT NULL, kind TEXT NOT NULL, data TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS points (
    id INTEGER PRIMARY KEY, host_ns INTEGER NOT NULL, label TEXT NOT NULL, data TEXT NOT NULL);
"""

_TABLES = ("meta", "snapshots", "chunks", "link_events", "events", "points")


class SessionError(Exception):
    """A session file that cannot be written or read, with a message naming the file."""


@dataclass(frozen=True, slots=True)
class Chunk:
    """Bytes read off the link in one go, with the host time they arrived [ns since the epoch]."""

    host_ns: int
    data: bytes


@dataclass(frozen=True, slots=True)
class Entry:
    """One row of the events, link-event or points tables; ``data`` is decoded JSON (or text for link events)."""

    host_ns: int
    kind: str
    data: Any


def _connect(path: Path, readonly: bool) -> sqlite3.Connection:
    """Open a connection; a reader opens read-write when it may (so SQLite can recover the WAL of a run that
    was killed), else read-only, else, on read-only storage (a shared folder handed to a class) where SQLite
    cannot make its shared-memory file, as an immutable file; it never writes a row."""
    con = None
    if readonly:
        uri = path.resolve().as_uri()
        wal = Path(f"{path}-wal").exists()
        attempts = ["mode=rw", "mode=ro"] + ([] if wal else ["mode=ro&immutable=1"])
        for query in attempts:
            try:
                con = sqlite3.connect(f"{uri}?{query}", uri=True, check_same_thread=False)
                con.execute("SELECT count(*) FROM sqlite_master").fetchone()
                break
            except sqlite3.OperationalError as exc:
                if con is not None:
                    con.close()
                con, error = None, exc
        if con is None:
            if wal:  # immutable would ignore the log: what it holds would silently be missing
                raise sqlite3.OperationalError(
                    f"cannot be opened where it is ({error}), and its write-ahead log ({path.name}-wal) was not "
                    "merged into it: copy both files to a folder you may write to and read the copy") from error
            raise error
    else:
        con = sqlite3.connect(str(path), check_same_thread=False, isolation_level=None)
    con.execute("PRAGMA busy_timeout = 5000")
    return con


class SessionWriter:
    """The only writer of one session file, on a thread of its own.

    ``append_chunk``, ``add_event``, ``add_link_event``, ``add_point`` and ``add_snapshot`` only put work on a
    queue and return at once. The thread commits what has queued at least every ``commit_interval_s``. When the
    disk is full (or the file reaches ``max_file_bytes``, a cap an operator may set to protect a small disk) or the
    file cannot be written, recording stops, :attr:`error` says why, everything committed
    before stays intact, and further appends are counted in :attr:`dropped_chunks` (the caller keeps acquiring
    and displaying).
    """

    def __init__(
        self,
        path: str | Path,
        meta: dict[str, str],
        commit_interval_s: float = 0.25,
        max_file_bytes: int | None = None,
        max_queued_bytes: int = 16 * 2**20,
    ):
        self.path = Path(path)
        if self.path.exists():
            raise SessionError(f"{self.path}: already exists; choose a new file name (sessions are never overwritten)")
        self.commit_interval_s = commit_interval_s
        self.error: str | None = None
        self.dropped_chunks = 0
        self.committed_chunks = 0
        self._queue: queue.SimpleQueue = queue.SimpleQueue()
        # Chunks queued but not yet committed are bounded: when the disk falls that far behind, append_chunk
        # waits (the link's reader then lags, and the board's own buffer or the simulator's clock takes the
        # strain) instead of memory growing without end. Nothing queued is ever dropped.
        self.max_queued_bytes = max_queued_bytes
        self._queued_bytes = 0
        self._room = threading.Condition()
        self.waits = 0
        self._closed = threading.Event()
        try:
            self._con = _connect(self.path, readonly=False)
            self._con.execute("PRAGMA journal_mode = WAL")
            self._con.execute("PRAGMA synchronous = FULL")
            if max_file_bytes is not None:
                page = self._con.execute("PRAGMA page_size").fetchone()[0]
                self._con.execute(f"PRAGMA max_page_count = {max(8, int(max_file_bytes) // page)}")
            self._con.executescript(_SCHEMA)
            rows = {"format": FORMAT_NAME, "format_version": str(FORMAT_VERSION), **meta}
            with self._con:
                self._con.execute("BEGIN")
                self._con.executemany("INSERT INTO meta VALUES (?, ?)", [(k, str(v)) for k, v in rows.items()])
        except sqlite3.Error as exc:
            raise SessionError(f"{self.path}: cannot create the session file ({exc})") from exc
        self._thread = threading.Thread(target=self._run, name=f"session-writer {self.path.name}", daemon=True)
        self._thread.start()

    # -- producer side (any thread) ------------------------------------------------------------------------
    def append_chunk(self, data: bytes, host_ns: int) -> None:
        """Queue bytes read off the link for the file."""
        if self.error is not None:
            self.dropped_chunks += 1
            return
        with self._room:
            if self._queued_bytes > self.max_queued_bytes:
                self.waits += 1
                self._room.wait_for(lambda: self._queued_bytes <= self.max_queued_bytes or self.error is not None
                                    or self._closed.is_set())
            self._queued_bytes += len(data)
        self._queue.put(("chunks", (host_ns, bytes(data))))

    def add_event(self, kind: str, data: dict, host_ns: int | None = None) -> None:
        """Queue an operator event (zero, note, setpoint, ...) with JSON-able data."""
        self._queue.put(("events", (host_ns or time.time_ns(), kind, json.dumps(data, sort_keys=True))))

    def add_link_event(self, kind: str, detail: str, host_ns: int | None = None) -> None:
        """Queue a link event (connected, lost, restored) with a human-readable detail."""
        self._queue.put(("link_events", (host_ns or time.time_ns(), kind, detail)))

    def add_point(self, label: str, data: dict, host_ns: int | None = None) -> None:
        """Queue a captured, averaged point."""
        self._queue.put(("points", (host_ns or time.time_ns(), label, json.dumps(data, sort_keys=True))))

    def add_snapshot(self, kind: str, name: str, text: str, host_ns: int | None = None) -> None:
        """Queue a snapshot of a file the session depends on (rig file, calibration, section table)."""
        self._queue.put(("snapshots", (host_ns or time.time_ns(), kind, name, text)))

    def set_meta(self, key: str, value: str) -> None:
        """Queue a metadata value (inserted or replaced)."""
        self._queue.put(("meta", (key, str(value))))

    @property
    def closed(self) -> bool:
        """True once the writer thread has committed its last batch and closed the file."""
        return self._closed.is_set()

    def close(self, timeout: float = 10.0) -> None:
        """Commit what is queued and close the file; waits at most ``timeout`` seconds."""
        if not self._closed.is_set():
            self._queue.put(None)
            self._thread.join(timeout)

    # A backlog (after a slow disk) is committed in transactions of bounded size, so a full disk loses at most one.
    MAX_TRANSACTION_BYTES = 256 * 1024

    # -- the writer thread ------------------------------------------------------------------------------
    _SQL = {
        "chunks": "INSERT INTO chunks (host_ns, data) VALUES (?, ?)",
        "events": "INSERT INTO events (host_ns, kind, data) VALUES (?, ?, ?)",
        "link_events": "INSERT INTO link_events (host_ns, kind, detail) VALUES (?, ?, ?)",
        "points": "INSERT INTO points (host_ns, label, data) VALUES (?, ?, ?)",
        "snapshots": "INSERT INTO snapshots (host_ns, kind, name, text) VALUES (?, ?, ?, ?)",
        "meta": "INSERT OR REPLACE INTO meta (key, value) VALUES (?, ?)",
    }

    def _run(self) -> None:
        stop = False
        while not stop:
            batch, stop = self._gather()
            if batch and self.error is None:
                self._commit(batch)
        try:
            self._con.close()
        finally:
            self._closed.set()
            with self._room:
                self._room.notify_all()

    def _gather(self) -> tuple[list, bool]:
        """Collect work for one commit: block for the first item, then take what arrives within the interval."""
        batch = []
        size = 0
        deadline = None
        while True:
            timeout = None if deadline is None else max(0.0, deadline - time.monotonic())
            try:
                item = self._queue.get(timeout=timeout)
            except queue.Empty:
                return batch, False
            if item is None:
                return batch, True
            batch.append(item)
            size += len(item[1][-1]) if item[0] == "chunks" else 0
            if size >= self.MAX_TRANSACTION_BYTES:
                return batch, False
            if deadline is None:
                deadline = time.monotonic() + self.commit_interval_s

    def _commit(self, batch: list) -> None:
        by_table: dict[str, list] = {}
        for table, row in batch:
            by_table.setdefault(table, []).append(row)
        try:
            self._write(by_table)
        finally:
            with self._room:
                self._queued_bytes -= sum(len(row[-1]) for row in by_table.get("chunks", ()))
                self._room.notify_all()

    def _write(self, by_table: dict[str, list]) -> None:
        try:
            self._con.execute("BEGIN")
            for table, rows in by_table.items():
                self._con.executemany(self._SQL[table], rows)
            self._con.execute("COMMIT")
            self.committed_chunks += len(by_table.get("chunks", ()))
        except sqlite3.Error as exc:
            try:
                self._con.execute("ROLLBACK")
            except sqlite3.Error:
                pass
            self.dropped_chunks += len(by_table.get("chunks", ()))
            full = "full" in str(exc).lower()
            self.error = (
                f"{self.path}: recording stopped, the disk is full; everything recorded until now is safe"
                if full
                else f"{self.path}: recording stopped ({exc}); everything recorded until now is safe"
            )


class SessionReader:
    """Read-only access to a session file; checks that it is one, and of a version this software reads."""

    def __init__(self, path: str | Path):
        self.path = Path(path)
        if self.path.is_dir():
            raise SessionError(f"{self.path}: is a directory; expected a session file (.taprig)")
        if not self.path.is_file():
            raise SessionError(f"{self.path}: no such session file")
        with open(self.path, "rb") as fh:
            head = fh.read(len(SQLITE_HEADER))
        if head != SQLITE_HEADER:
            raise SessionError(f"{self.path}: not a taprig session file (not an SQLite database)")
        try:
            self._con = _connect(self.path, readonly=True)
            tables = {r[0] for r in self._con.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
            if not set(_TABLES) <= tables:
                raise SessionError(f"{self.path}: not a taprig session file (missing tables {sorted(set(_TABLES) - tables)})")
            self.meta = dict(self._con.execute("SELECT key, value FROM meta"))
        except sqlite3.DatabaseError as exc:
            raise SessionError(f"{self.path}: damaged or truncated session file ({exc}); `taprig recover "
                               f"{self.path} -o NEW.taprig` copies what is intact into a new file") from exc
        if self.meta.get("format") != FORMAT_NAME:
            raise SessionError(f"{self.path}: not a taprig session file (format {self.meta.get('format')!r})")
        version = int(self.meta.get("format_version", "0"))
        if version > FORMAT_VERSION:
            raise SessionError(
                f"{self.path}: session format version {version} is newer than this taprig reads "
                f"({FORMAT_VERSION}); update taprig to read it"
            )

    def close(self) -> None:
        """Close the read connection."""
        self._con.close()

    def __enter__(self) -> "SessionReader":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def _query(self, sql: str, args: tuple = ()) -> list:
        try:
            return self._con.execute(sql, args).fetchall()
        except sqlite3.DatabaseError as exc:
            raise SessionError(f"{self.path}: damaged session file ({exc}); `taprig recover {self.path} -o "
                               "NEW.taprig` copies what is intact into a new file") from exc

    def chunks(self, batch: int = 2000) -> Iterator[Chunk]:
        """Yield the recorded chunks in arrival order, reading ``batch`` rows at a time."""
        last = 0
        while True:
            rows = self._query("SELECT id, host_ns, data FROM chunks WHERE id > ? ORDER BY id LIMIT ?", (last, batch))
            if not rows:
                return
            for _, host_ns, data in rows:
                yield Chunk(host_ns, bytes(data))
            last = rows[-1][0]

    def chunk_summary(self) -> tuple[int, int, int | None, int | None]:
        """Return (number of chunks, total bytes, first host_ns, last host_ns)."""
        n, size, first, last = self._query("SELECT count(*), coalesce(sum(length(data)), 0), min(host_ns), max(host_ns) FROM chunks")[0]
        return n, size, first, last

    def snapshots(self, kind: str | None = None) -> list[tuple[str, str, str]]:
        """Return (kind, name, text) of the stored snapshots, oldest first, optionally of one kind."""
        if kind is None:
            return self._query("SELECT kind, name, text FROM snapshots ORDER BY id")
        return self._query("SELECT kind, name, text FROM snapshots WHERE kind = ? ORDER BY id", (kind,))

    def timed_snapshots(self, kind: str) -> list[tuple[int, str, str]]:
        """Return (host_ns, name, text) of the snapshots of one kind, oldest first (replay follows them in time)."""
        return self._query("SELECT host_ns, name, text FROM snapshots WHERE kind = ? ORDER BY id", (kind,))

    def events(self) -> list[Entry]:
        """Return the operator events, oldest first."""
        return [Entry(t, k, json.loads(d)) for t, k, d in self._query("SELECT host_ns, kind, data FROM events ORDER BY id")]

    def link_events(self) -> list[Entry]:
        """Return the link events (connected, lost, restored), oldest first."""
        return [Entry(t, k, d) for t, k, d in self._query("SELECT host_ns, kind, detail FROM link_events ORDER BY id")]

    def points(self) -> list[Entry]:
        """Return the captured points, oldest first (``kind`` holds the label)."""
        return [Entry(t, k, json.loads(d)) for t, k, d in self._query("SELECT host_ns, label, data FROM points ORDER BY id")]

    def integrity_check(self) -> str:
        """Return SQLite's ``PRAGMA integrity_check`` verdict ("ok" when the file is sound)."""
        return self._query("PRAGMA integrity_check")[0][0]
