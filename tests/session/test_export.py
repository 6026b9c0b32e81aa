"""Export: documented columns, values equal to the replay, streaming, points, archives, refusals; the notebook API."""

from __future__ import annotations

import json
from pathlib import Path

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
from taprig.session.export import (
    ExportError, block_table, export_partitioned, export_session, open_archive, points_path, scan_schema,
)
from taprig.session.replay import Replay, ReplayBlock
from taprig.session.store import SessionReader, SessionWriter
from taprig.sim import SimOptions

RIGS = Path(__file__).resolve().parents[2] / "rigs"
AIRFOIL = RIGS / "naca0012-20tap.toml"
VENTURI = RIGS / "venturi-8.toml"
DAY_NS = 86_400 * 10**9
# docs/session-format.md, "Exports": the leading columns in order
DOCUMENTED = ["t_s", "host_t_s", "scan", "q_pa", "v_ms", "re", "mach", "alpha_deg", "cl", "cd_p", "cm_qc", "flags"]


def record(path: Path, rig=AIRFOIL, start_ns=HOST_EPOCH_NS, seconds=1.0, fan="fan") -> Path:
    record_simulated(rig, path, seconds, 400.0, SimOptions(seed=5, fan_rate=0.0, fan_tau=0.1), [Setpoint(0.0, fan, 0.9)], start_ns=start_ns)
    return path


@pytest.fixture(scope="module")
def session(tmp_path_factory) -> Path:
    """A one-second airfoil session with two captured points (recorded the way the acquisition loop does)."""
    base = tmp_path_factory.mktemp("export")
    raw = record(base / "plain.taprig")
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
    for i, label in enumerate(("alpha 0 a", "alpha 0 b")):
        window = slice(-100 * (i + 1), scans.n_scans - 100 * i)
        mean = reducer.reduce_mean(RawBlock(scans.counts[window], scans.channels, scans.t_ns[window],
                                            scans.scan_index[window]))
        writer.add_point(label, point_record(mean, 0.1), HOST_EPOCH_NS + (800 + i) * 10**6)
    writer.add_event("note", {"text": "steady"}, HOST_EPOCH_NS + 5 * 10**8)
    writer.close()
    return path


@pytest.fixture(scope="module")
def replayed(session):
    with Replay(session) as replay:
        return [b for s in replay for b in s.blocks], replay.start_ns, replay.first_t_ns


def column(blocks, getter) -> np.ndarray:
    return np.concatenate([getter(b) for b in blocks])


def check_values(frame: pd.DataFrame, replayed) -> None:
    """The exported table holds exactly the replay's numbers (doubles survive CSV text: shortest round trip)."""
    blocks, start_ns, t0 = replayed
    assert len(frame) == sum(b.raw.n_scans for b in blocks)
    assert np.array_equal(frame["scan"].to_numpy(), column(blocks, lambda b: b.raw.scan_index))
    assert np.array_equal(frame["t_s"].to_numpy(), column(blocks, lambda b: (b.raw.t_ns - t0) / 1e9))
    assert np.array_equal(frame["host_t_s"].to_numpy(), column(blocks, lambda b: (b.host_ns - start_ns) / 1e9))
    for name in ("q_pa", "cl", "cd_p", "cm_qc"):
        assert np.array_equal(frame[name].to_numpy(float), column(blocks, lambda b: getattr(b.reduced, name)),
                              equal_nan=True), name
    assert np.array_equal(frame["flags"].to_numpy(), column(blocks, lambda b: b.reduced.scan_flags))
    tap = blocks[0].reduced.tap_names[3]
    assert np.array_equal(frame[f"cp.{tap}"].to_numpy(float), column(blocks, lambda b: b.reduced.cp[:, 3]),
                          equal_nan=True)
    assert np.array_equal(frame["counts.p_total"].to_numpy(float),
                          column(blocks, lambda b: b.raw.counts[:, b.raw.channels.index(1)]))


def test_csv_has_the_documented_columns_and_the_replay_values(tmp_path, session, replayed):
    out = tmp_path / "run.csv"
    result = export_session(session, out, "csv")
    frame = pd.read_csv(out)
    assert list(frame.columns[:len(DOCUMENTED)]) == DOCUMENTED
    rig = Replay(session).rig
    tail = [c for c in frame.columns if c.startswith("counts.")]
    assert tail == [f"counts.{c.name}" for c in sorted(rig.channels, key=lambda c: c.index)]
    assert {f"cp.{t.name}" for t in rig.taps} <= set(frame.columns)
    assert {f"p_pa.{t.name}" for t in rig.taps} <= set(frame.columns)
    check_values(frame, replayed)
    assert result.scans == len(frame) and result.points == 2 and result.points_path == points_path(out)


def test_parquet_keeps_native_types_in_row_groups(tmp_path, session, replayed, monkeypatch):
    monkeypatch.setattr(export_mod, "ROW_GROUP_ROWS", 128)  # stream in many small row groups
    out = tmp_path / "run.parquet"
    export_session(session, out, "parquet")
    meta = pq.ParquetFile(out).metadata
    assert meta.num_row_groups >= 3
    table = pq.read_table(out)
    schema = table.schema
    assert schema.field("scan").type == pa.int64() and schema.field("flags").type == pa.uint16()
    assert schema.field("counts.p_total").type == pa.uint16() and schema.field("q_pa").type == pa.float64()
    check_values(table.to_pandas(), replayed)


def test_points_table_is_flattened(tmp_path, session):
    out = tmp_path / "run.csv"
    export_session(session, out, "csv")
    points = pd.read_csv(points_path(out))
    assert list(points["label"]) == ["alpha 0 a", "alpha 0 b"]
    assert points["host_t_s"].tolist() == [0.8, 0.801]
    with SessionReader(session) as reader:
        stored = reader.points()[0].data
    assert points.loc[0, "q_pa"] == stored["q_pa"]
    first_tap = next(t for t, v in stored["cp"].items() if v is not None)
    assert points.loc[0, f"cp.{first_tap}"] == stored["cp"][first_tap]
    assert json.loads(points.loc[0, "t_ns"]) == stored["t_ns"]  # a list cell is JSON text in CSV


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


def test_existing_outputs_are_refused_unless_forced(tmp_path, session):
    out = tmp_path / "run.csv"
    out.write_text("keep me")
    with pytest.raises(ExportError, match="already exists.*--force"):
        export_session(session, out, "csv")
    assert out.read_text() == "keep me"
    export_session(session, out, "csv", force=True)
    assert out.read_text().startswith("t_s,host_t_s,scan,")


@pytest.mark.parametrize("where", ["missing/run.csv", "file.txt/run.csv", "adir"])
def test_outputs_that_cannot_be_written(tmp_path, session, where):
    (tmp_path / "file.txt").write_text("x")
    (tmp_path / "adir").mkdir()
    with pytest.raises(ExportError):
        export_session(session, tmp_path / where, "csv")
    assert not list(tmp_path.rglob("*.partial"))


def test_partitioned_archive_reads_as_one_dataset(tmp_path, session):
    day2 = record(tmp_path / "second-day.taprig", start_ns=HOST_EPOCH_NS + DAY_NS)
    flow = record(tmp_path / "flow.taprig", rig=VENTURI, fan="blower")
    root = tmp_path / "archive"
    results = export_partitioned([session, day2, flow], root)
    assert (root / "rig=naca0012-20tap" / "date=2024-06-01" / "with-points.parquet").is_file()
    assert (root / "rig=naca0012-20tap" / "date=2024-06-02" / "second-day.parquet").is_file()
    assert (root / "_points" / "rig=naca0012-20tap" / "date=2024-06-01" / "with-points.parquet").is_file()
    dataset = open_archive(root)
    table = dataset.to_table()
    assert table.num_rows == sum(r.scans for r in results)
    by_rig = table.group_by("rig").aggregate([("scan", "count")]).to_pydict()
    assert dict(zip(by_rig["rig"], by_rig["scan_count"])) == {
        "naca0012-20tap": results[0].scans + results[1].scans, "venturi-8": results[2].scans}
    venturi = dataset.to_table(filter=pa_ds.field("rig") == "venturi-8")
    # one schema for all: a column of one rig reads as null in the rows of the other
    assert venturi.column("mass_flow_kg_s").null_count == 0 and venturi.column("cp.U01").null_count == venturi.num_rows
    airfoil = dataset.to_table(filter=pa_ds.field("rig") == "naca0012-20tap")
    assert airfoil.column("mass_flow_kg_s").null_count == airfoil.num_rows
    # a plain Hive read (what another engine does) sees the same partitions
    plain = pa_ds.dataset(root, format="parquet", partitioning="hive")
    assert plain.to_table(filter=pa_ds.field("date") == "2024-06-02").num_rows == results[1].scans
    with pytest.raises(ExportError, match="already exists"):
        export_partitioned([session], root)


def test_open_session_gives_dataframes(session, replayed):
    with taprig.open_session(session) as s:
        assert s.meta["rig_id"] == "naca0012-20tap" and s.rig.id == "naca0012-20tap"
        scans = s.scans()
        check_values(scans, replayed)
        assert list(scans.columns[:len(DOCUMENTED)]) == DOCUMENTED
        assert pd.concat(list(s.iter_scans()), ignore_index=True).equals(scans)
        events = s.events()
        assert list(events["kind"]) == ["setpoint", "note"] and events["data"][1] == {"text": "steady"}
        assert s.points()["label"].tolist() == ["alpha 0 a", "alpha 0 b"]
        assert s.counters["frames"] > 0 and s.counters["crc_errors"] == 0
        summary = s.summary()
        assert summary["scans"] == len(scans) and summary["points"] == 2 and summary["events"] == 2


def test_the_session_itself_is_never_an_output_even_forced(tmp_path, session):
    own = tmp_path / "own.taprig"
    own.write_bytes(session.read_bytes())
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


def test_a_failed_rename_into_place_is_an_export_error(tmp_path, session, monkeypatch):
    real_replace = export_mod.os.replace

    def failing_replace(src, dst):
        if Path(src).name.endswith(".partial"):
            raise OSError(18, "Invalid cross-device link")
        real_replace(src, dst)

    monkeypatch.setattr(export_mod.os, "replace", failing_replace)
    with pytest.raises(ExportError, match="run.csv: cannot write .*cross-device"):
        export_session(session, tmp_path / "run.csv", "csv")
    assert list(tmp_path.iterdir()) == []  # neither the output nor its .partial is left behind
