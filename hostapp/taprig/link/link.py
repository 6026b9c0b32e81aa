"""The serial link: one port, one reader thread, one decoder, commands with replies, heartbeat and reconnection.

:class:`Link` is the imperative shell around the pure :class:`taprig.protocol.StreamDecoder`. Its reader thread
reads the port in bulk (:func:`taprig.link.ports.read_available`), feeds each chunk to the decoder it owns, and hands
every subscriber the chunk, its host arrival time and the decoded items, so the recorder keeps the raw bytes and the
reducer gets the blocks from one read. Commands are matched to their ``REPLY`` by request id. A lost device (any
``SerialException``/``OSError`` from read, write or ``in_waiting``) closes the port, is announced, and is reconnected
with capped exponential backoff, by the same path or by USB identity, and confirmed by the uid of the board.
Every wait has a timeout, so no call hangs.
"""

from __future__ import annotations

import collections
import dataclasses
import functools
import logging
import re
import threading
import time
from typing import Callable

import serial

from taprig.link.errors import (
    CommandRefusedError, CommandTimeoutError, HandshakeTimeoutError, LinkDownError, LinkError, ProtocolVersionError,
)
from taprig.link.events import ByteRateMeter, ChunkSubscriber, EventSubscriber, LinkEvent, LinkEventKind, LinkGap
from taprig.link.ports import candidate_paths, open_port, read_available, usb_identity
from taprig.protocol import (
    AllowMoves, Describe, Description, Heartbeat, Log, Reply, ReplyCode, SetActuator, Start, Stop, StreamDecoder,
    encode_message,
)

log = logging.getLogger(__name__)

#: The protocol major version this host speaks (PROTOCOL.md §2).
PROTO_MAJOR = 1
#: The first minor version whose boards hold their safe state after a watchdog trip until ALLOW_MOVES (§4).
SAFE_HOLD_MINOR = 1
_LINK_ERRORS = (serial.SerialException, OSError)


def _printable_text(data: bytes, limit: int = 160) -> str:
    """Runs of printable ASCII in ``data`` (boot banners, stray prints), joined and cut to ``limit`` characters."""
    runs = [r.decode("ascii").strip() for r in re.findall(rb"[\x20-\x7e\t]{4,}", data)]
    text = " | ".join(r for r in runs if r)
    return text if len(text) <= limit else text[: limit - 3] + "..."


class Link:
    """A serial link to one board, by device path or pyserial URL.

    Parameters
    ----------
    port : str
        Device path (``/dev/ttyACM0``, ``COM5``) or URL (``sim://...``).
    baudrate, exclusive, keep_dtr_rts
        Passed to :func:`taprig.link.ports.open_port`.
    settle_s : float
        Wait after opening before the first ``DESCRIBE``, reading meanwhile (boards reset by the open print boot
        text) [s].
    handshake_timeout_s : float
        Give up the handshake after this long without a ``DESCRIPTION`` [s].
    describe_interval_s : float
        Re-send ``DESCRIBE`` this often during the handshake [s].
    read_timeout_s : float
        Longest a single read waits; bounds how long the reader takes to notice a stop [s].
    reconnect : bool
        Reconnect after a loss (otherwise the link stays down after ``LOST``).
    backoff_initial_s, backoff_max_s : float
        First wait before a reconnect attempt, doubled after each failed round up to the cap [s].
    heartbeat : bool
        Send ``HEARTBEAT`` every ``heartbeat_timeout_ms / 4`` of the device's description.
    description : Description, optional
        A description to decode with before the device sends one (e.g. when listening without a handshake).
    opener : callable, optional
        ``opener(path) -> serial port``; defaults to :func:`open_port` with the options above. Tests pass fakes.
    """

    def __init__(self, port: str, *, baudrate: int = 115200, exclusive: bool = True, keep_dtr_rts: bool = False,
                 settle_s: float = 0.1, handshake_timeout_s: float = 3.0, describe_interval_s: float = 0.5,
                 read_timeout_s: float = 0.05, reconnect: bool = True, backoff_initial_s: float = 0.1,
                 backoff_max_s: float = 5.0, heartbeat: bool = True, description: Description | None = None,
                 opener: Callable[[str], serial.SerialBase] | None = None):
        self.port_name = port
        self._first_port = port
        self._opener = opener or functools.partial(
            open_port, baudrate=baudrate, exclusive=exclusive, keep_dtr_rts=keep_dtr_rts, timeout=read_timeout_s)
        self.settle_s = settle_s
        self.handshake_timeout_s = handshake_timeout_s
        self.describe_interval_s = describe_interval_s
        self.reconnect = reconnect
        self.backoff_initial_s = backoff_initial_s
        self.backoff_max_s = backoff_max_s
        self._heartbeat_enabled = heartbeat
        self._handshake_enabled = True
        self.decoder = StreamDecoder(description)
        self.meter = ByteRateMeter()
        self.gaps: list[LinkGap] = []
        self.heartbeats_sent = 0
        #: Writes that timed out on a port that then took a delimiter (a host frozen inside a write): not losses.
        self.write_timeouts = 0
        #: Bytes read from another board (a different uid) on a reconnect attempt: never decoded nor recorded.
        self.other_board_bytes = 0
        self._port: serial.SerialBase | None = None
        self._identity = None
        self._uid: str | None = None
        self._tx_lock = threading.Lock()
        self._tx_seq = 0
        self._last_write_mono: float | None = None
        self._longest_quiet_s = 0.0
        self._next_req_id = 0
        self._cond = threading.Condition()
        self._replies: dict[int, Reply | LinkError | None] = {}
        self._descriptions_seen = 0
        self._logs: collections.deque[str] = collections.deque(maxlen=20)
        self._log_count = 0
        self._broken: BaseException | None = None
        self._lost_at_ns: int | None = None
        self._stop = threading.Event()
        self._threads: list[threading.Thread] = []
        self._chunk_subscribers: tuple[ChunkSubscriber, ...] = ()
        self._event_subscribers: tuple[EventSubscriber, ...] = ()

    # ----- subscribers ---------------------------------------------------------------------------------------

    def subscribe(self, on_chunk: ChunkSubscriber | None = None,
                  on_event: EventSubscriber | None = None) -> Callable[[], None]:
        """Add subscribers; return a function that removes them.

        ``on_chunk(chunk, host_time_ns, items)`` and ``on_event(event)`` run on the reader thread (events of
        ``open``/``close`` on the caller's): keep them short, hand heavy work to a queue. An exception in a
        subscriber is logged and does not stop the link.
        """
        if on_chunk:
            self._chunk_subscribers += (on_chunk,)
        if on_event:
            self._event_subscribers += (on_event,)

        def unsubscribe() -> None:
            self._chunk_subscribers = tuple(s for s in self._chunk_subscribers if s is not on_chunk)
            self._event_subscribers = tuple(s for s in self._event_subscribers if s is not on_event)

        return unsubscribe

    def _emit(self, kind: LinkEventKind, detail: str = "", gap: LinkGap | None = None,
              retry_in_s: float | None = None, host_time_ns: int | None = None) -> None:
        event = LinkEvent(kind, host_time_ns or time.time_ns(), self.port_name, detail, gap, retry_in_s)
        for subscriber in self._event_subscribers:
            try:
                subscriber(event)
            except Exception:  # a broken subscriber must not take the link down with it
                log.exception("link event subscriber failed on %s", kind.value)

    # ----- state ---------------------------------------------------------------------------------------------

    @property
    def description(self) -> Description | None:
        """The latest self-description of the device (``None`` before any)."""
        return self.decoder.description

    @property
    def counters(self):
        """A snapshot of the decoder's :class:`taprig.protocol.Counters`."""
        return self.decoder.counters

    @property
    def connected(self) -> bool:
        """True while a port is open and not known to be broken."""
        return self._port is not None and self._broken is None

    @property
    def board_holds_safe(self) -> bool:
        """True when the board's description says it keeps the safe hold after a watchdog trip (protocol 1.1 on,
        PROTOCOL.md §4): it refuses a move with ``BUSY`` until :meth:`allow_moves`. False for a 1.0 board (it obeys
        the next setpoint after a trip, so only the host's own check guards it) and before any description."""
        description = self.decoder.description
        return description is not None and description.proto_minor >= SAFE_HOLD_MINOR

    @property
    def heartbeat_enabled(self) -> bool:
        """True when this link feeds the device's watchdog with ``HEARTBEAT``."""
        return self._heartbeat_enabled

    @property
    def running(self) -> bool:
        """True while any of the link's threads (reader, heartbeat) is alive."""
        return any(thread.is_alive() for thread in self._threads)

    @property
    def lost_since_ns(self) -> int | None:
        """Host time [ns] the link was lost, while it is lost (reconnecting), and after :meth:`close` if it ended
        lost; None while it is up or if it never went down."""
        return self._lost_at_ns

    @property
    def bytes_received(self) -> int:
        """Bytes read from the device since the link was made."""
        return self.meter.total

    def byte_rate(self) -> float:
        """Measured receive rate over the last couple of seconds [B/s] (not the configured baud rate)."""
        return self.meter.rate()

    # ----- opening -------------------------------------------------------------------------------------------

    def open(self, handshake: bool = True) -> Description | None:
        """Open the port, handshake (unless ``handshake`` is false: only listen), start reader and heartbeat.

        Returns the device's description (``None`` without a handshake). Raises a :class:`LinkError` subclass:
        opening errors from :func:`open_port`, :class:`HandshakeTimeoutError` within ``handshake_timeout_s``,
        :class:`ProtocolVersionError`. Nothing is left open or running after an error.
        """
        if self._threads:
            raise LinkError(f"link to {self.port_name} is already open")
        self._handshake_enabled = handshake
        port = self._opener(self.port_name)
        self._identity = usb_identity(self.port_name)
        description = None
        if handshake:
            try:
                description = self._handshake(port)
            except _LINK_ERRORS as exc:
                self._close_quietly(port)
                raise LinkError(f"link to {self.port_name} failed during the handshake: {exc}") from None
            except BaseException:
                self._close_quietly(port)
                raise
            self._uid = description.uid
        self._port = port
        self._start_threads()
        self._emit(LinkEventKind.CONNECTED, self._connected_detail(description))
        return description

    def _connected_detail(self, description: Description | None) -> str:
        if description is None:
            return "opened without handshake"
        return (f"{description.firmware} uid {description.uid}, protocol "
                f"{description.proto_major}.{description.proto_minor}, {len(description.channels)} channels")

    def _start_threads(self) -> None:
        self._threads = [threading.Thread(target=self._run_reader, name=f"taprig-link-reader {self.port_name}",
                                          daemon=True)]
        if self._heartbeat_enabled:
            self._threads.append(threading.Thread(target=self._run_heartbeat, daemon=True,
                                                  name=f"taprig-link-heartbeat {self.port_name}"))
        for thread in self._threads:
            thread.start()

    def _handshake(self, port: serial.SerialBase, held: list | None = None) -> Description:
        """Settle, then ``DESCRIBE`` every ``describe_interval_s`` until a ``DESCRIPTION`` arrives or time is up.

        With ``held`` (a reconnect attempt), what arrives is decoded by a probe decoder of its own and kept in
        ``held`` as (host time, bytes); nothing reaches the link's decoder or its subscribers until the board is
        confirmed as the same one (:meth:`_reopen`), so another board's bytes are never recorded.
        """
        if held is not None:
            return self._probe(port, held)
        with self._cond:
            seen_before = self._descriptions_seen
            logs_before = self._log_count
        counters_before = self.decoder.counters.as_dict()
        start = time.monotonic()
        deadline = start + self.handshake_timeout_s
        next_describe = start + self.settle_s
        received = bytearray()
        while True:
            with self._cond:
                if self._descriptions_seen > seen_before:
                    return self._check_version(self.decoder.description)
            now = time.monotonic()
            if now >= deadline:
                raise self._handshake_failure(received, logs_before, counters_before)
            if self._stop.is_set():
                raise LinkDownError(f"link to {self.port_name} closed during the handshake")
            if now >= next_describe:
                self._write(port, Describe(req=self._new_req()))
                next_describe = now + self.describe_interval_s
            chunk = read_available(port)
            if chunk:
                if len(received) < 4096:
                    received += chunk[: 4096 - len(received)]
                self._ingest(chunk)

    def _probe(self, port: serial.SerialBase, held: list) -> Description:
        probe = StreamDecoder(self.decoder.description)
        start = time.monotonic()
        deadline = start + self.handshake_timeout_s
        next_describe = start + self.settle_s
        held_bytes = 0
        while True:
            now = time.monotonic()
            if now >= deadline:
                raise HandshakeTimeoutError(f"no DESCRIPTION from {self.port_name} within "
                                            f"{self.handshake_timeout_s:g} s")
            if self._stop.is_set():
                raise LinkDownError(f"link to {self.port_name} closed during the handshake")
            if now >= next_describe:
                self._write(port, Describe(req=self._new_req()))
                next_describe = now + self.describe_interval_s
            chunk = read_available(port)
            if not chunk:
                continue
            if held_bytes < self.PROBE_HOLD_BYTES:  # beyond that, what came before the DESCRIPTION is not kept
                held.append((time.time_ns(), chunk))
                held_bytes += len(chunk)
            for item in probe.feed(chunk):
                if isinstance(item, Description) and item.uid:
                    if held_bytes >= self.PROBE_HOLD_BYTES:
                        held[:] = [(time.time_ns(), chunk)]
                    return self._check_version(item)

    #: Bytes a reconnect attempt holds while it waits for the board's DESCRIPTION.
    PROBE_HOLD_BYTES = 1 << 20

    def _check_version(self, description: Description) -> Description:
        if description.proto_major != PROTO_MAJOR:
            raise ProtocolVersionError(
                f"device on {self.port_name} speaks protocol {description.proto_major}.{description.proto_minor}; "
                f"this host knows {PROTO_MAJOR}.x only (update taprig or the firmware)")
        return description

    def _handshake_failure(self, received: bytes, logs_before: int, counters_before: dict) -> HandshakeTimeoutError:
        after = self.decoder.counters.as_dict()
        delta = {k: after[k] - counters_before.get(k, 0) for k in ("bytes", "frames", "framing_errors", "crc_errors")}
        with self._cond:
            fresh = min(self._log_count - logs_before, len(self._logs))
            logs = list(self._logs)[len(self._logs) - fresh:]
        seen = f"{delta['bytes']} bytes, {delta['frames']} frames, " \
               f"{delta['framing_errors'] + delta['crc_errors']} bad frames"
        parts = [f"no DESCRIPTION from {self.port_name} within {self.handshake_timeout_s:g} s (saw {seen})"]
        if logs:
            parts.append("device log: " + " | ".join(logs[-5:]))
        text = _printable_text(received)
        if text:
            parts.append(f"text seen: {text!r}")
        if not delta["bytes"]:
            parts.append("nothing arrived: is this the board's port, is the firmware running, is the baud rate right?")
        return HandshakeTimeoutError("; ".join(parts))

    # ----- reading -------------------------------------------------------------------------------------------

    def _ingest(self, chunk: bytes) -> None:
        """Decode one chunk, note descriptions, replies and logs, and hand it to the subscribers."""
        host_time_ns = time.time_ns()
        self._deliver(chunk, host_time_ns)

    def _deliver(self, chunk: bytes, host_time_ns: int) -> None:
        self.meter.add(len(chunk))
        resets = self.decoder.counters.resets
        items = self.decoder.feed(chunk)
        noted = [item for item in items if isinstance(item, (Description, Reply, Log))]
        if noted:
            with self._cond:
                for item in noted:
                    if isinstance(item, Description):
                        self._descriptions_seen += 1
                    elif isinstance(item, Reply):
                        if self._replies.get(item.req, False) is None:
                            self._replies[item.req] = item
                    else:
                        self._logs.append(item.text)
                        self._log_count += 1
                self._cond.notify_all()
        for subscriber in self._chunk_subscribers:
            try:
                subscriber(chunk, host_time_ns, items)
            except Exception:  # the recorder and the viewer must not be able to stop the reader
                log.exception("link chunk subscriber failed")
        now_resets = self.decoder.counters.resets
        if now_resets > resets and self._threads:  # the boot seen while opening is no event: it is the connection
            self._emit(LinkEventKind.RESET, f"the board on {self.port_name} restarted (resets {now_resets})",
                       host_time_ns=host_time_ns)

    def _run_reader(self) -> None:
        while not self._stop.is_set():
            port = self._port
            if port is None or self._broken is not None:
                if port is not None:
                    self._mark_lost(self._broken)
                if not self.reconnect or not self._recover():
                    return
                continue
            try:
                chunk = read_available(port)
            except _LINK_ERRORS as exc:
                if self._stop.is_set():
                    return
                self._broken = exc
                continue
            if chunk:
                self._ingest(chunk)

    # ----- loss and reconnection -----------------------------------------------------------------------------

    def _mark_lost(self, exc: BaseException | None) -> None:
        with self._tx_lock:
            port, self._port = self._port, None
            self._broken = None
        self._close_quietly(port)  # before anything else: on Windows an unplugged port left open stays locked
        self._lost_at_ns = time.time_ns()
        self._fail_pending(LinkDownError(f"link to {self.port_name} lost: {exc}"))
        self._emit(LinkEventKind.LOST, f"{type(exc).__name__}: {exc}", host_time_ns=self._lost_at_ns)

    def _recover(self) -> bool:
        """Retry with capped exponential backoff until the same board is back (True) or the link is closed."""
        delay = self.backoff_initial_s
        while not self._stop.wait(delay):
            failure = "no candidate port"
            for path in candidate_paths(self._first_port, self._identity):
                if self._stop.is_set():
                    return False
                try:
                    port = self._reopen(path)
                except (LinkError, *_LINK_ERRORS) as exc:
                    failure = f"{path}: {exc}"
                    continue
                return self._restored(port, path)
            delay = min(delay * 2, self.backoff_max_s)
            self._emit(LinkEventKind.RETRY, f"{failure}; next attempt in {delay:.2g} s", retry_in_s=delay)
        return False

    def _reopen(self, path: str) -> serial.SerialBase:
        port = self._opener(path)
        if not self._handshake_enabled:
            self.decoder.link_restarted()
            return port
        held: list[tuple[int, bytes]] = []
        try:
            description = self._handshake(port, held)
        except BaseException:
            self._close_quietly(port)
            raise
        if self._uid is not None and description.uid != self._uid:
            self._close_quietly(port)
            self.other_board_bytes += sum(len(c) for _, c in held)
            raise LinkError(f"a different board is there (uid {description.uid}, expected {self._uid}); "
                            "its data is not recorded")
        # The same board: what it sent during the handshake joins the record, as if read now.
        self.decoder.link_restarted()
        for host_ns, chunk in held:
            self._deliver(chunk, host_ns)
        return port

    def _restored(self, port: serial.SerialBase, path: str) -> bool:
        with self._tx_lock:
            if self._stop.is_set():  # closed meanwhile: close() has already taken the port away
                self._close_quietly(port)
                return False
            self._port = port
        gap = LinkGap(self._lost_at_ns or time.time_ns(), time.time_ns())
        self._lost_at_ns = None
        self.gaps.append(gap)
        moved = "" if path == self.port_name else f" (was {self.port_name})"
        self.port_name = path
        self._emit(LinkEventKind.RESTORED, f"back on {path}{moved} after {gap.duration_s:.2f} s", gap,
                   host_time_ns=gap.end_ns)
        return True

    def _fail_pending(self, error: LinkError) -> None:
        with self._cond:
            for req, reply in self._replies.items():
                if reply is None:
                    self._replies[req] = error
            self._cond.notify_all()

    @staticmethod
    def _close_quietly(port: serial.SerialBase | None) -> None:
        if port is None:
            return
        try:
            port.close()
        except _LINK_ERRORS:  # closing a vanished device may fail too; it is closed as far as we can tell
            pass

    # ----- sending -------------------------------------------------------------------------------------------

    def _new_req(self) -> int:
        with self._tx_lock:
            self._next_req_id = self._next_req_id % 0xFFFF + 1  # 1..65535: a device answers unknown types with 0
            return self._next_req_id

    def _write(self, port: serial.SerialBase, msg, guard: Callable[[float], None] | None = None) -> int:
        """Encode ``msg`` with the next host sequence number and write it; return that number.

        ``guard(quiet_s)``, if given, is called under the send lock just before the bytes go out, with the longest
        time the host has sent nothing (since the last :meth:`take_longest_quiet`, now included); it may raise to
        withhold the message (a setpoint decided before the host froze must not go out after it).
        """
        with self._tx_lock:
            seq = self._tx_seq
            frame = encode_message(msg, seq)  # encoded first: nothing but the write follows the guard's look
            now = time.monotonic()
            if guard is not None:
                quiet = self._longest_quiet_s
                if self._last_write_mono is not None:
                    quiet = max(quiet, now - self._last_write_mono)
                guard(quiet)
            self._write_bytes(port, frame)
            if self._last_write_mono is not None:
                self._longest_quiet_s = max(self._longest_quiet_s, now - self._last_write_mono)
            self._last_write_mono = now
            self._tx_seq = (seq + 1) & 0xFFFFFFFF
            return seq

    def _write_bytes(self, port: serial.SerialBase, frame: bytes) -> None:
        """Write one encoded frame; a write timeout is a lost port only if the port then cannot take one byte.

        pyserial (POSIX) measures its write timeout on the monotonic clock from the start of the call and checks it
        after the bytes went out, and that clock runs on while the process is stopped: a host frozen inside a write
        (SIGSTOP, a starved machine) wakes to a ``SerialTimeoutException`` for bytes a healthy port took, and
        treating that as a loss dropped and re-made the link right after every such freeze. So after a timeout the
        frame, which may have been cut short, is ended with a delimiter under a fresh timeout (PROTOCOL.md §1: the
        receiver loses at most that frame; an extra ``0x00`` is an empty frame it ignores). Only when that times
        out too is the port stuck, and the exception goes up (the link is lost). A command whose frame was cut
        gets no reply: its caller sees a timeout, as on a noisy line.
        """
        try:
            port.write(frame)
        except serial.SerialTimeoutException:
            port.write(b"\x00")
            self.write_timeouts += 1
            log.warning("a write to %s timed out (the host may have been frozen); the port took a delimiter "
                        "after it, so the link is kept", self.port_name)

    def take_longest_quiet(self) -> float:
        """The longest time [s] the host sent the device nothing since the last call (the time since the last
        frame included), then start afresh. Longer than the device's heartbeat timeout means its watchdog tripped:
        a frozen or starved host, seen from the host's side."""
        with self._tx_lock:
            quiet = self._longest_quiet_s
            if self._last_write_mono is not None:
                quiet = max(quiet, time.monotonic() - self._last_write_mono)
            self._longest_quiet_s = 0.0
            return quiet

    def send(self, msg, guard: Callable[[float], None] | None = None) -> int:
        """Send a message without waiting for an answer; return its host sequence number.

        Raises :class:`LinkDownError` when the link is down; a write failure marks the link lost. ``guard`` as
        in :meth:`_write`.
        """
        port = self._port
        if port is None or self._broken is not None:
            raise LinkDownError(f"link to {self.port_name} is down; cannot send {type(msg).__name__}")
        try:
            return self._write(port, msg, guard)
        except _LINK_ERRORS as exc:
            self._broken = exc
            raise LinkDownError(f"writing {type(msg).__name__} to {self.port_name} failed: {exc}") from None

    @property
    def pacing(self):
        """The port's device-time pacing, or None for a port without it (a real board): an object with
        ``board_time_ns()`` and ``set_horizon(board_ns)``, the simulated board's (docs/simulator.md, Time)."""
        port = self._port
        return port if port is not None and hasattr(port, "set_horizon") else None

    def command(self, msg, timeout: float = 1.0, guard: Callable[[float], None] | None = None) -> Reply:
        """Send a host command with a fresh request id and wait for its ``REPLY``.

        ``msg`` is a command dataclass (its ``req`` is replaced). Raises :class:`CommandTimeoutError` if no reply
        with that id arrives within ``timeout`` [s], :class:`CommandRefusedError` (with ``code`` and ``detail``)
        if the code is not OK, :class:`LinkDownError` if the link is or goes down meanwhile.
        """
        req = self._new_req()
        msg = dataclasses.replace(msg, req=req)
        with self._cond:
            self._replies[req] = None
        try:
            self.send(msg, guard)
            deadline = time.monotonic() + timeout
            with self._cond:
                while self._replies[req] is None:
                    remaining = deadline - time.monotonic()
                    if remaining <= 0:
                        raise CommandTimeoutError(
                            f"no REPLY from {self.port_name} to {type(msg).__name__} (req {req}) within {timeout:g} s")
                    self._cond.wait(remaining)
                result = self._replies[req]
        finally:
            with self._cond:
                self._replies.pop(req, None)
        if isinstance(result, LinkError):
            raise result
        if result.code != ReplyCode.OK:
            name = result.code.name if isinstance(result.code, ReplyCode) else f"code {int(result.code)}"
            raise CommandRefusedError(
                f"device refused {type(msg).__name__} (req {req}): {name}" + (f": {result.detail}" if result.detail
                                                                               else ""), result.code, result.detail)
        return result

    def start_stream(self, rate_hz: float, channel_mask: int | None = None, scans_per_frame: int = 0,
                     timeout: float = 1.0) -> Reply:
        """Send ``START`` at ``rate_hz`` [Hz]; ``channel_mask`` defaults to every channel of the description."""
        if channel_mask is None:
            if self.description is None:
                raise LinkError("cannot start all channels before the device has described itself")
            channel_mask = (1 << len(self.description.channels)) - 1
        return self.command(Start(req=0, rate_hz=rate_hz, channel_mask=channel_mask,
                                  scans_per_frame=scans_per_frame), timeout)

    def stop_stream(self, timeout: float = 1.0) -> Reply:
        """Send ``STOP`` and wait for its reply."""
        return self.command(Stop(req=0), timeout)

    def set_actuator(self, actuator_id: int, value: float, timeout: float = 1.0,
                     guard: Callable[[float], None] | None = None) -> Reply:
        """Send ``SET_ACTUATOR`` (value in the actuator's unit) and wait for its reply; ``guard`` as in
        :meth:`_write`."""
        return self.command(SetActuator(req=0, actuator_id=actuator_id, value=value), timeout, guard)

    def allow_moves(self, timeout: float = 1.0) -> Reply:
        """Send ``ALLOW_MOVES`` (PROTOCOL.md §4): end the board's safe hold after a watchdog trip. Moves nothing
        itself. Only on an operator's request (a resume, a run they started), never on the host's own initiative;
        only to a board that has the hold (:attr:`board_holds_safe`: a 1.0 board would answer UNKNOWN_COMMAND)."""
        return self.command(AllowMoves(req=0), timeout)

    def _run_heartbeat(self) -> None:
        while True:
            description = self.decoder.description
            timeout_ms = description.heartbeat_timeout_ms if description and description.heartbeat_timeout_ms else 1000
            if self._stop.wait(timeout_ms / 4000):
                return
            if self._port is None:
                continue
            try:
                self.send(Heartbeat(req=0))
                self.heartbeats_sent += 1
            except LinkDownError:
                continue  # the reader notices and reconnects; heartbeats resume once the port is back

    # ----- closing -------------------------------------------------------------------------------------------

    def close(self, timeout: float = 2.0) -> None:
        """Stop the threads (each joined within ``timeout`` [s]) and close the port. Safe to call twice."""
        already = self._stop.is_set()
        self._stop.set()
        port = self._port
        if port is not None and hasattr(port, "cancel_read"):
            try:
                port.cancel_read()
            except _LINK_ERRORS:
                pass
        deadline = time.monotonic() + timeout
        for thread in self._threads:
            thread.join(max(0.0, deadline - time.monotonic()))
        with self._tx_lock:
            port, self._port = self._port, None
        self._close_quietly(port)
        self._fail_pending(LinkDownError(f"link to {self.port_name} closed"))
        if not already:
            self._emit(LinkEventKind.CLOSED, "closed by its owner")

    def __enter__(self) -> Link:
        return self

    def __exit__(self, *exc_info) -> None:
        self.close()
