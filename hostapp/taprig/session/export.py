"""Export a session as tables: one row per scan, one row per captured point (columns in docs/session-format.md).

The scan table is built block by block from a fast :class:`~taprig.session.replay.Replay` and written as it goes
(Parquet one row group per ~64k scans, CSV appended per block), so an hour-long session never sits in memory.
Its columns are fixed by the rig, not by the blocks: a channel a block does not stream is an empty (null) cell.
Files are written beside their final name and renamed into place when complete, so a failed export leaves no
half-written file.

Both tables follow one convention (docs/session-format.md, "Exports"): every row carries the session's id
(``session_id``) and the host's UTC wall-clock time (``host_utc``); angles are in degrees as commanded
(:func:`commanded_deg`); a value that cannot be given is null (an empty CSV cell, never NaN), with the reason in
``flag_bits`` / ``flag_names`` (:class:`~taprig.reduce.ScanFlag`); a CSV float always has a decimal point or an
exponent, so a reader infers a float column from its first row; no cell holds a list or JSON text.

Many sessions go to a Hive-style archive of two datasets, ``DIR/scans/rig=<id>/date=<YYYY-MM-DD>/<session>.parquet``
and ``DIR/points/rig=<id>/date=<YYYY-MM-DD>/<session>.parquet``, so a glob over ``DIR/scans`` sees only scans;
:func:`open_archive` (or DuckDB, Spark, Dask) reads each as one dataset.
"""

from __future__ import annotations

import json
import os
import uuid
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import Callable, Iterator
from urllib.parse import quote

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pa_csv
import pyarrow.dataset as pa_ds
import pyarrow.parquet as pq

from taprig.protocol import Encoding, RawBlock, StreamDecoder
from taprig.rig import Rig
from taprig.reduce import Reducer, ScanFlag
from taprig.session.replay import Replay, ReplayBlock, rig_from_session, session_start_ns
from taprig.session.store import SessionError, SessionReader

#: Scans per Parquet row group (and per DataFrame of :func:`scan_frames`).
ROW_GROUP_ROWS = 65536
#: Leading columns of the scan table, in order; the reducer's columns, taps and channels follow.
LEADING = ("session_id", "host_utc", "t_s", "host_t_s", "scan")
_FROM_REDUCED_SKIP = ("t_ns", "scan_index")
#: Reducer column → export column (``flags`` would be shadowed by pandas' ``DataFrame.flags``).
_RENAMED = {"flags": "flag_bits"}
#: Angles are exported rounded to this many decimals of a degree (see :func:`commanded_deg`).
ANGLE_DECIMALS = 9
#: Parquet key-value metadata key holding the session's ``meta`` table as JSON.
META_KEY = b"taprig.session_meta"
_UTC = pa.timestamp("ns", tz="UTC")
_COUNT_TYPES = {Encoding.I16: pa.int16(), Encoding.U16: pa.uint16(), Encoding.I32: pa.int32(),
                Encoding.U32: pa.uint32(), Encoding.F32: pa.float32()}
_ARCHIVE_PARTITIONING = pa.schema([("rig", pa.string()), ("date", pa.string())])
#: The archive's two datasets (directories under its root).
ARCHIVE_DATASETS = ("scans", "points")
FORMATS = ("csv", "parquet")
Progress = Callable[[int, int], None]


class ExportError(SessionError):
    """An export that cannot be written (the output exists, its directory is missing or not writable)."""


def commanded_deg(alpha_rad) -> np.ndarray:
    """An angle [rad] back in degrees as it was commanded: rounded to :data:`ANGLE_DECIMALS` decimals.

    Angles arrive in degrees (rig file, command line) and are radians inside; ``degrees(radians(12))`` is
    12.000000000000002, so an export would not match ``alpha_deg = 12``. Rounding to 1e-9° (far below any angle
    actuator's resolution) gives back the double nearest to the decimal that was typed.

    >>> float(commanded_deg(np.radians(12.0))), float(commanded_deg(np.radians(-0.5)))
    (12.0, -0.5)
    """
    return np.round(np.degrees(np.asarray(alpha_rad, dtype=float)), ANGLE_DECIMALS) + 0.0  # + 0.0: no -0.0


def session_id(meta: dict[str, str]) -> str:
    """The session's id: ``meta["session_id"]`` (written when recording starts), else one derived from the rig id
    and the start time (the same for copies of one file, different for two runs)."""
    given = meta.get("session_id")
    if given:
        return given
    key = "|".join(meta.get(k, "") for k in ("rig_id", "started_utc", "host_started_ns"))
    return uuid.uuid5(uuid.NAMESPACE_URL, f"taprig-session:{key}").hex


def flag_names_array(bits: np.ndarray) -> pa.Array:
    """``ScanFlag`` names of each mask joined by ``|`` (``NO_FLOW|DEGRADED``), null where no bit is set."""
    bits = np.asarray(bits)
    if bits.size == 0:
        return pa.array([], pa.string())
    unique, inverse = np.unique(bits, return_inverse=True)
    names = pa.array([("|".join(m.name for m in ScanFlag if int(u) & int(m)) or None) for u in unique], pa.string())
    return pc.take(names, pa.array(inverse.reshape(-1)))


def _float_or_null(values: np.ndarray, kind: pa.DataType) -> pa.Array:
    """``values`` as an Arrow array of ``kind`` with NaN written as null (a missing value, not a number)."""
    return pa.array(values, kind, from_pandas=True)


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
    fields = [pa.field("session_id", pa.string()), pa.field("host_utc", _UTC), pa.field("t_s", pa.float64()),
              pa.field("host_t_s", pa.float64()), pa.field("scan", pa.int64())]
    reduced = tuple(name for name in columns if name not in _FROM_REDUCED_SKIP)
    for name in reduced:
        fields.append(pa.field(_RENAMED.get(name, name), pa.from_numpy_dtype(columns[name].dtype)))
        if name == "flags":
            fields.append(pa.field("flag_names", pa.string()))
    counts = tuple((c.index, f"counts.{c.name}") for c in sorted(rig.channels, key=lambda c: c.index))
    fields += [pa.field(label, _COUNT_TYPES[rig.channel(index).encoding]) for index, label in counts]
    metadata = {"taprig.assumptions": json.dumps(list(reducer.assumptions), ensure_ascii=False)}
    return ScanSchema(pa.schema(fields, metadata=metadata), reduced, counts)


def block_table(block: ReplayBlock, spec: ScanSchema, t0_ns: int, start_ns: int, session: str = "") -> pa.Table:
    """One replayed block as a table of ``spec`` (times in seconds from ``t0_ns`` / ``start_ns``)."""
    raw, n = block.raw, block.raw.n_scans
    arrays = [pa.array(np.full(n, session, dtype=object), pa.string()),
              pa.array(np.asarray(block.host_ns, dtype=np.int64), _UTC),
              pa.array((raw.t_ns - t0_ns) / 1e9), pa.array((block.host_ns - start_ns) / 1e9),
              pa.array(raw.scan_index)]
    columns = block.reduced.to_columns()
    schema = spec.schema
    for name in spec.reduced:
        kind = schema.field(_RENAMED.get(name, name)).type
        if name not in columns:
            arrays.append(pa.nulls(n, kind))
        elif name == "alpha_deg":
            arrays.append(_float_or_null(commanded_deg(block.reduced.alpha_rad), kind))
        elif pa.types.is_floating(kind):
            arrays.append(_float_or_null(columns[name], kind))
        else:
            arrays.append(pa.array(columns[name], kind))
        if name == "flags":
            arrays.append(flag_names_array(columns[name]) if name in columns else pa.nulls(n, pa.string()))
    col_of = {index: j for j, index in enumerate(raw.channels)}
    for index, label in spec.counts:
        kind = schema.field(label).type
        j = col_of.get(index)
        if j is None:
            arrays.append(pa.nulls(n, kind))
        else:
            values = raw.counts[:, j].astype(kind.to_pandas_dtype())
            arrays.append(_float_or_null(values, kind) if pa.types.is_floating(kind) else pa.array(values))
    return pa.Table.from_arrays(arrays, schema=schema)


def _with_meta(schema: pa.Schema, meta: dict[str, str]) -> pa.Schema:
    """``schema`` carrying the session's ``meta`` (ambient conditions, rig, reference pressures…) as JSON."""
    return schema.with_metadata({**(schema.metadata or {}), META_KEY: json.dumps(meta, sort_keys=True).encode()})


def scan_tables(replay: Replay, progress: Progress | None = None) -> Iterator[pa.Table]:
    """Tables of ~:data:`ROW_GROUP_ROWS` scans each, in order, from a (fast) replay."""
    spec = scan_schema(replay.rig, replay.reducer)
    meta = dict(replay.reader.meta)
    schema = _with_meta(spec.schema, meta)
    session = session_id(meta)
    start_ns = replay.start_ns or 0
    held: list[pa.Table] = []
    rows, yielded = 0, False
    for step in replay:
        for block in step.blocks:
            held.append(block_table(block, spec, replay.first_t_ns or 0, start_ns, session))
            rows += block.raw.n_scans
        if progress is not None:
            progress(step.chunks_done, replay.total_chunks)
        if rows >= ROW_GROUP_ROWS:
            yield pa.concat_tables(held).replace_schema_metadata(schema.metadata)
            held, rows, yielded = [], 0, True
    if held or not yielded:
        yield pa.concat_tables(held).replace_schema_metadata(schema.metadata) if held else schema.empty_table()


def first_scan_t_ns(reader: SessionReader) -> int | None:
    """Device time of the session's first scan [ns] (the origin of ``t_s``), decoding only up to it."""
    decoder = StreamDecoder()
    for chunk in reader.chunks():
        for item in decoder.feed(chunk.data):
            if isinstance(item, RawBlock) and item.n_scans:
                return int(item.t_ns[0])
    return None


def _point_row(data) -> dict:
    """One stored point in the export's convention (degrees, flag bits and names, device times in seconds)."""
    row = dict(data) if isinstance(data, dict) else {"value": data}
    if "alpha_rad" in row:
        alpha = row.pop("alpha_rad")
        row["alpha_deg"] = None if alpha is None else float(commanded_deg(alpha))
    for name in ("plan_alpha_rad", "wall_alpha_rad"):  # a sweep's planned angle, the wall-corrected angle
        if name in row:
            alpha = row.pop(name)
            row[name.replace("_rad", "_deg")] = None if alpha is None else float(commanded_deg(alpha))
    if "flags" in row:
        names = [str(n) for n in row.pop("flags") or ()]
        row["flag_bits"] = int(sum(int(ScanFlag[n]) for n in names if n in ScanFlag.__members__))
        row["flag_names"] = "|".join(names) or None
    if "t_ns" in row:
        first, last = (list(row.pop("t_ns") or ()) + [None, None])[:2]
        row["t_first_ns"], row["t_last_ns"] = first, last
    return row


def points_table(reader: SessionReader, t0_ns: int | None = None) -> pa.Table:
    """The captured points: ``session_id``, ``host_utc``, ``host_t_s``, ``label``, then the point's data flattened
    (``q_pa``, ``alpha_deg``, ``flag_bits``, ``cp.<tap>``, ``plain.cl``…; device times ``t_first_s``/``t_last_s``
    on the scan table's ``t_s`` clock). Missing values are null; numeric columns are float64 or int64."""
    points = reader.points()
    start = session_start_ns(reader) or 0
    if t0_ns is None:
        t0_ns = first_scan_t_ns(reader) or 0
    session = session_id(reader.meta)
    flat = pd.json_normalize([_point_row(p.data) for p in points], sep=".") if points else pd.DataFrame()
    names = ["session_id", "host_utc", "host_t_s", "label"]
    arrays = [pa.array([session] * len(points), pa.string()), pa.array([p.host_ns for p in points], pa.int64()).cast(_UTC),
              pa.array([(p.host_ns - start) / 1e9 for p in points], pa.float64()),
              pa.array([p.kind for p in points], pa.string())]
    for name in flat.columns:
        values = [None if (v is None or (isinstance(v, float) and v != v)) else v for v in flat[name].tolist()]
        if name in ("t_first_ns", "t_last_ns"):
            names.append(name.replace("_ns", "_s"))
            arrays.append(pa.array([None if v is None else (int(v) - t0_ns) / 1e9 for v in values], pa.float64()))
            continue
        array = pa.array(values, from_pandas=True)
        if pa.types.is_null(array.type):
            array = array.cast(pa.float64())
        elif pa.types.is_list(array.type) or pa.types.is_struct(array.type):
            array = pa.array([None if v is None else json.dumps(v) for v in values], pa.string())
        names.append(name)
        arrays.append(array)
    return pa.Table.from_arrays(arrays, names=names).replace_schema_metadata(_with_meta(pa.schema([]), dict(reader.meta)).metadata)


def points_frame(reader: SessionReader) -> pd.DataFrame:
    """:func:`points_table` as a pandas DataFrame (what ``open_session(...).points()`` returns)."""
    return points_table(reader).to_pandas()


def csv_ready(table: pa.Table) -> pa.Table:
    """``table`` with its float columns as text any CSV reader infers as floats: shortest round-trip digits with
    a decimal point (``12.0``, not ``12``), null for a missing value; every other column as it is."""
    columns = []
    for column in table.columns:
        if pa.types.is_floating(column.type):
            text = pc.cast(column, pa.string())
            whole = pc.match_substring_regex(text, r"^-?[0-9]+$")
            text = pc.if_else(whole, pc.binary_join_element_wise(text, pa.scalar(".0"), pa.scalar("")), text)
            columns.append(text)
        elif pa.types.is_timestamp(column.type):
            columns.append(pc.strftime(column, format="%Y-%m-%dT%H:%M:%SZ"))  # ISO 8601, ns, UTC
        else:
            columns.append(column)
    return pa.Table.from_arrays(columns, names=table.column_names)


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
            else:  # no scan-table text needs quotes (ids, flag names, times): numbers are never quoted
                options = pa_csv.WriteOptions(quoting_header="none", quoting_style="none")
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


def _write_points(table: pa.Table, path: Path, fmt: str) -> None:
    partial = path.with_name(f".{path.name}.partial")
    try:
        if fmt == "parquet":
            pq.write_table(table, partial)
        else:  # labels are free text: quoted only where needed; numbers never
            csv_ready(table).to_pandas(types_mapper=pd.ArrowDtype).to_csv(partial, index=False, na_rep="")
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
            _write_points(points_table(replay.reader, replay.first_t_ns), points_out, fmt)
    return ExportResult(out, rows, points_out if n_points else None, n_points)


def _write_scans(replay: Replay, out: Path, fmt: str, progress: Progress | None) -> int:
    sink = None
    rows = 0
    try:
        for table in scan_tables(replay, progress):
            if fmt == "csv":
                table = csv_ready(table)
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
    """Where a session goes in an archive: (scan table, points table), each in its own dataset."""
    part = Path(f"rig={quote(rig_id, safe='')}") / f"date={session_date(reader)}" / f"{reader.path.stem}.parquet"
    return root / "scans" / part, root / "points" / part


def export_partitioned(sessions: list[str | Path], root: str | Path, calibration=None, force: bool = False,
                       progress: Progress | None = None) -> list[ExportResult]:
    """Add each session to the Hive-style archive under ``root`` (created if missing; its parent must exist):
    scans under ``root/scans/``, points under ``root/points/`` (see :func:`archive_paths`)."""
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


def open_archive(root: str | Path, dataset: str = "scans") -> pa_ds.Dataset:
    """One dataset of the archive under ``root`` (``scans`` or ``points``) as a :class:`pyarrow.dataset.Dataset`
    with the partition columns ``rig`` and ``date``.

    Sessions of different rigs have different tap columns; the dataset's schema is the union of all of them
    (a column a session lacks reads as null).
    """
    if dataset not in ARCHIVE_DATASETS:
        raise ExportError(f"unknown archive dataset {dataset!r}; expected one of {', '.join(ARCHIVE_DATASETS)}")
    base = Path(root) / dataset
    partitioning = pa_ds.partitioning(_ARCHIVE_PARTITIONING, flavor="hive")
    schemas = []
    if base.is_dir():
        probe = pa_ds.dataset(base, format="parquet", partitioning=partitioning)
        schemas = [fragment.physical_schema for fragment in probe.get_fragments()]
    if not schemas:
        raise ExportError(f"{root}: no exported {dataset} found "
                          f"(expected {dataset}/rig=<id>/date=<YYYY-MM-DD>/*.parquet under it)")
    schema = pa.unify_schemas([s.remove_metadata() for s in schemas] + [_ARCHIVE_PARTITIONING])
    return pa_ds.dataset(base, format="parquet", partitioning=partitioning, schema=schema)
