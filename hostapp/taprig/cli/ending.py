"""How a live command (record, sweep, demo) ends: every signal becomes a stop request, never an exception.

A signal handler that raises can land anywhere: between the two halves of a command frame, inside a lock, or in
the middle of the shutdown itself (a second Ctrl-C a few milliseconds after the first). So here a signal only
wakes a watcher thread (through :func:`signal.set_wakeup_fd`, which writes the signal's number from C, safely at
any moment); the watcher asks the acquisition to stop (:meth:`taprig.runtime.acquisition.Acquisition.request_stop`)
and the command's own thread leaves its loop at the next check and takes the one shutdown path. Later signals only
get a line saying the shutdown is under way. Ctrl-C (SIGINT), SIGTERM and SIGHUP (the terminal closed) are handled
alike; the exit code is 128 + the signal's number (130 for Ctrl-C).
"""

from __future__ import annotations

import os
import signal
import socket
import sys
import threading

NAMES = {"SIGINT": "Ctrl-C (SIGINT)", "SIGTERM": "SIGTERM", "SIGHUP": "SIGHUP (the terminal was closed)"}


def _signals() -> list[signal.Signals]:
    return [getattr(signal, name) for name in NAMES if hasattr(signal, name)]


def signal_words(signum: int) -> str:
    """``Ctrl-C (SIGINT)``, ``SIGTERM``, ... for a signal number."""
    name = signal.Signals(signum).name
    return NAMES.get(name, name)


class RunEnding:
    """Context manager for the live part of a command: while inside, the ending signals request a stop.

    ``attach(acquisition)`` once the run is open; a signal that came before is passed on then. ``signum`` is the
    first signal received (None if none), ``count`` how many arrived.
    """

    def __init__(self, program: str = "taprig"):
        self.program = program
        self.signum: int | None = None
        self.count = 0
        self._acq = None
        self._lock = threading.Lock()
        self._previous: dict = {}
        self._previous_fd = None
        self._pair: tuple[socket.socket, socket.socket] | None = None
        self._thread: threading.Thread | None = None

    @property
    def exit_code(self) -> int | None:
        """128 + the first signal's number, or None when no signal ended the run."""
        return None if self.signum is None else 128 + int(self.signum)

    @property
    def reason(self) -> str | None:
        """The ending in words, for the record and the operator."""
        return None if self.signum is None else f"stopped by {signal_words(self.signum)}"

    def attach(self, acquisition) -> None:
        """The run to stop on a signal; stops it at once if one has already arrived."""
        with self._lock:
            self._acq = acquisition
            pending = self.reason
        if pending is not None:
            acquisition.request_stop(pending)

    def __enter__(self) -> RunEnding:
        if threading.current_thread() is not threading.main_thread():
            return self  # signals are delivered to the main thread only; nothing to do elsewhere
        reader, writer = socket.socketpair()
        reader.setblocking(True)
        writer.setblocking(False)
        self._pair = (reader, writer)
        self._previous_fd = signal.set_wakeup_fd(writer.fileno(), warn_on_full_buffer=False)
        for sig in _signals():
            self._previous[sig] = signal.signal(sig, _ignore)  # the work is done by the watcher thread
        self._thread = threading.Thread(target=self._watch, name="taprig-signals", daemon=True)
        self._thread.start()
        return self

    def __exit__(self, *exc_info) -> None:
        if self._pair is None:
            return
        for sig, previous in self._previous.items():
            signal.signal(sig, previous)
        signal.set_wakeup_fd(self._previous_fd if self._previous_fd is not None else -1)
        reader, writer = self._pair
        try:
            writer.shutdown(socket.SHUT_RDWR)  # wakes the watcher with end of file
        except OSError:
            pass
        self._thread.join(2)
        reader.close()
        writer.close()
        self._pair = None

    def _watch(self) -> None:
        reader = self._pair[0]
        while True:
            try:
                data = reader.recv(64)
            except OSError:
                return
            if not data:
                return
            for signum in data:
                if signum in self._previous:  # another handler's signal (if any) is not an ending
                    self._on_signal(signum)

    def _on_signal(self, signum: int) -> None:
        with self._lock:
            self.count += 1
            first = self.signum is None
            if first:
                self.signum = signum
            acq = self._acq
        if first:
            if acq is not None:
                acq.request_stop(self.reason)
            return
        _say(f"{self.program}: {signal_words(signum)} again: already stopping, the actuators are being set to "
             "their safe values and the session closed; this takes a few seconds at most")


def _ignore(signum, frame) -> None:
    """The Python-level handler: nothing (the wakeup file descriptor carries the signal to the watcher)."""


def _say(text: str) -> None:
    """A line on stderr that never fails (the terminal may be gone after SIGHUP)."""
    try:
        os.write(sys.stderr.fileno(), (text + "\n").encode("utf-8", "replace"))
    except (OSError, ValueError, AttributeError):
        pass


def emit(text: str = "", stream=None, **kwargs) -> None:
    """``print`` that never fails: after SIGHUP the terminal is gone and a write to it raises."""
    try:
        print(text, file=stream or sys.stdout, **kwargs)
    except (OSError, ValueError):
        pass


def report_ending(command: str, report, reason: str | None = None) -> None:
    """Tell the operator how the run ended: the cause (when it was not a normal end) and the fate of each actuator."""
    if reason:
        emit(f"taprig {command}: {reason}", sys.stderr)
    for line in report.lines():
        emit(f"taprig {command}: {line}", sys.stderr)
