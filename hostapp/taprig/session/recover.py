"""Recovering what is intact from a damaged session file into a new one, counting what was lost.

A session whose file was damaged (a bad sector, a copy cut short) is refused whole by the reader. Each row of each
table is read on its own by its row id, so one damaged page costs only the rows on it; every row that still reads
is copied, with its id, into a new session file, and the rows that could not be read are counted per table.
"""

from __future__ import annotations

import json
import sqlite3
from pathlib import Path

from taprig.session.store import _SCHEMA, FORMAT_NAME, FORMAT_VERSION, SessionError

_COLUMNS = {
    "meta": ("key", "value"),
    "snapshots": ("host_ns", "kind", "name", "text"),
    "chunks": ("host_ns", "data"),
    "link_events": ("host_ns", "kind", "detail"),
    "events": ("host_ns", "kind", "data"),
    "points": ("host_ns", "label", "data"),
}
#: Row ids probed past the last one read, when the largest id itself cannot be read.
_PROBE_PAST = 4096


def _largest_id(con: sqlite3.Connection, table: str) -> int | None:
    try:
        return con.execute(f"SELECT max(rowid) FROM {table}").fetchone()[0] or 0
    except sqlite3.DatabaseError:
        return None


def recover_session(source: str | Path, target: str | Path) -> dict[str, dict[str, int]]:
    """Copy every readable row of ``source`` into the new session file ``target``; return, per table, how many
    rows were kept and how many were lost (ids that could not be read). Raises :class:`SessionError` when nothing
    can be read at all or ``target`` exists."""
    source, target = Path(source), Path(target)
    if target.exists():
        raise SessionError(f"{target}: already exists; choose a new file name (sessions are never overwritten)")
    try:
        con = sqlite3.connect(f"{source.resolve().as_uri()}?mode=ro", uri=True)
        con.execute("SELECT count(*) FROM sqlite_master").fetchone()
    except sqlite3.DatabaseError as exc:
        raise SessionError(f"{source}: nothing can be read from it ({exc})") from None
    out = sqlite3.connect(str(target))
    counts: dict[str, dict[str, int]] = {}
    try:
        out.executescript(_SCHEMA)
        for table, columns in _COLUMNS.items():
            kept = lost = 0
            largest = _largest_id(con, table)
            select = f"SELECT rowid, {', '.join(columns)} FROM {table} WHERE rowid = ?"
            insert = (f"INSERT OR REPLACE INTO {table} (rowid, {', '.join(columns)}) "
                      f"VALUES ({', '.join('?' * (len(columns) + 1))})")
            row_id, last_read = 0, 0
            while True:
                row_id += 1
                if largest is not None and row_id > largest:
                    break
                if largest is None and row_id > last_read + _PROBE_PAST:
                    break
                try:
                    row = con.execute(select, (row_id,)).fetchone()
                except sqlite3.DatabaseError:
                    lost += 1
                    continue
                if row is None:
                    continue  # no such id (never written): not a loss
                out.execute(insert, row)
                kept += 1
                last_read = row_id
            if largest is None:
                lost = max(0, lost - (row_id - 1 - last_read))  # probes past the last row read are not counted
            counts[table] = {"kept": kept, "lost": lost}
        rows = {"format": FORMAT_NAME, "format_version": str(FORMAT_VERSION), "recovered_from": str(source),
                "recovery": json.dumps(counts, sort_keys=True)}
        out.executemany("INSERT OR REPLACE INTO meta (key, value) VALUES (?, ?)", list(rows.items()))
        out.commit()
    except BaseException:
        out.close()
        target.unlink(missing_ok=True)
        raise
    finally:
        con.close()
    out.close()
    return counts
