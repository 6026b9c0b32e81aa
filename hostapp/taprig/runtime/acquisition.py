"""The acquisition loop: link → recorder (every chunk) and → reducer → hub; commands the other way.

The link's reader thread hands each chunk to :meth:`Acquisition._on_chunk`, which queues it for the session
writer (nothing recorded is ever skipped) and for the reduction thread, and watches for the board going safe on
its own (a halt: see :attr:`Acquisition.halt_reason`). The reduction thread reduces every sample
block, keeps a bounded window of recent raw blocks for point capture, and publishes a :class:`LiveState` to the
hub. If reduction ever falls behind, display updates are skipped and counted (``display_skipped``); the record is
unaffected.

Every ending of a run, normal or not, goes through :meth:`Acquisition.shutdown`: actuators to their safe values
with the replies awaited within a bound, the stream stopped, the link and the session closed, and a ``shutdown``
event recording what was sent and what the board acknowledged.
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
from taprig.analysis.unsteady import tap_fluctuation
from taprig.link import Link, LinkError, LinkEvent, LinkEventKind
from taprig.link.errors import CommandRefusedError, CommandTimeoutError
from taprig.protocol import Description, DeviceState, Log, RawBlock, Reply, ReplyCode, Status, channels_to_mask
from taprig.reduce import ReducedBlock, ReducedMean, Reducer, ScanFlag, finite_mean
from taprig.protocol import ActuatorKind
from taprig.rig import Calibration, Rig, build_calibration, calibration_to_text, wind_off_zero
from taprig.runtime.hub import Hub
from taprig.session.meta import ambient_to_meta
from taprig.session.replay import AngleSchedule
from taprig.session.store import SessionWriter


class AcquisitionError(Exception):
    """A run that cannot start or a command that cannot be carried out, with a message for the operator."""


#: A paced run's allowance for the host to decide [s of device time]: a command decided on the scans up to a device
#: time t acts at t + this (docs/sweeps.md, Device time).
DECISION_S = 0.5
#: A paced stream starts on a whole second of the board's clock, at least DECISION_S after the open [s].
START_GRID_S = 1.0
#: Longest wait for the board's reply to each safe value sent at shutdown [s].
SHUTDOWN_REPLY_S = 2.0
#: How long the ending waits for a link lost a moment before it to be made again, so the safe values reach the
#: board [s].
RELINK_WAIT_S = 2.0


@dataclass(frozen=True)
class ActuatorOutcome:
    """What happened to one actuator at shutdown: its safe value [SI], and whether it was sent and acknowledged."""

    name: str
    value: float
    unit: str
    sent: bool
    acknowledged: bool
    detail: str = ""

    def as_dict(self) -> dict:
        return asdict(self)


@dataclass(frozen=True)
class ShutdownReport:
    """How a run ended: the reason, each actuator's safe value and its fate, the stream and the session."""

    reason: str
    actuators: tuple[ActuatorOutcome, ...]
    link_up: bool
    stream_stopped: bool
    session_closed: bool | None  # None when nothing was recorded
    watchdog_ms: int | None
    halt_reason: str | None

    @property
    def all_acknowledged(self) -> bool:
        return self.link_up and all(a.acknowledged for a in self.actuators)

    def lines(self) -> list[str]:
        """What the operator is told, in words (no names of program parts)."""
        out = []
        if self.actuators and self.link_up:
            parts = []
            for a in self.actuators:
                state = "acknowledged" if a.acknowledged else f"NOT acknowledged ({a.detail})"
                parts.append(f"{a.name} {a.value:g}{' ' + a.unit if a.unit else ''} {state}")
            out.append("safe values sent: " + ", ".join(parts))
        if self.actuators and not self.all_acknowledged:
            out.append(self.watchdog_text())
        if self.session_closed is False:
            out.append("the session file could not be closed cleanly; what was committed is kept")
        return out

    def watchdog_text(self) -> str:
        names = " and ".join(a.name for a in self.actuators) or "the actuators"
        when = (f"within {self.watchdog_ms} ms of the last heartbeat" if self.watchdog_ms
                else "only if its firmware has a watchdog (this board advertises none): switch it off at its supply")
        if not self.link_up:
            return f"the link to the board is down, so nothing could be sent: the board's watchdog sets {names} " \
                   f"to their safe values {when}; check the rig before anyone reaches in"
        return f"not every safe value was acknowledged: the board's watchdog sets {names} to their safe values " \
               f"{when} once taprig has let go of the link; check the rig before anyone reaches in"


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

    def between(self, start_ns: int, end_ns: int) -> RawBlock | None:
        """The scans with start_ns ≤ t < end_ns [device ns], whatever blocks they came in; None if there are none."""
        chosen = [b for b in self.blocks if b.t_ns[-1] >= start_ns and b.t_ns[0] < end_ns]
        if not chosen:
            return None
        block = RawBlock.concat(chosen)
        keep = (block.t_ns >= start_ns) & (block.t_ns < end_ns)
        if keep.all():
            return block
        return RawBlock(block.counts[keep], block.channels, block.t_ns[keep], block.scan_index[keep])

    def last(self, seconds: float) -> RawBlock | None:
        """The scans of the newest ``seconds`` of device time, newest_t − seconds < t ≤ newest_t, whatever blocks
        they came in (a block that began earlier gives its tail: a large block is not left out whole, nor taken
        whole). A board restart has already emptied the window (:meth:`add`)."""
        if not self.blocks:
            return None
        newest = int(self.blocks[-1].t_ns[-1])
        first = newest - seconds * 1e9
        chosen = []
        for b in reversed(self.blocks):  # newest first, back to the first block that began early enough
            chosen.append(b)
            if b.t_ns[0] <= first:
                break
        block = RawBlock.concat(chosen[::-1])
        keep = block.t_ns > first
        if keep.all():
            return block
        return RawBlock(block.counts[keep], block.channels, block.t_ns[keep], block.scan_index[keep])


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
        self._hand_angle: float | None = None
        #: The record of the newest captured point (:meth:`capture_point`), None before the first.
        self.last_record: dict | None = None
        self._reducers: list[tuple[int, Reducer]] = [(0, reducer)]
        self.scans = 0
        self.display_skipped = 0
        self.link_state = "closed"
        self.last_log = ""
        #: What the operator is told once the run is open (the caller shows them): e.g. a board without a safe hold.
        self.notices: list[str] = []
        self.device_state: DeviceState | None = None  # from the board's latest STATUS
        self._window = _Window(window_s)
        self._window_lock = threading.Condition()
        # For each recent command's reply (by request id): the newest scan of the first block that came after it
        # on the link, None until one has (under the window lock; see :meth:`acted_by_ns`).
        self._after_reply: dict[int, int | None] = {}
        self._awaiting_block: list[int] = []
        #: Each actuator's newest command: (its request id, the board's clock after its reply or None).
        self._commanded: dict[str, tuple[int | None, int | None]] = {}
        self._paced = False
        #: Device time [ns] at which a paced stream starts (:meth:`open`), None otherwise.
        self.stream_start_ns: int | None = None
        # The newest reduced blocks with what reduced them (reducer, angle): the display's means reuse them
        self._reduced: deque = deque()
        self._reduced_lock = threading.Lock()
        self._work: queue.Queue = queue.Queue(maxsize=reduce_backlog)
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run_reduction, name="taprig-reduction", daemon=True)
        self._stream: tuple[float, int] | None = None  # (rate, mask) once streaming
        # The halt: the board went safe on its own; nothing automated may move an actuator until the operator
        # clears it (CONTRACTS.md, Halt). The first cause wins.
        self.halt_reason: str | None = None
        self.halted = threading.Event()
        self._halt_lock = threading.Lock()
        self._driven = False  # the board holds an actuator away from its safe value by our command
        self._last_state: DeviceState | None = None  # the board's previous STATUS state (reader thread)
        # An ending asked for (a signal, the operator): automated steps stop at their next check.
        self.stop_reason: str | None = None
        self._reduction_failure: str | None = None
        self._record_from_ns = 0  # chunks that arrived before this host time are not recorded (attach_writer)
        self.stop_requested = threading.Event()
        self._shutdown_lock = threading.Lock()
        self._shutting_down = threading.Event()
        self.shutdown_report: ShutdownReport | None = None
        self._unsubscribe = link.subscribe(self._on_chunk, self._on_link_event)

    # -- starting and stopping ----------------------------------------------------------------------------
    def open(self, rate_hz: float, paced: bool = False) -> Description:
        """Open the link, check the board against the rig, and start streaming the rig's channels at ``rate_hz``.

        ``paced``: on a board that can be paced in device time (the simulated one, :attr:`paced`), the stream
        starts on the first whole second of the board's clock at least ``DECISION_S`` ahead, and the board waits
        there (in compressed time) until the caller moves the horizon on (:meth:`pace`): so a sweep's scans are
        the same in real and in compressed time. Elsewhere ``paced`` changes nothing."""
        try:
            self.description = self.link.open()
        except LinkError as exc:
            self._unsubscribe()
            raise AcquisitionError(str(exc)) from None
        differences = self.rig.differences(self.description)
        if differences:
            self.link.close()
            raise AcquisitionError(
                f"the board on {self.link.port_name} does not match rig {self.rig.id!r} "
                f"({len(differences)} difference{'s' if len(differences) > 1 else ''}):"
                + "".join(f"\n  - {d}" for d in differences))
        if self.writer is not None:
            self.writer.set_meta("device_description", _description_json(self.description))
        self._end_safe_hold_at_open()
        self._thread.start()
        mask = channels_to_mask([c.index for c in self.rig.channels])
        pacing = self.link.pacing if paced else None
        if pacing is not None:
            grid = START_GRID_S * 1e9
            self.stream_start_ns = math.ceil((pacing.board_time_ns() + DECISION_S * 1e9) / grid) * grid
            pacing.set_horizon(self.stream_start_ns)
            self._paced = True
        try:
            self.link.start_stream(rate_hz, channel_mask=mask)
        except LinkError as exc:
            self.close()
            raise AcquisitionError(f"the board refused to start at {rate_hz:g} Hz: {exc}") from None
        self._stream = (rate_hz, mask)
        self.event("start", {"rate_hz": rate_hz, "channel_mask": mask})
        return self.description

    def _end_safe_hold_at_open(self) -> None:
        """A run the operator started may move what they ask: end a safe hold the board kept from before (a
        watchdog trip of an earlier run, PROTOCOL.md §4). No setpoint has been decided yet, so none can be stale.
        A 1.0 board has no hold: the operator is told that only the host's own check guards it after a trip."""
        if self.link.board_holds_safe:
            try:
                self.link.allow_moves()
            except LinkError as exc:
                self.close()
                raise AcquisitionError(f"the board did not end its safe hold at the start of the run: {exc}") \
                    from None
            return
        d = self.description
        self.notices.append(f"the board's firmware speaks protocol {d.proto_major}.{d.proto_minor}: after a "
                            "watchdog trip it obeys the next setpoint, so only taprig's own check stops a stale one; "
                            "update the firmware (protocol 1.1 adds the safe hold)")
        self.event("board without safe hold", {"protocol": f"{d.proto_major}.{d.proto_minor}"})

    def close(self) -> ShutdownReport:
        """End the run: the same single path as :meth:`shutdown`, for a normal ending."""
        return self.shutdown("run ended")

    @property
    def shutting_down(self) -> bool:
        """True once :meth:`shutdown` has begun."""
        return self._shutting_down.is_set()

    def shutdown(self, reason: str, reply_timeout_s: float = SHUTDOWN_REPLY_S) -> ShutdownReport:
        """The one way every run ends: actuators to safe values, stream stopped, link and session closed.

        Each actuator's safe value is sent and its reply awaited for at most ``reply_timeout_s``; what was sent
        and acknowledged is recorded as a ``shutdown`` event before the session is closed, and returned. Safe to
        call from any thread and more than once: a second call waits for the first and returns its report.
        Nothing here raises for a dead link or board: the report says what could not be done.
        """
        with self._shutdown_lock:
            if self.shutdown_report is not None:
                return self.shutdown_report
            self._shutting_down.set()
            self._stream = None  # no stream restart after a board reset from here on
            self.pace(None)  # the safe values act at once on a paced board, and supersede any move still waiting
            link_up = self.link.connected or self._await_link(RELINK_WAIT_S)
            outcomes = []
            if self._thread.ident is not None:  # the run was opened (a run that never opened moved nothing)
                outcomes = [self._send_safe(a, link_up, reply_timeout_s) for a in self._safe_order()]
            stream_stopped = False
            if link_up and self.link.connected:
                try:
                    self.link.stop_stream(timeout=reply_timeout_s)
                    stream_stopped = True
                except LinkError:
                    pass
            self.link.close()
            self._unsubscribe()
            self._stop.set()
            if self._thread.is_alive():
                self._thread.join(5)
            description = self.description
            watchdog_ms = description.heartbeat_timeout_ms if description is not None else None
            closed = None
            writer = self.writer
            if writer is not None:
                writer.add_event("shutdown", {"reason": reason, "link_up": link_up, "stream_stopped": stream_stopped,
                                              "halt_reason": self.halt_reason,
                                              "actuators": [o.as_dict() for o in outcomes]})
                writer.set_meta("stop_reason", reason)
                _finish(writer, self.link.counters.as_dict())
                closed = writer.closed
            self.hub.close()
            self.shutdown_report = ShutdownReport(reason, tuple(outcomes), link_up, stream_stopped, closed,
                                                  watchdog_ms or None, self.halt_reason)
            return self.shutdown_report

    def _safe_order(self):
        """The actuators in the order they are made safe: the fan (the flow, the danger) before the rest."""
        return sorted(self.rig.actuators, key=lambda a: a.kind is not ActuatorKind.FAN)

    def _await_link(self, timeout_s: float) -> bool:
        """Whether a link lost a moment ago (within ``RELINK_WAIT_S``: a host that froze and woke, a quick replug)
        is made again within ``timeout_s``, so that the safe values still reach the board; a link lost for longer,
        or one that does not reconnect, is not waited for."""
        lost_ns = self.link.lost_since_ns
        if not (self.link.reconnect and self.link.running) or lost_ns is None \
                or time.time_ns() - lost_ns > RELINK_WAIT_S * 1e9:
            return False
        deadline = time.monotonic() + timeout_s
        while not self.link.connected and time.monotonic() < deadline:
            time.sleep(0.02)
        return self.link.connected

    def _send_safe(self, actuator, link_up: bool, timeout: float) -> ActuatorOutcome:
        unit = "deg" if actuator.kind is ActuatorKind.ANGLE else actuator.unit
        shown = math.degrees(actuator.safe) if actuator.kind is ActuatorKind.ANGLE else actuator.safe
        if not link_up or not self.link.connected:
            return ActuatorOutcome(actuator.name, shown, unit, False, False, "link down")
        self._stamp_setpoint(actuator, actuator.safe)
        try:
            self.link.set_actuator(actuator.id, self._device_value(actuator, actuator.safe), timeout=timeout)
        except CommandTimeoutError:
            return ActuatorOutcome(actuator.name, shown, unit, True, False, f"no reply within {timeout:g} s")
        except CommandRefusedError as exc:
            return ActuatorOutcome(actuator.name, shown, unit, True, False, f"refused: {exc.detail or exc.code}")
        except LinkError:
            return ActuatorOutcome(actuator.name, shown, unit, False, False, "link down")
        return ActuatorOutcome(actuator.name, shown, unit, True, True)

    # -- halting and stopping ---------------------------------------------------------------------------------
    def _halt(self, reason: str, host_ns: int | None = None, board_safe: bool = True) -> None:
        """Note that the board went safe on its own (first cause wins); automated sequences stop at once."""
        with self._halt_lock:
            if self.halt_reason is not None:
                return
            self.halt_reason = reason
            self._driven = False
            self.halted.set()
        self.last_log = reason
        self.event("halt", {"reason": reason}, host_ns)
        if board_safe:
            for actuator in self.rig.actuators:  # the board holds them at their safe values now (PROTOCOL.md §4)
                self._stamp_setpoint(actuator, actuator.safe, by_board=True)

    def clear_halt(self) -> None:
        """Allow setpoints again after a halt: only on an explicit action of the operator.

        A board that keeps a safe hold after a watchdog trip (PROTOCOL.md §4, 1.1) is sent ``ALLOW_MOVES`` first:
        the operator's resume is the one request that ends it. If it is refused or unanswered the halt stands
        (:class:`AcquisitionError`). With the link down nothing can be sent: the halt is cleared, and a board that
        still holds refuses the next move (which halts again, saying so)."""
        if self.link.board_holds_safe and self.link.connected:
            try:
                self.link.allow_moves()
            except LinkError as exc:
                raise AcquisitionError(f"the board did not end its safe hold, so the halt stands: {exc}") from None
            self.event("allow_moves", {"by": "operator"})
        with self._halt_lock:
            reason, self.halt_reason = self.halt_reason, None
            self.halted.clear()
        if reason is not None:
            self.event("halt_cleared", {"reason": reason})

    def request_stop(self, reason: str) -> None:
        """Ask the run to end (a signal, the operator): automated steps stop at their next check, and no new
        setpoint other than a safe value is sent. The caller then calls :meth:`shutdown`."""
        if self.stop_reason is None:
            self.stop_reason = reason
            self.event("stop_requested", {"reason": reason})
        self.stop_requested.set()

    def check_running(self) -> None:
        """Raise :class:`AcquisitionError` with the true cause if the run is halted, stopping or shut down."""
        if self.halted.is_set():
            raise AcquisitionError(self.halt_reason or "the board went safe")
        if self.stop_requested.is_set():
            raise AcquisitionError(self.stop_reason or "stopped")
        if self._shutting_down.is_set():
            raise AcquisitionError("the run is ending")

    def _watchdog_s(self) -> float:
        d = self.description
        return d.heartbeat_timeout_ms / 1000 if d is not None and d.heartbeat_timeout_ms else 0.0

    def _last_look(self, quiet_s: float) -> None:
        """The check just before a setpoint's bytes go out (under the link's send lock): refuse it if the run is
        halted or ending, or if the host has been quiet longer than the board's watchdog time (it froze after
        deciding to send)."""
        self._halt_if_stalled(quiet_s)
        self.check_running()

    def _halt_if_stalled(self, quiet_s: float) -> None:
        timeout = self._watchdog_s()
        if self._driven and timeout > 0 and self.link.heartbeat_enabled and quiet_s > timeout:
            self._halt(f"taprig was held up for {quiet_s:.1f} s without a heartbeat to the board (longer than its "
                       f"watchdog time of {timeout:g} s), so the board's watchdog set {self._actuator_names()} to "
                       "their safe values; nothing more is sent until the operator resumes")

    def _check_host_stall(self) -> None:
        """Halt if the host sent the board nothing for longer than its watchdog time while it held an actuator
        away from safe: the watchdog has tripped (or is about to), whether or not its report has been read yet."""
        if self._watchdog_s() <= 0 or not self.link.heartbeat_enabled:  # no heartbeats: the caller feeds it
            return
        self._halt_if_stalled(self.link.take_longest_quiet())  # taken (and started afresh) also while not driving

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
            # the record starts here: a chunk read a moment before, still on its way, is left out, so every chunk
            # recorded lies after the setpoints above and replays at the angle the live run used
            self._record_from_ns = host_ns
            self.writer = writer

    def detach_writer(self) -> SessionWriter | None:
        """Stop recording mid-run: close the session file with its counters; returns the closed writer."""
        writer, self.writer = self.writer, None
        if writer is not None:
            _finish(writer, self.link.counters.as_dict())
        return writer

    # -- commands and operator events -----------------------------------------------------------------------
    def set_actuator(self, name: str, value: float, at_t_ns: int | None = None) -> None:
        """Drive an actuator (value in SI: radians for an angle) and record the setpoint as an event.

        ``at_t_ns``: the device time at which a paced run's command acts (the horizon it set), recorded with the
        setpoint (with ``late`` when scans past it had arrived before the command went out). Without it, on a
        paced run, the horizon is cleared first: a command from anyone else (the operator's page) acts at once."""
        actuator = next((a for a in self.rig.actuators if a.name == name), None)
        if actuator is None:
            raise AcquisitionError(f"rig {self.rig.id!r} has no actuator {name!r}; it has "
                                   + ", ".join(a.name for a in self.rig.actuators))
        if not actuator.min <= value <= actuator.max:
            raise AcquisitionError(f"{name}: {value:g} is outside its range {actuator.min:g} … {actuator.max:g}")
        safe = value == actuator.safe
        if not safe:  # a safe value may always be sent; anything else only while the run is going and not halted
            self._check_host_stall()
        previous = self.setpoints[name]
        if at_t_ns is None:
            self.pace(None)
        timing = None
        if at_t_ns is not None:
            newest = self.newest_t_ns
            timing = {"at_t_ns": int(at_t_ns), "late": newest is not None and newest >= at_t_ns}
        # The look at the halt and the setpoint's record are one step against _halt: a host frozen between them
        # (the halt noted on waking) cannot record a move as decided after the halt it had not yet seen.
        with self._halt_lock:
            if not safe:
                self.check_running()
            self._stamp_setpoint(actuator, value, timing=timing)
        try:
            reply = self.link.set_actuator(actuator.id, self._device_value(actuator, value),
                                           guard=None if safe else self._last_look)
        except AcquisitionError:  # withheld at the last moment: the host froze or the board went safe meanwhile
            self._stamp_setpoint(actuator, previous, refused=True)
            raise
        except LinkError as exc:
            self._stamp_setpoint(actuator, previous, refused=True)
            if isinstance(exc, CommandRefusedError) and exc.code == ReplyCode.BUSY and self.link.board_holds_safe:
                # PROTOCOL.md §4: the board tripped its watchdog and holds its safe state; this setpoint (decided
                # before the host heard of the trip, or sent after a freeze) moved nothing
                self._halt(f"the board's watchdog tripped and holds {self._actuator_names()} at their safe values; "
                           f"it refused {name} {value:g} and nothing moved; nothing more is sent until the operator "
                           "checks the rig and resumes")
                raise AcquisitionError(f"{name} not set to {value:g}: {self.halt_reason}") from None
            # The reply may have been held up by the very thing that made the board safe (a frozen host, a
            # reset): let the reader catch up a moment so the operator hears the true cause.
            if self.halted.wait(0.25):
                raise AcquisitionError(f"{name} not set to {value:g}: {self.halt_reason}") from None
            raise AcquisitionError(f"{name}: the board did not take {value:g}: {exc}") from None
        self._commanded[name] = (getattr(reply, "req", None), self.board_time_ns(paced_only=False))
        if not safe:
            self._driven = True

    def acted_by_ns(self, name: str, timeout_s: float) -> int | None:
        """A device time [ns] by which the board had acted on the newest command to actuator ``name``: the time
        from which its move may be counted without counting any of the time before it.

        A board acts on ``SET_ACTUATOR`` before it replies (PROTOCOL.md §3: the reply says what it did), and a
        block of scans goes out once its last scan is taken; so the newest scan of the first block that reaches
        the host after the reply was taken after the command acted. A board whose clock the port can read (the
        simulated one) gives it directly: its clock read after the reply. On a paced board the command acts at its
        chosen time or, when it arrived late, on arrival: the caller takes the later of that time and this one.

        Waits (at most ``timeout_s`` of wall time beyond the board's own pace) for that block on a board without a
        readable clock; :class:`AcquisitionError` when the run halts or stops meanwhile, or no block comes. None
        when no command to ``name`` was acknowledged in this run."""
        req, clock_ns = self._commanded.get(name, (None, None))
        if clock_ns is not None:
            return clock_ns
        if req is None:
            return None
        deadline = time.monotonic() + timeout_s
        with self._window_lock:
            while True:
                after = self._after_reply.get(req)
                if after is not None:
                    return after
                if time.monotonic() >= deadline:
                    break
                self.check_running()  # the board went safe, or the run is ending: stop waiting, say why
                self._window_lock.wait(min(0.2, max(0.0, deadline - time.monotonic())))
        self.check_running()
        raise AcquisitionError(f"no scans came after the board took the {name} setpoint within {timeout_s:g} s "
                               f"(link {self.link_state}): when its move began is not known")

    def _device_value(self, actuator, value: float) -> float:
        """``value`` [SI] in the board's unit; the rig's safe value is sent as the board's own safe value from its
        description (the same within the rig check's tolerance), bit for bit, so a board in its safe hold, which
        compares at f32, always takes it."""
        if value == actuator.safe and self.description is not None:
            info = next((a for a in self.description.actuators if a.id == actuator.id), None)
            if info is not None:
                return info.safe
        return actuator.to_device(value)

    def _stamp_setpoint(self, actuator, value: float, refused: bool = False, by_board: bool = False,
                        timing: dict | None = None) -> None:
        with self._schedule_lock:
            host_ns = time.time_ns()
            if actuator.kind is ActuatorKind.ANGLE:
                self._angles.add(host_ns, value)
            self.setpoints[actuator.name] = value
            data = {"actuator": actuator.name, "value": value}
            if refused:
                data["refused"] = True
            if by_board:
                data["by"] = "board"
            if timing:
                data.update(timing)
            self.event("setpoint", data, host_ns)

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
        """The angle of attack now: the setpoint of the rig's angle actuator, if it has one; else the angle the
        operator last set by hand (:meth:`set_angle_by_hand`), if any."""
        servo = self.rig.actuator_of_kind(ActuatorKind.ANGLE)
        return self._hand_angle if servo is None else self.setpoints[servo.name]

    def set_angle_by_hand(self, value: float) -> None:
        """The operator set the model to ``value`` [rad] by hand (a rig with no angle actuator): nothing is sent
        to the board; the angle is recorded as a ``hand angle`` event and used by the reduction from now on, live
        and in a replay."""
        if self.rig.actuator_of_kind(ActuatorKind.ANGLE) is not None:
            raise AcquisitionError(f"rig {self.rig.id!r} sets its angle with its servo, not by hand")
        if not math.isfinite(value):
            raise AcquisitionError(f"an angle set by hand must be a finite number, got {value}")
        with self._schedule_lock:
            host_ns = time.time_ns()
            self._angles.add(host_ns, value)
            self._hand_angle = float(value)
            self.event("hand angle", {"value": float(value)}, host_ns)

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

    def recent_reduced(self, seconds: float) -> tuple[Reducer, float | None, list[ReducedBlock]] | None:
        """The newest reduced blocks covering the last ``seconds`` of device time, all reduced by one reducer at
        one angle and in an unbroken run of scans, with that reducer and angle; None when there are none such (a
        calibration or angle changed within them, or reduction skipped a chunk)."""
        with self._reduced_lock:
            if not self._reduced:
                return None
            reducer, alpha, newest = self._reduced[-1]
            first_ns = int(newest.t_ns[-1]) - seconds * 1e9
            chosen = []
            for r, a, block in reversed(self._reduced):
                if block.t_ns[0] < first_ns:
                    break
                if r is not reducer or a != alpha or (chosen and block.scan_index[-1] + 1 != chosen[-1].scan_index[0]):
                    return None
                chosen.append(block)
        return (reducer, alpha, chosen[::-1]) if chosen else None

    def _keep_reduced(self, reducer: Reducer, alpha: float | None, block: ReducedBlock) -> None:
        """Keep ``block`` among the newest reduced blocks (about the last two seconds of device time)."""
        if block.n_scans == 0:
            return
        with self._reduced_lock:
            kept = self._reduced
            if kept and block.t_ns[0] < kept[-1][2].t_ns[-1]:
                kept.clear()  # device time went back: the board restarted, older scans are another stream
            kept.append((reducer, alpha, block))
            while len(kept) > 1 and block.t_ns[-1] - kept[0][2].t_ns[-1] > 2e9:
                kept.popleft()

    def check_flow(self, seconds: float = 0.5, window: tuple[int, int] | None = None) -> None:
        """Raise :class:`AcquisitionError` unless most scans of the last ``seconds`` (or of the device-time
        ``window`` [start, end) ns) have flow (q above no-flow).

        Says why when it can tell: the board's watchdog tripped (actuators at safe values), or the link is down.
        """
        self.check_running()
        block = self._scans(seconds, window)
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

    def capture_point(self, label: str, seconds: float = 2.0, extra: dict | None = None,
                      window: tuple[int, int] | None = None) -> ReducedMean:
        """Average the last ``seconds`` (or the scans of the device-time ``window`` [start, end) ns, a sweep's
        exact window) into a point with uncertainties, record it and return it.

        The record (:func:`point_record`, with each tap's Cp fluctuation over the window) gets ``extra``'s fields
        too (a sweep's setpoints and leg); :attr:`last_record` keeps it.
        """
        block = self._scans(seconds, window)
        self.check_running()  # after taking the scans: a halt is noted before any scan that follows it arrives
        if block is None or block.n_scans < 2:
            raise AcquisitionError("no data yet to capture a point from")
        reducer, alpha = self.reducer, self.alpha_rad
        mean = reducer.reduce_mean(block, alpha_rad=alpha)
        reduced = reducer.reduce(block, alpha_rad=alpha)
        record = point_record(mean, seconds)
        if window is not None:
            record["window_ns"] = [int(window[0]), int(window[1])]
        record["cp_rms"] = {t: _finite_or_none(v) for t, v in
                            zip(reduced.tap_names, tap_fluctuation(reduced.cp, reduced.q_pa))}
        record["setpoints"] = {name: float(v) for name, v in self.setpoints.items()}
        record.update(extra or {})
        self.last_record = record
        if self.writer is not None:
            self.writer.add_point(label, record)
        return mean

    def zero(self, seconds: float = 2.0, note: str = "", window: tuple[int, int] | None = None) -> Calibration:
        """Take a wind-off zero of every channel from the last ``seconds`` (or the device-time ``window``
        [start, end) ns), apply it and record it.

        The spans of the calibration in force are kept; only the zeros change (absolute channels keep theirs).
        """
        block = self._scans(seconds, window)
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

    # -- device time -------------------------------------------------------------------------------------------
    @property
    def paced(self) -> bool:
        """True when this run paces the board in device time (opened ``paced`` on a board that can be)."""
        return self._paced and self.link.pacing is not None

    def pace(self, board_ns: float | None) -> None:
        """On a paced run: the next commands act at board-clock time ``board_ns`` [ns], and in compressed time the
        board runs no further until the horizon moves on; None lets it run free. Elsewhere nothing."""
        pacing = self.link.pacing if self._paced else None
        if pacing is not None:
            try:
                pacing.set_horizon(board_ns)
            except Exception:  # a port lost meanwhile: the reader notices and the run halts
                pass

    def board_time_ns(self, paced_only: bool = True) -> int | None:
        """The board's clock now [ns] on a paced run (the simulated board's own), else None; with ``paced_only``
        False, whenever the port can tell it (the simulated board, paced or not)."""
        pacing = self.link.pacing if self._paced or not paced_only else None
        if pacing is None:
            return None
        try:
            return int(pacing.board_time_ns())
        except Exception:  # a port lost meanwhile: the reader notices and the run halts
            return None

    @property
    def newest_t_ns(self) -> int | None:
        """Device time of the newest scan received [ns], or None before any."""
        with self._window_lock:
            blocks = self._window.blocks
            return int(blocks[-1].t_ns[-1]) if blocks else None

    def wait_through(self, t_ns: int, timeout_s: float) -> None:
        """Block until a scan at device time ``t_ns`` or later has arrived, so every scan before it is here.

        :class:`AcquisitionError` when the run halts or is stopped meanwhile (the cause), or when no such scan
        arrives within ``timeout_s`` of wall time beyond the device time still to go."""
        newest = self.newest_t_ns
        to_go = 0.0 if newest is None else max(0.0, (t_ns - newest) / 1e9)
        deadline = time.monotonic() + timeout_s + to_go
        with self._window_lock:
            while True:
                blocks = self._window.blocks
                if blocks and int(blocks[-1].t_ns[-1]) >= t_ns:
                    return
                if time.monotonic() >= deadline:
                    break
                self.check_running()  # the board went safe, or the run is ending: stop waiting, say why
                self._window_lock.wait(min(0.2, max(0.0, deadline - time.monotonic())))
        self.check_running()
        raise AcquisitionError(f"no data for {timeout_s:g} s while waiting for the flow to settle (link {self.link_state})")

    def scans_between(self, start_ns: int, end_ns: int) -> RawBlock | None:
        """The raw scans with start_ns ≤ t < end_ns [device ns] (within the kept window), or None."""
        with self._window_lock:
            return self._window.between(start_ns, end_ns)

    def _scans(self, seconds: float, window: tuple[int, int] | None) -> RawBlock | None:
        return self.recent(seconds) if window is None else self.scans_between(*window)

    # -- the link's threads -------------------------------------------------------------------------------
    def _on_chunk(self, chunk: bytes, host_ns: int, items: list) -> None:
        blocks = [item for item in items if isinstance(item, RawBlock)]
        n_scans = sum(b.n_scans for b in blocks)
        writer = self.writer  # once: recording may be stopped from another thread meanwhile
        if writer is not None and host_ns >= self._record_from_ns:  # not a chunk read before recording began
            writer.append_chunk(chunk, host_ns, n_scans)
        self._watch_safety(items, host_ns)  # before the scans are kept: no point may use scans after a halt
        if self.link_state in ("connected", "restored") and any(isinstance(i, Description) for i in items):
            self._schedule_resume()  # the board rebooted under a live link (a reset): it is idle and safe now
        if blocks or any(isinstance(item, Reply) for item in items):
            with self._window_lock:
                for item in items:  # in the order the board sent them: a reply, then the blocks after it
                    if isinstance(item, Reply):
                        self._after_reply[item.req] = None
                        self._awaiting_block.append(item.req)
                        while len(self._after_reply) > 256:  # only recent commands are asked about
                            del self._after_reply[next(iter(self._after_reply))]
                    elif isinstance(item, RawBlock):
                        self._window.add(item)
                        for req in self._awaiting_block:
                            if req in self._after_reply:
                                self._after_reply[req] = int(item.t_ns[-1])
                        self._awaiting_block.clear()
                self._window_lock.notify_all()
            self.scans += n_scans
        try:
            self._work.put_nowait((host_ns, items))
        except queue.Full:
            self.display_skipped += 1

    def _watch_safety(self, items: list, host_ns: int) -> None:
        """Halt when the board reports it went safe on its own: a watchdog STATUS or LOG, or a reboot."""
        self._check_host_stall()
        live = self.link_state in ("connected", "restored")
        for item in items:
            if isinstance(item, Status):
                try:
                    state = DeviceState(item.state)
                except ValueError:  # a state this host does not know: not news of a halt
                    state = None
                previous, self._last_state = self._last_state, state
                self.device_state = state
                # A board powers up safe (PROTOCOL.md §4): SAFE is news only after it was not, or after we drove it.
                if state is DeviceState.SAFE and (self._driven or previous not in (None, DeviceState.SAFE)):
                    self._halt(f"the board's watchdog tripped and set {self._actuator_names()} to their safe "
                               "values (no heartbeat from taprig reached it in time); nothing more is sent until "
                               "the operator resumes", host_ns)
            elif isinstance(item, Log) and item.level >= 30 and _is_watchdog_text(item.text):
                self._halt(f"the board's watchdog tripped and set {self._actuator_names()} to their safe values "
                           f"(board: {item.text.strip()}); nothing more is sent until the operator resumes", host_ns)
            elif isinstance(item, Description) and live:
                self._last_state = None
                self._halt(f"the board restarted (a reset, a power dip or a crash) and set "
                           f"{self._actuator_names()} to their safe values; nothing more is sent until the "
                           "operator resumes", host_ns)

    def _actuator_names(self) -> str:
        names = [a.name for a in self.rig.actuators]
        return " and ".join(names) if len(names) < 3 else ", ".join(names[:-1]) + " and " + names[-1]

    def _schedule_resume(self) -> None:
        # Not on the reader thread: the START's reply arrives through that very thread.
        if self._stream is not None:
            threading.Thread(target=self._resume, name="taprig-resume", daemon=True).start()

    def _resume(self) -> None:
        """Restart streaming after the board rebooted; actuators stay at their safe values until set again.

        Safety: a board that restarted has put its fan and servo to safe values (PROTOCOL.md §4). Driving them
        back unasked could surprise someone who just reached into the rig, so only the stream is resumed (the
        halt that came with the reboot or the loss has recorded the safe values and stops automated steps).
        """
        stream = self._stream
        if stream is None or self._shutting_down.is_set():
            return  # the run is ending
        rate, mask = stream
        try:
            self.link.start_stream(rate, channel_mask=mask)
        except LinkError as exc:
            self.last_log = f"could not restart the stream after the board restarted: {exc}"
            return
        self.event("resumed", {"rate_hz": rate, "channel_mask": mask, "actuators": "safe values"})
        self.last_log = "the board restarted: streaming resumed, actuators at safe values until set again"

    def _on_link_event(self, event: LinkEvent) -> None:
        if event.kind is LinkEventKind.RESET:  # the board rebooted; the link itself stays up
            if self.writer is not None:
                self.writer.add_link_event(event.kind.value, event.detail or event.port, event.host_time_ns)
            return
        self.link_state = event.kind.value
        if event.kind is LinkEventKind.LOST and not self._shutting_down.is_set():
            timeout = self._watchdog_s()
            within = f"within {timeout:g} s" if timeout else "if its firmware has a watchdog"
            self._halt(f"the link to the board on {event.port} was lost (unplugged, or the board stopped "
                       f"answering); its watchdog sets {self._actuator_names()} to their safe values {within}; "
                       "nothing more is sent until the operator resumes", event.host_time_ns, board_safe=True)
        if event.kind is LinkEventKind.RESTORED:
            self._schedule_resume()  # a replugged board has rebooted and waits to be started again
        if self.writer is not None and event.kind is not LinkEventKind.RETRY:
            self.writer.add_link_event(event.kind.value, event.detail or event.port, event.host_time_ns)

    @property
    def failure(self) -> str | None:
        """Why the run cannot go on as asked, in plain words, or None: recording stopped (disk full, file
        deleted, writer failed) or reduction stopped. A caller ends the run (or shows it) with this message."""
        if self._reduction_failure is not None:
            return self._reduction_failure
        if self.writer is not None:
            if self.writer.error is not None:
                return self.writer.error
            if not self.writer.alive:
                return f"{self.writer.path}: recording stopped (the writer ended unexpectedly)"
        return None

    def _run_reduction(self) -> None:
        try:
            self._reduce_loop()
        except Exception as exc:  # the live numbers stop: say so; the record is unaffected
            self._reduction_failure = (f"live reduction stopped: {type(exc).__name__}: {exc} (the record is kept; "
                                       "check the rig file's sensor values with taprig check)")
            self.event("failure", {"what": self._reduction_failure})

    def _reduce_loop(self) -> None:
        while not (self._stop.is_set() and self._work.empty()):  # at the end, what was queued is still reduced
            try:
                host_ns, items = self._work.get(timeout=0.1)
            except queue.Empty:
                continue
            latest = None
            reducer, alpha = self._reduction_for(host_ns)
            for item in items:
                if isinstance(item, RawBlock):
                    latest = reducer.reduce(item, alpha_rad=alpha)
                    self._keep_reduced(reducer, alpha, latest)
                    if self.on_block is not None:
                        self.on_block(host_ns, latest)
                elif isinstance(item, Log) and not self.halted.is_set():
                    self.last_log = item.text
            if latest is not None:
                self.hub.publish(self._state(host_ns, latest))

    def _state(self, host_ns: int, block: ReducedBlock) -> LiveState:
        recording = {}
        if self.writer is not None:
            recording = {"path": str(self.writer.path), "committed_chunks": self.writer.committed_chunks,
                         "committed_scans": self.writer.committed_scans, "error": self.writer.error}
        return LiveState(host_ns, block, self.link.counters.as_dict(), self.link_state, dict(self.setpoints),
                         self.scans, recording, self.display_skipped, self.last_log)


def _is_watchdog_text(text: str) -> bool:
    """A LOG line that reports a watchdog trip (the reference firmware's and the simulator's wording)."""
    low = text.lower()
    return "watchdog" in low or "no host frame" in low


def session_meta(rig: Rig, port: str, ambient) -> dict[str, str]:
    """The metadata a recording starts with (docs/session-format.md)."""
    return {"software": f"taprig {__version__}", "session_id": uuid.uuid4().hex, "rig_id": rig.id, "rig_name": rig.name, "port": port,
            "started_utc": datetime.now(timezone.utc).isoformat(), "host_started_ns": str(time.time_ns()),
            **ambient_to_meta(ambient)}


def _finite_or_none(x) -> float | None:
    return float(x) if x is not None and math.isfinite(x) else None


def _coefficients(c) -> dict | None:
    return None if c is None else {k: v for k, v in vars(c).items()}


def point_record(mean: ReducedMean, seconds: float) -> dict:
    """A captured point as JSON-able data for the session's points table (SI; NaN as null)."""
    def num(x):
        return None if x is None or not math.isfinite(x) else float(x)

    return {
        "window_s": seconds, "n_scans": mean.n_scans, "used_scans": mean.used_scans, "t_ns": list(mean.t_ns),
        "q_pa": num(mean.q_pa), "u_q_pa": num(mean.u_q_pa), "v_ms": num(mean.v_ms), "re": num(mean.re),
        "u_v_ms": num(mean.u_v_ms), "u_re": num(mean.u_re),
        "alpha_rad": num(mean.alpha_rad), "flags": mean.flag_names,
        "cp": {t: num(c) for t, c in zip(mean.tap_names, mean.cp)},
        "u_cp": {t: num(c) for t, c in zip(mean.tap_names, mean.u_cp)},
        "plain": _coefficients(mean.plain), "shape": _coefficients(mean.shape),
        "corrected": _coefficients(mean.corrected),
        "wall_alpha_rad": num(mean.wall.alpha) if mean.corrected is not None and mean.wall is not None else None,
        "lift_n": num(mean.lift_n), "cl_balance": num(mean.cl_balance), "u_cl_balance": num(mean.u_cl_balance),
        "mass_flow_kg_s": num(mean.mass_flow_kg_s), "u_mass_flow_kg_s": num(mean.u_mass_flow_kg_s),
        "uncertainty_method": mean.uncertainty_method,
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
