"""pyserial URL handler for ``sim://``: a simulated rig behind the same port object as a real board.

``import taprig.link`` registers the handler package, after which
``serial.serial_for_url("sim://rigs/naca0012.toml?seed=1")`` returns a :class:`Serial` that behaves like an
open USB serial port to a board running the taprig protocol. Options are query parameters
(:mod:`taprig.sim.options`, ``docs/simulator.md``); a bare ``sim://`` simulates the rig named by the
``TAPRIG_SIM_RIG`` environment variable (commands with ``--rig`` fill the URL with
:func:`taprig.sim.options.with_rig` instead).

Reads hand out everything queued, up to the size asked for, in whole chunks (never a byte at a time). Time
follows the wall clock scaled by ``speed``; with ``speed=max`` the simulated clock runs only as fast as the reader
takes data (compressed time): a read that finds nothing queued advances the board to its next frame at once.

A host that paces the board in device time (a sweep) sets a horizon (:meth:`Serial.set_horizon`): its next
commands act at that board-clock time (:mod:`taprig.sim.device`), and in compressed time the board's clock stops
there until the horizon is moved on, so the reader cannot run the board past the moment the host is deciding
about. The same seed and horizons then give the same scans in real and in compressed time.
"""

from __future__ import annotations

import os
import threading
import time

from serial.serialutil import PortNotOpenError, SerialBase, SerialException, SerialTimeoutException

from taprig.rig.errors import RigError
from taprig.rig.loader import load_rig
from taprig.sim.device import SimulatedDevice
from taprig.sim.options import RIG_ENVIRONMENT_VARIABLE, parse_sim_url

#: In compressed time, a read that finds nothing to send advances the board at most this far [ns] before it
#: concludes the board is idle and waits for the timeout in wall time instead.
IDLE_HORIZON_NS = 2_000_000_000
#: Least simulated time a compressed-time read moves the board on [ns]: several frames per numpy pass.
COMPRESSED_STEP_NS = 100_000_000
#: Longest wall-clock wait between checks for new output in real time [s] (bounds the latency of a close).
MAX_WAIT_S = 0.05


class Serial(SerialBase):
    """A serial port whose other end is a :class:`taprig.sim.device.SimulatedDevice`."""

    def open(self) -> None:
        """Load the rig of the URL, power up the simulated board and start its clock."""
        if self.is_open:
            raise SerialException("port is already open")
        if self._port is None:
            raise SerialException("port must be configured before it can be used")
        try:
            target = parse_sim_url(self.portstr, os.environ.get(RIG_ENVIRONMENT_VARIABLE))
            rig = load_rig(target.rig_path)
        except (ValueError, RigError, OSError) as exc:
            raise SerialException(f"cannot open {self.portstr}: {exc}") from None
        self.device = SimulatedDevice(rig, target.options)
        self._speed = target.options.speed
        self._lock = threading.Condition()
        self._t0 = time.monotonic()
        self.is_open = True

    def close(self) -> None:
        """Close the port; a blocked read returns what it has."""
        if self.is_open:
            with self._lock:
                self.is_open = False
                self._lock.notify_all()
        super().close()

    def _reconfigure_port(self, force_update: bool = False) -> None:
        """Line settings mean nothing to a simulated board; accepted and ignored."""

    # -- time -------------------------------------------------------------------------------------------------
    def _wall_sim_ns(self) -> int:
        """Simulated time that the wall clock has reached [ns]."""
        return int((time.monotonic() - self._t0) * self._speed * 1e9)

    @property
    def compressed(self) -> bool:
        """True when the simulated clock runs as fast as the reader takes data (``speed=max``)."""
        return self._speed == float("inf")

    def _catch_up(self) -> None:
        """Advance the board to now (paced modes) or to its next output if nothing is queued (compressed; never
        past the horizon)."""
        device = self.device
        if not self.compressed:
            device.produce_until(max(device.now_ns, self._wall_sim_ns()))
            return
        if device.pending or self._held():
            return
        due = device.next_due_ns()
        if due - device.now_ns <= IDLE_HORIZON_NS:
            target = max(due, device.now_ns + COMPRESSED_STEP_NS)
            cap = device.horizon_true_ns()
            device.produce_until(int(target if cap is None else min(target, cap)))

    def _held(self) -> bool:
        """True in compressed time when the board's clock has reached the horizon and waits for the host."""
        cap = self.device.horizon_true_ns()
        return self.compressed and cap is not None and self.device.now_ns >= cap

    def board_time_ns(self) -> int:
        """The board's clock now [ns since its boot], the clock of the stream's scan times (real time: brought up
        to the wall clock first)."""
        with self._lock:
            self._check_alive()
            if not self.compressed:
                self.device.produce_until(max(self.device.now_ns, self._wall_sim_ns()))
            return self.device.board_ns

    def set_horizon(self, board_ns: float | None) -> None:
        """Commands written from now on act at board-clock time ``board_ns`` [ns since boot] (None: on arrival);
        in compressed time the board's clock runs no further than that until the horizon moves."""
        with self._lock:
            self._check_alive()
            self.device.set_horizon(board_ns)
            self._lock.notify_all()

    def _check_alive(self) -> None:
        if not self.is_open:
            raise PortNotOpenError()
        if self.device.disconnected and not self.device.pending:
            raise SerialException("device reports readiness to read but returned no data (device disconnected?)")

    # -- the port interface -----------------------------------------------------------------------------------
    @property
    def in_waiting(self) -> int:
        """Bytes ready to read now."""
        with self._lock:
            self._check_alive()
            self._catch_up()
            return self.device.pending

    def read(self, size: int = 1) -> bytes:
        """Read up to ``size`` bytes; block until that many are ready or the timeout passes (pyserial semantics)."""
        deadline = None if self._timeout is None else time.monotonic() + self._timeout
        data = bytearray()
        with self._lock:
            while len(data) < size:
                if data and self.device.disconnected and not self.device.pending:
                    break  # hand over what arrived before the board vanished; the next read raises
                self._check_alive()
                self._catch_up()
                data += self.device.read(size - len(data))
                if len(data) >= size or not self._wait_for_output(deadline):
                    break
        return bytes(data)

    def _wait_for_output(self, deadline: float | None) -> bool:
        """Wait (lock held) until the board may have more to send; False once the deadline has passed."""
        now = time.monotonic()
        if deadline is not None and now >= deadline:
            return False
        if self.device.disconnected:
            return True  # the next turn raises
        if self.compressed and not self._held() and self.device.next_due_ns() - self.device.now_ns <= IDLE_HORIZON_NS:
            return True  # the board has more to send at once: no waiting in compressed time
        wait = MAX_WAIT_S
        if not self.compressed:
            due = self.device.next_due_ns()
            if due != float("inf"):
                wait = min(wait, max((due - self._wall_sim_ns()) / (self._speed * 1e9), 0.0))
        if deadline is not None:
            wait = min(wait, deadline - now)
        self._lock.wait(wait)
        return self.is_open

    def write(self, data) -> int:
        """Give host bytes to the board; blocks (or raises on the write timeout) while the board stalls."""
        data = bytes(data)
        deadline = None if self._write_timeout is None else time.monotonic() + self._write_timeout
        with self._lock:
            while True:
                if not self.is_open:
                    raise PortNotOpenError()
                if self.device.disconnected:
                    raise SerialException("write failed: device disconnected")
                if not self.compressed:
                    self.device.produce_until(max(self.device.now_ns, self._wall_sim_ns()))
                stall_end = self.device.stalled_until(self.device.now_ns)
                if stall_end is None:
                    break
                self._wait_out_stall(stall_end, deadline)
            self.device.receive(data)
            self._lock.notify_all()
        return len(data)

    def _wait_out_stall(self, stall_end: int, deadline: float | None) -> None:
        """Block a write while the board takes no bytes; raise SerialTimeoutException at the write timeout.

        In compressed time the wait is simulated: the board's clock moves on to the end of the stall, or by the
        write timeout read as simulated time if that comes first.
        """
        if deadline is not None and time.monotonic() >= deadline:
            raise SerialTimeoutException("write timeout: the board is not taking bytes")
        if self.compressed:
            if deadline is not None:
                limit = self.device.now_ns + int(self._write_timeout * 1e9)
                if limit < stall_end:
                    self.device.produce_until(limit)
                    raise SerialTimeoutException("write timeout: the board is not taking bytes")
            self.device.produce_until(stall_end)
            return
        wait = (stall_end - self._wall_sim_ns()) / (self._speed * 1e9)
        if deadline is not None:
            wait = min(wait, deadline - time.monotonic())
        self._lock.wait(max(min(wait, MAX_WAIT_S), 0.0))

    def flush(self) -> None:
        """Nothing is buffered on the way to the board."""

    def reset_input_buffer(self) -> None:
        """Discard everything the board has sent and not yet been read."""
        with self._lock:
            if not self.is_open:
                raise PortNotOpenError()
            self._catch_up()
            self.device.read()

    def reset_output_buffer(self) -> None:
        """Nothing waits on the way to the board; accepted."""
        if not self.is_open:
            raise PortNotOpenError()

    @property
    def out_waiting(self) -> int:
        """Bytes on their way to the board: always 0 (writes are handed over at once)."""
        return 0

    def cancel_read(self) -> None:
        """Wake a blocked read."""
        with self._lock:
            self._lock.notify_all()

    def _update_dtr_state(self) -> None:
        """Control lines are not wired on the simulated board."""

    def _update_rts_state(self) -> None:
        """Control lines are not wired on the simulated board."""

    def _update_break_state(self) -> None:
        """Control lines are not wired on the simulated board."""

    @property
    def cts(self) -> bool:
        return True

    @property
    def dsr(self) -> bool:
        return True

    @property
    def ri(self) -> bool:
        return False

    @property
    def cd(self) -> bool:
        return True
