"""The notebook API: ``taprig.open_session(path)`` → a :class:`Session` with pandas DataFrames.

>>> s = taprig.open_session("run.taprig")               # doctest: +SKIP
>>> s.scans()[["t_s", "q_pa", "cl"]].describe()          # doctest: +SKIP

Everything is read from the file when asked for: ``scans()`` replays the session (decode and reduce, as
``taprig replay --fast`` does) and holds the whole table in memory; for a long session iterate over
``iter_scans()`` instead, one DataFrame of ~64k scans at a time. ``summary()`` is what ``taprig info --json``
prints.
"""

from __future__ import annotations

import json
from functools import cached_property
from pathlib import Path
from typing import Callable, Iterator

import pandas as pd
import pyarrow as pa

from taprig.protocol import RawBlock, StreamDecoder
from taprig.rig import Calibration, Rig
from taprig.session.export import points_frame, scan_schema, scan_tables
from taprig.session.meta import description_from_meta
from taprig.session.replay import Replay, rig_from_session, session_start_ns
from taprig.session.store import SessionReader

Progress = Callable[[int, int], None]


def decode_all(reader: SessionReader, progress: Progress | None = None) -> dict:
    """Decode every chunk (no reduction): the decoder's counters, scans decoded and first/last device times."""
    decoder = StreamDecoder(description_from_meta(reader.meta))
    total = reader.chunk_summary()[0]
    scans, first, last = 0, None, None
    for done, chunk in enumerate(reader.chunks(), start=1):
        for item in decoder.feed(chunk.data):
            if isinstance(item, RawBlock):
                scans += item.n_scans
                first = int(item.t_ns[0]) if first is None else first
                last = int(item.t_ns[-1])
        if progress is not None and (done % 256 == 0 or done == total):
            progress(done, total)
    return {"counters": decoder.counters.as_dict(), "scans": scans, "first_t_ns": first, "last_t_ns": last}


def stored_counters(meta: dict[str, str]) -> dict | None:
    """The live decoder counters stored in ``meta`` at stop, or None (a run that was killed never stored them)."""
    try:
        value = json.loads(meta["counters"])
    except (KeyError, ValueError):
        return None
    return value if isinstance(value, dict) else None


class Session:
    """One session file, read-only. See the module docstring.

    Parameters
    ----------
    path : str or Path
        The ``.taprig`` file.
    calibration : Calibration, optional
        Reduce with this calibration instead of the session's own (``scans()`` and ``iter_scans()``).
    """

    def __init__(self, path: str | Path, calibration: Calibration | None = None):
        self.path = Path(path)
        self.calibration = calibration
        self._reader = SessionReader(self.path)

    def close(self) -> None:
        """Close the file."""
        self._reader.close()

    def __enter__(self) -> Session:
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def __repr__(self) -> str:
        return f"<taprig Session {self.path.name}: rig {self.meta.get('rig_id')!r}, started {self.meta.get('started_utc')}>"

    @property
    def meta(self) -> dict[str, str]:
        """The session's metadata (key → text)."""
        return dict(self._reader.meta)

    @cached_property
    def rig(self) -> Rig:
        """The rig model of the session's rig snapshot."""
        return rig_from_session(self._reader)

    @property
    def start_ns(self) -> int | None:
        """Host time the session started [ns since the epoch]."""
        return session_start_ns(self._reader)

    def _entries(self, entries, value_name: str) -> pd.DataFrame:
        start = self.start_ns or 0
        return pd.DataFrame({
            "host_t_s": [(e.host_ns - start) / 1e9 for e in entries], "kind": [e.kind for e in entries],
            value_name: [e.data for e in entries],
        })

    def events(self) -> pd.DataFrame:
        """Operator events: ``host_t_s`` [s since the start], ``kind``, ``data`` (decoded JSON)."""
        return self._entries(self._reader.events(), "data")

    def link_events(self) -> pd.DataFrame:
        """Link events (connected, lost, restored, reset): ``host_t_s``, ``kind``, ``detail``."""
        return self._entries(self._reader.link_events(), "detail")

    def points(self) -> pd.DataFrame:
        """Captured points: ``host_t_s``, ``label`` and the point's data flattened (``cp.<tap>``, ``plain.cl``…)."""
        return points_frame(self._reader)

    def replay(self, **options) -> Replay:
        """A :class:`~taprig.session.replay.Replay` of this session (same options as its constructor)."""
        options.setdefault("calibration", self.calibration)
        return Replay(self._reader, **options)

    def iter_scans(self) -> Iterator[pd.DataFrame]:
        """The scan table in DataFrames of ~64k scans, in order (columns of docs/session-format.md)."""
        for table in scan_tables(self.replay()):
            yield table.to_pandas()

    def scans(self) -> pd.DataFrame:
        """The whole scan table as one DataFrame (columns of docs/session-format.md)."""
        replay = self.replay()
        tables = list(scan_tables(replay))
        return pa.concat_tables(tables).to_pandas() if tables else \
            scan_schema(replay.rig, replay.reducer).schema.empty_table().to_pandas()

    @cached_property
    def decoded(self) -> dict:
        """Decoder counters and scan count of the whole file (decoded once, on first use)."""
        return decode_all(self._reader)

    @property
    def counters(self) -> dict[str, int]:
        """The decoder counters of the whole file, decoded afresh (frames, crc_errors, gaps, scans_lost, …)."""
        return dict(self.decoded["counters"])

    @property
    def live_counters(self) -> dict | None:
        """The counters the live run stored at stop, if it stopped cleanly."""
        return stored_counters(self._reader.meta)

    def summary(self, progress: Progress | None = None) -> dict:
        """What ``taprig info --json`` prints: the session's identity, duration, counts and counters."""
        if progress is not None and "decoded" not in self.__dict__:
            self.__dict__["decoded"] = decode_all(self._reader, progress)
        return session_summary(self._reader, self.decoded)


def _duration_s(meta: dict[str, str], first_ns: int | None, last_ns: int | None, start_ns: int | None) -> float:
    try:
        return (int(meta["host_stopped_ns"]) - int(meta["host_started_ns"])) / 1e9
    except (KeyError, ValueError):
        if last_ns is None or start_ns is None:
            return 0.0
        return (last_ns - start_ns) / 1e9


#: A session without a stop time whose write-ahead log changed this recently [s] is taken as still being recorded
#: (a recorder commits at least every 250 ms while data flows); older, it was not stopped cleanly.
RECORDING_FRESH_S = 5.0


def being_recorded(path: str | Path) -> bool:
    """True if another process appears to be recording ``path`` now: its ``-wal`` file changed within
    :data:`RECORDING_FRESH_S`. (A run that was killed leaves the ``-wal`` file, but it stops changing.)"""
    import time

    try:
        return time.time() - Path(f"{path}-wal").stat().st_mtime < RECORDING_FRESH_S
    except OSError:
        return False


def session_summary(reader: SessionReader, decoded: dict) -> dict:
    """Summary of a session from its reader and :func:`decode_all`'s result (see :meth:`Session.summary`)."""
    meta = reader.meta
    n_chunks, n_bytes, first_ns, last_ns = reader.chunk_summary()
    counters, live = decoded["counters"], stored_counters(meta)
    link_events = reader.link_events()
    differing = None if live is None else sorted(k for k in counters if k in live and live[k] != counters[k])
    return {
        "path": str(reader.path), "format_version": int(meta.get("format_version", 0)),
        "software": meta.get("software"), "rig": meta.get("rig_id"), "rig_name": meta.get("rig_name"),
        "port": meta.get("port"), "started": meta.get("started_utc"), "stopped": meta.get("stopped_utc"),
        "being_recorded": meta.get("stopped_utc") is None and being_recorded(reader.path),
        "duration_s": _duration_s(meta, first_ns, last_ns, session_start_ns(reader)),
        "chunks": n_chunks, "bytes": n_bytes, "scans": decoded["scans"], "frames": counters["frames"],
        "crc_errors": counters["crc_errors"], "framing_errors": counters["framing_errors"],
        "gaps": counters["gaps"], "frames_lost": counters["frames_lost"], "scans_lost": counters["scans_lost"],
        "resets": counters["resets"], "events": len(reader.events()), "points": len(reader.points()),
        "link_events": len(link_events), "link_outages": sum(1 for e in link_events if e.kind == "lost"),
        "recording_error": meta.get("recording_error"), "counters": counters, "live_counters": live,
        "counters_match": None if live is None else not differing, "counters_differing": differing or [],
        "assumptions": session_assumptions(reader),
    }


def session_assumptions(reader: SessionReader) -> list[str]:
    """What the session's reduction assumes (the freestream static's source, the speed relation, the
    calibration in force at the start), or why its rig cannot be reduced."""
    from taprig.reduce import ReduceError, stated_assumptions
    from taprig.rig import RigError
    from taprig.session.replay import ReplayError, calibrations_from_session

    try:
        calibrations = calibrations_from_session(reader)
        return list(stated_assumptions(rig_from_session(reader), calibrations[0][1] if calibrations else None))
    except (ReduceError, ReplayError, RigError, ValueError) as exc:
        return [f"cannot reduce: {exc}"]


def open_session(path: str | Path, calibration: Calibration | None = None) -> Session:
    """Open a session file for study: ``.meta``, ``.rig``, ``.events()``, ``.points()``, ``.scans()``,
    ``.counters`` (see :class:`Session`). Raises :class:`~taprig.session.store.SessionError` for a file that is
    not a session, is damaged, or is of a newer format version."""
    return Session(path, calibration)
