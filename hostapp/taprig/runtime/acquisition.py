"""The acquisition loop: link → recorder (every chunk) and → reducer → hub; commands the other way.

The link's reader thread hands each chunk to :meth:`Acquisition._on_chunk`, which queues it for the session
writer (nothing recorded is ever skipped) and for the reduction thread. The reduction thread reduces every sample
block, keeps a bounded window of recent raw blocks for point capture, and publishes a :class:`LiveState` to the
hub. If reduction ever falls behind, display updates are skipped and counted (``display_skipped``); the record is
unaffected.
"""

from __future__ import annotations

import json
import math
import queue
import threading
import time
import uuid
from collections import deque
from dataclasses import asdict, dataclass, field
from datetime import datetime, timezone
from typing import Callable

from taprig import __version__
from taprig.link import Link, LinkError, LinkEvent, LinkEventKind
from taprig.protocol import Description, DeviceState, Log, RawBlock, Status, channels_to_mask
from taprig.reduce import ReducedBlock, ReducedMean, Reducer, ScanFlag, finite_mean
from taprig.protocol import ActuatorKind
from taprig.rig import Calibration, Rig, build_calibration, calibration_to_text, wind_off_zero
from taprig.runtime.hub import Hub
from taprig.session.meta import ambient_to_meta
from taprig.session.replay import AngleSchedule
from taprig.session.store import SessionWriter


class AcquisitionError(Exception):
    """A run that cannot start or a command that cannot be carried out, with a message for the operator."""


@dataclass(frozen=True)
class LiveState:
    """What a viewer needs to draw the run now: the newest reduced block and the state around it."""

    host_ns: int
    block: ReducedBlock | None
    counters: dict
    link_state: str
    setpoints: dict[str, float]
    scans: int
    recording: dict
    display_skipped: int
    last_log: str = ""

    def summary(self) -> dict:
        """A few numbers of this state for the hub's trend history (block means; NaN where there are none)."""
        b = self.block
        out = {"host_ns": self.host_ns, "scans": self.scans, "frames": self.counters.get("frames", 0)}
        if b is not None:
            out["t_ns"] = int(b.t_ns[-1])
            out.update({name: finite_mean(getattr(b, name)) for name in ("q_pa", "v_ms", "alpha_rad", "cl", "cd_p", "cm_qc")})
        return out


@dataclass
class _Window:
    """Recent raw blocks, bounded by device time, for point capture and zeroing."""

    seconds: float
    blocks: deque = field(default_factory=deque)

    def add(self, block: RawBlock) -> None:
        if self.blocks and block.t_ns[0] < self.blocks[-1].t_ns[-1]:
            self.blocks.clear()  # device time went back: the board restarted, older scans are another stream
        self.blocks.append(block)
        newest = block.t_ns[-1]
        while self.blocks and newest - self.blocks[0].t_ns[-1] > self.seconds * 1e9:
            self.blocks.popleft()

    def last(self, seconds: float) -> RawBlock | None:
        if not self.blocks:
            return None
        newest = self.blocks[-1].t_ns[-1]
        chosen = [b for b in self.blocks if newest - b.t_ns[0] <= seconds * 1e9]
        return RawBlock.concat(chosen or [self.blocks[-1]])


class Acquisition:
    """One live run: a link, a reducer, optionally a session writer, and a hub for viewers.

    The link must not be open yet: the acquisition subscribes first, so the handshake bytes (the device's
    self-description) are in the record too and a replay can decode from the first byte.

    ``on_block(host_ns, reduced)``, if given, sees every reduced block on the reduction thread (the hub only keeps
    the newest); keep it short. At most ``reduce_backlog`` chunks wait for reduction: if reduction falls further
    behind, the newest chunks are recorded and kept for points but not reduced for display (``display_skipped``).
    """

    def __init__(self, link: Link, rig: Rig, reducer: Reducer, writer: SessionWriter | None = None,
                 hub: Hub | None = None, window_s: float = 30.0,
                 on_block: Callable[[int, ReducedBlock], None] | None = None, reduce_backlog: int = 32):
        self.link = link
        self.on_block = on_block
        self.rig = rig
        self.writer = writer
        self.hub: Hub[LiveState] = hub or Hub(summarize=LiveState.summary)
        self.description: Description | None = None
        self.setpoints: dict[str, float] = {a.name: a.safe for a in rig.actuators}
        # What a chunk is reduced with is chosen by the chunk's host time, by the same rules as replay
        # (docs/session-format.md, Replay): so a replay of the record is bit-identical to the live run.
        self._schedule_lock = threading.Lock()
        self._angles = AngleSchedule(rig)
        self._reducers: list[tuple[int, Reducer]] = [(0, reducer)]
        self.scans = 0
        self.display_skipped = 0
        self.link_state = "closed"
        self.last_log = ""
        self.device_state: DeviceState | None = None  # from the board's latest STATUS
        self._window = _Window(window_s)
        self._window_lock = threading.Lock()
        self._work: queue.Queue = queue.Queue(maxsize=reduce_backlog)
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run_reduction, name="taprig-reduction", daemon=True)
        self._stream: tuple[float, int] | None = None  # (rate, mask) once streaming
        self._unsubscribe = link.subscribe(self._on_chunk, self._on_link_event)

    # -- starting and stopping ----------------------------------------------------------------------------
    def open(self, rate_hz: float) -> Description:
        """Open the link, check the board against the rig, and start streaming the rig's channels at ``rate_hz``."""
        try:
            self.description = self.link.open()
        except LinkError as exc:
            self._unsubscribe()
            raise AcquisitionError(str(exc)) from None
        differences = self.rig.differences(self.description)
        if differences:
            self.link.close()
            raise AcquisitionError(
                f"the board on {self.link.port_name} does not match rig {self.rig.id!r}: " + "; ".join(differences))
        if self.writer is not None:
            self.writer.set_meta("device_description", _description_json(self.description))
        self._thread.start()
        mask = channels_to_mask([c.index for c in self.rig.channels])
        try:
            self.link.start_stream(rate_hz, channel_mask=mask)
        except LinkError as exc:
            self.close()
            raise AcquisitionError(f"the board refused to start at {rate_hz:g} Hz: {exc}") from None
        self._stream = (rate_hz, mask)
        self.event("start", {"rate_hz": rate_hz, "channel_mask": mask})
        return self.description

    def close(self) -> None:
        """Stop streaming, send the actuators to safe values, close the link and the session file."""
        self._stream = None
        if self.link.connected:
            for actuator in self.rig.actuators:
                try:
                    self.set_actuator(actuator.name, actuator.safe)
                except AcquisitionError:
                    pass  # the board's watchdog brings it to safe values anyway once the heartbeat stops
            try:
                self.link.stop_stream()
            except LinkError:
                pass
        self.link.close()
        self._unsubscribe()
        self._stop.set()
        if self._thread.is_alive():
            self._thread.join(5)
        if self.writer is not None:
            _finish(self.writer, self.link.counters.as_dict())
        self.hub.close()

    # -- recording on demand -----------------------------------------------------------------------------------
    def attach_writer(self, writer: SessionWriter) -> None:
        """Start recording into ``writer`` mid-run (its metadata and rig snapshot already written).

        The record starts with what a replay needs to reduce it as the live run did: the board's self-description
        (so the samples decode without the handshake's bytes), the calibration in force and every setpoint now.
        """
        if self.writer is not None:
            raise AcquisitionError(f"already recording to {self.writer.path}")
        if self.description is not None:
            writer.set_meta("device_description", _description_json(self.description))
        calibration = self.reducer.calibration
        if calibration is not None:
            writer.add_snapshot("calibration", "in force when recording started", calibration_to_text(calibration))
        with self._schedule_lock:
            host_ns = time.time_ns()
            for name, value in self.setpoints.items():
                writer.add_event("setpoint", {"actuator": name, "value": value}, host_ns)
            if self._stream is not None:
                writer.add_event("start", {"rate_hz": self._stream[0], "channel_mask": self._stream[1]}, host_ns)
            self.writer = writer

    def detach_writer(self) -> SessionWriter | None:
        """Stop recording mid-run: close the session file with its counters; returns the closed writer."""
        writer, self.writer = self.writer, None
        if writer is not None:
            _finish(writer, self.link.counters.as_dict())
        return writer

    # -- commands and operator events -----------------------------------------------------------------------
    def set_actuator(self, name: str, value: float) -> None:
        """Drive an actuator (value in SI: radians for an angle) and record the setpoint as an event."""
        actuator = next((a for a in self.rig.actuators if a.name == name), None)
        if actuator is None:
            raise AcquisitionError(f"rig {self.rig.id!r} has no actuator {name!r}; it has "
                                   + ", ".join(a.name for a in self.rig.actuators))
        if not actuator.min <= value <= actuator.max:
            raise AcquisitionError(f"{name}: {value:g} is outside its range {actuator.min:g} … {actuator.max:g}")
        previous = self.setpoints[name]
        self._stamp_setpoint(actuator, value)
        try:
            self.link.set_actuator(actuator.id, actuator.to_device(value))
        except LinkError as exc:
            self._stamp_setpoint(actuator, previous, refused=True)
            raise AcquisitionError(f"{name}: the board did not take {value:g}: {exc}") from None

    def _stamp_setpoint(self, actuator, value: float, refused: bool = False) -> None:
        with self._schedule_lock:
            host_ns = time.time_ns()
            if actuator.kind is ActuatorKind.ANGLE:
                self._angles.add(host_ns, value)
            self.setpoints[actuator.name] = value
            data = {"actuator": actuator.name, "value": value}
            self.event("setpoint", {**data, "refused": True} if refused else data, host_ns)

    @property
    def reducer(self) -> Reducer:
        """The reducer in force now (the newest calibration)."""
        return self._reducers[-1][1]

    def _reduction_for(self, host_ns: int) -> tuple[Reducer, float | None]:
        with self._schedule_lock:
            reducer = next(r for t, r in reversed(self._reducers) if t <= host_ns)
            return reducer, self._angles.at(host_ns)

    @property
    def alpha_rad(self) -> float | None:
        """The angle of attack now: the setpoint of the rig's angle actuator, if it has one."""
        servo = self.rig.actuator_of_kind(ActuatorKind.ANGLE)
        return None if servo is None else self.setpoints[servo.name]

    def event(self, kind: str, data: dict, host_ns: int | None = None) -> None:
        """Record an operator event in the session (if recording)."""
        if self.writer is not None:
            self.writer.add_event(kind, data, host_ns)

    def note(self, text: str) -> None:
        """Record a note from the operator."""
        self.event("note", {"text": text})

    def recent(self, seconds: float) -> RawBlock | None:
        """The raw scans of the last ``seconds`` of device time (bounded by the window), or None before data."""
        with self._window_lock:
            return self._window.last(seconds)

    def check_flow(self, seconds: float = 0.5) -> None:
        """Raise :class:`AcquisitionError` unless most scans of the last ``seconds`` have flow (q above no-flow).

        Says why when it can tell: the board's watchdog tripped (actuators at safe values), or the link is down.
        """
        block = self.recent(seconds)
        if block is None:
            raise AcquisitionError(f"no data (link {self.link_state})")
        reduced = self._reduction_for(time.time_ns())[0].reduce(block, alpha_rad=self.alpha_rad)
        flowing = (reduced.scan_flags & ScanFlag.NO_FLOW) == 0
        if flowing.mean() > 0.5:
            return
        reason = "check the fan, its supply and any interlock"
        if self.device_state is DeviceState.SAFE:
            reason = ("the board's watchdog tripped and holds the actuators at their safe values (the host's "
                      "heartbeat did not reach it in time)")
        q = finite_mean(reduced.q_pa)
        raise AcquisitionError(f"no flow (q = {q:.1f} Pa): {reason}")

    def capture_point(self, label: str, seconds: float = 2.0) -> ReducedMean:
        """Average the last ``seconds`` into a point with uncertainties, record it and return it."""
        block = self.recent(seconds)
        if block is None or block.n_scans < 2:
            raise AcquisitionError("no data yet to capture a point from")
        mean = self.reducer.reduce_mean(block, alpha_rad=self.alpha_rad)
        if self.writer is not None:
            self.writer.add_point(label, point_record(mean, seconds))
        return mean

    def zero(self, seconds: float = 2.0, note: str = "") -> Calibration:
        """Take a wind-off zero of every channel from the last ``seconds``, apply it and record it.

        The spans of the calibration in force are kept; only the zeros change (absolute channels keep theirs).
        """
        block = self.recent(seconds)
        if block is None or block.n_scans < 2:
            raise AcquisitionError("no data yet to take a zero from")
        names = [self.rig.channel(i).name for i in block.channels]
        calibration = build_calibration(self.rig, names, datetime.now(timezone.utc), zero=wind_off_zero(block.counts),
                                        operator_note=note or "wind-off zero")
        if self.reducer.calibration is not None:  # keep the spans of the calibration in force
            calibration = self.reducer.calibration.with_zero(calibration)
        reducer = self.reducer.with_calibration(calibration)
        with self._schedule_lock:
            host_ns = time.time_ns()
            self._reducers.append((host_ns, reducer))
            self.event("zero", {"channels": names, "zero_counts": [float(x) for x in block.counts.mean(axis=0)]},
                       host_ns)
            if self.writer is not None:
                self.writer.add_snapshot("calibration", "wind-off zero", calibration_to_text(calibration), host_ns)
        return calibration

    # -- the link's threads -------------------------------------------------------------------------------
    def _on_chunk(self, chunk: bytes, host_ns: int, items: list) -> None:
        writer = self.writer  # once: recording may be stopped from another thread meanwhile
        if writer is not None:
            writer.append_chunk(chunk, host_ns)
        if self.link_state in ("connected", "restored") and any(isinstance(i, Description) for i in items):
            self._schedule_resume()  # the board rebooted under a live link (a reset): it is idle and safe now
        blocks = [item for item in items if isinstance(item, RawBlock)]
        if blocks:
            with self._window_lock:
                for block in blocks:
                    self._window.add(block)
            self.scans += sum(b.n_scans for b in blocks)
        try:
            self._work.put_nowait((host_ns, items))
        except queue.Full:
            self.display_skipped += 1

    def _schedule_resume(self) -> None:
        # Not on the reader thread: the START's reply arrives through that very thread.
        if self._stream is not None:
            threading.Thread(target=self._resume, name="taprig-resume", daemon=True).start()

    def _resume(self) -> None:
        """Restart streaming after the board rebooted; actuators stay at their safe values until set again.

        Safety: a board that restarted has put its fan and servo to safe values (PROTOCOL.md §4). Driving them
        back unasked could surprise someone who just reached into the rig, so only the stream is resumed.
        """
        for actuator in self.rig.actuators:
            self._stamp_setpoint(actuator, actuator.safe)
        rate, mask = self._stream
        try:
            self.link.start_stream(rate, channel_mask=mask)
        except LinkError as exc:
            self.last_log = f"could not restart the stream after the board restarted: {exc}"
            return
        self.event("resumed", {"rate_hz": rate, "channel_mask": mask, "actuators": "safe values"})
        self.last_log = "the board restarted: streaming resumed, actuators at safe values until set again"

    def _on_link_event(self, event: LinkEvent) -> None:
        self.link_state = event.kind.value
        if event.kind is LinkEventKind.RESTORED:
            self._schedule_resume()  # a replugged board has rebooted and waits to be started again
        if self.writer is not None and event.kind is not LinkEventKind.RETRY:
            self.writer.add_link_event(event.kind.value, event.detail or event.port, event.host_time_ns)

    def _run_reduction(self) -> None:
        while not self._stop.is_set():
            try:
                host_ns, items = self._work.get(timeout=0.1)
            except queue.Empty:
                continue
            latest = None
            reducer, alpha = self._reduction_for(host_ns)
            for item in items:
                if isinstance(item, RawBlock):
                    latest = reducer.reduce(item, alpha_rad=alpha)
                    if self.on_block is not None:
                        self.on_block(host_ns, latest)
                elif isinstance(item, Log):
                    self.last_log = item.text
                elif isinstance(item, Status):
                    self.device_state = DeviceState(item.state)
            if latest is not None:
                self.hub.publish(self._state(host_ns, latest))

    def _state(self, host_ns: int, block: ReducedBlock) -> LiveState:
        recording = {}
        if self.writer is not None:
            recording = {"path": str(self.writer.path), "committed_chunks": self.writer.committed_chunks,
                         "error": self.writer.error}
        return LiveState(host_ns, block, self.link.counters.as_dict(), self.link_state, dict(self.setpoints),
                         self.scans, recording, self.display_skipped, self.last_log)


def session_meta(rig: Rig, port: str, ambient) -> dict[str, str]:
    """The metadata a recording starts with (docs/session-format.md)."""
    return {"software": f"taprig {__version__}", "session_id": uuid.uuid4().hex, "rig_id": rig.id, "rig_name": rig.name, "port": port,
            "started_utc": datetime.now(timezone.utc).isoformat(), "host_started_ns": str(time.time_ns()),
            **ambient_to_meta(ambient)}


def _coefficients(c) -> dict | None:
    return None if c is None else {k: v for k, v in vars(c).items()}


def point_record(mean: ReducedMean, seconds: float) -> dict:
    """A captured point as JSON-able data for the session's points table (SI; NaN as null)."""
    def num(x):
        return None if x is None or not math.isfinite(x) else float(x)

    return {
        "window_s": seconds, "n_scans": mean.n_scans, "used_scans": mean.used_scans, "t_ns": list(mean.t_ns),
        "q_pa": num(mean.q_pa), "u_q_pa": num(mean.u_q_pa), "v_ms": num(mean.v_ms), "re": num(mean.re),
        "alpha_rad": num(mean.alpha_rad), "flags": mean.flag_names,
        "cp": {t: num(c) for t, c in zip(mean.tap_names, mean.cp)},
        "u_cp": {t: num(c) for t, c in zip(mean.tap_names, mean.u_cp)},
        "plain": _coefficients(mean.plain), "shape": _coefficients(mean.shape),
        "corrected": _coefficients(mean.corrected),
        "lift_n": num(mean.lift_n), "cl_balance": num(mean.cl_balance), "mass_flow_kg_s": num(mean.mass_flow_kg_s),
    }


def _finish(writer: SessionWriter, counters: dict) -> None:
    """Close a session file with the link's counters and the stop time."""
    writer.set_meta("counters", _json(counters))
    writer.set_meta("stopped_utc", datetime.now(timezone.utc).isoformat())
    writer.set_meta("host_stopped_ns", str(time.time_ns()))
    writer.close()


def _json(obj) -> str:
    return json.dumps(obj, sort_keys=True)


def _description_json(description: Description) -> str:
    return _json(asdict(description))
