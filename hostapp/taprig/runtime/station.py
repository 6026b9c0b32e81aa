"""The station: one rig run by an operator from the dashboard, and the display updates its viewers share.

A :class:`Station` wraps a live :class:`~taprig.runtime.acquisition.Acquisition` and offers what the page's
controls do: zero, record on demand, capture a point, a note, actuator setpoints within the rig's limits, a sweep
and the stop that sends every actuator to its safe value. It computes nothing itself: the reducer makes the means,
:mod:`taprig.runtime.viewframe` lays them out.

Display updates are made on one thread, at most ``max_rate_hz`` a second and only while someone watches, from the
mean of the newest ``window_s`` of scans; every viewer gets the same :class:`Frame` (serialised once), latest
wins. A slow viewer misses updates; the acquisition and the record never wait for a viewer. The uncertainty budget
of a mean costs several times its values, so it is made a few times a second (``budget_rate_hz``) and each update
names the window its uncertainties belong to (see :meth:`Display._uncertainties`).
"""

from __future__ import annotations

import json
import math
import threading
import time
from collections import deque
from dataclasses import dataclass, field
from typing import Callable

import numpy as np

from taprig.protocol import ActuatorKind, DeviceState
from taprig.reduce import ReduceError, ScanFlag
from taprig.analysis import find_stall, linear_range_fit, wording
from taprig.runtime.acquisition import Acquisition, AcquisitionError, LiveState
from taprig.runtime.hub import Hub
from taprig.runtime.viewframe import (actuator_value_from_operator, flow_state, num, point_summary, reading,
                                      rig_description, sweep_results)
from taprig.session.store import SessionWriter


TREND_SECONDS = 300.0   # how far back the trend plot reaches
TREND_RATE_HZ = 5.0     # trend samples per second kept for it
DISPLAY_CPU_SHARE = 0.25  # the most of one core that display updates may take (their rate drops before that)
BUDGET_RATE_HZ = 4.0    # full means (with the uncertainty budget) a second; display updates between take their u
BUDGET_CPU_SHARE = 0.02  # the most of one core that the periodic full means may take (their rate drops before)
UNWATCHED_GRACE_S = 5.0  # a sweep started from a control page ends this long after the last control page closed
BUDGET_Q_CHANGE = 0.1   # a full mean describes later windows' uncertainties while q is within 10 % (or 2 u(q)) of its own


def _described_by(mean, full) -> bool:
    """Whether the full mean ``full``'s uncertainties still describe the values-only ``mean`` (see
    :meth:`Display._uncertainties`)."""
    if flow_state(mean)[0] != flow_state(full)[0] or mean.excluded_taps != full.excluded_taps:
        return False
    if not np.array_equal(np.isfinite(mean.cp), np.isfinite(full.cp)):
        return False
    if math.isfinite(mean.q_pa) and math.isfinite(full.q_pa) and math.isfinite(full.u_q_pa):
        # Cp's and the coefficients' uncertainties scale with 1/q: q may move by a tenth, or within its own noise
        return abs(mean.q_pa - full.q_pa) <= max(BUDGET_Q_CHANGE * abs(full.q_pa), 2.0 * full.u_q_pa)
    return math.isfinite(mean.q_pa) == math.isfinite(full.q_pa) and not math.isfinite(full.u_q_pa)


class Frame:
    """One display update: its data and, made once on first use and shared by every viewer, its JSON text."""

    __slots__ = ("data", "_text", "_event", "_lock")

    def __init__(self, data: dict):
        self.data = data
        self._text: bytes | None = None
        self._event: bytes | None = None
        self._lock = threading.Lock()

    def text(self) -> bytes:
        """The update as compact UTF-8 JSON (serialised once for all viewers)."""
        with self._lock:
            if self._text is None:
                self._text = json.dumps(self.data, separators=(",", ":"), allow_nan=False).encode()
            return self._text

    def event(self) -> bytes:
        """The update as one Server-Sent Event, ``data: <JSON>`` and a blank line (made once for all viewers)."""
        if self._event is None:
            self._event = b"data: " + self.text() + b"\n\n"
        return self._event


@dataclass
class SweepStatus:
    """Where a sweep started from the page stands."""

    running: bool = False
    done: int = 0
    total: int = 0
    message: str = ""
    stop: threading.Event = field(default_factory=threading.Event)
    #: A sweep by hand waiting for the operator: ``{"alpha_deg", "leg", "index"}`` of the angle to set, else None.
    asking: dict | None = None
    answer: list = field(default_factory=list)
    answered: threading.Event = field(default_factory=threading.Event)
    #: Set to end the sweep at once, mid-wait (STOP, the page that ran it closed, the server closing); the
    #: sentence says why. ``stop`` instead ends it after the point being taken.
    abort: threading.Event = field(default_factory=threading.Event)
    abort_reason: str = ""
    #: ``"angle"``, ``"fan"`` or ``"nested"``; the plan; the point being taken (:meth:`SweepStatus.view`); the
    #: records of the sweep's points so far (with those carried from a resumed session first).
    kind: str = ""
    plan: object = None
    current: dict | None = None
    records: list = field(default_factory=list)
    resumed_from: str | None = None
    leased: bool = False  # started from a control page: ends when the last one closes (Station.control_page)

    def view(self) -> dict:
        """The sweep's state as the page shows it (point k of at most N, its leg, fan setting and angle)."""
        return {"running": self.running, "done": self.done, "total": self.total, "message": self.message,
                "asking": self.asking, "kind": self.kind, "current": self.current, "taken": len(self.records),
                "exact": getattr(self.plan, "past_stall", None) is None, "resumed_from": self.resumed_from}


class _Abortable:
    """The acquisition as a page sweep sees it: the same object, except that once ``status.abort`` is set every
    wait ends at once (:meth:`check_running` raises) and nothing but a safe value may be sent, so a STOP, a closed
    page or a closing server end a sweep mid-point instead of after it. ``watch`` is called at each check (the
    station's lease on the page that started the sweep)."""

    def __init__(self, acq, status: SweepStatus, watch: Callable[[], None]):
        self._acq, self._status, self._watch = acq, status, watch

    def __getattr__(self, name):
        return getattr(self._acq, name)

    def check_running(self) -> None:
        self._watch()
        if self._status.abort.is_set():
            raise AcquisitionError(self._status.abort_reason or "sweep stopped")
        self._acq.check_running()

    def set_actuator(self, name: str, value: float, *args, **kwargs):
        actuator = next((a for a in self._acq.rig.actuators if a.name == name), None)
        if self._status.abort.is_set() and (actuator is None or value != actuator.safe):
            raise AcquisitionError(self._status.abort_reason or "sweep stopped")
        return self._acq.set_actuator(name, value, *args, **kwargs)


class PageOperator:
    """The operator at the page sets each angle of a sweep by hand: the sweep waits (its status says which angle
    it asks for) until :meth:`Station.hand_angle_set` answers, the operator stops the sweep, or the run ends."""

    def __init__(self, acq, status: SweepStatus, notify: Callable[[str], None]):
        self.acq, self.status, self.notify = acq, status, notify

    def set_angle(self, point) -> float | None:
        status = self.status
        status.answer.clear()
        status.answered.clear()
        asked = math.degrees(point.alpha_rad)
        status.asking = {"alpha_deg": asked, "leg": point.leg, "index": point.index}
        self.notify(f"sweep by hand: set the model to α = {asked:+.1f}° ({point.leg}), hands clear, then confirm")
        try:
            while not status.answered.wait(0.2):
                self.acq.check_running()  # the run is ending, or the board went safe: stop waiting
                if status.stop.is_set():
                    return None
        finally:
            status.asking = None
        value = status.answer[0] if status.answer else None
        return None if value is None else math.radians(value)


class Display:
    """Display updates of a run (live or replayed) for any number of viewers: one thread, latest wins.

    Subclasses give ``source`` (with ``hub``, ``recent(seconds)``, ``reducer``, ``alpha_rad``) and ``status()``
    (what else the page shows: link, setpoints, recording, sweep or playback).
    """

    def __init__(self, source, window_s: float = 0.25, max_rate_hz: float = 25.0,
                 budget_rate_hz: float = BUDGET_RATE_HZ):
        self.source = source
        self.window_s = window_s
        self.min_interval = 1.0 / max_rate_hz
        self.budget_interval = 1.0 / budget_rate_hz
        self._budget: tuple | None = None  # ((reducer, alpha, full mean, its scans), monotonic time it was made)
        self._budget_cost = 0.0  # thread CPU time [s] of the newest full mean
        self.frames: Hub[Frame] = Hub(history_len=1)
        self.notices: list[dict] = []  # what the operator was told, newest last (bounded)
        self.points: list[dict] = []  # captured points (viewframe.point_summary), in capture order
        self.trend: deque = deque(maxlen=int(TREND_SECONDS * TREND_RATE_HZ))  # (host_ns, q, Cl), ≥ 5 minutes
        self._lock = threading.Lock()
        self._closed = threading.Event()
        self._seq = 0
        self._thread = threading.Thread(target=self._view_loop, name="taprig-view", daemon=True)

    def notify(self, text: str) -> None:
        """Tell every viewer something (shown in the page's message line)."""
        with self._lock:
            self.notices.append({"host_ns": time.time_ns(), "text": text})
            del self.notices[:-20]

    def points_view(self) -> dict:
        """Captured points and, from three or more with lift, the lift curve of :mod:`taprig.analysis` (the same
        analysis as the handout): slope and zero-lift angle with their scatter and shared systematic parts, Cl max
        and the stall, against the wall-corrected angle where the coefficients are corrected; ``lines`` says them
        in :mod:`taprig.analysis.wording`'s words (the page shows those, as the terminal and the handout do)."""
        with self._lock:
            points = list(self.points)
        usable = [p for p in points if p["cl"] is not None and p["alpha_deg"] is not None]
        if len(usable) < 3:
            return {"points": points, "lift_curve": None}
        alpha = [math.radians(p["alpha_corrected_deg"] if p["alpha_corrected_deg"] is not None else p["alpha_deg"])
                 for p in usable]
        cl = [p["cl"][0] for p in usable]
        u_cl = [p["cl"][1] if p["cl"][1] is not None else math.nan for p in usable]
        try:
            fit, stall = linear_range_fit(alpha, cl, u_cl), find_stall(alpha, cl, u_cl)
        except ValueError:  # too few distinct angles for a line
            return {"points": points, "lift_curve": None}
        per_deg = math.pi / 180
        walls = any(p["alpha_corrected_deg"] is not None for p in usable)
        lines = [wording.slope_sentence(fit, walls), wording.zero_lift_sentence(fit), wording.stall_sentence(stall)]
        return {"points": points, "lift_curve": {"lines": lines,
            "slope_per_deg": num(fit.slope * per_deg), "u_slope_scatter_per_deg": num(fit.u_slope_scatter * per_deg),
            "u_slope_systematic_per_deg": num(fit.u_slope_systematic * per_deg),
            "alpha_zero_lift_deg": num(math.degrees(fit.alpha_zero)), "u_alpha_zero_deg": num(math.degrees(fit.u_alpha_zero)),
            "linear_range_deg": [num(math.degrees(a)) for a in fit.alpha_range],
            "cl_max": num(stall.cl_max), "u_cl_max": num(stall.u_cl_max),
            "alpha_cl_max_deg": num(math.degrees(stall.alpha_cl_max)), "stalled": bool(stall.stalled)}}

    def status(self, state: LiveState | None) -> dict:
        """What the page shows besides the numbers (overridden)."""
        return {}

    def latest_frame(self) -> Frame:
        """The newest display update (made now when no viewer keeps them coming), for a client that polls."""
        frame = self.frames.latest
        if frame is None or self.frames.subscriber_count == 0:
            frame = self.frame(self.source.hub.latest)
        return frame

    def trend_view(self) -> list:
        """The trend of q [Pa] and Cl over the last minutes: ``[host_ns, q, Cl]`` rows, oldest first."""
        with self._lock:
            return list(self.trend)

    def _sample_trend(self, state: LiveState | None) -> None:
        if state is None or state.block is None:
            return
        summary = state.summary()
        flowing = not np.any(state.block.scan_flags & ScanFlag.NO_FLOW)  # Cl of wind-off noise means nothing
        row = [state.host_ns, num(summary.get("q_pa")), num(summary.get("cl")) if flowing else None]
        with self._lock:
            if not self.trend or state.host_ns - self.trend[-1][0] >= 1e9 / TREND_RATE_HZ:
                self.trend.append(row)

    def _view_loop(self) -> None:
        due = 0.0
        with self.source.hub.subscribe() as sub:
            while not self._closed.is_set():
                state = sub.get(timeout=0.5)
                self._sample_trend(state)
                if self.frames.subscriber_count == 0:
                    continue
                wait = due - time.monotonic()
                if wait > 0 and self._closed.wait(wait):
                    break
                state = sub.get(timeout=0) or state or self.source.hub.latest
                start = time.monotonic()
                try:
                    self.frames.publish(self.frame(state))
                except Exception as exc:  # a display update must never end the run; say what went wrong
                    self.notify(f"display update failed: {exc}")
                # at most max_rate_hz, and the updates' own work held to DISPLAY_CPU_SHARE of a core, so that a
                # wide rig on a slow computer shows fewer updates rather than starving the acquisition
                cost = time.monotonic() - start
                due = start + max(self.min_interval, cost / DISPLAY_CPU_SHARE)

    def frame(self, state: LiveState | None) -> Frame:
        """The display update for ``state``: the mean of the newest window of scans, and :meth:`status`.

        The values are the reducer's mean of the newest window; their uncertainties are those of the newest full
        mean (:meth:`_uncertainties`), whose own window the update names (``reading.uncertainty_window``).
        """
        src = self.source
        self._seq += 1
        reducer = src.reducer
        data = {"seq": self._seq, "sent_ns": 0, "host_ns": state.host_ns if state else None,
                "notices": self.notices[-3:], "reading": None, "assumptions": list(reducer.assumptions),
                "calibration_warning": reducer.calibration_warning, **self.status(state)}
        with self._lock:
            data["trend"] = self.trend[-1] if self.trend else None
        if state is not None and state.block is not None:
            window = self._window(src, reducer)
            if window is not None:
                mean_of, scans, reducer, alpha = window
                mean, (budget, budget_scans) = self._uncertainties(mean_of, reducer, scans, alpha)
                data["reading"] = reading(reducer, mean, state.block.channel_flag_counts(), scans,
                                          src.alpha_rad is not None, uncertainty=budget,
                                          uncertainty_scan_index=budget_scans)
        data["sent_ns"] = time.time_ns()
        return Frame(data)

    def _window(self, src, reducer) -> tuple | None:
        """The newest ``window_s`` of scans as ``(mean_of, scans, reducer, alpha)``: ``mean_of(uncertainties)``
        makes their mean, ``scans`` are their first and last scan index.

        A live run's reduction thread has reduced them already (with the calibration and angle in force when each
        chunk arrived): where one reducer at one angle reduced them all, their mean is made from those reductions,
        with the same numbers as from the raw scans; else from the raw scans with the reducer and angle now.
        """
        reduced = src.recent_reduced(self.window_s) if hasattr(src, "recent_reduced") else None
        if reduced is not None and sum(b.n_scans for b in reduced[2]) >= 2:
            by, alpha, blocks = reduced
            scans = (int(blocks[0].scan_index[0]), int(blocks[-1].scan_index[-1]))
            return (lambda u: by.mean_of_reduced(blocks, alpha_rad=alpha, uncertainties=u)), scans, by, alpha
        block = src.recent(self.window_s)
        if block is None or block.n_scans < 2:
            return None
        alpha = src.alpha_rad
        scans = (int(block.scan_index[0]), int(block.scan_index[-1]))
        return (lambda u: reducer.reduce_mean(block, alpha_rad=alpha, uncertainties=u)), scans, reducer, alpha

    def _uncertainties(self, mean_of, reducer, scans: tuple[int, int], alpha_rad) -> tuple:
        """``(mean, (full, its scans))``: the mean ``mean_of(uncertainties)`` of the window of scans ``scans``
        and the newest full mean (with uncertainties) to take them from, with the first and last scan index of
        its window.

        A full mean (the GUM budget: most of a mean's cost) is made at most ``budget_rate_hz`` a second, and less
        often when it costs more than ``BUDGET_CPU_SHARE`` of a core at that rate (a Monte Carlo budget); between
        them the values alone are computed and take the uncertainties of the newest full mean, as long as it still
        describes them: same reducer (calibration) and angle, same flow state, same taps left out and q within
        ``BUDGET_Q_CHANGE`` of its own (or within twice its uncertainty, near no flow). Otherwise a full mean of this
        window is made now.
        """
        full, made = self._budget if self._budget is not None else (None, 0.0)
        now = time.monotonic()
        interval = max(self.budget_interval, self._budget_cost / BUDGET_CPU_SHARE)
        if full is not None and now - made < interval and full[0] is reducer and full[1] == alpha_rad:
            mean = mean_of(False)
            if _described_by(mean, full[2]):
                return mean, (full[2], full[3])
        cpu = time.thread_time()
        mean = mean_of(True)
        self._budget_cost = time.thread_time() - cpu
        self._budget = ((reducer, alpha_rad, mean, scans), now)
        return mean, (mean, scans)

    def close(self) -> None:
        """Stop the display thread."""
        self._closed.set()
        self.frames.close()
        if self._thread.is_alive():
            self._thread.join(2)


class Station(Display):
    """Interactive control of one live run, and display updates for any number of viewers.

    Parameters
    ----------
    acquisition : Acquisition
        Opened and streaming.
    new_writer : callable, optional
        Makes a new session writer (its metadata and the rig snapshot already written) when recording starts;
        None: this run cannot record on demand (it records from the start, or not at all).
    real_board : bool
        The first actuator command of the run must be confirmed by the operator (not on a simulated rig).
    """

    def __init__(self, acquisition: Acquisition, new_writer: Callable[[], SessionWriter] | None = None,
                 real_board: bool = False, window_s: float = 0.25, max_rate_hz: float = 25.0):
        super().__init__(acquisition, window_s, max_rate_hz)
        self.acq = acquisition
        self.rig = acquisition.rig
        self.new_writer = new_writer
        self.needs_confirmation = real_board
        self.sweep = SweepStatus()
        self._sweep_thread: threading.Thread | None = None
        self._control_pages = 0           # control-key pages with their event stream open
        self._unwatched_since: float | None = None
        self.unwatched_grace_s = UNWATCHED_GRACE_S
        self._rates: tuple[float, dict] | None = None
        self._last_rates: dict[str, float] = {}
        self._thread.start()

    # -- what the page asks ---------------------------------------------------------------------------------
    def describe(self) -> dict:
        """The rig as a viewer needs it (taps, actuators, theory, assumptions), and what the run can do."""
        out = rig_description(self.acq.reducer)
        out["can_record"] = self.new_writer is not None
        out["real_board"] = self.needs_confirmation or not self.acq.link.port_name.lower().startswith("sim://")
        out["port"] = self.acq.link.port_name
        return out

    # -- commands ---------------------------------------------------------------------------------------------
    def confirm(self) -> None:
        """The operator confirmed the rig is safe to move (guards on, hands clear): actuators may be commanded."""
        self.needs_confirmation = False
        self.acq.event("confirmed", {"by": "operator", "what": "actuators may move"})

    def _check_may_move(self) -> None:
        if self.needs_confirmation:
            raise AcquisitionError("confirm first: on a real board the first actuator command of a run needs the "
                                   "operator's confirmation that guards are on and hands are clear")
        reason = getattr(self.acq, "halt_reason", None)
        if reason:
            raise AcquisitionError(f"the board went safe on its own ({reason}); resume control first")

    def set_actuator(self, name: str, value: float) -> float:
        """Set an actuator from the operator's value (degrees for an angle); returns the SI value sent."""
        actuator = next((a for a in self.rig.actuators if a.name == name), None)
        if actuator is None:
            raise AcquisitionError(f"this rig has no actuator {name!r}; it has "
                                   + (", ".join(a.name for a in self.rig.actuators) or "none"))
        if not math.isfinite(value):
            raise AcquisitionError(f"{name}: the value must be a finite number")
        si = actuator_value_from_operator(actuator, value)
        if not actuator.min - 1e-12 <= si <= actuator.max + 1e-12:
            lo, hi = (math.degrees(actuator.min), math.degrees(actuator.max)) \
                if actuator.kind is ActuatorKind.ANGLE else (actuator.min, actuator.max)
            raise AcquisitionError(f"{name}: {value:g} is outside its limits {lo:g} … {hi:g}")
        self._check_may_move()
        self.acq.set_actuator(name, min(max(si, actuator.min), actuator.max))
        return si

    def stop_all(self) -> list[str]:
        """Stop any sweep at once and send every actuator to its safe value; returns what could not be sent."""
        self._abort_sweep("sweep stopped: STOP, every actuator to its safe value")
        failed = self._all_safe("operator")
        self.notify("stop: every actuator sent to its safe value" if not failed else
                    "stop: " + "; ".join(failed) + " — the board's watchdog sets safe values when the host goes quiet")
        return failed

    def resume_control(self) -> None:
        """The operator takes control again after the board went safe on its own."""
        clear = getattr(self.acq, "clear_halt", None)
        if clear is not None:
            clear()

    def zero(self) -> None:
        """A wind-off zero from the last second (refused while the fan runs: that would zero the flow away)."""
        fan = self.rig.actuator_of_kind(ActuatorKind.FAN)
        if fan is not None and self.acq.setpoints.get(fan.name, fan.safe) != fan.safe:
            raise AcquisitionError(f"the fan is set to {self.acq.setpoints[fan.name]:g}: a wind-off zero needs it at "
                                   f"its safe value {fan.safe:g} and the flow stopped")
        block = self.acq.recent(1.0)
        if block is not None and block.n_scans >= 2:  # the fan may be set to stop and still be running down
            reduced = self.acq.reducer.reduce(block, alpha_rad=self.acq.alpha_rad)
            if np.count_nonzero(reduced.scan_flags & ScanFlag.NO_FLOW) * 2 < reduced.n_scans:
                raise AcquisitionError(f"the air is still moving (q ≈ {np.nanmean(reduced.q_pa):.1f} Pa): wait for the "
                                       "fan to stop before a wind-off zero")
        self.acq.zero(1.0, note="wind-off zero from the dashboard")
        self.notify("wind-off zero taken")

    def capture(self, label: str = "", seconds: float = 1.0) -> dict:
        """Average the last ``seconds`` into a point (recorded when recording) and add it to the table."""
        mean = self.acq.capture_point(label or f"point {len(self.points) + 1}", seconds)
        with self._lock:
            summary = point_summary(len(self.points) + 1, label or f"point {len(self.points) + 1}", mean,
                                    self.acq.alpha_rad)
            self.points.append(summary)
        return summary

    def note(self, text: str) -> None:
        """Record the operator's note (kept in the session when recording)."""
        self.acq.note(text)
        self.notify(f"note: {text}")

    def start_recording(self) -> str:
        """Start recording into a new session file; returns its path."""
        if self.new_writer is None:
            raise AcquisitionError("this run cannot start a recording from the page")
        if self.acq.writer is not None:
            return str(self.acq.writer.path)
        writer = self.new_writer()
        self.acq.attach_writer(writer)
        self.notify(f"recording to {writer.path}")
        return str(writer.path)

    def stop_recording(self) -> str | None:
        """Close the session file being written (the run goes on); returns its path."""
        if self.new_writer is None:
            raise AcquisitionError("this run records from its start to its end; it cannot stop recording midway")
        writer = self.acq.detach_writer()
        if writer is None:
            return None
        self.notify(f"recording stopped: {writer.path}")
        return str(writer.path)

    def start_plan(self, plan, settle_s: float = 1.0, average_s: float = 1.0, spin_up_s: float = 4.0,
                   resumed=None, source: str | None = None) -> int:
        """Run the sweep ``plan`` (a :class:`taprig.runtime.plan.SweepPlan`, made by
        :func:`taprig.runtime.plan.plan_from_request` as ``taprig sweep`` makes its plans) on a thread, capturing a
        point at each of its points; returns the most points it can take. With ``resumed`` (a
        :class:`taprig.runtime.sweep.Resumable` read from the session ``source``) the points taken there are
        carried into the session being recorded and only the missing ones are taken.

        A sweep by hand asks the operator at the page (:meth:`hand_angle_set`). How it ends: its last point, the
        operator's stop (after the point being taken), STOP, the page that started it closing (when one was open),
        the station closing, a halt or an error. Whenever the plan runs the fan, every ending sends the actuators
        it drives to their safe values; an angle sweep alone leaves the fan as the operator set it and the angle
        where it is (back to its safe value past the stall) unless STOP, a closed page or the station's end stopped
        it, which send every actuator to its safe value."""
        from taprig.reduce.steady import SteadyCriteria
        from taprig.runtime.plan import PlanError
        from taprig.runtime.resume import carry_points
        from taprig.runtime.sweep import check_plan, run_plan

        if self.sweep.running:
            raise AcquisitionError("a sweep is already running; stop it first")
        for name, v, lo, hi in (("settle", settle_s, 0, 600), ("average", average_s, 1e-3, 600),
                                ("spin-up", spin_up_s, 0, 600)):
            if not (math.isfinite(v) and lo <= v <= hi):
                raise AcquisitionError(f"sweep {name}: must be a number of seconds within {lo:g}…{hi:g}")
        try:
            check_plan(self.rig, plan)
            done = plan.next_point(resumed.records) if resumed is not None else None
        except PlanError as exc:
            raise AcquisitionError(f"sweep: {exc}") from None
        if resumed is not None and done is None:
            raise AcquisitionError("sweep: that sweep is complete; nothing to resume")
        if not plan.by_hand or plan.fans:
            self._check_may_move()
        kind = "nested" if plan.inner == "angle" and len(plan.fans) > 1 else plan.inner
        status = SweepStatus(running=True, total=plan.size_bound(), message="sweep running", kind=kind, plan=plan,
                             resumed_from=source)
        self.sweep = status
        if resumed is not None:
            status.records.extend(carry_points(self.acq, resumed, source))
            status.done = len(status.records)
        status.current = self._point_view(plan.next_point(status.records))
        acq = _Abortable(self.acq, status, lambda: self._watch_lease(status))
        operator = PageOperator(acq, status, self.notify) if plan.by_hand else None
        status.leased = self._control_pages > 0
        runs_fan = bool(plan.fans)

        def on_point(point) -> None:
            self.add_sweep_point(point)
            status.records.append(point.record)
            status.done += 1
            status.current = self._point_view(plan.next_point(status.records))

        def run() -> None:
            try:
                run_plan(acq, plan, settle_s=settle_s, average_s=average_s, on_point=on_point, stop=status.stop,
                         steady=SteadyCriteria(),  # each point averaged once the flow is steady
                         done=list(status.records), spin_up_s=spin_up_s, operator=operator,
                         safe_at_end=runs_fan or plan.past_stall is not None)
                status.message = (status.abort_reason if status.abort.is_set() and status.abort_reason else
                                  "sweep stopped by the operator" if status.stop.is_set() else "sweep done")
            except (AcquisitionError, ReduceError, ValueError) as exc:
                status.message = status.abort_reason if status.abort.is_set() else f"sweep ended: {exc}"
            finally:
                ended = self._sweep_safe(plan, all_of_them=status.abort.is_set(), runs_fan=runs_fan)
                if ended:
                    status.message += "; " + ended
                status.current = None
                status.running = False
                self.notify(status.message)

        self._sweep_thread = threading.Thread(target=run, name="taprig-page-sweep", daemon=True)
        self._sweep_thread.start()
        return plan.size_bound()

    def start_sweep(self, from_deg: float, to_deg: float, step_deg: float, settle_s: float = 1.0,
                    average_s: float = 1.0, up_and_down: bool = False, past_stall: int | None = None,
                    by_hand: bool = False) -> int:
        """An angle sweep from ``from_deg`` to ``to_deg`` [°] with the fan left as it is (:meth:`start_plan`)."""
        from taprig.runtime.plan import PlanError, SweepRequest, plan_from_request

        try:
            plan = plan_from_request(self.rig, SweepRequest(None, None, from_deg, to_deg, step_deg, None,
                                                            up_and_down, past_stall, by_hand))
        except PlanError as exc:
            raise AcquisitionError(f"sweep: {exc}") from None
        return self.start_plan(plan, settle_s, average_s)

    @staticmethod
    def _point_view(point) -> dict | None:
        if point is None:
            return None
        return {"number": point.index + 1, "label": point.label(), "leg": point.leg, "fan": point.fan,
                "alpha_deg": None if point.alpha_rad is None else math.degrees(point.alpha_rad),
                "by_hand": point.by_hand}

    def _sweep_safe(self, plan, all_of_them: bool, runs_fan: bool) -> str:
        """At a page sweep's end: the actuators it drives (every one with ``all_of_them``) to their safe values,
        when the plan runs the fan or the sweep was aborted; returns what could not be sent ('' when all was)."""
        if not (all_of_them or runs_fan):
            return ""
        kinds = {ActuatorKind.FAN} | ({ActuatorKind.ANGLE} if plan.angles_rad and not plan.by_hand else set())
        failed = []
        for actuator in self.rig.actuators:
            if all_of_them or actuator.kind in kinds:
                try:
                    self.acq.set_actuator(actuator.name, actuator.safe)
                except AcquisitionError as exc:
                    failed.append(str(exc))
        if failed:
            return ("not every safe value could be sent (" + "; ".join(failed) + "): the board's watchdog sets them "
                    "when the host goes quiet")
        return ""

    def _abort_sweep(self, reason: str) -> None:
        status = self.sweep
        if status.running and not status.abort.is_set():
            status.abort_reason = reason
        status.stop.set()
        status.abort.set()

    # -- the page that runs a sweep ---------------------------------------------------------------------------
    def control_page(self, opened: bool) -> None:
        """A page with the control key opened (True) or closed (False) its event stream. A sweep started while
        one was open ends, every actuator to its safe value, once none has been open for ``unwatched_grace_s``
        (a page reloaded within that keeps it)."""
        with self._lock:
            self._control_pages += 1 if opened else -1
            self._unwatched_since = None if self._control_pages > 0 else time.monotonic()

    def _watch_lease(self, status: SweepStatus) -> None:
        since = self._unwatched_since
        if getattr(status, "leased", False) and self._control_pages <= 0 and since is not None \
                and time.monotonic() - since >= self.unwatched_grace_s and not status.abort.is_set():
            self._abort_sweep(f"sweep stopped: the page that ran it was closed (no control page for "
                              f"{self.unwatched_grace_s:g} s); every actuator sent to its safe value")
            self._all_safe("station: the page that ran the sweep closed")

    def _all_safe(self, by: str) -> list[str]:
        """Every actuator to its safe value, recorded as a stop ``by`` whom; returns what could not be sent."""
        failed = []
        for actuator in self.rig.actuators:
            try:
                self.acq.set_actuator(actuator.name, actuator.safe)
            except AcquisitionError as exc:
                failed.append(str(exc))
        self.acq.event("stop", {"by": by, "failed": failed})
        return failed

    def end_sweep(self, reason: str, timeout_s: float = 10.0) -> None:
        """End a running sweep at once (the station or its run is closing): its actuators to their safe values,
        and wait for its thread."""
        if not self.sweep.running:
            return
        self._abort_sweep(reason)
        thread = self._sweep_thread
        if thread is not None and thread.is_alive():
            thread.join(timeout_s)

    def sweep_results(self) -> dict:
        """What the analysis says of the page sweep's points so far (:func:`taprig.runtime.viewframe.sweep_results`)."""
        status = self.sweep
        return {"sweep": status.view(), **sweep_results(list(status.records), self.rig, status.plan)}

    def close(self) -> None:
        """End a sweep still running (every actuator to its safe value), then stop the display thread."""
        self.end_sweep("sweep stopped: the dashboard is closing; every actuator sent to its safe value")
        super().close()

    def hand_angle_set(self, angle_deg: float | None) -> None:
        """The operator's answer to a sweep by hand: the angle set [°] (None stops the sweep there)."""
        asking = self.sweep.asking
        if asking is None:
            raise AcquisitionError("no sweep is waiting for an angle set by hand")
        if angle_deg is not None and not (math.isfinite(angle_deg) and -90 <= angle_deg <= 90):
            raise AcquisitionError(f"the angle set must be a number of degrees within −90…90, got {angle_deg}")
        if angle_deg is None:
            self.sweep.stop.set()
        self.sweep.answer[:] = [angle_deg]
        self.sweep.answered.set()

    def add_sweep_point(self, point) -> None:
        """Add a sweep's point (:class:`taprig.runtime.sweep.SweepPoint`) to the table and the lift curve."""
        plan = getattr(point, "plan", None)
        label = (f"sweep {plan.label()}" if plan is not None else
                 f"sweep α {math.degrees(point.alpha_rad):+.1f}°" if point.alpha_rad is not None else "sweep point")
        with self._lock:
            self.points.append(point_summary(len(self.points) + 1, label, point.mean, point.alpha_rad))

    def stop_sweep(self) -> None:
        """Stop the sweep after its current step (the actuators stay where they are; use stop for safe values)."""
        self.sweep.stop.set()

    # -- display updates -------------------------------------------------------------------------------------
    def status(self, state: LiveState | None) -> dict:
        """Link health, setpoints, recording, sweep, points and the board's state for a display update."""
        return {"mode": "live", "link": self._link(state), "setpoints": self._setpoints(),
                "recording": self._recording(),
                "sweep": self.sweep.view(),
                "points": len(self.points), "needs_confirmation": self.needs_confirmation,
                "halt": getattr(self.acq, "halt_reason", None)}

    def _setpoints(self) -> dict:
        out = {}
        for a in self.rig.actuators:
            value = self.acq.setpoints.get(a.name, a.safe)
            out[a.name] = {"value": num(math.degrees(value) if a.kind is ActuatorKind.ANGLE else value),
                           "safe": value == a.safe}
        return out

    def _recording(self) -> dict:
        writer = self.acq.writer
        if writer is None:
            return {"on": False}
        return {"on": True, "path": str(writer.path), "chunks": writer.committed_chunks, "error": writer.error}

    def _link(self, state: LiveState | None) -> dict:
        counters = self.acq.link.counters.as_dict()
        now = time.monotonic()
        if self._rates is None:
            self._rates = (now, counters)
        elif now - self._rates[0] > 0.5:  # per-second rates over at least half a second
            dt = now - self._rates[0]
            self._last_rates = {k: (counters.get(k, 0) - self._rates[1].get(k, 0)) / dt for k in ("frames", "bytes")}
            self._rates = (now, counters)
        board = self.acq.device_state
        return {"state": self.acq.link_state, "board": board.name.lower() if isinstance(board, DeviceState) else None,
                "counters": counters, "rates": self._last_rates,
                "last_log": self.acq.last_log, "scans": self.acq.scans, "display_skipped": self.acq.display_skipped,
                "age_s": (time.time_ns() - state.host_ns) / 1e9 if state is not None else None}
