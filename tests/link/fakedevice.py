"""A small fake board for the link tests: a thread on the master side of a pseudo-terminal.

It speaks the protocol with taprig.protocol's own encoder and decoder (the decoder reads host → device types
too): answers DESCRIBE with DESCRIPTION + REPLY, START/STOP/SET_ACTUATOR with REPLY, records every host frame it
receives, and streams small SAMPLES frames while started. Knobs make it misbehave the ways a real board does:
boot text before the firmware runs, ignoring the first DESCRIBEs, never answering, vanishing (unplug).
"""

from __future__ import annotations

import os
import select
import threading
import time
from dataclasses import dataclass, field

import numpy as np

from taprig.protocol import (
    FLAG_BOOT, ActuatorInfo, ActuatorKind, ChannelInfo, Describe, Description, Encoding, Heartbeat, Reply,
    ReplyCode, Samples, SetActuator, Start, Stop, StreamDecoder, encode_message,
)

N_CHANNELS = 4
SCANS_PER_FRAME = 5


def make_description(uid: str = "FAKE-0001", heartbeat_timeout_ms: int = 400) -> Description:
    """A 4-channel i32 board with one fan (0–1 duty)."""
    channels = tuple(ChannelInfo(f"p{i}", Encoding.I32) for i in range(N_CHANNELS))
    fan = ActuatorInfo(id=1, kind=ActuatorKind.FAN, min=0.0, max=1.0, safe=0.0, unit="duty", name="fan")
    return Description(1, 0, "fake-board 0.1", uid, 1.0, 2000.0, 4096, heartbeat_timeout_ms, channels, (fan,))


class Pty:
    """A pseudo-terminal pair in raw mode; ``path`` is the slave's device path (what the host opens)."""

    def __init__(self):
        import tty  # POSIX only; imported here so that this module loads (and its tests skip) on Windows

        self.master, self._slave = os.openpty()
        tty.setraw(self._slave)  # no echo or line editing before the host configures the port
        self.path = os.ttyname(self._slave)

    def release_slave(self) -> None:
        """Drop our own slave fd once the host has the port open, so closing the master is a true hang-up."""
        if self._slave is not None:
            os.close(self._slave)
            self._slave = None

    def close(self) -> None:
        """Close both ends (idempotent)."""
        self.release_slave()
        if self.master is not None:
            os.close(self.master)
            self.master = None


@dataclass
class Received:
    """One host frame as the fake board saw it."""

    msg: object
    t: float


@dataclass
class Behaviour:
    """How the fake board acts; the defaults are a well-behaved board."""

    answer: bool = True                 # answer DESCRIBE at all
    ignore_describes: int = 0           # DESCRIBEs ignored before the first answer (firmware still booting)
    boot_text: bytes = b""              # printed on start, before any frame (a bootloader banner)
    boot_description: bool = False      # send DESCRIPTION with the BOOT flag on start
    first_seq: int = 0                  # seq of the first frame sent
    refuse: dict = field(default_factory=dict)  # command type -> (ReplyCode, detail)
    silent: tuple = ()                  # command types never answered


class FakeDevice:
    """Runs the fake board on ``pty.master`` in a thread until :meth:`stop` or :meth:`unplug`."""

    def __init__(self, pty: Pty, description: Description | None = None, behaviour: Behaviour | None = None):
        self.pty = pty
        self.description = description or make_description()
        self.behaviour = behaviour or Behaviour()
        self.received: list[Received] = []
        self.cond = threading.Condition()
        self._decoder = StreamDecoder(receiver="device")
        self._seq = self.behaviour.first_seq
        self._describes_ignored = 0
        self._streaming = False
        self._scan = 0
        self.frames_sent = 0
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, name="fake-device", daemon=True)

    def start(self) -> FakeDevice:
        """Print the boot text (and boot DESCRIPTION) if asked, then serve."""
        if self.behaviour.boot_text:
            self._write(self.behaviour.boot_text)
        if self.behaviour.boot_description:
            self._send(self.description, flags=FLAG_BOOT)
        self._thread.start()
        return self

    def stop(self) -> None:
        """Stop serving (the pty stays open)."""
        self._stop.set()
        self._thread.join(2.0)

    def unplug(self) -> None:
        """Vanish as an unplugged USB board does: stop and close the master, so host reads fail."""
        self.stop()
        self.pty.close()

    def wait_for(self, predicate, timeout: float = 3.0) -> bool:
        """Wait until ``predicate(received)`` is true; return whether it became so within ``timeout`` [s]."""
        with self.cond:
            return self.cond.wait_for(lambda: predicate(self.received), timeout)

    @property
    def host_counters(self):
        """The board's decoder counters of what the host sent (its sequence numbers, bad frames)."""
        return self._decoder.counters

    def of_type(self, cls) -> list[Received]:
        """The received host frames of one message class."""
        with self.cond:
            return [r for r in self.received if isinstance(r.msg, cls)]

    # ----- internals -----------------------------------------------------------------------------------------

    def _write(self, data: bytes) -> None:
        view = memoryview(data)
        while view and not self._stop.is_set():
            _, ready, _ = select.select([], [self.pty.master], [], 0.05)
            if ready:
                view = view[os.write(self.pty.master, view):]

    def _send(self, msg, flags: int = 0, encodings=None) -> None:
        frame = encode_message(msg, self._seq, flags=flags, encodings=encodings)
        self._seq = (self._seq + 1) & 0xFFFFFFFF
        self.frames_sent += 1  # counted before the write: the host may count the frame before write() returns
        self._write(frame)

    def _reply(self, req: int, code: ReplyCode = ReplyCode.OK, detail: str = "") -> None:
        self._send(Reply(req=req, code=code, detail=detail))

    def _run(self) -> None:
        while not self._stop.is_set():
            ready, _, _ = select.select([self.pty.master], [], [], 0.01)
            if ready:
                try:
                    data = os.read(self.pty.master, 65536)
                except OSError:  # the host has its end closed (reconnecting): wait for it or for stop
                    self._stop.wait(0.01)
                    continue
                for msg in self._decoder.feed(data):
                    self._handle(msg)
            if self._streaming:
                self._send_samples()

    def _handle(self, msg) -> None:
        with self.cond:
            self.received.append(Received(msg, time.monotonic()))
            self.cond.notify_all()
        refused = self.behaviour.refuse.get(type(msg))
        if isinstance(msg, self.behaviour.silent):
            return
        if refused and not isinstance(msg, Heartbeat):
            self._reply(msg.req, *refused)
        elif isinstance(msg, Describe):
            self._describe(msg)
        elif isinstance(msg, Start):
            self._streaming, self._scan = True, 0
            self._reply(msg.req)
        elif isinstance(msg, Stop):
            self._streaming = False
            self._reply(msg.req)
        elif isinstance(msg, SetActuator):
            self._set_actuator(msg)

    def _describe(self, msg: Describe) -> None:
        if not self.behaviour.answer:
            return
        if self._describes_ignored < self.behaviour.ignore_describes:
            self._describes_ignored += 1
            return
        self._send(self.description)
        self._reply(msg.req)

    def _set_actuator(self, msg: SetActuator) -> None:
        actuator = next((a for a in self.description.actuators if a.id == msg.actuator_id), None)
        if actuator is None:
            self._reply(msg.req, ReplyCode.BAD_ARGUMENT, f"no actuator {msg.actuator_id}")
        elif not actuator.min <= msg.value <= actuator.max:
            self._reply(msg.req, ReplyCode.OUT_OF_RANGE, f"{msg.value} outside {actuator.min}..{actuator.max}")
        else:
            self._reply(msg.req)

    def _send_samples(self) -> None:
        scans = np.arange(self._scan, self._scan + SCANS_PER_FRAME)
        data = (scans[:, None] * 10 + np.arange(N_CHANNELS)[None, :]).astype(np.int32)
        block = Samples(t_us=self._scan * 1000, period_ns=1_000_000, first_scan=self._scan,
                        channel_mask=(1 << N_CHANNELS) - 1, data=data)
        self._send(block, encodings=[Encoding.I32] * N_CHANNELS)
        self._scan += SCANS_PER_FRAME
