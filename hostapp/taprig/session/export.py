"""Export a session as tables: one row per scan, one row per captured point (columns in docs/session-format.md).

The scan table is built block by block from a fast :class:`~taprig.session.replay.Replay` and written as it goes
(Parquet one row group per ~64k scans, CSV appended per block), so an hour-long session never sits in memory.
Its columns are fixed by the rig, not by the blocks: a channel a block does not stream is an empty (null) cell.
Files are written beside their final name and renamed into place when complete, so a failed export leaves no
half-written file.

Many sessions go to a Hive-style archive, ``DIR/rig=<id>/date=<YYYY-MM-DD>/<session>.parquet`` (points under
``DIR/_points/…``, a prefix dataset readers skip), which :func:`open_archive` (or DuckDB, Spark, Dask) reads as one
dataset.
"""

from __future__ import annotations

import json
import os
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import Callable, Iterator
from urllib.parse import quote

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.csv as pa_csv
import pyarrow.dataset as pa_ds
import pyarrow.parquet as pq

from taprig.protocol import Encoding, RawBlock
from taprig.rig import Rig
from taprig.reduce import Reducer
from taprig.session.replay import Replay, ReplayBlock, rig_from_session, session_start_ns
from taprig.session.store import SessionError, SessionReader

#: Scans per Parquet row group (and per DataFrame of :func:`scan_frames`).
ROW_GROUP_ROWS = 65536
#: Leading columns of the scan table, in order; the reducer's optional columns, taps and channels follow.
LEADING = ("t_s", "host_t_s", "scan")
_FROM_REDUCED_SKIP = ("t_ns", "scan_index")
_COUNT_TYPES = {Encoding.I16: pa.int16(), Encoding.U16: pa.uint16(), Encoding.I32: pa.int32(),
                Encoding.U32: pa.uint32(), Encoding.F32: pa.float32()}
_ARCHIVE_PARTITIONING = pa.schema([("rig", pa.string()), ("date", pa.string())])
FORMATS = ("csv", "parquet")
Progress = Callable[[int, int], None]


class ExportError(SessionError):
    """An export that cannot be written (the output exists, its directory is missing or not writable)."""


@dataclass(frozen=True)
class ScanSchema:
    """The scan table's columns for one rig: Arrow schema, reducer columns, and (device index, label) of counts."""

    schema: pa.Schema
    reduced: tuple[str, ...]
    counts: tuple[tuple[int, str], ...]


def scan_schema(rig: Rig, reducer: Reducer) -> ScanSchema:
    """The columns of the scan table of ``rig``: the reducer's columns for a block of every channel, then counts."""
    channels = tuple(sorted(c.index for c in rig.channels))
    probe = RawBlock(np.zeros((1, len(channels))), channels, np.zeros(1, np.int64), np.zeros(1, np.int64))
    columns = reducer.reduce(probe).to_columns()
    fields = [pa.field("t_s", pa.float64()), pa.field("host_t_s", pa.float64()), pa.field("scan", pa.int64())]
    reduced = tuple(name for name in columns if name not in _FROM_REDUCED_SKIP)
    fields += [pa.field(name, pa.from_numpy_dtype(columns[name].dtype)) for name in reduced]
    counts = tuple((c.index, f"counts.{c.name}") for c in sorted(rig.channels, key=lambda c: c.index))
    fields += [pa.field(label, _COUNT_TYPES[rig.channel(index).encoding]) for index, label in counts]
    metadata = {"taprig.assumptions": json.dumps(list(reducer.assumptions), ensure_ascii=False)}
    return ScanSchema(pa.schema(fields, metadata=metadata), reduced, counts)


def block_table(block: ReplayBlock, spec: ScanSchema, t0_ns: int, start_ns: int) -> pa.Table:
    """One replayed block as a table of ``spec`` (times in seconds from ``t0_ns`` / ``start_ns``)."""
    raw, n = block.raw, block.raw.n_scans
    arrays = [pa.array((raw.t_ns - t0_ns) / 1e9), pa.array((block.host_ns - start_ns) / 1e9),
              pa.array(raw.scan_index)]
    columns = block.reduced.to_columns()
    schema = spec.schema
    for name in spec.reduced:
        kind = schema.field(name).type
        arrays.append(pa.array(columns[name], kind) if name in columns else pa.nulls(n, kind))
    col_of = {index: j for j, index in enumerate(raw.channels)}
    for index, label in spec.counts:
        kind = schema.field(label).type
        j = col_of.get(index)
        arrays.append(pa.nulls(n, kind) if j is None else pa.array(raw.counts[:, j].astype(kind.to_pandas_dtype())))
    return pa.Table.from_arrays(arrays, schema=schema)


def scan_tables(replay: Replay, progress: Progress | None = None) -> Iterator[pa.Table]:
    """Tables of ~:data:`ROW_GROUP_ROWS` scans each, in order, from a (fast) replay."""
    spec = scan_schema(replay.rig, replay.reducer)
    start_ns = replay.start_ns or 0
    held: list[pa.Table] = []
    rows, yielded = 0, False
    for step in replay:
        for block in step.blocks:
            held.append(block_table(block, spec, replay.first_t_ns or 0, start_ns))
            rows += block.raw.n_scans
        if progress is not None:
            progress(step.chunks_done, replay.total_chunks)
        if rows >= ROW_GROUP_ROWS:
            yield pa.concat_tables(held)
            held, rows, yielded = [], 0, True
    if held or not yielded:
        yield pa.concat_tables(held) if held else spec.schema.empty_table()


def points_frame(reader: SessionReader) -> pd.DataFrame:
    """The captured points: ``host_t_s``, ``label``, then the point's data flattened (``cp.<tap>``, ``plain.cl``)."""
    points = reader.points()
    start = session_start_ns(reader) or 0
    data = pd.json_normalize([p.data if isinstance(p.data, dict) else {"value": p.data} for p in points], sep=".")
    head = pd.DataFrame({"host_t_s": [(p.host_ns - start) / 1e9 for p in points], "label": [p.kind for p in points]})
    return pd.concat([head, data], axis=1)


def _csv_ready(frame: pd.DataFrame) -> pd.DataFrame:
    """Lists and dicts in cells (flags, time windows) as JSON text, so a CSV cell holds one value."""
    out = frame.copy()
    for name in out.columns:
        if out[name].dtype == object:
            out[name] = [json.dumps(v) if isinstance(v, (list, dict)) else v for v in out[name]]
    return out


# -- files ----------------------------------------------------------------------------------------------------------

def points_path(out: Path) -> Path:
    """Where the points table of an export to ``out`` goes: ``run.csv`` → ``run.points.csv``."""
    return out.with_name(f"{out.stem}.points{out.suffix}")


def check_output(path: Path, force: bool) -> None:
    """Refuse an output that exists (unless ``force``) or whose directory is missing or not writable."""
    if path.is_dir():
        raise ExportError(f"{path}: is a directory; expected a file name for the export")
    if path.exists() and not force:
        raise ExportError(f"{path}: already exists; choose another name or pass --force to replace it")
    parent = path.parent
    if not parent.is_dir():
        raise ExportError(f"{parent}: no such directory to write {path.name} into")
    if not os.access(parent, os.W_OK | os.X_OK):
        raise ExportError(f"{parent}: directory is not writable")


def refuse_overwriting_session(session: Path, outputs: tuple[Path, ...]) -> None:
    """Refuse an output that is the session being read, or its ``-wal``/``-shm`` file, ``--force`` or not.

    Compared by resolved path (symlinks, ``./``, ``..``) and, for a file that exists, by identity (a hard link).
    """
    session = Path(session)
    own = {session.resolve()} | {Path(f"{session}{tail}").resolve() for tail in ("-wal", "-shm")}
    for out in outputs:
        same = out.resolve() in own or (out.exists() and session.exists() and os.path.samefile(out, session))
        if same:
            raise ExportError(f"{out}: is the session being exported ({session}) or one of its files; "
                              "choose another output name (the session is never overwritten)")


class _Sink:
    """A table file written under a temporary name and renamed into place by :meth:`commit`."""

    def __init__(self, path: Path, schema: pa.Schema, fmt: str):
        self.path, self.fmt = path, fmt
        self.partial = path.with_name(f".{path.name}.partial")
        try:
            if fmt == "parquet":
                self._writer = pq.ParquetWriter(self.partial, schema)
            else:
                options = pa_csv.WriteOptions(quoting_header="none")
                self._writer = pa_csv.CSVWriter(str(self.partial), schema, write_options=options)
        except OSError as exc:
            raise ExportError(f"{path}: cannot write ({exc})") from None

    def write(self, table: pa.Table) -> None:
        try:
            if self.fmt == "parquet":
                self._writer.write_table(table, row_group_size=ROW_GROUP_ROWS)
            else:
                self._writer.write_table(table)
        except OSError as exc:
            self.abort()
            raise ExportError(f"{self.path}: cannot write ({exc})") from None

    def commit(self) -> None:
        try:
            self._writer.close()
            os.replace(self.partial, self.path)
        except OSError as exc:
            self.partial.unlink(missing_ok=True)
            raise ExportError(f"{self.path}: cannot write ({exc})") from None

    def abort(self) -> None:
        try:
            self._writer.close()
        finally:
            self.partial.unlink(missing_ok=True)


def _write_points(frame: pd.DataFrame, path: Path, fmt: str) -> None:
    partial = path.with_name(f".{path.name}.partial")
    try:
        if fmt == "parquet":
            pq.write_table(pa.Table.from_pandas(frame, preserve_index=False), partial)
        else:
            _csv_ready(frame).to_csv(partial, index=False)
        os.replace(partial, path)
    except OSError as exc:
        partial.unlink(missing_ok=True)
        raise ExportError(f"{path}: cannot write ({exc})") from None


@dataclass(frozen=True)
class ExportResult:
    """What an export wrote: the scan table's path and rows, the points table's path (None if no points)."""

    scans_path: Path
    scans: int
    points_path: Path | None
    points: int


def export_session(session: str | Path, out: str | Path, fmt: str, calibration=None, force: bool = False,
                   progress: Progress | None = None, points_out: Path | None = None) -> ExportResult:
    """Write the scan table of ``session`` to ``out`` and its points to :func:`points_path` (``fmt`` csv|parquet).

    ``calibration`` re-reduces the run with another :class:`~taprig.rig.Calibration`.
    """
    if fmt not in FORMATS:
        raise ExportError(f"unknown export format {fmt!r}; expected one of {', '.join(FORMATS)}")
    out = Path(out)
    points_out = points_out or points_path(out)
    refuse_overwriting_session(Path(session), (out, points_out))
    with Replay(session, calibration=calibration) as replay:
        n_points = len(replay.reader.points())
        check_output(out, force)
        if n_points:
            check_output(points_out, force)
        rows = _write_scans(replay, out, fmt, progress)
        if n_points:
            _write_points(points_frame(replay.reader), points_out, fmt)
    return ExportResult(out, rows, points_out if n_points else None, n_points)


def _write_scans(replay: Replay, out: Path, fmt: str, progress: Progress | None) -> int:
    sink = None
    rows = 0
    try:
        for table in scan_tables(replay, progress):
            if sink is None:
                sink = _Sink(out, table.schema, fmt)
            sink.write(table)
            rows += table.num_rows
    except BaseException:
        if sink is not None:
            sink.abort()
        raise
    sink.commit()
    return rows


# -- archives of many sessions ------------------------------------------------------------------------------------

def session_date(reader: SessionReader) -> str:
    """The UTC date the session started (``YYYY-MM-DD``), from ``started_utc`` or the host start time."""
    text = reader.meta.get("started_utc", "")
    try:
        return datetime.fromisoformat(text).astimezone(timezone.utc).date().isoformat()
    except ValueError:
        pass
    start = session_start_ns(reader)
    if start is None:
        raise ExportError(f"{reader.path}: the session has no start time (no started_utc, no chunks) to file it by")
    return datetime.fromtimestamp(start / 1e9, timezone.utc).date().isoformat()


def archive_paths(reader: SessionReader, rig_id: str, root: Path) -> tuple[Path, Path]:
    """Where a session goes in an archive: (scan table, points table)."""
    part = Path(f"rig={quote(rig_id, safe='')}") / f"date={session_date(reader)}" / f"{reader.path.stem}.parquet"
    return root / part, root / "_points" / part


def export_partitioned(sessions: list[str | Path], root: str | Path, calibration=None, force: bool = False,
                       progress: Progress | None = None) -> list[ExportResult]:
    """Add each session to the Hive-style archive under ``root`` (created if missing; its parent must exist)."""
    root = Path(root)
    if root.exists() and not root.is_dir():
        raise ExportError(f"{root}: exists and is not a directory; expected an archive directory")
    if not root.parent.is_dir():
        raise ExportError(f"{root.parent}: no such directory to create the archive {root.name} in")
    results = []
    for session in sessions:
        with SessionReader(session) as reader:
            rig_id = reader.meta.get("rig_id") or rig_from_session(reader).id
            scans_out, points_out = archive_paths(reader, rig_id, root)
        for path in (scans_out, points_out):
            try:
                path.parent.mkdir(parents=True, exist_ok=True)
            except OSError as exc:
                raise ExportError(f"{path.parent}: cannot create the archive directory ({exc})") from None
        results.append(export_session(session, scans_out, "parquet", calibration, force, progress, points_out))
    return results


def open_archive(root: str | Path) -> pa_ds.Dataset:
    """The archive under ``root`` as one :class:`pyarrow.dataset.Dataset` (partition columns ``rig``, ``date``).

    Sessions of different rigs have different tap columns; the dataset's schema is the union of all of them
    (a column a session lacks reads as null).
    """
    partitioning = pa_ds.partitioning(_ARCHIVE_PARTITIONING, flavor="hive")
    probe = pa_ds.dataset(root, format="parquet", partitioning=partitioning)
    schemas = [fragment.physical_schema for fragment in probe.get_fragments()]
    if not schemas:
        raise ExportError(f"{root}: no exported sessions found (expected rig=<id>/date=<YYYY-MM-DD>/*.parquet)")
    schema = pa.unify_schemas(schemas + [_ARCHIVE_PARTITIONING])
    return pa_ds.dataset(root, format="parquet", partitioning=partitioning, schema=schema)
