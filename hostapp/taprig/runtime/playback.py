"""Playback: a recorded session replayed for the dashboard, with play, pause, speed, seek and recalibration.

The session's bytes go through :class:`taprig.session.replay.Replay`, the same decoder and reducer as the live
run, so the page shows the numbers the run showed (or, recalibrated, what it would have shown). Every control
restarts the replay from the current position: pacing then starts afresh, and a seek decodes up to the new
position without reducing (the decoder's counters stay true).
"""

from __future__ import annotations

import math
import threading
from pathlib import Path

from taprig.protocol import RawBlock
from taprig.reduce import Reducer
from taprig.rig import Calibration
from taprig.runtime.acquisition import LiveState, _Window
from taprig.runtime.hub import Hub
from taprig.runtime.station import Display
from taprig.runtime.viewframe import num, point_record_summary, rig_description
from taprig.session.replay import Replay, ReplayError
from taprig.session.store import SessionError, SessionReader

#: Replay speeds the page offers (× real time); 0 stands for "as fast as the host can".
SPEEDS = (0.25, 0.5, 1.0, 2.0, 5.0, 10.0, 0.0)


class _Source:
    """What the display reads of a replay: the hub, a window of recent raw scans, the reducer and angle now."""

    def __init__(self, reducer: Reducer):
        self.hub: Hub[LiveState] = Hub(summarize=LiveState.summary)
        self.reducer = reducer
        self.alpha_rad: float | None = None
        self._window = _Window(30.0)
        self._lock = threading.Lock()

    def add(self, block: RawBlock) -> None:
        with self._lock:
            self._window.add(block)

    def recent(self, seconds: float) -> RawBlock | None:
        with self._lock:
            return self._window.last(seconds)

    def clear(self) -> None:
        with self._lock:
            self._window.blocks.clear()


class Playback(Display):
    """Replay ``path`` for viewers; controls from any thread (:meth:`play`, :meth:`pause`, :meth:`seek`, ...)."""

    def __init__(self, path: str | Path, calibration: Calibration | None = None, speed: float = 1.0):
        self.path = Path(path)
        probe = Replay(self.path, calibration=calibration)  # refuses a damaged or foreign file now, with its reason
        try:
            reducer, self.rig, self.meta = probe.reducer, probe.rig, dict(probe.meta)
            self.start_ns = probe.start_ns or 0
            _, _, _, last_ns = probe.reader.chunk_summary()
            self.duration_s = max(((last_ns or self.start_ns) - self.start_ns) / 1e9, 0.0)
            records = probe.reader.points()
        finally:
            probe.close()
        super().__init__(_Source(reducer))
        self.calibration = calibration
        self.calibration_name = "the session's own calibration" if calibration is None else "a calibration file"
        self.speed = speed
        self.position_s = 0.0
        self.playing = False
        self.finished = False
        self.error = ""
        self.counters: dict = {}
        self.points = [point_record_summary(i + 1, e.kind, e.data) for i, e in enumerate(records)
                       if isinstance(e.data, dict)]
        self._restart = threading.Event()
        self._wake = threading.Condition()
        self._player = threading.Thread(target=self._play_loop, name="taprig-playback", daemon=True)
        self._thread.start()
        self._player.start()

    # -- controls -------------------------------------------------------------------------------------------
    def play(self) -> None:
        """Play from the current position (from the start again at the end)."""
        if self.finished:
            self.position_s = 0.0
        self._control(playing=True)

    def pause(self) -> None:
        """Pause where it is."""
        self._control(playing=False)

    def set_speed(self, speed: float) -> None:
        """Play at ``speed`` × real time (0: as fast as possible)."""
        if speed not in SPEEDS:
            raise ValueError("speed must be one of " + ", ".join("max" if s == 0 else f"{s:g}" for s in SPEEDS))
        self._control(speed=speed)

    def seek(self, seconds: float) -> None:
        """Go to ``seconds`` after the session start (shows that moment; keeps playing if it was)."""
        if not (math.isfinite(seconds) and 0 <= seconds <= self.duration_s):
            raise ValueError(f"seek: give a time between 0 and {self.duration_s:.1f} s")
        self._control(position_s=float(seconds))

    def recalibrate(self, calibration: Calibration | None, name: str) -> None:
        """Reduce from now on with ``calibration`` (None: the session's own), restarting at the current position."""
        probe = Replay(self.path, calibration=calibration)  # refuses a calibration for another rig, with the reason
        try:
            self.source.reducer = probe.reducer
        finally:
            probe.close()
        self.calibration, self.calibration_name = calibration, name
        self._control()
        self.notify(f"re-reduced with {name}")

    def _control(self, **changes) -> None:
        with self._wake:
            for key, value in changes.items():
                setattr(self, key, value)
            self.finished = False
            self._restart.set()
            self._wake.notify_all()

    # -- what the page asks ---------------------------------------------------------------------------------
    def describe(self) -> dict:
        """The rig as recorded, and the playback's own facts (file, duration, speeds)."""
        out = rig_description(self.source.reducer)
        out.update({"can_record": False, "real_board": False, "port": self.meta.get("port", ""),
                    "session": {"path": str(self.path), "duration_s": self.duration_s,
                                "started_utc": self.meta.get("started_utc", ""), "speeds": list(SPEEDS)}})
        return out

    def status(self, state: LiveState | None) -> dict:
        """Position, speed and the decoder's counters so far, for a display update."""
        return {"mode": "replay", "playback": {"position_s": num(self.position_s), "duration_s": self.duration_s,
                                               "calibration": self.calibration_name,
                                               "playing": self.playing, "speed": self.speed,
                                               "finished": self.finished, "error": self.error},
                "link": {"state": "replay", "counters": self.counters, "rates": {}, "board": None,
                         "last_log": "", "age_s": None},
                "points": len(self.points), "setpoints": {}, "recording": {"on": False}}

    # -- the player thread ------------------------------------------------------------------------------------
    def _play_loop(self) -> None:
        shown_once = False
        while not self._closed.is_set():
            with self._wake:
                if not self.playing and shown_once and not self._restart.is_set():
                    self._wake.wait(0.5)
                    continue
            self._restart.clear()
            shown_once = True
            self._play_from(self.position_s, show_only=not self.playing)

    def _play_from(self, seek_s: float, show_only: bool) -> None:
        """Replay from ``seek_s`` until the end, a control or close; with ``show_only`` just the first step."""
        self.source.clear()
        try:
            replay = Replay(self.path, calibration=self.calibration, speed=self.speed or None,
                            seek_s=min(seek_s, self.duration_s), hold=False)  # the display averages chunks' blocks
        except (ReplayError, ValueError) as exc:
            self.error, self.playing = str(exc), False
            return
        with replay:
            for step in replay:
                if self._closed.is_set() or self._restart.is_set():
                    return
                self._publish(step, replay)
                if show_only:
                    return
        self.finished, self.playing = True, False
        self.notify("end of the session")

    def _publish(self, step, replay: Replay) -> None:
        if not step.blocks:
            return
        for block in step.blocks:
            self.source.add(block.raw)
        self.source.alpha_rad = replay.angles.at(step.host_ns)
        self.source.reducer = replay.reducer_in_force(step.host_ns)
        self.position_s = (step.host_ns - self.start_ns) / 1e9
        self.counters = replay.counters.as_dict()
        last = step.blocks[-1]
        state = LiveState(step.host_ns, last.reduced, self.counters, "replay", {}, 0, {}, 0)
        self.source.hub.publish(state)

    def close(self) -> None:
        """Stop playing and the display thread."""
        self._closed.set()
        with self._wake:
            self._wake.notify_all()
        super().close()
        self._player.join(2)


def session_files(folder: str | Path, limit: int = 500) -> list[dict]:
    """Session files in ``folder`` (newest first): name, size and, when readable, rig, start and duration."""
    out = []
    root = Path(folder)
    if not root.is_dir():
        return out
    paths = sorted(root.glob("*.taprig"), key=lambda p: p.stat().st_mtime, reverse=True)[:limit]
    for path in paths:
        entry = {"name": path.name, "bytes": path.stat().st_size}
        try:
            with SessionReader(path) as reader:
                meta = reader.meta
                chunks, _, first, last = reader.chunk_summary()
                entry.update({"rig": meta.get("rig_id", ""), "started_utc": meta.get("started_utc", ""),
                              "chunks": chunks, "points": len(reader.points()),
                              "duration_s": ((last or 0) - (first or 0)) / 1e9 if chunks else 0.0})
        except (SessionError, OSError, ValueError) as exc:  # listed with why it cannot be opened
            entry["problem"] = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        out.append(entry)
    return out
