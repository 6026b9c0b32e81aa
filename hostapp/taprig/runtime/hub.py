"""The hub: the latest state of a run, fanned out to any number of subscribers without slowing the producer.

The acquisition loop publishes; viewers (the terminal display, the dashboard's event stream, a sweep waiting for
a steady point) subscribe. Each subscription holds only the newest value it has not yet taken ("latest wins"):
a slow viewer misses intermediate updates but never makes the publisher wait or memory grow. The recorder is not
a hub subscriber: it gets every chunk from the acquisition loop directly, so nothing recorded is ever skipped.
"""

from __future__ import annotations

import threading
from collections import deque
from typing import Any, Callable, Generic, TypeVar

T = TypeVar("T")


class Subscription(Generic[T]):
    """A mailbox of one: ``get`` returns the newest value published since the last ``get``."""

    def __init__(self, hub: "Hub[T]"):
        self._hub = hub
        self._cond = threading.Condition()
        self._value: Any = None
        self._fresh = False
        self.missed = 0  # updates overwritten before this subscriber took them

    def _offer(self, value: T) -> None:
        with self._cond:
            if self._fresh:
                self.missed += 1
            self._value = value
            self._fresh = True
            self._cond.notify_all()

    def get(self, timeout: float | None = None) -> T | None:
        """Wait up to ``timeout`` seconds for a value not yet taken; return it, or ``None`` on timeout/close."""
        with self._cond:
            if not self._cond.wait_for(lambda: self._fresh or self._hub.closed, timeout):
                return None
            if not self._fresh:
                return None
            self._fresh = False
            return self._value

    def close(self) -> None:
        """Stop receiving updates."""
        self._hub._unsubscribe(self)
        with self._cond:
            self._cond.notify_all()

    def __enter__(self) -> "Subscription[T]":
        return self

    def __exit__(self, *exc) -> None:
        self.close()


class Hub(Generic[T]):
    """Latest value, a bounded history, and latest-wins fan-out.

    ``history`` keeps at most ``history_len`` entries (a deque): memory stays flat over a run of hours. Each entry
    is ``summarize(value)`` — a few numbers for a trend plot, not the whole value, which can hold megabytes of
    arrays when the producer hands over large blocks — or the value itself when no ``summarize`` is given.
    """

    def __init__(self, history_len: int = 600, summarize: Callable[[T], Any] | None = None):
        self._lock = threading.Lock()
        self._subs: list[Subscription[T]] = []
        self._summarize = summarize
        self.history: deque = deque(maxlen=history_len)
        self.latest: T | None = None
        self.published = 0
        self.closed = False

    def publish(self, value: T) -> None:
        """Make ``value`` the latest, append it to the history and offer it to every subscriber."""
        with self._lock:
            self.latest = value
            self.history.append(value if self._summarize is None else self._summarize(value))
            self.published += 1
            subs = list(self._subs)
        for sub in subs:
            sub._offer(value)

    def subscribe(self) -> Subscription[T]:
        """Return a new subscription; it first sees the next value published."""
        sub: Subscription[T] = Subscription(self)
        with self._lock:
            self._subs.append(sub)
        return sub

    def snapshot(self) -> list:
        """Return a copy of the history, oldest first."""
        with self._lock:
            return list(self.history)

    def close(self) -> None:
        """Wake every subscriber; their ``get`` returns ``None`` from now on."""
        with self._lock:
            self.closed = True
            subs = list(self._subs)
        for sub in subs:
            with sub._cond:
                sub._cond.notify_all()

    def _unsubscribe(self, sub: Subscription[T]) -> None:
        with self._lock:
            if sub in self._subs:
                self._subs.remove(sub)

    @property
    def subscriber_count(self) -> int:
        """How many subscriptions are open."""
        with self._lock:
            return len(self._subs)
