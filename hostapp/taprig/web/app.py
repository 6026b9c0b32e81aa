"""The dashboard's HTTP side: a Flask app over a live :class:`~taprig.runtime.station.Station` and replays.

It asks and shows: every number comes from the runtime's display updates (:class:`~taprig.runtime.station.Frame`),
pushed to each viewer as Server-Sent Events; every control is one POST that calls the station. Checks here are
about the request (who sends it, its shape and limits); the station checks what it means for the rig.

Access: two keys made at start. The control key may do everything; the view key only reads (a link for students
on a shared network). A POST needs the control key in ``X-Taprig-Key``, a JSON body and, when the browser sends an
``Origin``, the page's own origin (so another site cannot drive the rig through a browser that has the page open).
"""

from __future__ import annotations

import hmac
import math
import secrets
import sys
import threading
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

from flask import Flask, Response, jsonify, render_template, request
from werkzeug.exceptions import HTTPException

from taprig.physics.units import Unit
from taprig.reduce import ReduceError
from taprig.rig import RigError, calibration_from_text
from taprig.runtime.acquisition import AcquisitionError
from taprig.runtime.playback import SPEEDS, Playback, session_files
from taprig.runtime.station import Display, Station
from taprig.session.replay import ReplayError
from taprig.session.store import SessionError

#: What the page says wherever actuators can be commanded (README, Safety, in short).
SAFETY_NOTE = ("Fan and model move on command: guards on at inlet and outlet, hands, hair, sleeves and cables clear "
               "of the fan and the test section; a hardware stop stays in reach. Compressed air: eye protection. "
               "Local codes, your institution's rules and your supervisor's instructions come first.")

#: Keyboard shortcuts the page offers (key → action); listed on the page.
SHORTCUTS = {"Escape": "stop: every actuator to its safe value", "z": "wind-off zero", "c": "capture a point",
             "r": "start / stop recording", "n": "add a note", "p": "play / pause (replay)"}

MAX_STREAMS = 100          # open event streams at once (a class of thirty with room to spare)
CONTROL_RATE = 20.0        # control requests per second, sustained, for all clients together
CONTROL_BURST = 40
MAX_BODY = 256 * 1024      # a calibration file is a few kB


class RequestProblem(Exception):
    """A request that cannot be carried out: its HTTP status and a sentence for the person at the page."""

    def __init__(self, message: str, status: int = 400, field: str | None = None):
        super().__init__(message)
        self.status = status
        self.field = field  # the form field the message is about (the page shows it there)


@dataclass
class Keys:
    """The control and view keys of one server."""

    control: str = field(default_factory=lambda: secrets.token_urlsafe(18))
    view: str = field(default_factory=lambda: secrets.token_urlsafe(18))

    def role(self, given: str | None) -> str | None:
        """"control", "view" or None for the key ``given``."""
        if not given:
            return None
        if hmac.compare_digest(given, self.control):
            return "control"
        if hmac.compare_digest(given, self.view):
            return "view"
        return None


class _Bucket:
    """A token bucket: ``rate`` requests per second sustained, ``burst`` at once."""

    def __init__(self, rate: float, burst: int):
        self.rate, self.burst, self.tokens, self.stamp = rate, burst, float(burst), time.monotonic()
        self.lock = threading.Lock()

    def take(self) -> bool:
        with self.lock:
            now = time.monotonic()
            self.tokens = min(self.burst, self.tokens + (now - self.stamp) * self.rate)
            self.stamp = now
            if self.tokens < 1:
                return False
            self.tokens -= 1
            return True


class Sources:
    """The displays one server shows: the live station (if any) and replays opened from the sessions folder."""

    def __init__(self, station: Station | None, sessions_dir: Path | None, max_replays: int = 4):
        self.station = station
        self.sessions_dir = sessions_dir
        self.replays: dict[str, Playback] = {}
        self.max_replays = max_replays
        self.lock = threading.Lock()

    def get(self, name: str) -> Display:
        if name == "live" and self.station is not None:
            return self.station
        with self.lock:
            if name in self.replays:
                return self.replays[name]
        raise RequestProblem(f"no display {name!r} here" + (" (this server has no live run)" if name == "live" else ""),
                             404)

    def open_replay(self, path: Path) -> str:
        """Open ``path`` for replay (or return the one already open); returns its display name."""
        with self.lock:
            for name, playback in self.replays.items():
                if playback.path == path:
                    return name
            if len(self.replays) >= self.max_replays:  # close the oldest: each holds a thread and a file
                oldest = next(iter(self.replays))
                self.replays.pop(oldest).close()
        playback = Playback(path)
        with self.lock:
            name = f"replay-{secrets.token_hex(4)}"
            self.replays[name] = playback
        return name

    def close(self) -> None:
        with self.lock:
            for playback in self.replays.values():
                playback.close()
            self.replays.clear()


def _json_body() -> dict:
    if not request.is_json:
        raise RequestProblem("send a JSON body (Content-Type: application/json)", 415)
    body = request.get_json(silent=True)
    if not isinstance(body, dict):
        raise RequestProblem("the body must be a JSON object")
    return body


def _number(body: dict, key: str, low: float, high: float, default: float | None = None) -> float:
    value = body.get(key, default)
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise RequestProblem(f"{key!r} must be a number" + ("" if default is None else f" (default {default:g})"))
    value = float(value)
    if not (math.isfinite(value) and low <= value <= high):
        raise RequestProblem(f"{key!r} must be between {low:g} and {high:g}, got {value:g}")
    return value


def _text(body: dict, key: str, limit: int, required: bool = True) -> str:
    value = body.get(key, "" if not required else None)
    if not isinstance(value, str) or (required and not value.strip()):
        raise RequestProblem(f"{key!r} must be a non-empty text" if required else f"{key!r} must be a text")
    if len(value) > limit:
        raise RequestProblem(f"{key!r} is longer than {limit} characters")
    return value.strip()


def create_app(sources: Sources, keys: Keys, log: Callable[[str], None] | None = None) -> Flask:
    """The dashboard app over ``sources`` with access ``keys``."""
    app = Flask(__name__)
    app.config.update(MAX_CONTENT_LENGTH=MAX_BODY, JSON_SORT_KEYS=False)
    bucket = _Bucket(CONTROL_RATE, CONTROL_BURST)
    streams = {"open": 0}
    streams_lock = threading.Lock()
    log = log or (lambda text: print(text, file=sys.stderr))

    def role() -> str | None:
        return keys.role(request.headers.get("X-Taprig-Key") or request.args.get("key"))

    def need(level: str) -> None:
        who = role()
        if who is None:
            raise RequestProblem("this page needs its key: open the link taprig printed when it started", 401)
        if level == "control" and who != "control":
            raise RequestProblem("this is a view-only link: it cannot change anything on the rig", 403)

    @app.errorhandler(RequestProblem)
    def _problem(exc: RequestProblem):
        if exc.field is not None:
            return jsonify(error=str(exc), field=exc.field), exc.status
        return jsonify(error=str(exc)), exc.status

    @app.errorhandler(HTTPException)
    def _http(exc: HTTPException):
        words = {404: "no such page here", 405: "that method is not allowed here",
                 413: f"the request is too large (at most {MAX_BODY // 1024} kB)"}
        return jsonify(error=words.get(exc.code, exc.description or exc.name)), exc.code

    @app.errorhandler(Exception)
    def _defect(exc: Exception):  # a defect in taprig: one line in the log, a sentence to the page, no traceback
        log(f"internal error answering {request.method} {request.path}: {type(exc).__name__}: {exc}")
        return jsonify(error="internal error in taprig (see the terminal); the run goes on"), 500

    @app.before_request
    def _guard():
        if request.method == "POST":
            origin = request.headers.get("Origin")
            if origin is not None and origin != request.host_url.rstrip("/"):
                raise RequestProblem("request from another site refused", 403)
            need("control")
            if not bucket.take():
                raise RequestProblem("too many commands at once; wait a moment", 429)

    @app.after_request
    def _headers(resp: Response):
        resp.headers["X-Content-Type-Options"] = "nosniff"
        resp.headers["Referrer-Policy"] = "no-referrer"
        resp.headers["Content-Security-Policy"] = ("default-src 'self'; img-src 'self' data:; "
                                                   "style-src 'self' 'unsafe-inline'; frame-ancestors 'none'")
        if request.path.startswith("/api/"):
            resp.headers["Cache-Control"] = "no-store"
        return resp

    @app.get("/")
    def index():
        return render_template("index.html")

    @app.get("/api/<name>/describe")
    def describe(name: str):
        need("view")
        display = sources.get(name)
        out = display.describe()
        out.update({"role": role(), "source": name, "safety": SAFETY_NOTE, "shortcuts": SHORTCUTS,
                    "units": {u.symbol: 1.0 / u.scale for u in (Unit.PA, Unit.MMH2O, Unit.INH2O)},
                    "sessions": sources.sessions_dir is not None, "live": sources.station is not None})
        return jsonify(out)

    @app.get("/api/<name>/stream")
    def stream(name: str):
        need("view")
        display = sources.get(name)
        with streams_lock:
            if streams["open"] >= MAX_STREAMS:
                raise RequestProblem(f"too many viewers at once (at most {MAX_STREAMS}); try again later", 429)
            streams["open"] += 1
        sub = display.frames.subscribe()
        watching = role() == "control" and isinstance(display, Station)  # a page that may run a sweep

        def events():
            if watching:
                display.control_page(True)
            try:
                yield b"retry: 2000\n\n"
                latest = display.frames.latest
                if latest is not None:
                    yield latest.event()
                while True:
                    frame = sub.get(timeout=5.0)
                    if frame is None:
                        if display.frames.closed:
                            yield b"event: closed\ndata: {}\n\n"
                            return
                        yield b": still here\n\n"
                        continue
                    yield frame.event()
            finally:
                sub.close()
                if watching:
                    display.control_page(False)
                with streams_lock:
                    streams["open"] -= 1

        return Response(events(), mimetype="text/event-stream",
                        headers={"Cache-Control": "no-store", "X-Accel-Buffering": "no"})

    @app.get("/api/<name>/latest")
    def latest(name: str):
        need("view")
        frame = sources.get(name).latest_frame()
        return Response(frame.text(), mimetype="application/json")

    @app.get("/api/<name>/picture")
    def picture(name: str):
        from taprig.rig.picture import rig_picture

        need("view")
        display = sources.get(name)
        alpha = request.args.get("alpha_deg", "0")
        try:
            alpha_rad = math.radians(float(alpha))
        except ValueError:
            raise RequestProblem(f"alpha_deg must be a number of degrees, got {alpha!r}") from None
        if not (math.isfinite(alpha_rad) and abs(alpha_rad) <= math.pi / 2):
            raise RequestProblem("alpha_deg must be between -90 and 90")
        return jsonify(rig_picture(display.rig, alpha_rad).to_dict())

    @app.get("/api/<name>/points")
    def points(name: str):
        need("view")
        return jsonify(sources.get(name).points_view())

    @app.get("/api/<name>/trend")
    def trend(name: str):
        need("view")
        return jsonify(trend=sources.get(name).trend_view())

    @app.post("/api/live/<action>")
    def live_control(action: str):
        station = sources.get("live")
        body = _json_body()
        handler = _LIVE_ACTIONS.get(action)
        if handler is None:
            raise RequestProblem(f"no control {action!r}; there are " + ", ".join(sorted(_LIVE_ACTIONS)), 404)
        try:
            result = handler(station, body)
        except AcquisitionError as exc:
            raise RequestProblem(str(exc), 409) from None
        return jsonify(ok=True, **(result or {}))

    @app.get("/api/live/sweep-results")
    def sweep_results():
        need("view")
        return jsonify(sources.get("live").sweep_results())

    @app.get("/api/live/resumable")
    def resumable():
        """The sessions of the folder whose sweep on this rig was interrupted, each with the point it takes next."""
        from taprig.runtime.resume import resumable_sessions

        need("view")
        station = sources.get("live")
        if sources.sessions_dir is None:
            return jsonify(sessions=[], folder=None)
        return jsonify(folder=str(sources.sessions_dir), sessions=resumable_sessions(sources.sessions_dir, station.rig))

    @app.post("/api/live/sweep-resume")
    def sweep_resume():
        """Go on with the interrupted sweep of a session of the folder: ``{"name": FILE, "zero": bool}``."""
        from taprig.runtime.plan import PlanError
        from taprig.runtime.resume import open_resumable

        station = sources.get("live")
        body = _json_body()
        path = _session_path(body)
        try:
            resumed = open_resumable(path, station.rig)
        except PlanError as exc:
            raise RequestProblem(str(exc).replace(str(path), path.name), 409, field="resume") from None
        try:
            if _flag(body, "zero", True):
                station.zero()
            if station.acq.writer is None and station.new_writer is not None:
                station.start_recording()
            total = station.start_plan(resumed.plan, resumed.settle_s, resumed.average_s, resumed.spin_up_s,
                                       resumed=resumed, source=path.name)
        except AcquisitionError as exc:
            raise RequestProblem(str(exc), 409, field="resume") from None
        return jsonify(ok=True, points=total, carried=len(resumed.records),
                       recording=str(station.acq.writer.path) if station.acq.writer is not None else None)

    @app.post("/api/<name>/playback/<action>")
    def playback_control(name: str, action: str):
        playback = sources.get(name)
        if not isinstance(playback, Playback):
            raise RequestProblem(f"{name!r} is not a replay", 404)
        body = _json_body()
        handler = _PLAYBACK_ACTIONS.get(action)
        if handler is None:
            raise RequestProblem(f"no replay control {action!r}; there are " + ", ".join(sorted(_PLAYBACK_ACTIONS)),
                                 404)
        try:
            handler(playback, body)
        except (ValueError, ReplayError, RigError, SessionError, ReduceError) as exc:
            raise RequestProblem(str(exc).splitlines()[0] if str(exc) else "not accepted", 400) from None
        return jsonify(ok=True)

    @app.get("/api/sessions")
    def sessions():
        need("view")
        if sources.sessions_dir is None:
            raise RequestProblem("this server shows no sessions folder", 404)
        return jsonify(folder=str(sources.sessions_dir), sessions=session_files(sources.sessions_dir))

    def _session_path(body: dict) -> Path:
        if sources.sessions_dir is None:
            raise RequestProblem("this server shows no sessions folder", 404)
        name = _text(body, "name", 255)
        path = sources.sessions_dir / name
        if Path(name).name != name or not name.endswith(".taprig") or not path.is_file():
            raise RequestProblem(f"no session file {name!r} in {sources.sessions_dir}", 404)
        return path

    @app.post("/api/sessions/open")
    def open_session():
        path = _session_path(_json_body())
        try:
            return jsonify(ok=True, source=sources.open_replay(path))
        except (ReplayError, SessionError, ValueError) as exc:
            raise RequestProblem(str(exc).splitlines()[0], 400) from None

    @app.post("/api/sessions/export")
    def export():
        from taprig.session.export import ExportError, export_session

        body = _json_body()
        path = _session_path(body)
        fmt = body.get("format")
        if fmt not in ("csv", "parquet"):
            raise RequestProblem("'format' must be \"csv\" or \"parquet\"")
        out = path.with_suffix(f".{fmt}")
        try:
            result = export_session(path, out, fmt)
        except (ExportError, SessionError, ReplayError, OSError) as exc:
            raise RequestProblem(str(exc).splitlines()[0], 409) from None
        return jsonify(ok=True, path=str(out), rows=getattr(result, "rows", None))

    handout_lock = threading.Lock()

    @app.get("/api/sessions/handout")
    def handout():
        """The PDF handout of one session of the folder (taprig.report), sent as a download; one at a time."""
        from taprig.report import HandoutError, handout_pages
        from taprig.report.content import load_session
        from taprig.report.handout import pdf_bytes

        need("view")
        path = _session_path({"name": request.args.get("name", "")})
        if not handout_lock.acquire(blocking=False):
            raise RequestProblem("a handout is being written; try again in a moment", 429)
        try:
            content = load_session(path)
            data = pdf_bytes(handout_pages([content]), [content])
        except HandoutError as exc:
            raise RequestProblem(str(exc), 409) from None
        finally:
            handout_lock.release()
        return Response(data, mimetype="application/pdf", headers={
            "Content-Disposition": f'attachment; filename="{path.stem}-handout.pdf"'})

    return app


def _setpoint(station: Station, body: dict) -> dict:
    name = _text(body, "actuator", 64)
    value = _number(body, "value", -1e6, 1e6)
    return {"sent": station.set_actuator(name, value)}


#: How the page's sweep form names each field of a :class:`taprig.runtime.plan.SweepRequest` in its messages.
PAGE_NAMES = {"fans": "fan settings", "fan": "fan", "from_deg": "from", "to_deg": "to", "step_deg": "step",
              "at_deg": "held angle", "up_and_down": "'up and back down'", "past_stall": "points past the stall",
              "by_hand": "by hand"}

SWEEP_KINDS = ("angle", "fan", "nested")


def _sweep(station: Station, body: dict) -> dict:
    """Start a sweep from the page's form: ``kind`` "angle" (the fan left as it is), "fan" (the fan settings
    ``fans``, typed as at the terminal: ``0.3,0.5,0.8`` or ``0.3:0.9:0.2``; at the held angle ``at_deg`` on a rig
    with an angle servo) or "nested" (the angle sweep at each fan setting). The plan is made as ``taprig sweep``
    makes it (:func:`taprig.runtime.plan.plan_from_request`); a refusal names its field."""
    from taprig.runtime.plan import FieldError, SweepRequest, parse_fan_settings, plan_from_request

    kind = body.get("kind", "angle")
    if kind not in SWEEP_KINDS:
        raise RequestProblem(f"'kind' must be one of {', '.join(SWEEP_KINDS)}, got {kind!r}", field="kind")

    def number(key: str, low: float, high: float, default: float | None = None) -> float:
        try:
            return _number(body, key, low, high, default)
        except RequestProblem as exc:
            raise RequestProblem(f"{PAGE_NAMES.get(key, key)}: {exc}", field=key) from None

    past = body.get("past_stall")
    try:
        fans = None
        if kind != "angle":
            text = body.get("fans")
            if not isinstance(text, str) or len(text) > 2000:
                raise FieldError("fans", "fan settings: type them as 0.3,0.5,0.8 or FROM:TO:STEP")
            fans = parse_fan_settings(text, PAGE_NAMES["fans"])
        at_deg = number("at_deg", -90, 90) if kind == "fan" and body.get("at_deg") is not None else None
        angle_part = kind != "fan"
        request = SweepRequest(
            fans, None, number("from_deg", -90, 90, -4.0) if angle_part else -4.0,
            number("to_deg", -90, 90) if angle_part else None, number("step_deg", 0.01, 90, 2.0) if angle_part else 2.0,
            at_deg, _flag(body, "up_and_down"),
            None if past is None or not angle_part else int(number("past_stall", 0, 50)),
            _flag(body, "by_hand"), "fan" if kind == "fan" else "angle")
        plan = plan_from_request(station.rig, request, PAGE_NAMES)
    except FieldError as exc:
        raise RequestProblem(str(exc), field=exc.field) from None
    total = station.start_plan(plan, number("settle_s", 0, 60, 1.0), number("average_s", 0.1, 30, 1.0),
                               number("spin_up_s", 0, 60, 4.0))
    return {"angles": total, "points": total, "kind": kind}


def _flag(body: dict, key: str, default: bool = False) -> bool:
    value = body.get(key, default)
    if not isinstance(value, bool):
        raise RequestProblem(f"'{key}' must be true or false, got {value!r}", field=key)
    return value


def _hand_angle(station: Station, body: dict) -> None:
    """The operator's answer to a sweep by hand: ``{"angle_deg": A}`` (the angle set) or ``{"stop": true}``."""
    if _flag(body, "stop"):
        station.hand_angle_set(None)
    else:
        station.hand_angle_set(_number(body, "angle_deg", -90, 90))


_LIVE_ACTIONS: dict[str, Callable[[Station, dict], dict | None]] = {
    "confirm": lambda s, b: s.confirm(),
    "stop": lambda s, b: {"failed": s.stop_all()},
    "resume": lambda s, b: s.resume_control(),
    "zero": lambda s, b: s.zero(),
    "capture": lambda s, b: {"point": s.capture(_text(b, "label", 80, required=False),
                                                _number(b, "seconds", 0.1, 30, 1.0))},
    "note": lambda s, b: s.note(_text(b, "text", 2000)),
    "setpoint": _setpoint,
    "record-start": lambda s, b: {"path": s.start_recording()},
    "record-stop": lambda s, b: {"path": s.stop_recording()},
    "sweep-start": _sweep,
    "sweep-stop": lambda s, b: s.stop_sweep(),
    "sweep-hand-angle": _hand_angle,
}


def _recalibrate(playback: Playback, body: dict) -> None:
    text = body.get("calibration")
    if text is None:
        playback.recalibrate(None, "the session's own calibration")
        return
    if not isinstance(text, str) or not text.strip():
        raise ValueError("'calibration' must be the text of a calibration file (TOML or JSON), or null")
    name = _text(body, "name", 255, required=False) or "an uploaded calibration"
    playback.recalibrate(calibration_from_text(text, name), name)


_PLAYBACK_ACTIONS: dict[str, Callable[[Playback, dict], None]] = {
    "play": lambda p, b: p.play(),
    "pause": lambda p, b: p.pause(),
    "speed": lambda p, b: p.set_speed(_number(b, "speed", 0, max(SPEEDS))),
    "seek": lambda p, b: p.seek(_number(b, "seconds", 0, 1e9)),
    "recalibrate": _recalibrate,
}
