"""What a handout shows of one session, gathered from the layers below: nothing here computes a physical quantity.

The points are the session's own point records (``taprig.session``), the analysis is
:func:`taprig.analysis.analyse_points`, the curves drawn through and beside the taps are
:mod:`taprig.reduce.curves`' with the reducer the session's replay builds for each point's time, the counters are
a fresh decode of every stored byte (as ``taprig info``), and the sentences on assumptions are the reducer's.

What is decided here is only what may be shown as a number: a point whose state is no flow, an invalid
reference, a saturated reading without its uncertainty, an implausible speed, or a calibration that failed its
own checks is a state in words, never a number (:func:`point_state`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path
from types import SimpleNamespace

import numpy as np

from taprig.analysis import SweepAnalysis, analyse_points
from taprig.analysis.wording import as_number
from taprig.reduce import ReduceError
from taprig.reduce.curves import Curve, reference_curves, shape_fit_curve
from taprig.rig import Calibration, Rig, RigError, RigKind
from taprig.runtime.viewframe import point_record_summary
from taprig.session.api import Session, session_summary
from taprig.session.replay import Replay, ReplayError, calibrations_from_session
from taprig.session.store import SessionError


class HandoutError(Exception):
    """A handout that cannot be made, with one sentence naming the file and what was expected; ``code`` is the
    command's exit status (1: the file is there but holds nothing to hand out; 2: it is not a usable input)."""

    def __init__(self, message: str, code: int = 1):
        super().__init__(message)
        self.code = code


#: States of a point that keep all its numbers off the page (words for the reader).
NO_NUMBERS = ("no flow", "reference invalid", "implausible", "bad calibration", "saturated")


def point_state(record: dict, calibration_failed: bool) -> str:
    """"" for a point whose numbers may be shown, else its state in words (:data:`NO_NUMBERS`).

    A point's flags are the OR over its scans, so a single wind-off scan sets NO_FLOW: whether the reducer made
    the point's values decides flow, as on the dashboard (:func:`taprig.runtime.viewframe.point_record_summary`).
    A saturated channel is left out of the integrals by the reducer; the point stays a number only while q and its
    uncertainty stand (a saturated reference leaves q without one).
    """
    if calibration_failed:
        return "bad calibration"
    flags = set(record.get("flags") or ())
    if "BEYOND_RIG" in flags:
        return "implausible"
    state = point_record_summary(0, "", record)["state"]
    if state != "flow":
        return state
    if "SATURATED" in flags and (record.get("u_q_pa") is None or record.get("q_pa") is None):
        return "saturated"
    return ""


@dataclass(frozen=True, eq=False)
class PointView:
    """One point as the handout shows it: its label, record, state ("" = numbers stand), direction of the sweep
    ("up", "down" or ""), and the fit curve through its taps (None where the rig has none)."""

    label: str
    record: dict
    state: str
    leg: str
    host_ns: int
    fit: Curve | None = None

    @property
    def shown(self) -> bool:
        """True when the point's numbers may be shown."""
        return not self.state

    @property
    def saturated_taps(self) -> bool:
        """True when the reducer left saturated taps out of a point that otherwise stands."""
        return self.shown and "SATURATED" in (self.record.get("flags") or ())


@dataclass(frozen=True, eq=False)
class SessionContent:
    """Everything one session contributes to a handout (see the module docstring)."""

    path: Path
    meta: dict
    rig: Rig
    points: tuple[PointView, ...]
    analysis: SweepAnalysis | None
    summary: dict
    calibration: Calibration | None
    calibration_failed: bool
    assumptions: tuple[str, ...]
    reference: tuple[Curve, ...]
    tap_names: tuple[str, ...]
    density: float
    ambient_stored: bool
    ambient: object
    notes: list = field(default_factory=list)

    @property
    def shown(self) -> tuple[PointView, ...]:
        """The points whose numbers stand."""
        return tuple(p for p in self.points if p.shown)

    @property
    def title(self) -> str:
        return self.meta.get("rig_name") or self.rig.name


def _leg(record: dict) -> str:
    """The sweep direction a point record carries, read defensively ("" when none or not a word we know)."""
    for key in ("leg", "direction"):
        value = record.get(key)
        if isinstance(value, str) and value.lower() in ("up", "down"):
            return value.lower()
    return ""


def _fit_curve(reducer, record: dict, kind: RigKind) -> Curve | None:
    """The shape fit through the point's recorded tap Cp (:func:`taprig.reduce.curves.shape_fit_curve`)."""
    if kind is not RigKind.AIRFOIL or record.get("shape") is None:
        return None
    cp_map = record.get("cp") or {}
    cp = np.array([as_number(cp_map.get(name)) for name in reducer.tap_names])
    excluded = tuple(n for n, c in zip(reducer.tap_names, cp) if not math.isfinite(c))
    mean = SimpleNamespace(cp=cp, shape=record.get("shape"), excluded_taps=excluded)
    try:
        return shape_fit_curve(reducer, mean)
    except (ValueError, ReduceError):
        return None


def load_session(path: str | Path, coefficients: str = "best") -> SessionContent:
    """Read ``path`` for a handout; :class:`HandoutError` (one sentence) when it cannot be one."""
    path = Path(path)
    if not path.exists():
        raise HandoutError(f"{path}: no such file (expected a session file written by taprig, .taprig)", 2)
    if path.is_dir():
        raise HandoutError(f"{path}: is a folder; expected a session file (.taprig)", 2)
    try:
        session = Session(path)
    except SessionError as exc:
        raise HandoutError(str(exc).splitlines()[0] or f"{path}: not a taprig session file", 2) from None
    try:
        with session:
            return _load(session, path, coefficients)
    except (SessionError, ReplayError, RigError, ReduceError) as exc:
        raise HandoutError(f"{path}: {str(exc).splitlines()[0]}" if str(path) not in str(exc)
                           else str(exc).splitlines()[0], 2) from None


def _load(session: Session, path: Path, coefficients: str) -> SessionContent:
    reader = session._reader
    entries = reader.points()
    if not entries:
        raise HandoutError(f"{path}: the session holds no points (a handout shows captured points: run "
                           "`taprig sweep`, or capture points from the dashboard while recording)", 1)
    meta = session.meta
    summary = session_summary(reader, session.decoded)
    replay = Replay(reader)
    rig = replay.rig
    calibrations = calibrations_from_session(reader)
    first_ns = min(e.host_ns for e in entries)
    in_force = [c for t, c in calibrations if t <= first_ns] or [c for _, c in calibrations[:1]]
    calibration = in_force[-1] if in_force else None
    points = []
    for entry in entries:
        record = entry.data if isinstance(entry.data, dict) else {}
        reducer = replay.reducer_in_force(entry.host_ns)
        failed = bool(reducer.calibration_warning)
        state = point_state(record, failed)
        fit = _fit_curve(reducer, record, rig.kind) if not state else None
        points.append(PointView(str(entry.kind), record, state, _leg(record), int(entry.host_ns), fit))
    reducer = replay.reducer_in_force(first_ns)
    shown = [p.record for p in points if p.shown]
    analysis = analyse_points(shown, rig, coefficients) if shown else None
    ambient_stored = "ambient_pressure_pa" in meta
    return SessionContent(
        path=path, meta=meta, rig=rig, points=tuple(points), analysis=analysis, summary=summary,
        calibration=calibration, calibration_failed=bool(reducer.calibration_warning),
        assumptions=tuple(reducer.assumptions), reference=tuple(reference_curves(reducer)),
        tap_names=tuple(reducer.tap_names), density=float(reducer.fluid.density), ambient_stored=ambient_stored,
        ambient=reducer.ambient,
    )
