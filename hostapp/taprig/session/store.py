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

import array
import errno
import json
import os
import queue
import sqlite3
import struct
import sys
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


def _connect(path: Path, readonly: bool, keep_wal: bool = False) -> sqlite3.Connection:
    """Open a connection; a reader opens read-write when it may (so SQLite can recover the WAL of a run that
    was killed), else read-only, else, on read-only storage (a shared folder handed to a class) where SQLite
    cannot make its shared-memory file, as an immutable file; it never writes a row. With ``keep_wal`` (a
    damaged WAL) it opens read-only first, so the WAL stays as it is for a closer look."""
    con = None
    if readonly:
        uri = path.resolve().as_uri()
        wal = Path(f"{path}-wal").exists()
        attempts = (["mode=ro"] if keep_wal else []) + ["mode=rw", "mode=ro"] + ([] if wal else ["mode=ro&immutable=1"])
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
        con = sqlite3.connect(os.fsencode(path), check_same_thread=False, isolation_level=None)
    con.execute("PRAGMA busy_timeout = 5000")
    return con


def printable_path(path: str | Path) -> str:
    """A file name as text that can be stored and printed: bytes that are not UTF-8 become ``\\xNN``."""
    return str(path).encode("utf-8", "surrogateescape").decode("utf-8", "backslashreplace")


def _text(value) -> str:
    """Any value as storable text (SQLite text must be valid UTF-8; names from the command line may not be)."""
    return str(value).encode("utf-8", "surrogateescape").decode("utf-8", "backslashreplace")


def _create(path: Path, rows: dict[str, str]) -> None:
    """Create the session file with its tables and first metadata, whole or not at all.

    The file is built under a temporary name in the same folder and linked to ``path`` once its header is
    committed: a run killed at that instant leaves no half-made file under the wanted name, and of two recorders
    racing for one name exactly one gets it (``link`` refuses an existing name; the other is told so).
    """
    tmp = path.with_name(f".{path.name}.{os.getpid()}.{threading.get_ident()}.partial")
    try:
        con = sqlite3.connect(os.fsencode(tmp), isolation_level=None)
        try:
            con.execute("PRAGMA journal_mode = WAL")
            con.executescript(_SCHEMA)
            con.execute("BEGIN")
            con.executemany("INSERT INTO meta VALUES (?, ?)", [(k, _text(v)) for k, v in rows.items()])
            con.execute("COMMIT")
            con.execute("PRAGMA wal_checkpoint(TRUNCATE)")
        finally:
            con.close()  # the last connection folds the WAL back into the file and removes it
        try:
            os.link(tmp, path)
        except FileExistsError:
            raise SessionError(f"{printable_path(path)}: already exists; choose a new file name "
                               "(sessions are never overwritten)") from None
        except OSError as exc:
            if exc.errno not in (errno.EPERM, errno.ENOTSUP, errno.EOPNOTSUPP, errno.EXDEV):
                raise
            if path.exists():  # a file system without hard links: a plain rename after a last look
                raise SessionError(f"{printable_path(path)}: already exists; choose a new file name "
                                   "(sessions are never overwritten)") from None
            os.rename(tmp, path)
    except sqlite3.Error as exc:
        raise SessionError(f"{printable_path(path)}: cannot create the session file ({_os_reason(exc, path)})") from None
    except OSError as exc:
        raise SessionError(f"{printable_path(path)}: cannot create the session file ({_os_reason(exc, path)})") from None
    finally:
        for leftover in (tmp, Path(f"{tmp}-wal"), Path(f"{tmp}-shm"), Path(f"{tmp}-journal")):
            try:
                leftover.unlink()
            except OSError:
                pass


def _os_reason(exc: BaseException, path: Path) -> str:
    """Why a file could not be made, in plain words (read-only folder, no room, no folder)."""
    folder = path.parent if str(path.parent) else Path(".")
    text = str(exc).lower()
    err = getattr(exc, "errno", None)
    try:
        read_only_fs = bool(os.statvfs(folder).f_flag & os.ST_RDONLY)
    except (OSError, AttributeError):
        read_only_fs = False
    if err == errno.EROFS or read_only_fs or "readonly" in text or "read-only" in text:
        return f"the folder {printable_path(folder)} is on a read-only file system"
    if err in (errno.EACCES, errno.EPERM) or "unable to open" in text or "permission" in text:
        if folder.is_dir() and not os.access(folder, os.W_OK):
            return f"the folder {printable_path(folder)} is read-only for this user"
        if not folder.is_dir():
            return f"the folder {printable_path(folder)} does not exist"
    if err == errno.ENOSPC or "full" in text:
        return "the disk is full"
    if err == errno.ENOENT:
        return f"the folder {printable_path(folder)} does not exist"
    return str(exc)


class SessionWriter:
    """The only writer of one session file, on a thread of its own.

    ``append_chunk``, ``add_event``, ``add_link_event``, ``add_point`` and ``add_snapshot`` only put work on a
    queue and return at once. The thread commits what has queued at least every ``commit_interval_s``. When the
    disk is full (or the file reaches ``max_file_bytes``, a cap an operator may set to protect a small disk), the
    file is deleted or cannot be written, or anything else goes wrong on the writer thread, recording stops,
    :attr:`error` says why, everything committed before stays intact, and further appends are counted in
    :attr:`dropped_chunks` (the caller keeps acquiring and displaying, and must say that recording stopped).

    Room to close: a small reserve file beside the session (``.NAME.reserve``, :attr:`RESERVE_BYTES`) is held
    while recording and removed on a full disk, so ``recording_error`` and the final metadata still fit; the WAL
    is checkpointed every :attr:`CHECKPOINT_PAGES` pages and cut back to :attr:`WAL_LIMIT_BYTES` so it stays small.
    :attr:`committed_scans` counts the scans of the chunks in the file (given to :meth:`append_chunk`).
    """

    RESERVE_BYTES = 1 << 20
    CHECKPOINT_PAGES = 1000
    WAL_LIMIT_BYTES = 4 << 20

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
            raise SessionError(f"{printable_path(self.path)}: already exists; choose a new file name "
                               "(sessions are never overwritten)")
        self.commit_interval_s = commit_interval_s
        self.error: str | None = None
        self.dropped_chunks = 0
        self.dropped_scans = 0
        self.committed_chunks = 0
        self.committed_scans = 0
        #: Longest time a chunk waited between :meth:`append_chunk` and the end of its commit [s].
        self.max_commit_delay_s = 0.0
        self._queue: queue.SimpleQueue = queue.SimpleQueue()
        # Chunks queued but not yet committed are bounded: when the disk falls that far behind, append_chunk
        # waits (the link's reader then lags, and the board's own buffer or the simulator's clock takes the
        # strain) instead of memory growing without end. Nothing queued is ever dropped.
        self.max_queued_bytes = max_queued_bytes
        self._queued_bytes = 0
        self._room = threading.Condition()
        self.waits = 0
        self._closed = threading.Event()
        self._commit_s = 0.0
        self._closing = False
        self._max_page_count: int | None = None
        self._reserve = self.path.with_name(f".{self.path.name}.reserve")
        rows = {"format": FORMAT_NAME, "format_version": str(FORMAT_VERSION), **meta}
        _create(self.path, rows)
        try:
            self._identity = _file_identity(self.path)
            self._con = _connect(self.path, readonly=False)
            self._con.execute("PRAGMA journal_mode = WAL")
            self._con.execute("PRAGMA synchronous = FULL")
            self._con.execute(f"PRAGMA wal_autocheckpoint = {self.CHECKPOINT_PAGES}")
            self._con.execute(f"PRAGMA journal_size_limit = {self.WAL_LIMIT_BYTES}")
            if max_file_bytes is not None:
                page = self._con.execute("PRAGMA page_size").fetchone()[0]
                self._max_page_count = max(8, int(max_file_bytes) // page)
                self._con.execute(f"PRAGMA max_page_count = {self._max_page_count}")
        except (sqlite3.Error, OSError) as exc:
            raise SessionError(f"{printable_path(self.path)}: cannot open the session file ({exc})") from None
        self._make_reserve()
        self._thread = threading.Thread(target=self._run, name=f"session-writer {printable_path(self.path.name)}",
                                        daemon=True)
        self._thread.start()

    def _make_reserve(self) -> None:
        try:
            with open(self._reserve, "wb") as fh:
                fh.write(b"\0" * self.RESERVE_BYTES)
                fh.flush()
                os.fsync(fh.fileno())
        except OSError:
            self._drop_reserve()  # no room even for the reserve: recording will stop at the first commit

    def _drop_reserve(self) -> None:
        try:
            self._reserve.unlink()
        except OSError:
            pass

    # -- producer side (any thread) ------------------------------------------------------------------------
    def append_chunk(self, data: bytes, host_ns: int, scans: int = 0) -> None:
        """Queue bytes read off the link for the file; ``scans`` is the number of scans decoded from them."""
        if self.error is not None:
            self.dropped_chunks += 1
            self.dropped_scans += scans
            return
        with self._room:
            if self._queued_bytes > self.max_queued_bytes:
                self.waits += 1
                self._room.wait_for(lambda: self._queued_bytes <= self.max_queued_bytes or self.error is not None
                                    or self._closed.is_set())
            self._queued_bytes += len(data)
        self._queue.put(("chunks", (host_ns, bytes(data)), (scans, time.monotonic())))

    def add_event(self, kind: str, data: dict, host_ns: int | None = None) -> None:
        """Queue an operator event (zero, note, setpoint, ...) with JSON-able data."""
        self._queue.put(("events", (host_ns or time.time_ns(), kind, json.dumps(data, sort_keys=True)), None))

    def add_link_event(self, kind: str, detail: str, host_ns: int | None = None) -> None:
        """Queue a link event (connected, lost, restored, reset) with a human-readable detail."""
        self._queue.put(("link_events", (host_ns or time.time_ns(), kind, _text(detail)), None))

    def add_point(self, label: str, data: dict, host_ns: int | None = None) -> None:
        """Queue a captured, averaged point."""
        self._queue.put(("points", (host_ns or time.time_ns(), _text(label), json.dumps(data, sort_keys=True)), None))

    def add_snapshot(self, kind: str, name: str, text: str, host_ns: int | None = None) -> None:
        """Queue a snapshot of a file the session depends on (rig file, calibration, section table)."""
        self._queue.put(("snapshots", (host_ns or time.time_ns(), kind, _text(name), _text(text)), None))

    def set_meta(self, key: str, value: str) -> None:
        """Queue a metadata value (inserted or replaced); kept even after recording stopped, when there is room."""
        self._queue.put(("meta", (key, _text(value)), None))

    @property
    def closed(self) -> bool:
        """True once the writer thread has committed its last batch and closed the file."""
        return self._closed.is_set()

    def close(self, timeout: float = 10.0) -> None:
        """Commit what is queued and close the file; waits at most ``timeout`` seconds."""
        self._closing = True
        if not self._closed.is_set():
            self._queue.put(None)
            self._thread.join(timeout)

    @property
    def alive(self) -> bool:
        """True while the writer thread runs or was asked to close (it ends by itself only on a defect)."""
        return self._closing or self._thread.is_alive()

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
        try:
            while not stop:
                batch, stop = self._gather()
                if batch:
                    self._commit(batch)
        except BaseException as exc:  # anything at all: recording stops and says so, it never ends unseen
            self._fail(f"recording stopped by an internal error ({type(exc).__name__}: {exc})")
        finally:
            try:
                if self.error is None:
                    self._con.execute("PRAGMA wal_checkpoint(TRUNCATE)")
            except sqlite3.Error:
                pass
            try:
                self._con.close()
            except sqlite3.Error:
                pass
            self._drop_reserve()
            self._closed.set()
            with self._room:
                self._room.notify_all()

    def _gather(self) -> tuple[list, bool]:
        """Collect work for one commit: block for the first item, then take what arrives within the interval.

        The interval is shortened by the time the last commit took, so a chunk is committed within about
        ``commit_interval_s`` of its arrival (docs/session-format.md states the bound).
        """
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
                deadline = time.monotonic() + max(0.0, self.commit_interval_s - self._commit_s)

    def _commit(self, batch: list) -> None:
        by_table: dict[str, list] = {}
        for table, row, _ in batch:
            by_table.setdefault(table, []).append(row)
        chunk_info = [info for table, _, info in batch if table == "chunks"]
        try:
            if self.error is None:
                self._check_file()
            if self.error is None:
                try:
                    self._write(by_table, chunk_info)
                except Exception as exc:  # not an SQLite error: a defect, but recording must still stop visibly
                    self._fail(f"recording stopped by an internal error ({type(exc).__name__}: {exc})")
            if self.error is not None:
                self.dropped_chunks += len(chunk_info)
                self.dropped_scans += sum(s for s, _ in chunk_info)
                self._after_error([item for item in batch if item[0] != "chunks"])
        finally:
            with self._room:
                self._queued_bytes -= sum(len(row[-1]) for row in by_table.get("chunks", ()))
                self._room.notify_all()

    def _check_file(self) -> None:
        """Stop when the file (or its folder) was deleted or replaced: writing on would reach nothing on disk."""
        try:
            same = _file_identity(self.path) == self._identity
        except OSError:
            same = False
        if not same:
            gone = "its folder was deleted" if not self.path.parent.exists() else "the file was deleted or replaced"
            self.error = (f"{printable_path(self.path)}: recording stopped, {gone} during the run; "
                          f"nothing recorded is on disk under that name any more")

    def _write(self, by_table: dict[str, list], chunk_info: list) -> None:
        started = time.monotonic()
        try:
            self._con.execute("BEGIN")
            for table, rows in by_table.items():
                self._con.executemany(self._SQL[table], rows)
            self._con.execute("COMMIT")
        except sqlite3.Error as exc:
            try:
                self._con.execute("ROLLBACK")
            except sqlite3.Error:
                pass
            full = "full" in str(exc).lower()
            self._fail("recording stopped, the disk is full" if full else f"recording stopped ({exc})")
            return
        done = time.monotonic()
        self._commit_s = done - started
        self.committed_chunks += len(chunk_info)
        self.committed_scans += sum(s for s, _ in chunk_info)
        if chunk_info:
            self.max_commit_delay_s = max(self.max_commit_delay_s, done - min(t for _, t in chunk_info))

    def _fail(self, what: str) -> None:
        """Stop recording: say why (``recording_error`` in the file too, using the reserve kept for it)."""
        if self.error is None:
            self.error = f"{printable_path(self.path)}: {what}; everything recorded until now is safe"
        self._drop_reserve()
        if self._max_page_count is not None:  # the operator's cap: the reserve is a few pages above it
            try:
                self._con.execute(f"PRAGMA max_page_count = {self._max_page_count + self.RESERVE_BYTES // 4096}")
            except sqlite3.Error:
                pass
        self._after_error([("meta", ("recording_error", _text(self.error)), None)])

    def _after_error(self, batch: list) -> None:
        """After recording stopped, still keep the small things (metadata, events): best effort, never raises."""
        rows = [(table, row) for table, row, _ in batch if table != "chunks"]
        if not rows:
            return
        try:
            self._check_identity_quietly()
            self._con.execute("BEGIN")
            for table, row in rows:
                self._con.execute(self._SQL[table], row)
            self._con.execute("COMMIT")
        except Exception:
            try:
                self._con.execute("ROLLBACK")
            except Exception:
                pass

    def _check_identity_quietly(self) -> None:
        if _file_identity_or_none(self.path) != self._identity:
            raise OSError("the session file is gone")


def _file_identity(path: Path) -> tuple[int, int]:
    st = os.stat(path)
    return st.st_dev, st.st_ino


def _file_identity_or_none(path: Path) -> tuple[int, int] | None:
    try:
        return _file_identity(path)
    except OSError:
        return None


class SessionReader:
    """Read-only access to a session file; checks that it is one, and of a version this software reads.

    :attr:`warnings` lists what the reader found wrong but could read around (a damaged WAL beside a killed run);
    each is also printed once on stderr, so every command that reads the file says it.
    """

    def __init__(self, path: str | Path):
        self.path = Path(path)
        self.warnings: list[str] = []
        shown = printable_path(self.path)
        if self.path.is_dir():
            raise SessionError(f"{shown}: is a directory; expected a session file (.taprig)")
        if not self.path.is_file():
            raise SessionError(f"{shown}: no such session file")
        try:
            with open(self.path, "rb") as fh:
                head = fh.read(len(SQLITE_HEADER))
        except OSError as exc:
            raise SessionError(f"{shown}: cannot be read ({exc.strerror or exc})") from None
        if head != SQLITE_HEADER:
            raise SessionError(f"{shown}: not a taprig session file (not an SQLite database)")
        lost = wal_damage(self.path)
        if lost is not None:
            self.warnings.append(lost)
            _warn(lost)
        try:
            self._con = _connect(self.path, readonly=True, keep_wal=lost is not None)
            tables = {r[0] for r in self._con.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
            if not set(_TABLES) <= tables:
                raise SessionError(f"{shown}: not a taprig session file (missing tables {sorted(set(_TABLES) - tables)})")
            self.meta = {str(k): str(v) for k, v in self._con.execute("SELECT key, value FROM meta")}
        except sqlite3.DatabaseError as exc:
            raise SessionError(f"{printable_path(self.path)}: damaged or truncated session file ({exc}); `taprig recover "
                               f"{printable_path(self.path)} -o NEW.taprig` copies what is intact into a new file") from None
        if self.meta.get("format") != FORMAT_NAME:
            raise SessionError(f"{shown}: not a taprig session file (format {self.meta.get('format')!r})")
        text = self.meta.get("format_version", "0")
        try:
            version = int(text)
        except ValueError:
            raise SessionError(f"{shown}: damaged session file (meta format_version is {text!r}, expected a whole "
                               f"number such as {FORMAT_VERSION})") from None
        if version > FORMAT_VERSION:
            raise SessionError(
                f"{shown}: session format version {version} is newer than this taprig reads "
                f"({FORMAT_VERSION}); update taprig to read it"
            )
        if version < 1:
            raise SessionError(f"{shown}: damaged session file (meta format_version is {text!r}, expected 1 to "
                               f"{FORMAT_VERSION})")

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
            raise SessionError(f"{printable_path(self.path)}: damaged session file ({exc}); `taprig recover {printable_path(self.path)} -o "
                               "NEW.taprig` copies what is intact into a new file") from None

    def _entries(self, table: str, sql: str, as_json: bool) -> list[Entry]:
        out = []
        for row_id, t, k, d in self._query(sql):
            if type(t) is not int or not isinstance(k, str) or not isinstance(d, str):
                raise SessionError(f"{printable_path(self.path)}: damaged session file ({table} row {row_id} has "
                                   f"host_ns {t!r}, expected a whole number, and text fields)")
            if as_json:
                try:
                    d = json.loads(d)
                except ValueError:
                    raise SessionError(f"{printable_path(self.path)}: damaged session file ({table} row {row_id} "
                                       f"is not valid JSON: {d[:60]!r})") from None
            out.append(Entry(t, k, d))
        return out

    def chunks(self, batch: int = 2000) -> Iterator[Chunk]:
        """Yield the recorded chunks in arrival order, reading ``batch`` rows at a time."""
        last = 0
        while True:
            rows = self._query("SELECT id, host_ns, data FROM chunks WHERE id > ? ORDER BY id LIMIT ?", (last, batch))
            if not rows:
                return
            for row_id, host_ns, data in rows:
                if not isinstance(data, bytes) or type(host_ns) is not int:
                    what = "holds text, not bytes" if not isinstance(data, bytes) else f"has host_ns {host_ns!r}"
                    raise SessionError(f"{printable_path(self.path)}: damaged session file (chunk {row_id} {what})")
                yield Chunk(host_ns, data)
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
        return self._entries("events", "SELECT id, host_ns, kind, data FROM events ORDER BY id", True)

    def link_events(self) -> list[Entry]:
        """Return the link events (connected, lost, restored), oldest first."""
        return self._entries("link_events", "SELECT id, host_ns, kind, detail FROM link_events ORDER BY id", False)

    def points(self) -> list[Entry]:
        """Return the captured points, oldest first (``kind`` holds the label)."""
        return self._entries("points", "SELECT id, host_ns, label, data FROM points ORDER BY id", True)

    def integrity_check(self) -> str:
        """Return SQLite's ``PRAGMA integrity_check`` verdict ("ok" when the file is sound)."""
        return self._query("PRAGMA integrity_check")[0][0]


_WAL_MAGIC = (0x377F0682, 0x377F0683)
_WAL_CHECK_LIMIT = 256 * 2**20
_shown_warnings: set[str] = set()


def _warn(message: str) -> None:
    """Print a reader's warning once per process on stderr (every command that reads the file shows it)."""
    if message not in _shown_warnings:
        _shown_warnings.add(message)
        print(f"taprig: warning: {message}", file=sys.stderr)


def _wal_checksum(data, s0: int, s1: int, swap: bool) -> tuple[int, int]:
    """SQLite's WAL checksum over ``data`` (a multiple of 8 bytes), continuing from (s0, s1)
    (sqlite.org/fileformat.html §4.2: s0 += x[i] + s1; s1 += x[i+1] + s0, modulo 2³²)."""
    words = array.array("I")
    words.frombytes(bytes(data))
    if swap:
        words.byteswap()
    it = iter(words)
    for a, b in zip(it, it):
        s0 = (s0 + a + s1) & 0xFFFFFFFF
        s1 = (s1 + b + s0) & 0xFFFFFFFF
    return s0, s1


def wal_damage(path: str | Path) -> str | None:
    """Look at the ``-wal`` beside a session before SQLite recovers it; say what recovery would silently drop.

    SQLite keeps WAL frames up to the first one whose checksum fails and ignores the rest
    (sqlite.org/fileformat.html §4.4). When committed frames of the same WAL follow a damaged one, those
    transactions are lost: return a sentence saying so, else None (no WAL, an empty one, or a sound one).
    """
    wal = Path(f"{path}-wal")
    try:
        size = wal.stat().st_size
        if size < 32 or size > _WAL_CHECK_LIMIT:
            return None
        data = wal.read_bytes()
    except OSError:
        return None
    magic, _, page_size, _, salt1, salt2, c1, c2 = struct.unpack_from(">8I", data, 0)
    if magic not in _WAL_MAGIC or page_size < 512 or page_size & (page_size - 1):
        return None
    swap = (magic == 0x377F0683) != (sys.byteorder == "big")
    s0, s1 = _wal_checksum(data[:24], 0, 0, swap)
    if (s0, s1) != (c1, c2):
        return None  # a header that does not check: SQLite ignores the whole WAL; nothing to compare with
    frame = 24 + page_size
    n_frames = (len(data) - 32) // frame
    good_commits = 0
    damaged_at = None
    later_commits = 0
    for i in range(n_frames):
        off = 32 + i * frame
        _, commit, f_salt1, f_salt2, f_c1, f_c2 = struct.unpack_from(">6I", data, off)
        if (f_salt1, f_salt2) != (salt1, salt2):
            if damaged_at is None:
                break  # the end of this WAL's frames: older frames of an earlier generation follow
            continue
        if damaged_at is None:
            s0, s1 = _wal_checksum(data[off:off + 8], s0, s1, swap)
            s0, s1 = _wal_checksum(data[off + 24:off + frame], s0, s1, swap)
            if (s0, s1) == (f_c1, f_c2):
                good_commits += commit != 0
                continue
            damaged_at = i
        later_commits += commit != 0
    if damaged_at is None or later_commits == 0:
        return None
    return (f"{printable_path(path)}: its write-ahead log ({printable_path(wal.name)}) is damaged at frame "
            f"{damaged_at + 1} of {n_frames}: {later_commits} committed transaction(s) after the damage cannot be "
            f"recovered, so the last part of the recording is missing from what is read "
            f"(the log is left untouched for a closer look)")
