"""A host process frozen and woken (SIGSTOP/SIGCONT, a starved machine) in the middle of a write to a healthy port:
the link must not take it for a lost board.

pyserial's POSIX ``write`` measures its write timeout on the monotonic clock from the start of the call and checks
it again after the bytes went out; that clock runs on while the process is stopped, so a host stopped right after
``os.write`` wakes to an expired timeout and a ``SerialTimeoutException`` for bytes the port took. The freeze is
played here deterministically: the clock pyserial's timeouts read jumps by five seconds just after the write.
(The pyserial behaviour is read from its source, serial/serialposix.py, ``Serial.write``; pyserial 3.5.)
"""

from __future__ import annotations

import functools
import os
import sys
import threading
import time
import types

import pytest
import serial
import serial.serialposix
import serial.serialutil

from taprig.link import LinkDownError, LinkEventKind, open_port
from taprig.protocol import Heartbeat, Stop

pytestmark = pytest.mark.skipif(sys.platform == "win32", reason="needs POSIX pseudo-terminals (os.openpty)")


class Freezer:
    """The clock of pyserial's timeouts, and its ``os.write``: when armed, the next write to ``fd`` is followed by
    a jump of ``seconds`` on that clock, as if the process had been stopped right after the bytes went out."""

    def __init__(self, monkeypatch, seconds: float = 5.0):
        self.offset = 0.0
        self.seconds = seconds
        self.fd: int | None = None
        self.frozen = 0
        real_os = os

        def write(fd, data):
            n = real_os.write(fd, data)
            if self.fd is not None and fd == self.fd:
                self.fd = None
                self.offset += self.seconds
                self.frozen += 1
            return n

        proxy = types.SimpleNamespace(**{name: getattr(real_os, name) for name in dir(real_os)
                                         if not name.startswith("__")})
        proxy.write = write
        monkeypatch.setattr(serial.serialposix, "os", proxy)
        monkeypatch.setattr(serial.serialutil.Timeout, "TIME", staticmethod(lambda: time.monotonic() + self.offset))

    def arm(self, port) -> None:
        self.fd = port.fileno()


def test_a_host_frozen_inside_a_write_keeps_its_link_and_the_command_gets_through(ptys, devices, links, monkeypatch):
    pty = ptys()
    device = devices(pty)
    link = links(pty.path, heartbeat=False)
    events = []
    link.subscribe(on_event=events.append)
    link.open()
    pty.release_slave()
    freezer = Freezer(monkeypatch)
    freezer.arm(link._port)
    reply = link.command(Stop(req=0), timeout=2.0)  # written, then "frozen" 5 s past the 1 s write timeout
    assert freezer.frozen == 1 and int(reply.code) == 0
    assert device.wait_for(lambda received: any(isinstance(r.msg, Stop) for r in received))
    link.send(Heartbeat(req=0))
    assert link.connected and LinkEventKind.LOST not in [e.kind for e in events]
    assert link.write_timeouts == 1
    assert device.host_counters.framing_errors == 0  # the frame arrived whole; the closing 0x00 is an empty frame


def test_a_port_that_takes_nothing_is_still_lost(ptys, links):
    # The other side stops reading (a wedged board): its buffer fills, a write times out, the delimiter that would
    # end a cut frame times out too: that is a lost link, as before.
    pty = ptys()
    link = links(pty.path, heartbeat=False, reconnect=False,
                 opener=functools.partial(open_port, write_timeout=0.2, timeout=0.05))
    link.open(handshake=False)
    with pytest.raises(LinkDownError, match="timeout"):
        for _ in range(100_000):
            link.send(Heartbeat(req=0))
    done = threading.Event()
    while link.connected:
        done.wait(0.01)
    assert not link.connected
