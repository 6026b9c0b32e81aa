"""Export: documented columns, values equal to the replay, streaming, points, archives, refusals; the notebook API.

The tables are read back with the engines our users use: pandas, pyarrow and DuckDB (with the queries
docs/session-format.md shows), and the session's own meta with Python's sqlite3.
"""

from __future__ import annotations

import json
import math
import sqlite3
from pathlib import Path

import duckdb

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.dataset as pa_ds
import pyarrow.parquet as pq
import pytest

import taprig
from taprig.bench.bench_replay import HOST_EPOCH_NS, Setpoint, record_simulated
from taprig.protocol import RawBlock
from taprig.runtime.acquisition import point_record
from taprig.session import export as export_mod
from taprig.reduce import ScanFlag
from taprig.session.export import (
    ExportError, block_table, commanded_deg, export_partitioned, export_session, open_archive, points_path,
    scan_schema, session_id,
)
from taprig.session.replay import Replay, ReplayBlock
from taprig.session.store import SessionReader, SessionWriter
from taprig.sim import SimOptions

RIGS = Path(__file__).resolve().parents[2] / "rigs"
AIRFOIL = RIGS / "naca0012-20tap.toml"
VENTURI = RIGS / "venturi-8.toml"
DAY_NS = 86_400 * 10**9
# docs/session-format.md, "Exports": the leading columns in order
DOCUMENTED = ["session_id", "host_utc", "t_s", "host_t_s", "scan", "q_pa", "v_ms", "re", "mach", "alpha_deg", "cl",
              "cd_p", "cm_qc", "flag_bits", "flag_names"]
#: Reasons a scan's coefficients are missing (docs/session-format.md, "Exports"; docs/reduction.md)
NO_COEFFICIENTS = int(ScanFlag.NO_FLOW | ScanFlag.REFERENCE_INVALID | ScanFlag.NO_INTEGRAL)
# DuckDB's CSV sniffer infers a column's type from a sample of its first 20 480 rows (DuckDB docs, "CSV auto
# detection", sample_size): the commanded -0.5° comes after that many scans, whole-degree angles before it.
SCANS = 22_000
RATE_HZ = 2000.0
ALPHAS_DEG = (12.0, -0.5)


def record(path: Path, rig=AIRFOIL, start_ns=HOST_EPOCH_NS, seconds=1.0, fan="fan", setpoints=None,
           rate_hz=400.0) -> Path:
    setpoints = [Setpoint(0.0, fan, 0.9)] if setpoints is None else setpoints
    record_simulated(rig, path, seconds, rate_hz, SimOptions(seed=5, fan_rate=0.0, fan_tau=0.1), setpoints,
                     start_ns=start_ns)
    return path


@pytest.fixture(scope="module")
def session(tmp_path_factory) -> Path:
    """An 11-second airfoil session with two captured points (recorded the way the acquisition loop does): wind
    off for its first 0.3 s, then at 12° until the last 0.2 s, at -0.5° after that."""
    base = tmp_path_factory.mktemp("export")
    seconds = SCANS / RATE_HZ
    setpoints = [Setpoint(0.1, "alpha", math.radians(ALPHAS_DEG[0])), Setpoint(0.3, "fan", 0.9),
                 Setpoint(seconds - 0.2, "alpha", math.radians(ALPHAS_DEG[1]))]
    raw = record(base / "plain.taprig", seconds=seconds, setpoints=setpoints, rate_hz=RATE_HZ)
    path = base / "with-points.taprig"
    with Replay(raw) as replay:
        blocks = [b.raw for s in replay for b in s.blocks]
        reducer = replay.reducer
        with SessionReader(raw) as src:
            writer = SessionWriter(path, src.meta)
            for kind, name, text in src.snapshots():
                writer.add_snapshot(kind, name, text, HOST_EPOCH_NS)
            for chunk in src.chunks():
                writer.append_chunk(chunk.data, chunk.host_ns)
            for event in src.events():
                writer.add_event(event.kind, event.data, event.host_ns)
    scans = RawBlock.concat(blocks)
    windows = {"wind off": (slice(0, 100), 0.0), "alpha -0.5": (slice(-100, None), ALPHAS_DEG[1])}
    for i, (label, (window, alpha_deg)) in enumerate(windows.items()):
        mean = reducer.reduce_mean(RawBlock(scans.counts[window], scans.channels, scans.t_ns[window],
                                            scans.scan_index[window]), alpha_rad=math.radians(alpha_deg))
        writer.add_point(label, point_record(mean, 0.05), HOST_EPOCH_NS + (800 + i) * 10**6)
    writer.add_event("note", {"text": "steady"}, HOST_EPOCH_NS + 5 * 10**8)
    writer.close()
    return path


@pytest.fixture(scope="module")
def replayed(session):
    with Replay(session) as replay:
        return [b for s in replay for b in s.blocks], replay.start_ns, replay.first_t_ns


def column(blocks, getter) -> np.ndarray:
    return np.concatenate([getter(b) for b in blocks])


def check_values(frame: pd.DataFrame, replayed, session_path: Path) -> None:
    """The exported table holds exactly the replay's numbers (doubles survive CSV text: shortest round trip),
    a missing value (NaN in the reducer) is a null, and the angle is the one commanded."""
    blocks, start_ns, t0 = replayed
    assert len(frame) == sum(b.raw.n_scans for b in blocks)
    with sqlite3.connect(f"file:{session_path}?mode=ro", uri=True) as db:  # the session's meta, read by sqlite3
        meta = dict(db.execute("select key, value from meta").fetchall())
    assert set(frame["session_id"]) == {session_id(meta)}
    utc = pd.to_datetime(frame["host_utc"], utc=True)
    assert np.array_equal(utc.to_numpy("datetime64[ns]").astype(np.int64), column(blocks, lambda b: b.host_ns))
    assert np.array_equal(frame["scan"].to_numpy(), column(blocks, lambda b: b.raw.scan_index))
    assert np.array_equal(frame["t_s"].to_numpy(), column(blocks, lambda b: (b.raw.t_ns - t0) / 1e9))
    assert np.array_equal(frame["host_t_s"].to_numpy(), column(blocks, lambda b: (b.host_ns - start_ns) / 1e9))
    for name in ("q_pa", "cl", "cd_p", "cm_qc"):
        assert np.array_equal(frame[name].to_numpy(float, na_value=np.nan),
                              column(blocks, lambda b: getattr(b.reduced, name)), equal_nan=True), name
    # pandas reads the bit mask as an integer column and uses it as one (`flags` was DataFrame.flags)
    bits = column(blocks, lambda b: b.reduced.scan_flags)
    assert np.array_equal(frame["flag_bits"].to_numpy(), bits)
    assert np.array_equal((frame.flag_bits & int(ScanFlag.NO_FLOW)).to_numpy(), bits & int(ScanFlag.NO_FLOW))
    names = frame["flag_names"].astype(object).where(frame["flag_names"].notna(), None)
    assert list(names) == [("|".join(ScanFlag(int(b)).name.split("|")) if b else None) for b in bits]
    alpha = column(blocks, lambda b: b.reduced.alpha_rad)
    assert np.array_equal(frame["alpha_deg"].to_numpy(float), commanded_deg(alpha))
    assert set(frame["alpha_deg"]) <= {0.0, *ALPHAS_DEG}
    tap = blocks[0].reduced.tap_names[3]
    assert np.array_equal(frame[f"cp.{tap}"].to_numpy(float, na_value=np.nan),
                          column(blocks, lambda b: b.reduced.cp[:, 3]), equal_nan=True)
    assert np.array_equal(frame["counts.p_total"].to_numpy(float),
                          column(blocks, lambda b: b.raw.counts[:, b.raw.channels.index(1)]))


def test_commanded_angles_read_back_as_typed():
    # from memory: 12° and 6° do not survive radians→degrees exactly in IEEE 754 doubles
    assert math.degrees(math.radians(12.0)) != 12.0
    typed = np.array([12.0, 6.0, -0.5, 0.1, 0.3, -15.0, 2.125, 1e-9])
    assert np.array_equal(commanded_deg(np.radians(typed)), typed)


@pytest.fixture(scope="module")
def csv_export(session, tmp_path_factory):
    out = tmp_path_factory.mktemp("csv") / "run.csv"
    return out, export_session(session, out, "csv")


def test_csv_has_the_documented_columns_and_the_replay_values(csv_export, session, replayed):
    out, result = csv_export
    frame = pd.read_csv(out, low_memory=False)
    assert list(frame.columns[:len(DOCUMENTED)]) == DOCUMENTED
    rig = Replay(session).rig
    tail = [c for c in frame.columns if c.startswith("counts.")]
    assert tail == [f"counts.{c.name}" for c in sorted(rig.channels, key=lambda c: c.index)]
    assert {f"cp.{t.name}" for t in rig.taps} <= set(frame.columns)
    assert {f"p_pa.{t.name}" for t in rig.taps} <= set(frame.columns)
    check_values(frame, replayed, session)
    assert result.scans == len(frame) == SCANS and result.points == 2 and result.points_path == points_path(out)
    # no column is shadowed by a DataFrame attribute, so `frame.<column>` is always the column
    assert not {c for c in frame.columns if c.isidentifier()} & set(dir(pd.DataFrame))
    # floats always carry a decimal point or an exponent, missing values are empty cells (no "nan" text)
    header, first = out.read_text().splitlines()[:2]
    cells = dict(zip(header.split(","), first.split(",")))
    assert cells["alpha_deg"] == "0.0" and cells["t_s"] == "0.0" and "nan" not in out.read_text()


def test_duckdb_reads_the_csv_with_the_right_types_and_values(csv_export, replayed):
    out = csv_export[0]
    db = duckdb.connect()
    db.execute(f"create table scans as select * from read_csv('{out}')")  # DuckDB's own type inference
    types = dict(db.execute("select column_name, column_type from (describe scans)").fetchall())
    assert types["alpha_deg"] == "DOUBLE" and types["cl"] == "DOUBLE" and types["t_s"] == "DOUBLE"
    assert types["host_utc"] == "TIMESTAMP WITH TIME ZONE" and types["flag_bits"] in ("BIGINT", "INTEGER")
    by_alpha = dict(db.execute("select alpha_deg, count(*) from scans group by alpha_deg").fetchall())
    blocks = replayed[0]
    alpha = commanded_deg(column(blocks, lambda b: b.reduced.alpha_rad))
    assert by_alpha == {a: int(np.sum(alpha == a)) for a in np.unique(alpha)}
    assert by_alpha[12.0] > 20_480 and by_alpha[-0.5] > 0  # the whole degrees fill DuckDB's sniffing sample
    mean_cl, nulls = db.execute("select avg(cl), count(*) - count(cl) from scans").fetchone()
    cl = column(blocks, lambda b: b.reduced.cl)
    assert mean_cl == pytest.approx(np.nanmean(cl), rel=1e-12) and nulls == np.isnan(cl).sum() > 0
    # every missing coefficient has its reason in the flags
    unexplained = db.execute(f"select count(*) from scans where cl is null and flag_bits & {NO_COEFFICIENTS} = 0")
    assert unexplained.fetchone()[0] == 0
    assert db.execute("select count(*) from scans where flag_names like '%NO_FLOW%'").fetchone()[0] > 0


def test_parquet_keeps_native_types_and_writes_nulls(tmp_path, session, replayed, monkeypatch):
    monkeypatch.setattr(export_mod, "ROW_GROUP_ROWS", 4096)  # stream in several row groups
    out = tmp_path / "run.parquet"
    export_session(session, out, "parquet")
    meta = pq.ParquetFile(out).metadata
    assert meta.num_row_groups >= 3
    table = pq.read_table(out)
    schema = table.schema
    assert schema.field("scan").type == pa.int64() and schema.field("flag_bits").type == pa.uint16()
    assert schema.field("counts.p_total").type == pa.uint16() and schema.field("q_pa").type == pa.float64()
    assert schema.field("host_utc").type == pa.timestamp("ns", tz="UTC")
    assert json.loads(schema.metadata[export_mod.META_KEY])["rig_id"] == "naca0012-20tap"
    check_values(table.to_pandas(), replayed, session)
    cl = table.column("cl")
    assert cl.null_count > 0 and not pa.compute.any(pa.compute.is_nan(cl)).as_py()
    db = duckdb.connect()
    mean_cl, at_12 = db.execute(f"select avg(cl), count(*) filter (where alpha_deg = 12) "
                                f"from read_parquet('{out}')").fetchone()
    blocks = replayed[0]
    assert mean_cl == pytest.approx(np.nanmean(column(blocks, lambda b: b.reduced.cl)), rel=1e-12)
    assert at_12 == int(np.sum(commanded_deg(column(blocks, lambda b: b.reduced.alpha_rad)) == 12.0)) > 0


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
def test_points_follow_the_scans_convention(tmp_path, session, replayed, csv_export, fmt):
    out = csv_export[0] if fmt == "csv" else tmp_path / "run.parquet"
    if fmt == "parquet":
        export_session(session, out, fmt)
    points = pd.read_csv(points_path(out)) if fmt == "csv" else pd.read_parquet(points_path(out))
    assert list(points.columns[:4]) == ["session_id", "host_utc", "host_t_s", "label"]
    assert list(points["label"]) == ["wind off", "alpha -0.5"]
    assert points["host_t_s"].tolist() == [0.8, 0.801]
    with SessionReader(session) as reader:
        stored = [p.data for p in reader.points()]
        sid = session_id(reader.meta)
    assert set(points["session_id"]) == {sid}
    assert points["alpha_deg"].tolist() == [0.0, -0.5] and "alpha_rad" not in points.columns
    assert "flags" not in points.columns and "t_ns" not in points.columns
    # wind off: q is there, the coefficients are null and the reason is in the flags
    assert points.loc[0, "flag_bits"] & int(ScanFlag.NO_FLOW) and "NO_FLOW" in points.loc[0, "flag_names"]
    assert pd.isna(points.loc[0, "plain.cl"]) and stored[0]["plain"] is None or stored[0]["plain"]["cl"] is None
    assert points.loc[1, "q_pa"] == stored[1]["q_pa"] and points.loc[1, "plain.cl"] == stored[1]["plain"]["cl"]
    first_tap = next(t for t, v in stored[1]["cp"].items() if v is not None)
    assert points.loc[1, f"cp.{first_tap}"] == stored[1]["cp"][first_tap]
    # device times on the scan table's clock
    blocks, _, t0 = replayed
    assert points.loc[1, "t_first_s"] == (stored[1]["t_ns"][0] - t0) / 1e9
    assert points.loc[1, "t_last_s"] == column(blocks, lambda b: (b.raw.t_ns - t0) / 1e9)[-1]
    if fmt == "csv":
        db = duckdb.connect()
        types = dict(db.execute(f"select column_name, column_type from (describe select * from "
                                f"read_csv('{points_path(out)}'))").fetchall())
        assert types["alpha_deg"] == "DOUBLE" and types["host_utc"] == "TIMESTAMP WITH TIME ZONE"
        texts = [v for name in points.columns for v in points[name] if isinstance(v, str)]
        assert texts and not any(text.startswith(("[", "{")) for text in texts)  # no list or JSON in a cell


def test_a_block_without_some_channels_leaves_their_cells_empty(session):
    with Replay(session) as replay:
        spec = scan_schema(replay.rig, replay.reducer)
        channels = (0, 1, 2, 3, 22)  # the references (pitot, static, baro) and two taps
        raw = RawBlock(np.full((2, 5), 30000.0), channels, np.arange(2, dtype=np.int64), np.arange(2, dtype=np.int64))
        block = ReplayBlock(raw, replay.reducer.reduce(raw), np.zeros(2, dtype=np.int64))
        table = block_table(block, spec, 0, 0)
    assert table.schema == spec.schema
    names = {c.index: c.name for c in replay.rig.channels}
    assert table.column(f"counts.{names[2]}").to_pylist() == [30000, 30000]
    assert table.column(f"counts.{names[9]}").null_count == 2


def test_existing_outputs_are_refused_unless_forced(tmp_path, small):
    out = tmp_path / "run.csv"
    out.write_text("keep me")
    with pytest.raises(ExportError, match="already exists.*--force"):
        export_session(small, out, "csv")
    assert out.read_text() == "keep me"
    export_session(small, out, "csv", force=True)
    assert out.read_text().startswith("session_id,host_utc,t_s,host_t_s,scan,")


@pytest.fixture(scope="module")
def small(tmp_path_factory) -> Path:
    """A one-second airfoil session."""
    return record(tmp_path_factory.mktemp("small") / "small.taprig")


@pytest.mark.parametrize("where", ["missing/run.csv", "file.txt/run.csv", "adir"])
def test_outputs_that_cannot_be_written(tmp_path, small, where):
    (tmp_path / "file.txt").write_text("x")
    (tmp_path / "adir").mkdir()
    with pytest.raises(ExportError):
        export_session(small, tmp_path / where, "csv")
    assert not list(tmp_path.rglob("*.partial"))


def test_partitioned_archive_reads_as_datasets(tmp_path, session, small):
    day2 = record(tmp_path / "second-day.taprig", start_ns=HOST_EPOCH_NS + DAY_NS)
    flow = record(tmp_path / "flow.taprig", rig=VENTURI, fan="blower")
    root = tmp_path / "archive"
    results = export_partitioned([session, day2, flow, small], root)
    assert (root / "scans" / "rig=naca0012-20tap" / "date=2024-06-01" / "with-points.parquet").is_file()
    assert (root / "scans" / "rig=naca0012-20tap" / "date=2024-06-02" / "second-day.parquet").is_file()
    assert (root / "points" / "rig=naca0012-20tap" / "date=2024-06-01" / "with-points.parquet").is_file()
    dataset = open_archive(root)
    table = dataset.to_table()
    assert table.num_rows == sum(r.scans for r in results)
    by_rig = table.group_by("rig").aggregate([("scan", "count")]).to_pydict()
    assert dict(zip(by_rig["rig"], by_rig["scan_count"])) == {
        "naca0012-20tap": results[0].scans + results[1].scans + results[3].scans, "venturi-8": results[2].scans}
    venturi = dataset.to_table(filter=pa_ds.field("rig") == "venturi-8")
    # one schema for all: a column of one rig reads as null in the rows of the other
    assert venturi.column("cp.U01").null_count == venturi.num_rows
    flowing = pa.compute.equal(pa.compute.bit_wise_and(venturi.column("flag_bits"), NO_COEFFICIENTS), 0)
    assert pa.compute.is_null(venturi.column("mass_flow_kg_s")).to_pylist() == pa.compute.invert(flowing).to_pylist()
    assert venturi.column("mass_flow_kg_s").null_count < venturi.num_rows
    airfoil = dataset.to_table(filter=pa_ds.field("rig") == "naca0012-20tap")
    assert airfoil.column("mass_flow_kg_s").null_count == airfoil.num_rows
    assert open_archive(root, "points").to_table().num_rows == 2
    # a plain Hive read (what another engine does) sees the same partitions
    plain = pa_ds.dataset(root / "scans", format="parquet", partitioning="hive")
    assert plain.to_table(filter=pa_ds.field("date") == "2024-06-02").num_rows == results[1].scans
    # DuckDB, with the queries of docs/session-format.md: a glob over scans/ sees only scans
    db = duckdb.connect()
    one_rig = db.execute(f"select count(*), count(distinct session_id), avg(cl) from read_parquet("
                         f"'{root}/scans/rig=naca0012-20tap/**/*.parquet', hive_partitioning = true)").fetchone()
    assert one_rig[0] == airfoil.num_rows and one_rig[1] == 3 and math.isfinite(one_rig[2])
    per_rig = db.execute(f"select rig, count(*) from read_parquet('{root}/scans/**/*.parquet', "
                         f"hive_partitioning = true, union_by_name = true) group by rig order by rig").fetchall()
    assert per_rig == [("naca0012-20tap", airfoil.num_rows), ("venturi-8", venturi.num_rows)]
    joined = db.execute(f"""
        select p.label, count(s.scan), avg(s.q_pa)
        from read_parquet('{root}/points/**/*.parquet', hive_partitioning = true, union_by_name = true) p
        join read_parquet('{root}/scans/**/*.parquet', hive_partitioning = true, union_by_name = true) s
          on s.session_id = p.session_id and s.t_s between p.t_first_s and p.t_last_s
        group by p.label order by p.label""").fetchall()
    assert [(label, n) for label, n, _ in joined] == [("alpha -0.5", 100), ("wind off", 100)]
    with pytest.raises(ExportError, match="already exists"):
        export_partitioned([session], root)
    with pytest.raises(ExportError, match="no exported points"):
        open_archive(tmp_path, "points")


def test_open_session_gives_dataframes(session, replayed):
    with taprig.open_session(session) as s:
        assert s.meta["rig_id"] == "naca0012-20tap" and s.rig.id == "naca0012-20tap"
        scans = s.scans()
        check_values(scans, replayed, session)
        assert list(scans.columns[:len(DOCUMENTED)]) == DOCUMENTED
        assert pd.concat(list(s.iter_scans()), ignore_index=True).equals(scans)
        events = s.events()
        assert list(events["kind"]) == ["setpoint"] * 3 + ["note"] and events["data"][3] == {"text": "steady"}
        assert s.points()["label"].tolist() == ["wind off", "alpha -0.5"]
        assert s.counters["frames"] > 0 and s.counters["crc_errors"] == 0
        summary = s.summary()
        assert summary["scans"] == len(scans) and summary["points"] == 2 and summary["events"] == 4


def test_the_session_itself_is_never_an_output_even_forced(tmp_path, small):
    own = tmp_path / "own.taprig"
    own.write_bytes(small.read_bytes())
    before = own.read_bytes()
    (tmp_path / "hard.csv").hardlink_to(own)
    for out in (own, Path(f"{own}-wal"), tmp_path / "hard.csv", tmp_path / "." / own.name):
        with pytest.raises(ExportError, match="is the session being exported"):
            export_session(own, out, "csv", force=True)
    # the points table beside the output: run.csv → run.points.csv, here the session's own name
    points_named = tmp_path / "own.points.taprig"
    points_named.write_bytes(before)
    with pytest.raises(ExportError, match="is the session being exported"):
        export_session(points_named, tmp_path / "own.taprig", "csv", force=True)
    assert own.read_bytes() == before and points_named.read_bytes() == before


def test_a_failed_rename_into_place_is_an_export_error(tmp_path, small, monkeypatch):
    real_replace = export_mod.os.replace

    def failing_replace(src, dst):
        if Path(src).name.endswith(".partial"):
            raise OSError(18, "Invalid cross-device link")
        real_replace(src, dst)

    monkeypatch.setattr(export_mod.os, "replace", failing_replace)
    with pytest.raises(ExportError, match="run.csv: cannot write .*cross-device"):
        export_session(small, tmp_path / "run.csv", "csv")
    assert list(tmp_path.iterdir()) == []  # neither the output nor its .partial is left behind


def test_session_ids_are_given_or_derived_from_the_start():
    meta = {"rig_id": "naca0012-20tap", "started_utc": "2024-06-01T12:00:00+00:00", "host_started_ns": "1"}
    assert session_id({**meta, "session_id": "given"}) == "given"
    derived = session_id(meta)
    assert derived == session_id(dict(meta)) and len(derived) == 32  # the same for copies of one file
    assert derived != session_id({**meta, "host_started_ns": "2"})  # another run
