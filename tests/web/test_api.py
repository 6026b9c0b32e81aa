"""The dashboard's HTTP API over a live simulated rig: keys, origin, every control, the event stream, recording on
demand, replay, and a fuzz of every endpoint (never a 5xx; the acquisition and the recording go on)."""

from __future__ import annotations

import json
import math
import threading

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from taprig.runtime.sweep import wait_device_time
from taprig.runtime.viewframe import num
from taprig.session.replay import Replay
from taprig.session.store import SessionReader
from taprig.web import app as web_app
from tests.web.conftest import replayed_mean


def wait_for(live, predicate, timeout_s: float = 20.0) -> None:
    """Wait on the run's own updates until ``predicate()`` holds (no sleeps: each check follows a new block)."""
    with live.acq.hub.subscribe() as sub:
        for _ in range(int(timeout_s / 0.05)):
            if predicate():
                return
            sub.get(timeout=0.05)
    assert predicate(), "condition not reached in time"


def frames(live, n: int = 1) -> list[dict]:
    """The next ``n`` display updates from the event stream, as the page receives them."""
    resp = live.client.get(f"/api/live/stream?key={live.keys.view}")
    out = []
    try:
        buffer = b""
        for chunk in resp.response:
            buffer += chunk
            while b"\n\n" in buffer:
                event, buffer = buffer.split(b"\n\n", 1)
                if event.startswith(b"data: "):
                    out.append(json.loads(event[6:]))
            if len(out) >= n:
                return out
    finally:
        resp.close()
    return out


# -- access ----------------------------------------------------------------------------------------------------
def test_every_request_needs_a_key_and_a_view_key_commands_nothing(live):
    assert live.get("/api/live/describe", key=None).status_code == 401
    assert live.client.get("/api/live/describe?key=wrong").status_code == 401
    assert live.get("/api/live/describe").status_code == 200
    assert live.post("/api/live/setpoint", {"actuator": "fan", "value": 0.5}, key="view").status_code == 403
    assert live.post("/api/live/setpoint", {"actuator": "fan", "value": 0.5}, key="nonsense").status_code == 401
    assert live.post("/api/live/stop", key=None).status_code == 401
    assert live.acq.setpoints["fan"] == 0.0  # nothing moved


def test_another_sites_page_cannot_command(live):
    resp = live.post("/api/live/setpoint", {"actuator": "fan", "value": 0.5}, headers={"Origin": "http://evil.example"})
    assert resp.status_code == 403 and "another site" in resp.get_json()["error"]
    same = live.post("/api/live/setpoint", {"actuator": "fan", "value": 0.5}, headers={"Origin": "http://localhost"})
    assert same.status_code == 200
    assert live.client.post("/api/live/stop", data="x", headers={"X-Taprig-Key": live.keys.control}).status_code == 415


def test_describe_states_what_the_numbers_rest_on(live):
    d = live.get("/api/live/describe").get_json()
    assert d["role"] == "view" and d["kind"] == "airfoil" and len(d["taps"]) == 20
    assert {a["name"] for a in d["actuators"]} == {"fan", "alpha"}
    alpha = next(a for a in d["actuators"] if a["name"] == "alpha")
    assert alpha["unit"] == "deg" and alpha["max"] == pytest.approx(15.0)
    assert any("freestream static" in a for a in d["assumptions"])  # the reference pressure, stated
    assert any("calibration" in a for a in d["assumptions"]) and d["calibration_warning"] == ""
    assert "guards" in d["safety"] and "supervisor" in d["safety"]
    # mmH2O and inH2O from their definitions: 9.80665 Pa and 249.08891 Pa (NIST SP 811, B.8)
    assert d["units"]["mmH2O"] == pytest.approx(1 / 9.80665) and d["units"]["inH2O"] == pytest.approx(1 / 249.08891)
    assert live.get("/api/live/describe", key="control").get_json()["role"] == "control"


def test_the_rig_picture_is_served_at_the_angle_asked(live):
    level = live.get("/api/live/picture?alpha_deg=0").get_json()
    turned = live.get("/api/live/picture?alpha_deg=10").get_json()
    assert {t["name"] for t in level["taps"]} == {t.name for t in live.rig.taps}
    assert level["outline"] != turned["outline"] and turned["alpha"] == pytest.approx(math.radians(10))
    assert live.get("/api/live/picture?alpha_deg=abc").status_code == 400
    assert live.get("/api/live/picture?alpha_deg=1e9").status_code == 400


# -- controls ----------------------------------------------------------------------------------------------------
def test_setpoints_within_limits_in_the_operators_units(live):
    assert live.post("/api/live/setpoint", {"actuator": "alpha", "value": 6}).status_code == 200
    assert live.acq.setpoints["alpha"] == pytest.approx(math.radians(6))  # degrees at the edge, radians inside
    resp = live.post("/api/live/setpoint", {"actuator": "alpha", "value": 40})
    assert resp.status_code == 409 and "outside its limits" in resp.get_json()["error"]
    resp = live.post("/api/live/setpoint", {"actuator": "fan", "value": 1.5})
    assert resp.status_code == 409 and live.acq.setpoints["fan"] == 0.0
    assert live.post("/api/live/setpoint", {"actuator": "pump", "value": 1}).status_code == 409
    assert live.post("/api/live/setpoint", {"actuator": "fan", "value": "1"}).status_code == 400


def test_stop_sends_every_actuator_to_its_safe_value(live):
    live.post("/api/live/setpoint", {"actuator": "fan", "value": 0.7})
    live.post("/api/live/setpoint", {"actuator": "alpha", "value": 8})
    resp = live.post("/api/live/stop")
    assert resp.status_code == 200 and resp.get_json()["failed"] == []
    assert live.acq.setpoints == {a.name: a.safe for a in live.rig.actuators}


def test_zero_is_refused_with_the_fan_running_and_taken_wind_off(tmp_path):
    from tests.web.conftest import AIRFOIL, Live

    live = Live(tmp_path, AIRFOIL, "seed=4&speed=10&watchdog_ms=0&fan_tau=10")  # a slow run-down, seen at once
    try:
        _zero_only_wind_off(live)
    finally:
        live.close()


def _zero_only_wind_off(live):
    wait_device_time(live.acq, 1.2, 20)
    live.post("/api/live/setpoint", {"actuator": "fan", "value": 0.8})
    resp = live.post("/api/live/zero")
    assert resp.status_code == 409 and "wind-off zero" in resp.get_json()["error"]
    wait_device_time(live.acq, 40.0, 60)  # four time constants: the stream is up to speed
    live.post("/api/live/stop")
    running_down = live.post("/api/live/zero")  # the fan is set to stop but the air still moves
    assert running_down.status_code == 409 and "still moving" in running_down.get_json()["error"]
    wait_device_time(live.acq, 80.0, 120)  # the fan has run down (8 time constants)
    assert live.post("/api/live/zero").status_code == 200
    assert live.acq.reducer.calibration is not None


def test_first_actuator_command_on_a_real_board_needs_confirmation(tmp_path):
    from tests.web.conftest import AIRFOIL, Live

    real = Live(tmp_path, AIRFOIL, "seed=4&speed=10&watchdog_ms=0", real_board=True)
    try:
        resp = real.post("/api/live/setpoint", {"actuator": "fan", "value": 0.4})
        assert resp.status_code == 409 and "confirm first" in resp.get_json()["error"]
        assert real.acq.setpoints["fan"] == 0.0
        assert frames(real)[0]["needs_confirmation"] is True
        assert real.post("/api/live/confirm").status_code == 200
        assert real.post("/api/live/setpoint", {"actuator": "fan", "value": 0.4}).status_code == 200
    finally:
        real.close()


def test_record_on_demand_capture_and_note_replay_as_recorded(live):
    assert live.post("/api/live/setpoint", {"actuator": "fan", "value": 0.8}).status_code == 200
    assert live.post("/api/live/setpoint", {"actuator": "alpha", "value": 4}).status_code == 200
    wait_device_time(live.acq, 3.0, 30)
    path = live.post("/api/live/record-start").get_json()["path"]
    wait_device_time(live.acq, 1.5, 30)
    point = live.post("/api/live/capture", {"label": "four degrees", "seconds": 1.0}).get_json()["point"]
    assert point["state"] == "flow" and point["cl"][0] > 0.2 and point["cl"][1] > 0
    assert live.post("/api/live/note", {"text": "tufts attached"}).status_code == 200
    assert live.post("/api/live/record-stop").get_json()["path"] == path
    view = live.get("/api/live/points").get_json()
    assert [p["label"] for p in view["points"]] == ["four degrees"]
    with SessionReader(path) as reader:
        assert [e.data["text"] for e in reader.events() if e.kind == "note"] == ["tufts attached"]
        assert [p.kind for p in reader.points()] == ["four degrees"]
    # a recording started mid-run decodes and reduces from its first byte, at the angle in force
    with Replay(path) as replay:
        steps = list(replay)
        assert replay.counters.undecodable == 0
    alpha = np.concatenate([b.reduced.alpha_rad for s in steps for b in s.blocks])
    assert sum(b.raw.n_scans for s in steps for b in s.blocks) > 500
    assert np.allclose(alpha, math.radians(4))


def test_displayed_numbers_are_the_reducers_for_the_same_scans(live):
    """The stream's values equal the reducer's mean of the very scans the update names, and its uncertainties the
    reducer's full mean of the scans it names for them, both replayed from the record."""
    live.post("/api/live/record-start")
    assert live.post("/api/live/setpoint", {"actuator": "fan", "value": 0.8}).status_code == 200
    assert live.post("/api/live/setpoint", {"actuator": "alpha", "value": 5}).status_code == 200
    wait_device_time(live.acq, 3.0, 30)
    live.station.budget_interval = 3600.0  # every update below takes its uncertainties from one earlier full mean
    flowing = [f["reading"] for f in frames(live, 8) if f["reading"] and f["reading"]["state"] == "flow"]
    path = live.post("/api/live/record-stop").get_json()["path"]
    later = [r for r in flowing if r["uncertainty_window"]["scan_index"] != r["window"]["scan_index"]]
    assert later, "no update took its uncertainties from an earlier window"
    for shown in (flowing[0], later[-1]):
        mean = replayed_mean(path, shown["window"]["scan_index"], math.radians(5))
        full = replayed_mean(path, shown["uncertainty_window"]["scan_index"], math.radians(5))
        assert shown["uncertainty_window"]["scan_index"][1] <= shown["window"]["scan_index"][1]
        # (an uncertainty that does not hold, NaN, is sent as null: JSON has no NaN)
        assert shown["flow"]["q_pa"] == [mean.q_pa, num(full.u_q_pa)]
        assert shown["flow"]["v_ms"] == [mean.v_ms, num(full.u_v_ms)]
        assert shown["flow"]["re"] == [mean.re, num(full.u_re)]
        assert shown["coefficients"]["cl"] == [mean.corrected.cl, num(full.corrected.u_cl)]
        assert shown["taps"]["cp"] == [float(c) for c in mean.cp]
        assert shown["taps"]["u_cp"] == [num(u) for u in full.u_cp]
        assert shown["uncertainty_window"]["method"] == full.uncertainty_method


def test_no_flow_is_shown_as_a_state_not_a_number(live):
    wait_device_time(live.acq, 1.0, 20)
    reading = frames(live, 2)[-1]["reading"]
    assert reading["state"] == "no flow" and "q" in reading["why"]
    assert reading["coefficients"] is None and reading["taps"]["cp"] is None and "v_ms" not in reading["flow"]


def test_a_calibration_failing_its_own_checks_is_stated_in_every_update(tmp_path):
    from datetime import datetime, timezone

    from taprig.rig import Calibration, ChannelCalibration, load_rig
    from tests.web.conftest import AIRFOIL, Live

    rig = load_rig(AIRFOIL)
    forced = Calibration(rig_id=rig.id, date=datetime(2026, 1, 5, tzinfo=timezone.utc), operator_note="forced",
                         channels={"p_total": ChannelCalibration(zero_counts=0.0, gain=1e6, n_points=3,
                                                                 flags=("gain 1e+06 × nominal",))})
    bad = Live(tmp_path, AIRFOIL, "seed=4&speed=10&watchdog_ms=0", calibration=forced)
    try:
        f = frames(bad, 2)[-1]
        assert "FAILED ITS OWN CHECKS" in f["calibration_warning"] and "p_total" in f["calibration_warning"]
        assert f["calibration_warning"] in f["assumptions"]
    finally:
        bad.close()


def test_a_sweep_from_the_page_takes_its_points_and_can_be_stopped(live):
    live.post("/api/live/setpoint", {"actuator": "fan", "value": 0.8})
    wait_device_time(live.acq, 3.0, 30)
    resp = live.post("/api/live/sweep-start", {"from_deg": 0, "to_deg": 4, "step_deg": 2, "settle_s": 0.3,
                                               "average_s": 0.3})
    assert resp.status_code == 200 and resp.get_json()["angles"] == 3
    assert live.post("/api/live/sweep-start", {"from_deg": 0, "to_deg": 4}).status_code == 409  # one at a time
    wait_for(live, lambda: not live.station.sweep.running, 60)
    assert live.station.sweep.message == "sweep done"
    view = live.get("/api/live/points").get_json()
    assert [round(p["alpha_deg"]) for p in view["points"]] == [0, 2, 4]
    curve = view["lift_curve"]
    # thin-airfoil theory: 0.1097 per degree (docs/REFERENCES.md); the simulated section's viscous loss lowers it
    assert 0.07 < curve["slope_per_deg"] < 0.12 and curve["u_slope_systematic_per_deg"] > 0
    assert abs(curve["alpha_zero_lift_deg"]) < 1.0  # a symmetric section (NACA 0012): zero lift at 0°
    # the page shows the server's sentences (taprig.analysis.wording): the slope with its combined u, Cl max with its u
    from taprig.analysis.wording import pm

    # (a line through two points has no scatter part: null here, "not stated" in words, not counted as 0)
    parts = [u for u in (curve["u_slope_scatter_per_deg"], curve["u_slope_systematic_per_deg"]) if u is not None]
    assert curve["lines"][0].startswith(f"Lift slope {pm(curve['slope_per_deg'], math.hypot(*parts))} per degree")
    if curve["u_slope_scatter_per_deg"] is None:
        assert "scatter not stated" in curve["lines"][0]
    assert f"Cl max {pm(curve['cl_max'], curve['u_cl_max'])}" in curve["lines"][2]
    # refused before anything moves: reversed range, outside the servo's limits
    assert "runs down" in live.post("/api/live/sweep-start", {"from_deg": 4, "to_deg": 0}).get_json()["error"]
    assert "limits" in live.post("/api/live/sweep-start", {"from_deg": 0, "to_deg": 40}).get_json()["error"]
    stopper = live.post("/api/live/sweep-start", {"from_deg": -4, "to_deg": 12, "step_deg": 1, "settle_s": 0.5,
                                                  "average_s": 0.5})
    assert stopper.status_code == 200
    live.post("/api/live/sweep-stop")
    wait_for(live, lambda: not live.station.sweep.running, 60)
    assert live.station.sweep.message == "sweep stopped by the operator" and live.station.sweep.done < 17


def test_a_venturi_bench_runs_its_fan_from_the_page(venturi):
    d = venturi.get("/api/live/describe").get_json()
    assert d["kind"] == "venturi" and d["theory"][0]["label"].startswith("ideal")
    fan = d["actuators"][0]
    assert fan["kind"] == "fan"
    assert venturi.post("/api/live/setpoint", {"actuator": fan["name"], "value": 0.7}).status_code == 200
    wait_device_time(venturi.acq, 3.0, 30)
    reading = [f for f in frames(venturi, 3) if f["reading"]][-1]["reading"]
    assert reading["state"] == "flow" and reading["venturi"]["mass_flow_kg_s"] > 0
    assert 0 < reading["venturi"]["u_mass_flow_kg_s"] < 0.1 * reading["venturi"]["mass_flow_kg_s"]
    assert reading["flow"]["alpha_deg"] is None and reading["coefficients"] is None
    assert venturi.post("/api/live/stop").status_code == 200 and venturi.acq.setpoints[fan["name"]] == fan["safe"]


def test_stream_sends_updates_with_link_health(live):
    f = frames(live, 2)[-1]
    assert f["mode"] == "live" and f["link"]["state"] in ("connected", "restored")
    assert f["link"]["counters"]["crc_errors"] == 0 and f["recording"] == {"on": False}
    assert set(f["setpoints"]) == {"fan", "alpha"}


# -- replay ------------------------------------------------------------------------------------------------------
def test_sessions_open_for_replay_and_export(live):
    live.post("/api/live/record-start")
    live.post("/api/live/setpoint", {"actuator": "fan", "value": 0.6})
    wait_device_time(live.acq, 1.5, 30)
    name = live.post("/api/live/record-stop").get_json()["path"].rsplit("/", 1)[1]
    listed = live.get("/api/sessions").get_json()["sessions"]
    assert [s["name"] for s in listed] == [name] and listed[0]["rig"] == "naca0012-20tap"
    source = live.post("/api/sessions/open", {"name": name}).get_json()["source"]
    d = live.get(f"/api/{source}/describe").get_json()
    assert d["session"]["duration_s"] > 0
    assert live.post(f"/api/{source}/playback/speed", {"speed": 0}).status_code == 200
    assert live.post(f"/api/{source}/playback/play").status_code == 200
    assert live.post(f"/api/{source}/playback/seek", {"seconds": 1e6}).status_code == 400
    bad = live.post(f"/api/{source}/playback/recalibrate", {"calibration": "not a calibration"})
    assert bad.status_code == 400 and "Traceback" not in bad.get_data(as_text=True)
    assert live.post("/api/sessions/open", {"name": "../../etc/passwd"}).status_code == 404
    out = live.post("/api/sessions/export", {"name": name, "format": "csv"}).get_json()
    assert out["path"].endswith(".csv")
    assert live.post("/api/sessions/export", {"name": name, "format": "xls"}).status_code == 400


# -- bad requests ------------------------------------------------------------------------------------------------
ACTIONS = ["confirm", "stop", "resume", "zero", "capture", "note", "setpoint", "record-start", "record-stop",
           "sweep-start", "sweep-stop", "nonsense", "../x"]
VALUES = st.one_of(st.none(), st.booleans(), st.integers(-10**30, 10**30), st.floats(allow_nan=True),
                   st.text(max_size=50), st.lists(st.integers(), max_size=3), st.dictionaries(st.text(max_size=5), st.integers(), max_size=2))
BODIES = st.one_of(st.dictionaries(st.sampled_from(["actuator", "value", "label", "seconds", "text", "from_deg",
                                                    "to_deg", "step_deg", "settle_s", "average_s", "name", "format"]),
                                   VALUES, max_size=5), VALUES)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(action=st.sampled_from(ACTIONS), body=BODIES, key=st.sampled_from(["control", "view", None, "zzz"]))
def test_fuzz_never_a_server_error_and_the_run_goes_on(live, action, body, key):
    if not hasattr(live, "started"):
        live.started = live.post("/api/live/record-start").get_json()["path"]
    before = (live.acq.scans, live.acq.writer.committed_chunks if live.acq.writer else 0)
    headers = {"X-Taprig-Key": getattr(live.keys, key) if key in ("control", "view") else key} if key else {}
    resp = live.client.post(f"/api/live/{action}", data=json.dumps(body), content_type="application/json",
                            headers=headers)
    assert resp.status_code < 500, resp.get_data(as_text=True)
    assert "Traceback" not in resp.get_data(as_text=True)
    for path in ("/api/live/describe", "/api/live/points", "/api/nowhere/stream", "/api/sessions"):
        assert live.get(path).status_code < 500
    live.station.sweep.stop.set()
    wait_for(live, lambda: live.acq.scans > before[0])
    assert live.log == []  # no internal error was logged


def test_malformed_requests_get_a_sentence(live):
    big = live.client.post("/api/live/note", data="x" * (web_app.MAX_BODY + 10), content_type="application/json",
                           headers={"X-Taprig-Key": live.keys.control})
    assert big.status_code == 413 and "too large" in big.get_json()["error"]
    assert live.client.get("/nowhere").status_code == 404
    assert live.client.put("/api/live/stop").status_code == 405
    assert live.post("/api/live/note", [1, 2]).status_code == 400


def test_a_flood_of_commands_is_held_back_and_the_recording_goes_on(live):
    path = live.post("/api/live/record-start").get_json()["path"]
    statuses = [live.post("/api/live/note", {"text": f"n{i}"}).status_code for i in range(120)]
    assert set(statuses) <= {200, 429} and statuses.count(429) > 0
    chunks = live.acq.writer.committed_chunks
    wait_for(live, lambda: live.acq.writer.committed_chunks > chunks)
    live.post("/api/live/stop")  # the bucket refills: a stop still gets through after a short wait
    with SessionReader(path) as reader:
        assert reader.chunk_summary()[0] > 0


def test_viewers_beyond_the_limit_are_told_to_wait(live, monkeypatch):
    monkeypatch.setattr(web_app, "MAX_STREAMS", 0)
    app = web_app.create_app(live.sources, live.keys)
    resp = app.test_client().get(f"/api/live/stream?key={live.keys.view}")
    assert resp.status_code == 429 and "too many viewers" in resp.get_json()["error"]


def test_frame_serialised_once_for_every_viewer(live):
    frame = live.station.frame(live.acq.hub.latest)
    assert frame.text() is frame.text()
    threads = [threading.Thread(target=frame.text) for _ in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    json.loads(frame.text())


def test_resume_after_a_watchdog_trip_ends_the_boards_safe_hold_and_moves_nothing_itself(live):
    # PROTOCOL.md §4 (1.1): after a trip the board refuses moves until ALLOW_MOVES, which only the operator's
    # resume sends; the resume itself moves nothing.
    assert live.post("/api/live/setpoint", {"actuator": "fan", "value": 0.5}).status_code == 200
    board = live.acq.link._port.device
    with live.acq.link._port._lock:
        board._trip_watchdog()  # the board's watchdog trips now (as when the host's heartbeats stop reaching it)
    wait_for(live, lambda: live.acq.halted.is_set())
    refused = live.post("/api/live/setpoint", {"actuator": "fan", "value": 0.6})
    assert refused.status_code >= 400 and "resume" in refused.get_json()["error"]
    assert board.held and board.actuators[0].setpoint == 0.0
    assert live.post("/api/live/resume").status_code == 200
    assert not board.held and board.actuators[0].setpoint == 0.0  # nothing moved on the resume
    assert live.post("/api/live/setpoint", {"actuator": "fan", "value": 0.6}).status_code == 200
    assert board.actuators[0].setpoint == pytest.approx(0.6)
    sent = [type(m).__name__ for _, _, m in board.commands]
    assert sent.count("AllowMoves") == 2  # at the start of the run and on the resume, never on its own
