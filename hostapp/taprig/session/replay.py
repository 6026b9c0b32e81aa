"""Replay a session: its stored chunks through a fresh decoder and the run's reducer, as the live run saw them.

The rig comes from the session's rig snapshot (with any section table stored beside it), the calibration from its
calibration snapshots (or one given to re-reduce the run with), the ambient conditions from ``meta``. Chunks are
fed one by one, in recording order, to a fresh :class:`~taprig.protocol.StreamDecoder`, exactly as the link fed
them live, so the decoded messages and the counters are the live ones. Reduction is row by row (every scan's result
depends on that scan's counts, angle and calibration only), so reducing several chunks' scans in one call gives
the same numbers as reducing them one by one; the fast replay does that to save per-call overhead: it tags each
chunk with its arrival time so the decoder holds the scans of many chunks and hands them out as one block (one
conversion to float64 and one reduction per batch), each scan's arrival time and angle still its own chunk's.

What the reducer is given for each chunk, live and in replay alike (see :class:`AngleSchedule`):

- the calibration in force: the first calibration snapshot from the start, each later one from its ``host_ns``;
- the angle of attack: the safe value of the rig's angle actuator until the first ``setpoint`` event naming it,
  then the latest such setpoint whose ``host_ns`` is not after the chunk's.

Seek decodes from the first chunk (so the decoder's sequence and scan state and its counters are exact) but
reduces and paces only from the seek time on; decoding costs a few per cent of a reduction, so this exact method
is also cheap.
"""

from __future__ import annotations

import bisect
import math
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Iterator, Protocol

import numpy as np

from taprig.protocol import ActuatorKind, Counters, RawBlock, StreamDecoder
from taprig.reduce import Ambient, ReducedBlock, ReduceError, Reducer, ambient_for
from taprig.rig import Calibration, Rig, RigError, calibration_from_text, parse_rig
from taprig.session.meta import ambient_from_meta, description_from_meta
from taprig.session.store import Entry, SessionError, SessionReader

#: Scans gathered before one reduction call in a fast replay (large enough to amortise the per-call cost, small
#: enough to stay in cache: 4096 scans × 64 channels of float64 is 2 MB; measured fastest by bench_replay).
FAST_BATCH_SCANS = 4096
#: A paced replay waits at most this long [s of wall time] between two chunks: a pause in the recording (a pulled
#: cable) is played as a short pause, not in full.
MAX_PACED_WAIT_S = 2.0


class ReplayError(SessionError):
    """A session that cannot be replayed (no rig snapshot, a bad snapshot, a calibration of another rig)."""


class Clock(Protocol):
    """What a paced replay needs of time: a monotonic reading [s] and a way to wait [s]."""

    def monotonic(self) -> float: ...

    def sleep(self, seconds: float) -> None: ...


class SystemClock:
    """The process's monotonic clock."""

    def monotonic(self) -> float:
        """Seconds of a monotonic clock."""
        return time.monotonic()

    def sleep(self, seconds: float) -> None:
        """Wait ``seconds``."""
        time.sleep(seconds)


# -- what a session says about its run --------------------------------------------------------------------------

def rig_from_session(reader: SessionReader) -> Rig:
    """The rig model of the session's newest rig snapshot (section tables from its ``section`` snapshots)."""
    snapshots = reader.snapshots("rig")
    if not snapshots:
        raise ReplayError(f"{reader.path}: the session holds no rig snapshot, so it cannot be reduced")
    _, name, text = snapshots[-1]
    attachments = {n: t for _, n, t in reader.snapshots("section")}
    try:
        return parse_rig(text, f"{reader.path} (rig snapshot {name})", attachments)
    except RigError as exc:
        raise ReplayError(str(exc)) from None


def calibrations_from_session(reader: SessionReader) -> list[tuple[int, Calibration]]:
    """The session's calibration snapshots as (host_ns, Calibration), oldest first."""
    out = []
    for host_ns, name, text in reader.timed_snapshots("calibration"):
        try:
            out.append((int(host_ns), calibration_from_text(text, f"{reader.path} (calibration snapshot {name})")))
        except RigError as exc:
            raise ReplayError(str(exc)) from None
    return out


def ambient_of_session(reader: SessionReader, rig: Rig) -> Ambient:
    """The run's ambient conditions from ``meta``, or the rig file's defaults when the session stored none."""
    try:
        return ambient_from_meta(reader.meta) or ambient_for(rig)
    except ValueError as exc:
        raise ReplayError(f"{reader.path}: the ambient conditions in meta are not usable ({exc})") from None


def session_start_ns(reader: SessionReader) -> int | None:
    """Host time the session started [ns since the epoch]: ``host_started_ns``, else the first chunk's time."""
    try:
        return int(reader.meta["host_started_ns"])
    except (KeyError, ValueError):
        return reader.chunk_summary()[2]


class AngleSchedule:
    """The commanded angle of attack [rad] in force at each host time (None for a rig without an angle actuator).

    Built from a session's events, or fed live with :meth:`add` in time order. ``at(host_ns)`` is the safe value
    of the angle actuator until the first setpoint, then the latest setpoint stamped at or before ``host_ns``. On a
    rig with no angle actuator the ``hand angle`` events (an angle the operator set by hand) stand for the
    setpoints, and there is no angle before the first.
    """

    def __init__(self, rig: Rig, events: list[Entry] = ()):
        angle = rig.actuator_of_kind(ActuatorKind.ANGLE)
        self._names = set() if angle is None else {angle.name, angle.id}
        self._default = None if angle is None else float(angle.safe)
        self._times: list[int] = []
        self._values: list[float] = []
        for event in events:
            data = event.data if isinstance(event.data, dict) else {}
            by_hand = event.kind == "hand angle" and not self._names  # a rig with no servo: set by the operator
            if (by_hand or event.kind == "setpoint" and data.get("actuator") in self._names) and "value" in data:
                value = data["value"]
                if isinstance(value, bool) or not isinstance(value, (int, float)):
                    raise ReplayError(f"damaged session: the setpoint event at host_ns {event.host_ns} has value "
                                      f"{value!r}, expected a number in radians")
                self.add(event.host_ns, float(value))

    def add(self, host_ns: int, value: float) -> None:
        """A setpoint of the angle actuator [rad] commanded at ``host_ns``."""
        self._times.append(int(host_ns))
        self._values.append(float(value))

    def at(self, host_ns: int) -> float | None:
        """The angle in force at ``host_ns`` [rad], or None when the rig has no angle actuator."""
        i = bisect.bisect_right(self._times, host_ns) - 1
        return self._default if i < 0 else self._values[i]


# -- replay ------------------------------------------------------------------------------------------------------

@dataclass(frozen=True, eq=False)
class ReplayBlock:
    """Raw scans, their reduction, and the host arrival time of each scan's chunk [int64 ns since the epoch]."""

    raw: RawBlock
    reduced: ReducedBlock
    host_ns: np.ndarray


@dataclass(frozen=True, eq=False)
class ReplayStep:
    """What one step of a replay produced: one chunk when paced, a batch of chunks when fast.

    ``host_ns`` is the arrival time of the step's last chunk; ``chunks_done`` counts chunks read so far (those
    skipped by a seek included); ``items`` the decoded items in arrival order (``RawBlock`` s included).
    """

    host_ns: int
    chunks_done: int
    items: tuple
    blocks: tuple[ReplayBlock, ...]

    @property
    def n_scans(self) -> int:
        """Scans reduced in this step."""
        return sum(b.raw.n_scans for b in self.blocks)


class Replay:
    """Iterate over a session as :class:`ReplayStep` s, paced at ``speed`` × real time or as fast as possible.

    Parameters
    ----------
    session : path or SessionReader
        The session file (opened and closed here) or an open reader (left open).
    calibration : Calibration, optional
        Re-reduce the whole run with this calibration instead of the session's own.
    speed : float, optional
        Replay at ``speed`` × real time, paced on the recorded host times; None: as fast as possible.
    seek_s : float
        Start reducing (and pacing) at this host time after the session start [s]; a seek past the last recorded
        chunk is a :class:`ReplayError` (it would replay nothing).
    clock : Clock, optional
        Time source of a paced replay (tests pass a simulated one).
    batch_scans : int
        In a fast replay, scans gathered before one reduction call (one step).
    hold : bool
        In a fast replay, let the decoder hold the scans of many chunks and hand them out as one block per step
        (the fastest); False: one block per chunk, as live (a display that averages the newest quarter second).

    Attributes ``rig``, ``ambient``, ``reducer``, ``meta``, ``start_ns`` (session start, ns since the epoch),
    ``first_t_ns`` (device time of the first scan, once seen), ``total_chunks`` and ``counters`` (so far).
    """

    def __init__(self, session: str | Path | SessionReader, calibration: Calibration | None = None,
                 speed: float | None = None, seek_s: float = 0.0, clock: Clock | None = None,
                 batch_scans: int = FAST_BATCH_SCANS, hold: bool = True):
        if speed is not None and not speed > 0:
            raise ValueError(f"replay speed must be > 0 (or None for as fast as possible); got {speed}")
        if not (seek_s >= 0 and math.isfinite(seek_s)):
            raise ValueError(f"seek must be a finite number >= 0 s; got {seek_s}")
        self._owns = not isinstance(session, SessionReader)
        self.reader = SessionReader(session) if self._owns else session
        try:
            self.rig = rig_from_session(self.reader)
            self.ambient = ambient_of_session(self.reader, self.rig)
            self.angles = AngleSchedule(self.rig, self.reader.events())
            self._calibrations = [(0, calibration)] if calibration is not None else \
                calibrations_from_session(self.reader)
            # Each calibration holds from its host time on, the sensors' nominal transfer before the first (a
            # calibration given at the start is stamped before the first chunk, so it covers the whole run).
            self._reducers = [self._reducer(None)] + [self._reducer(c) for _, c in self._calibrations]
            self._switch_ns = [t for t, _ in self._calibrations]
        except Exception:
            self.close()
            raise
        self.speed, self.seek_s, self.batch_scans, self.hold = speed, float(seek_s), int(batch_scans), hold
        self.clock = clock or SystemClock()
        self.start_ns = session_start_ns(self.reader)
        self.total_chunks, _, first_ns, last_ns = self.reader.chunk_summary()
        self._first_chunk_ns = first_ns or 0
        self._check_seek(last_ns)
        self.decoder = StreamDecoder(description_from_meta(self.reader.meta))
        self.first_t_ns: int | None = None
        self._origin: tuple[int, float] | None = None

    def _check_seek(self, last_ns: int | None) -> None:
        """Refuse a seek past the last recorded chunk (it would replay nothing), closing the file."""
        if self.seek_s == 0:
            return
        start_ns = self.start_ns or 0
        # in seconds first: a seek far past the end would overflow as nanoseconds; then exactly as __iter__ skips
        if (last_ns is None or (last_ns - start_ns) / 1e9 < self.seek_s
                or last_ns < start_ns + round(self.seek_s * 1e9)):
            self.close()
            held = ("no recorded bytes" if last_ns is None
                    else f"its last bytes arrived {(last_ns - start_ns) / 1e9:.2f} s after the start")
            raise ReplayError(f"{self.reader.path}: seek {self.seek_s:g} s is past the end of the session ({held}); "
                              "nothing to replay")

    def _reducer(self, calibration: Calibration | None) -> Reducer:
        if calibration is not None and calibration.problems_with(self.rig):
            raise ReplayError(f"{self.reader.path}: " + "; ".join(calibration.problems_with(self.rig)))
        try:
            return Reducer(self.rig, calibration, self.ambient)
        except (ReduceError, ValueError) as exc:
            raise ReplayError(f"{self.reader.path}: cannot reduce rig {self.rig.id!r}: {exc}") from None

    @property
    def meta(self) -> dict[str, str]:
        """The session's metadata."""
        return self.reader.meta

    @property
    def reducer(self) -> Reducer:
        """The reducer in force at the first recorded chunk (the whole run's, unless it was zeroed mid-run)."""
        return self._reducers[self.reducer_at(self._first_chunk_ns)]

    @property
    def counters(self) -> Counters:
        """The decoder's counters so far."""
        return self.decoder.counters

    def close(self) -> None:
        """Close the session file if this replay opened it."""
        if self._owns:
            self.reader.close()

    def __enter__(self) -> Replay:
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def reducer_at(self, host_ns: int) -> int:
        """Index of the reducer in force at ``host_ns``: 0 (nominal) before the first calibration's host time."""
        return bisect.bisect_right(self._switch_ns, host_ns)

    def reducer_in_force(self, host_ns: int) -> Reducer:
        """The reducer that reduces a chunk that arrived at ``host_ns`` (see :meth:`reducer_at`)."""
        return self._reducers[self.reducer_at(host_ns)]

    def __iter__(self) -> Iterator[ReplayStep]:
        """Replay from the first chunk (each iteration starts afresh, with a new decoder).

        A fast replay feeds each chunk tagged with its arrival time, so the decoder holds the scans of many chunks
        and hands them out as one block (:class:`~taprig.protocol.StreamDecoder`, holding): one conversion and one
        reduction per batch instead of one per chunk, with every scan's arrival time kept.
        """
        self.decoder = decoder = StreamDecoder(description_from_meta(self.reader.meta))
        self.first_t_ns, self._origin = None, None
        seek_ns = (self.start_ns or 0) + round(self.seek_s * 1e9)
        fast = self.speed is None
        items: list = []
        pending: list[tuple[RawBlock, np.ndarray]] = []
        scans, current, done, last_ns = 0, 0, 0, None

        def take(decoded: list, host_ns: int | None) -> None:
            """Add decoded items to the step; each block with its scans' arrival times."""
            nonlocal scans
            items.extend(decoded)
            tags = iter(decoder.take_tags())
            for item in decoded:
                if isinstance(item, RawBlock):
                    arrival = next(tags) if host_ns is None else np.full(item.n_scans, host_ns, dtype=np.int64)
                    pending.append((item, arrival))
                    scans += item.n_scans
                    if self.first_t_ns is None:
                        self.first_t_ns = int(item.t_ns[0])

        def step(host_ns: int) -> ReplayStep:
            nonlocal items, pending, scans
            out = self._step(host_ns, done, items, pending, current)
            items, pending, scans = [], [], 0
            return out

        for chunk in self.reader.chunks():
            done += 1
            if chunk.host_ns < seek_ns:
                decoded = decoder.feed(chunk.data)  # decoded for the decoder's state and counters; not reduced
                if self.first_t_ns is None:
                    self.first_t_ns = next((int(b.t_ns[0]) for b in decoded if isinstance(b, RawBlock)), None)
                continue
            which = self.reducer_at(chunk.host_ns)
            if which != current:
                take(decoder.flush(), None)  # the held scans were reduced under the reducer before this chunk
                if pending:
                    done -= 1
                    yield step(last_ns)
                    done += 1
            current = which
            if fast and self.hold:
                take(decoder.feed(chunk.data, tag=chunk.host_ns), None)
                last_ns = chunk.host_ns
                if scans + decoder.pending_scans >= self.batch_scans:
                    take(decoder.flush(), None)
                    yield step(chunk.host_ns)
            else:
                take(decoder.feed(chunk.data), chunk.host_ns)
                last_ns = chunk.host_ns
                if not fast:
                    self._wait(chunk.host_ns)
                    yield step(chunk.host_ns)
                elif scans >= self.batch_scans:
                    yield step(chunk.host_ns)
        take(decoder.flush(), None)
        if items:
            yield step(int(pending[-1][1][-1]) if pending else seek_ns)

    def _step(self, host_ns: int, done: int, items: list, pending: list, which: int) -> ReplayStep:
        """Reduce the pending raw blocks (runs of one channel set in one call each) into a step."""
        reducer = self._reducers[which]
        blocks = []
        start = 0
        while start < len(pending):
            end = start + 1
            while end < len(pending) and pending[end][0].channels == pending[start][0].channels:
                end += 1
            run = pending[start:end]
            raw = RawBlock.concat([b for b, _ in run])
            arrival = run[0][1] if len(run) == 1 else np.concatenate([t for _, t in run])
            alpha = self._alpha(reducer, arrival)
            try:
                reduced = reducer.reduce(raw, alpha_rad=alpha)
            except (ReduceError, KeyError, IndexError, ValueError) as exc:  # a block the rig does not fit
                raise ReplayError(f"{self.reader.path}: cannot reduce the scans at host time "
                                  f"{(int(arrival[0]) - (self.start_ns or 0)) / 1e9:.3f} s: {exc}") from None
            blocks.append(ReplayBlock(raw, reduced, arrival))
            start = end
        return ReplayStep(host_ns, done, tuple(items), tuple(blocks))

    def _alpha(self, reducer: Reducer, arrival: np.ndarray):
        """The angle per scan: each scan's chunk arrival time looked up in the schedule."""
        times, inverse = np.unique(arrival, return_inverse=True)
        values = [self.angles.at(int(t)) for t in times]
        if all(v is None for v in values):
            return None
        fixed = reducer.options.alpha_rad
        return np.array([fixed if v is None else v for v in values], dtype=float)[inverse.reshape(-1)]

    def _wait(self, host_ns: int) -> None:
        """Pace a replay: wait until ``host_ns`` is due at ``speed`` × real time from the first replayed chunk."""
        now = self.clock.monotonic()
        if self._origin is None:
            self._origin = (host_ns, now)
            return
        due = self._origin[1] + (host_ns - self._origin[0]) / 1e9 / self.speed
        delay = due - now
        if delay > MAX_PACED_WAIT_S:
            # a long pause in the recording: move the origin so the rest keeps its pace after a short wait
            self._origin = (self._origin[0], self._origin[1] - (delay - MAX_PACED_WAIT_S))
            delay = MAX_PACED_WAIT_S
        if delay > 0:
            self.clock.sleep(delay)
