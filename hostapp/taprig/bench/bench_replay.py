"""``taprig bench replay``: replay as fast as possible of a 64-channel × 2 kHz session, with full reduction.

The session is recorded from the simulated 64-channel rig (``rigs/bench-64.toml``, fan at 60 %) the way the
acquisition loop records one: the link's reads every 10 ms stored as chunks with their host time, through the
real :class:`~taprig.session.store.SessionWriter`. The figure is session time replayed per wall time (decode,
reduction of every scan, nothing printed), as a multiple of real time. Baseline, measured in the same run:
``pandas.read_csv`` merely parsing the same session exported as CSV (every reduced column, Cp and pressure per
tap, raw counts), which replay must beat although it does all the work from the raw bytes.

:func:`record_simulated` is also how the session tests make their recordings.
"""

from __future__ import annotations

import json
import tempfile
import time
import uuid
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import Callable, Sequence

import pandas as pd

from taprig.bench import Record, best_of
from taprig.protocol import Heartbeat, SetActuator, Start, StreamDecoder, channels_to_mask, encode_message
from taprig.reduce import Ambient
from taprig.rig import Calibration, Rig, calibration_to_text, load_rig
from taprig.session.export import export_session
from taprig.session.meta import ambient_to_meta
from taprig.session.replay import Replay
from taprig.session.store import SessionWriter
from taprig.sim import SimOptions, SimulatedDevice

RIG_FILE = Path(__file__).resolve().parents[3] / "rigs" / "bench-64.toml"
RATE_HZ = 2000.0
TARGET_MULTIPLE = 300.0
#: Replay must beat merely parsing the same session's CSV export with pandas.read_csv by this factor.
TARGET_CSV_RATIO = 5.0
#: Host time of the first read in a simulated recording (2024-06-01 12:00 UTC) [ns since the epoch].
HOST_EPOCH_NS = 1_717_243_200_000_000_000
HEARTBEAT_NS = 250_000_000


@dataclass(frozen=True)
class SimulatedRun:
    """What a simulated recording did: the live decoder's counters and the simulator's exact fault tally."""

    counters: dict
    tally: dict


@dataclass(frozen=True)
class Setpoint:
    """An actuator command at a simulated time: ``value`` in SI (radians for an angle)."""

    t_s: float
    actuator: str
    value: float


def _session_meta(rig: Rig, options: SimOptions, start_ns: int) -> dict[str, str]:
    ambient = Ambient(options.ambient_pa, options.ambient_c + 273.15, options.humidity)
    started = datetime.fromtimestamp(start_ns / 1e9, timezone.utc).isoformat()
    return {"software": "taprig bench", "session_id": uuid.uuid4().hex, "rig_id": rig.id, "rig_name": rig.name, "port": f"sim://{rig.id}",
            "started_utc": started, "host_started_ns": str(start_ns), **ambient_to_meta(ambient)}


def record_simulated(rig_path: str | Path, out: str | Path, seconds: float, rate_hz: float = RATE_HZ,
                     options: SimOptions = SimOptions(seed=1), setpoints: Sequence[Setpoint] = (),
                     calibration: Calibration | None = None, read_every_s: float = 0.01,
                     on_chunk: Callable[[int, bytes, list], None] | None = None,
                     start_ns: int = HOST_EPOCH_NS) -> SimulatedRun:
    """Record ``seconds`` of the simulated rig into a new session file ``out``; return counters and fault tally.

    The host reads the board every ``read_every_s``, stores each read as a chunk stamped with simulated host
    time, sends a heartbeat every 250 ms and the ``setpoints`` (each also stored as a ``setpoint`` event at the
    time it is sent). ``on_chunk(host_ns, data, items)`` sees every chunk with the items a live decoder made of
    it, as the acquisition loop's subscribers do.
    """
    rig = load_rig(rig_path)
    device = SimulatedDevice(rig, options)
    writer = SessionWriter(out, _session_meta(rig, options, start_ns))
    writer.add_snapshot("rig", Path(rig_path).name, rig.source_text, start_ns)
    for name, text in rig.attachments.items():
        writer.add_snapshot("section", name, text, start_ns)
    if calibration is not None:
        writer.add_snapshot("calibration", "calibration.toml", calibration_to_text(calibration), start_ns)
    decoder = StreamDecoder()
    seq = 0

    def command(msg, t_ns: int) -> None:
        nonlocal seq
        device.produce_until(t_ns)
        device.receive(encode_message(msg, seq))
        seq += 1

    pending = sorted(setpoints, key=lambda s: s.t_s)
    actuators = {a.name: a for a in rig.actuators}
    command(Start(1, rate_hz, channels_to_mask([c.index for c in rig.channels]), 0), 0)
    step_ns, end_ns = int(read_every_s * 1e9), int(seconds * 1e9)
    for t_ns in range(step_ns, end_ns + step_ns, step_ns):
        while pending and pending[0].t_s * 1e9 <= t_ns:
            sp = pending.pop(0)
            command(SetActuator(seq, actuators[sp.actuator].id, actuators[sp.actuator].to_device(sp.value)), t_ns)
            writer.add_event("setpoint", {"actuator": sp.actuator, "value": sp.value}, start_ns + t_ns)
        if t_ns % HEARTBEAT_NS < step_ns:
            command(Heartbeat(seq), t_ns)
        device.produce_until(t_ns)
        data = device.read()
        if data:
            items = decoder.feed(data)
            writer.append_chunk(data, start_ns + t_ns)
            if on_chunk is not None:
                on_chunk(start_ns + t_ns, data, items)
    counters = decoder.counters.as_dict()
    writer.set_meta("counters", json.dumps(counters, sort_keys=True))
    writer.set_meta("host_stopped_ns", str(start_ns + end_ns))
    writer.set_meta("stopped_utc", datetime.fromtimestamp((start_ns + end_ns) / 1e9, timezone.utc).isoformat())
    writer.close()
    if writer.error is not None:
        raise RuntimeError(writer.error)
    return SimulatedRun(counters, device.tally.as_dict())


def _replay_all(path: Path) -> tuple[int, float, float]:
    """Replay ``path`` as fast as possible; return (scans reduced, setup time [s], replay time [s])."""
    t0 = time.perf_counter()
    with Replay(path) as replay:
        t1 = time.perf_counter()
        scans = sum(step.n_scans for step in replay)
        t2 = time.perf_counter()
    return scans, t1 - t0, t2 - t1


def _median(values: list[float]) -> float:
    return sorted(values)[len(values) // 2]


def run(quick: bool) -> list[Record]:
    """Record a session from the simulated 64-channel rig, then time fast replay and ``pandas.read_csv``.

    Replay is timed without its setup (parsing the rig snapshot, building the reducer and its panel model), a
    fixed cost per session reported on its own: the multiple of real time is what a long session replays at.
    """
    seconds, repeats = (3.0, 1) if quick else (20.0, 3)
    with tempfile.TemporaryDirectory(prefix="taprig-bench-replay-") as tmp:
        session, csv = Path(tmp) / "bench.taprig", Path(tmp) / "bench.csv"
        record_simulated(RIG_FILE, session, seconds, RATE_HZ, SimOptions(seed=7), [Setpoint(0.0, "fan", 0.6)])
        runs = [_replay_all(session) for _ in range(repeats)]
        scans = runs[0][0]
        result = export_session(session, csv, "csv")
        if result.scans != scans:
            raise AssertionError(f"export wrote {result.scans} scans, replay reduced {scans}")
        t_csv = best_of(lambda: pd.read_csv(csv), repeats)
        csv_mb = csv.stat().st_size / 1e6
    t_setup, t_replay = _median([r[1] for r in runs]), _median([r[2] for r in runs])
    multiple, csv_multiple = seconds / t_replay, seconds / t_csv
    return [
        Record("replay 64 ch × 2 kHz, full reduction vs pandas.read_csv of its export", multiple, "× real time",
               csv_multiple, multiple / csv_multiple,
               f"≥ {TARGET_MULTIPLE:g}× real time and ≥ {TARGET_CSV_RATIO:g}× read_csv",
               met=multiple >= TARGET_MULTIPLE and multiple / csv_multiple >= TARGET_CSV_RATIO),
        Record("replay 64 ch × 2 kHz, scans reduced", scans / t_replay, "scans/s", scans / t_csv, t_csv / t_replay),
        Record("replay setup per session (rig snapshot, reducer)", t_setup, "s"),
        Record("CSV export of the same session, size", csv_mb, "MB"),
    ]
