"""What a link tells its subscribers besides the bytes: connection events, outages (gaps) and the byte rate.

Host times are ``time.time_ns()`` (wall clock, ns since the epoch) so they line up with the session record;
durations inside the link are measured on the monotonic clock.
"""

from __future__ import annotations

import collections
import time
from dataclasses import dataclass
from enum import Enum
from typing import Callable, Protocol


class LinkEventKind(Enum):
    """The kinds of :class:`LinkEvent`."""

    CONNECTED = "connected"        # port open and the handshake done (or skipped)
    LOST = "lost"                  # read/write/in_waiting raised: the port is closed, reconnecting begins
    RETRY = "retry"                # one reconnect attempt failed; detail says why and when the next one is
    RESTORED = "restored"          # the same board is back (uid confirmed); ``gap`` spans the outage
    CLOSED = "closed"              # the link was stopped by its owner
    RESET = "reset"                # the board rebooted (a frame with the BOOT flag, or its sequence restarted)


@dataclass(frozen=True)
class LinkGap:
    """An outage of the link: from the moment it was lost to the moment the board was back.

    What the board sent meanwhile is unknown, so ``bytes_lost`` and ``frames_lost`` are ``None``; the decoder's
    sequence accounting counts the frames it can prove missing once the stream resumes.
    """

    start_ns: int
    end_ns: int
    bytes_lost: int | None = None
    frames_lost: int | None = None

    @property
    def duration_s(self) -> float:
        """Length of the outage [s]."""
        return (self.end_ns - self.start_ns) / 1e9


@dataclass(frozen=True)
class LinkEvent:
    """One change in the state of the link.

    ``port`` is the path or URL in use (after a replug it may differ from the one first opened); ``detail`` is a
    line for a person (the exception text for ``LOST``, the new path and outage length for ``RESTORED``).
    ``retry_in_s`` is the backoff before the next attempt, on ``RETRY`` events only.
    """

    kind: LinkEventKind
    host_time_ns: int
    port: str
    detail: str = ""
    gap: LinkGap | None = None
    retry_in_s: float | None = None


class ChunkSubscriber(Protocol):
    """Called from the reader thread with each chunk as read, its host arrival time [ns] and its decoded items."""

    def __call__(self, chunk: bytes, host_time_ns: int, items: list) -> None: ...


EventSubscriber = Callable[[LinkEvent], None]


class ByteRateMeter:
    """The measured byte rate of a link (USB CDC ignores the configured baud rate, so only a measurement counts).

    Keeps (monotonic time, cumulative bytes) marks at most every ``step_s`` and reports the rate over the last
    ``window_s``. Not thread-safe: one reader thread adds, others read the last computed figures.
    """

    def __init__(self, window_s: float = 2.0, step_s: float = 0.1, clock: Callable[[], float] = time.monotonic):
        self._clock = clock
        self._window_s = window_s
        self._step_s = step_s
        self._marks: collections.deque[tuple[float, int]] = collections.deque()
        self.total = 0
        self._started = clock()

    def add(self, n: int) -> None:
        """Count ``n`` bytes received now."""
        now = self._clock()
        if not self._marks or now - self._marks[-1][0] >= self._step_s:
            self._marks.append((now, self.total))  # bytes counted before this chunk arrived
            while len(self._marks) > 2 and now - self._marks[0][0] > self._window_s:
                self._marks.popleft()
        self.total += n

    def rate(self) -> float:
        """Bytes per second over about the last window, up to now (so it falls when the data stop) [B/s]."""
        now = self._clock()
        marks = list(self._marks)  # a snapshot: the reader thread may append meanwhile
        recent = [m for m in marks if now - m[0] <= self._window_s] or marks[-1:]
        if not recent or now - recent[0][0] < self._step_s:
            return self.mean_rate()
        t0, n0 = recent[0]
        return (self.total - n0) / (now - t0)

    def mean_rate(self) -> float:
        """Bytes per second since the meter was made [B/s]."""
        elapsed = self._clock() - self._started
        return self.total / elapsed if elapsed > 0 else 0.0
