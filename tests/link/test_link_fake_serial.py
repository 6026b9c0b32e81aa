"""The link against fake serial objects: a USB board vanishing as pyserial reports it, backoff, error messages.

No port and no pty here: the fake object answers DESCRIBE from its ``write`` and fails ``read`` (or
``in_waiting``) with the exception pyserial raises on a vanished USB device, so these run on every platform.
"""

from __future__ import annotations

import errno
import sys
import threading

import pytest
import serial

from taprig.link import (
    ByteRateMeter, LinkEventKind, NotSerialDeviceError, PortBusyError, PortNotFoundError, PortPermissionError,
    read_available,
)
from taprig.link.errors import open_error
from taprig.protocol import Describe, Description, Reply, ReplyCode, StreamDecoder, encode_message

# The message pyserial's POSIX read raises when a USB device disappears under it (serialposix.py, pyserial 3.5).
VANISHED = "device reports readiness to read but returned no data (device disconnected or multiple access on port?)"


def description(uid="FAKE-USB-1"):
    return Description(1, 0, "fake-serial 0.1", uid, 1.0, 1000.0, 4096, 1000, (), ())


class FakeSerial:
    """Answers DESCRIBE; after ``fail_after`` reads (None: never) every read, or ``in_waiting``, raises."""

    def __init__(self, log, name, fail_after=None, fail_in_waiting=False, uid="FAKE-USB-1"):
        self.log, self.name, self.uid = log, name, uid
        self.fail_after, self.fail_in_waiting = fail_after, fail_in_waiting
        self.reads = 0
        self._outbox = bytearray()
        self._cond = threading.Condition()
        self._decoder = StreamDecoder(receiver="device")
        self._seq = 0
        self.timeout = 0.02
        log.append(("open", name))

    @property
    def in_waiting(self):
        if self.fail_in_waiting and self.fail_after is not None and self.reads >= self.fail_after:
            raise serial.SerialException("ClearCommError failed (PermissionError(13, 'The device does not "
                                         "recognize the command.', None, 22))")  # pyserial on Windows
        return len(self._outbox)

    def read(self, size=1):
        self.reads += 1
        if not self.fail_in_waiting and self.fail_after is not None and self.reads > self.fail_after:
            raise serial.SerialException(VANISHED)
        with self._cond:
            self._cond.wait_for(lambda: self._outbox, self.timeout)
            data = bytes(self._outbox[:size])
            del self._outbox[:size]
        return data

    def write(self, data):
        for msg in self._decoder.feed(data):
            if isinstance(msg, Describe):
                out = encode_message(description(self.uid), self._seq) + \
                    encode_message(Reply(msg.req, ReplyCode.OK, ""), self._seq + 1)
                self._seq += 2
                with self._cond:
                    self._outbox += out
                    self._cond.notify_all()
        return len(data)

    def cancel_read(self):
        with self._cond:
            self._cond.notify_all()

    def close(self):
        self.log.append(("close", self.name))


def scripted_opener(log, script):
    """``script``: a list of FakeSerial factories or exceptions, consumed one per open attempt (last repeats)."""
    def opener(path):
        step = script.pop(0) if len(script) > 1 else script[0]
        if isinstance(step, BaseException):
            log.append(("refused", path))
            raise open_error(path, step)
        return step()

    return opener


class Collected:
    def __init__(self):
        self.events, self.cond = [], threading.Condition()

    def __call__(self, event):
        with self.cond:
            self.events.append(event)
            self.cond.notify_all()

    def wait(self, kind, timeout=5.0):
        with self.cond:
            assert self.cond.wait_for(lambda: any(e.kind is kind for e in self.events), timeout), \
                f"no {kind.value}; got {[e.kind.value for e in self.events]}"


@pytest.mark.parametrize("fail_in_waiting", [False, True], ids=["read raises (Linux)", "in_waiting raises (Windows)"])
def test_vanished_usb_device_is_closed_retried_with_backoff_and_restored(links, fail_in_waiting):
    log = []
    gone = serial.SerialException(errno.ENOENT, "could not open port /dev/ttyACM0: [Errno 2] No such file")
    script = [lambda: FakeSerial(log, "first", fail_after=3, fail_in_waiting=fail_in_waiting),
              gone, gone, gone, lambda: FakeSerial(log, "second")]
    link = links("/dev/ttyACM0", opener=scripted_opener(log, script), backoff_initial_s=0.01, backoff_max_s=0.03)
    seen = Collected()
    link.subscribe(on_event=seen)
    link.open()
    seen.wait(LinkEventKind.RESTORED)
    kinds = [e.kind for e in seen.events]
    assert kinds[:2] == [LinkEventKind.CONNECTED, LinkEventKind.LOST]
    assert kinds[-1] is LinkEventKind.RESTORED and kinds.count(LinkEventKind.RETRY) == 3
    # The port is closed before any attempt to open it again (a Windows port left open stays locked).
    assert log.index(("close", "first")) < log.index(("refused", "/dev/ttyACM0"))
    delays = [e.retry_in_s for e in seen.events if e.kind is LinkEventKind.RETRY]
    assert delays == [0.02, 0.03, 0.03]  # doubled from 0.01, capped at 0.03
    assert link.connected and link.counters.frames == 4  # two DESCRIPTION + REPLY pairs, nothing miscounted
    assert link.counters.framing_errors == 0


def test_loss_fails_a_waiting_command_instead_of_leaving_it_hanging(links):
    from taprig.link import LinkDownError
    from taprig.protocol import Stop

    log = []
    script = [lambda: FakeSerial(log, "only", fail_after=40), serial.SerialException(errno.ENOENT, "gone")]
    link = links("/dev/ttyACM0", opener=scripted_opener(log, script), reconnect=True)
    link.open()
    with pytest.raises(LinkDownError):
        link.command(Stop(req=0), timeout=5.0)  # the fake board answers only DESCRIBE; the loss ends the wait


@pytest.mark.parametrize(("exc", "kind", "words"), [
    (serial.SerialException(errno.ENOENT, "could not open port /dev/ttyUSB7: [Errno 2] No such file or directory"),
     PortNotFoundError, "no serial port /dev/ttyUSB7"),
    (serial.SerialException(errno.EAGAIN, "Could not exclusively lock port /dev/ttyUSB7: [Errno 11] Resource "
                                          "temporarily unavailable"), PortBusyError, "busy"),
    (serial.SerialException(errno.EACCES, "could not open port /dev/ttyUSB7: [Errno 13] Permission denied"),
     PortPermissionError, "dialout" if sys.platform.startswith("linux") else "denied"),
    (serial.SerialException("Could not configure port: (25, 'Inappropriate ioctl for device')"),
     NotSerialDeviceError, "not a serial device"),
    (serial.SerialException("could not open port 'COM9': FileNotFoundError(2, 'The system cannot find the file "
                            "specified.', None, 2)"), PortNotFoundError, "no serial port"),
])
def test_open_errors_become_messages_that_say_what_to_do(exc, kind, words):
    # The exception texts are those pyserial 3.5 raises (serialposix.py / serialwin32.py).
    error = open_error("/dev/ttyUSB7", exc)
    assert isinstance(error, kind)
    assert words in str(error)


def test_read_available_drains_in_bulk_never_byte_by_byte():
    class Buffered:
        def __init__(self, pieces):
            self.pieces, self.sizes = list(pieces), []

        @property
        def in_waiting(self):
            return len(self.pieces[0]) if self.pieces else 0

        def read(self, size):
            self.sizes.append(size)
            return self.pieces.pop(0)[:size] if self.pieces else b""

    port = Buffered([b"a" * 3000, b"b" * 4095, b"c" * 10])
    assert read_available(port) == b"a" * 3000 + b"b" * 4095 + b"c" * 10
    assert port.sizes == [3000, 4095, 10]
    idle = Buffered([])
    assert read_available(idle) == b"" and idle.sizes == [1]  # waits (port timeout) for one byte, no spin


def test_byte_rate_is_measured_over_a_window_and_falls_when_data_stop():
    now = [0.0]
    meter = ByteRateMeter(window_s=1.0, step_s=0.1, clock=lambda: now[0])
    for _ in range(20):  # 1000 bytes every 0.1 s = 10 kB/s
        meter.add(1000)
        now[0] += 0.1
    assert meter.rate() == pytest.approx(10_000, rel=0.15)
    now[0] += 5.0
    assert meter.rate() < 1000
    assert meter.total == 20_000
