"""Fan sweeps, nested sweeps and resumed sweeps from the page's API (a station over the simulated rig, compressed
time): the plans are the terminal's (`taprig sweep`'s options make the same SweepPlan), the refusals name their
field, the results are the analysis's of the recorded points, and every ending leaves the actuators safe."""

from __future__ import annotations

import json
import math
import os
import signal
import subprocess
import sys
import urllib.request
from pathlib import Path

import pytest

from taprig.analysis import analyse_points
from taprig.cli import build_parser
from taprig.cli.commands.sweep import build_plan
from taprig.rig import load_rig
from taprig.runtime.plan import parse_fan_settings
from taprig.session.store import SessionReader
from tests.web.conftest import AIRFOIL, Live
from tests.web.test_api import wait_for

ROOT = Path(__file__).resolve().parents[2]
VENTURI_PITOT = ROOT / "tests" / "analysis" / "venturi-pitot.toml"
#: The simulated venturi's discharge coefficient (set by the test: docs/simulator.md, option venturi_c).
SIM_C = 0.97
FAST = "seed=5&speed=max&watchdog_ms=0"
PACE = {"settle_s": 0.3, "average_s": 0.5, "spin_up_s": 2}


def terminal_plan(rig_path: Path, *options: str):
    """The plan `taprig sweep --rig RIG OPTIONS` would run (its own option parser and plan builder)."""
    args = build_parser().parse_args(["sweep", "--rig", str(rig_path), "--port", "sim://", *options])
    return build_plan(args, load_rig(rig_path))


def records_of(path: Path) -> list[dict]:
    with SessionReader(path) as reader:
        return [e.data for e in reader.points()]


@pytest.fixture
def venturi(tmp_path):
    (tmp_path / "v").mkdir()
    live = Live(tmp_path / "v", VENTURI_PITOT, f"{FAST}&venturi_c={SIM_C}")
    yield live
    live.close()


@pytest.fixture
def wing(tmp_path):
    (tmp_path / "w").mkdir()
    live = Live(tmp_path / "w", AIRFOIL, FAST)
    yield live
    live.close()


def _fan_running(live) -> bool:
    return live.station.sweep.running and live.acq.setpoints["blower"] != 0.0


def test_a_fan_sweep_of_a_venturi_is_the_terminals_plan_and_shows_the_analysis(venturi):
    assert venturi.post("/api/live/record-start").status_code == 200
    resp = venturi.post("/api/live/sweep-start", {"kind": "fan", "fans": "0.4:0.7:0.15", **PACE})
    assert resp.status_code == 200 and resp.get_json()["points"] == 3
    assert venturi.station.sweep.plan == terminal_plan(VENTURI_PITOT, "--fans", "0.4:0.7:0.15")
    wait_for(venturi, lambda: not venturi.station.sweep.running, 120)
    assert venturi.station.sweep.message == "sweep done"
    assert venturi.acq.setpoints["blower"] == 0.0  # the sweep ran the fan: back to its safe value
    shown = venturi.get("/api/live/sweep-results").get_json()
    path = Path(venturi.post("/api/live/record-stop").get_json()["path"])
    records = records_of(path)
    assert [r["fan"] for r in records] == [0.4, 0.55, 0.7] and [p["fan"] for p in shown["points"]] == [0.4, 0.55, 0.7]
    dc = analyse_points(records, venturi.rig).discharge  # the analysis of the session's own records
    assert shown["discharge"]["mean_c"] == [pytest.approx(dc.mean_c, rel=1e-12), pytest.approx(dc.u_mean_c, rel=1e-12)]
    for point, c, u, state in zip(shown["points"], dc.c, dc.u_c, dc.states):
        if state:  # a sensor beyond its rated range (the ±2 kPa parts at fan 0.7): the state, no C
            assert point["c"] is None and point["c_state"] == state
        else:
            assert point["c"] == [pytest.approx(c, rel=1e-12), pytest.approx(u, rel=1e-12)]
    # the simulated venturi's C is recovered within three of its stated standard uncertainties
    assert abs(dc.mean_c - SIM_C) <= 3 * dc.u_mean_c
    assert shown["sweep"]["kind"] == "fan" and shown["sweep"]["done"] == 3


def test_a_nested_sweep_takes_each_angle_at_each_fan_setting(wing):
    body = {"kind": "nested", "fans": "0.5,0.8", "from_deg": 0, "to_deg": 4, "step_deg": 2, **PACE}
    assert wing.post("/api/live/sweep-start", body).status_code == 200
    assert wing.station.sweep.plan == terminal_plan(AIRFOIL, "--fans", "0.5,0.8", "--from-deg", "0", "--to-deg", "4")
    wait_for(wing, lambda: not wing.station.sweep.running, 180)
    assert wing.station.sweep.message == "sweep done"
    assert wing.acq.setpoints == {"fan": 0.0, "alpha": 0.0}
    shown = wing.get("/api/live/sweep-results").get_json()
    assert [(p["fan"], round(p["alpha_deg"])) for p in shown["points"]] == [
        (0.5, 0), (0.5, 2), (0.5, 4), (0.8, 0), (0.8, 2), (0.8, 4)]
    groups = shown["lift"]
    assert [g["fan"] for g in groups] == [0.5, 0.8]
    for g in groups:  # each setting's lift curve is the analysis's of that setting's records
        chosen = [r for r in wing.station.sweep.records if r["fan"] == g["fan"]]
        fit = analyse_points(chosen, wing.rig).fit
        assert g["slope_per_deg"][0] == pytest.approx(fit.slope * math.pi / 180, rel=1e-12)
        # thin-airfoil theory 0.1097 per degree (docs/REFERENCES.md); the simulated section is 0.9 of it, raised
        # by its tunnel's walls
        assert 0.07 < g["slope_per_deg"][0] < 0.13
    assert groups[0]["re"][1] < groups[1]["re"][0]  # the faster fan, the higher Re


def test_a_reynolds_sweep_holds_the_angle(wing):
    body = {"kind": "fan", "fans": "0.5,0.8", "at_deg": 4, **PACE}
    assert wing.post("/api/live/sweep-start", body).status_code == 200
    assert wing.station.sweep.plan == terminal_plan(AIRFOIL, "--at-deg", "4", "--fans", "0.5,0.8")
    wait_for(wing, lambda: not wing.station.sweep.running, 120)
    assert wing.station.sweep.message == "sweep done"
    shown = wing.get("/api/live/sweep-results").get_json()
    assert [round(p["alpha_deg"]) for p in shown["points"]] == [4, 4]
    assert shown["points"][0]["re"][0] < shown["points"][1]["re"][0] and shown["lift"] == []
    assert "Cl against Re" in shown["reasons"]["fit"]
    assert wing.acq.setpoints == {"fan": 0.0, "alpha": 0.0}


@pytest.mark.parametrize("rig, body, field, words", [
    ("venturi", {"kind": "fan", "fans": "0.5,1.2"}, "fans", "outside the fan's range"),
    ("venturi", {"kind": "fan", "fans": "0.6:0.3:0.1"}, "fans", "runs down"),
    ("venturi", {"kind": "fan", "fans": "0.6,0.3"}, "fans", "must rise"),
    ("venturi", {"kind": "fan", "fans": "0,0.5"}, "fans", "safe (off) value"),
    ("venturi", {"kind": "fan", "fans": "0.5"}, "fans", "at least 2"),
    ("venturi", {"kind": "fan", "fans": "half"}, "fans", "FROM:TO:STEP"),
    ("venturi", {"kind": "nested", "fans": "0.4,0.6", "from_deg": 0, "to_deg": 4}, "by_hand", "no angle actuator"),
    ("wing", {"kind": "angle", "from_deg": 10, "to_deg": -4}, "from_deg", "the range runs down"),
    ("wing", {"kind": "angle", "from_deg": 0, "to_deg": 40}, "to_deg", "refused, not clipped"),
    ("wing", {"kind": "fan", "fans": "0.3,0.6", "at_deg": 20}, "at_deg", "outside the servo's limits"),
    ("wing", {"kind": "fan", "fans": "0.3,0.6"}, "at_deg", "holds the model at one angle"),
    ("wing", {"kind": "nested", "fans": "0.3,1.6", "from_deg": 0, "to_deg": 4}, "fans", "outside the fan's range"),
    ("wing", {"kind": "angle", "from_deg": 0, "to_deg": 4, "step_deg": "2"}, "step_deg", "must be a number"),
])
def test_refusals_name_their_field_and_nothing_moves(request, rig, body, field, words):
    live = request.getfixturevalue(rig)
    resp = live.post("/api/live/sweep-start", body)
    answer = resp.get_json()
    assert resp.status_code == 400 and answer["field"] == field and words in answer["error"], answer
    assert "Traceback" not in answer["error"] and not live.station.sweep.running
    assert all(v == a.safe for a in live.rig.actuators for k, v in live.acq.setpoints.items() if k == a.name)


def test_only_a_control_key_starts_or_resumes_a_sweep(venturi):
    body = {"kind": "fan", "fans": "0.4,0.6", **PACE}
    assert venturi.post("/api/live/sweep-start", body, key="view").status_code == 403
    assert venturi.post("/api/live/sweep-resume", {"name": "x.taprig"}, key="view").status_code == 403
    assert venturi.post("/api/live/sweep-start", body, key=None).status_code == 401
    assert not venturi.station.sweep.running and venturi.acq.setpoints["blower"] == 0.0


# -- every ending of a page's fan sweep leaves the fan at its safe value ------------------------------------------
def _start_long_fan_sweep(live) -> None:
    body = {"kind": "fan", "fans": "0.3:0.9:0.1", "up_and_down": True, **PACE}
    assert live.post("/api/live/sweep-start", body).status_code == 200
    wait_for(live, lambda: _fan_running(live), 60)


def _ends_safe(live, words: str) -> None:
    wait_for(live, lambda: not live.station.sweep.running, 60)
    assert words in live.station.sweep.message, live.station.sweep.message
    assert live.acq.setpoints["blower"] == 0.0
    assert live.station.sweep.done < 13  # it ended before its last point
    scans = live.acq.scans
    wait_for(live, lambda: live.acq.scans > scans + 500, 60)  # later: nothing sent the fan up again
    assert live.acq.setpoints["blower"] == 0.0


def test_stop_mid_fan_sweep_ends_it_at_once_with_the_fan_safe(venturi):
    _start_long_fan_sweep(venturi)
    assert venturi.post("/api/live/stop").status_code == 200
    _ends_safe(venturi, "STOP")


def test_the_sweeps_own_stop_ends_after_its_point_with_the_fan_safe(venturi):
    _start_long_fan_sweep(venturi)
    assert venturi.post("/api/live/sweep-stop").status_code == 200
    _ends_safe(venturi, "stopped by the operator")


def test_closing_the_page_that_ran_a_fan_sweep_ends_it_safe(venturi):
    venturi.station.unwatched_grace_s = 1.0  # a reload takes less; the default is longer
    stream = venturi.client.get(f"/api/live/stream?key={venturi.keys.control}")
    chunks = iter(stream.response)
    next(chunks)  # the page is watching
    _start_long_fan_sweep(venturi)
    assert venturi.station.sweep.leased
    stream.close()  # the browser tab closes
    _ends_safe(venturi, "the page that ran it was closed")


def test_a_sweep_started_without_a_page_is_not_ended_by_pages_coming_and_going(venturi):
    body = {"kind": "fan", "fans": "0.4,0.6", **PACE}
    venturi.station.unwatched_grace_s = 0.0
    assert venturi.post("/api/live/sweep-start", body).status_code == 200
    view = venturi.client.get(f"/api/live/stream?key={venturi.keys.control}")
    next(iter(view.response))
    view.close()
    wait_for(venturi, lambda: not venturi.station.sweep.running, 120)
    assert venturi.station.sweep.message == "sweep done" and venturi.acq.setpoints["blower"] == 0.0


def test_the_station_closing_mid_fan_sweep_leaves_the_fan_safe(venturi):
    _start_long_fan_sweep(venturi)
    venturi.station.close()
    assert not venturi.station.sweep.running and "dashboard is closing" in venturi.station.sweep.message
    assert venturi.acq.setpoints["blower"] == 0.0


def _post(base: str, key: str, action: str, body: dict | None = None) -> dict:
    req = urllib.request.Request(f"{base}/api/live/{action}", data=json.dumps(body or {}).encode(), method="POST",
                                 headers={"Content-Type": "application/json", "X-Taprig-Key": key})
    with urllib.request.urlopen(req, timeout=30) as resp:
        return json.loads(resp.read())


def _latest(base: str, key: str) -> dict:
    with urllib.request.urlopen(f"{base}/api/live/latest?key={key}", timeout=30) as resp:
        return json.loads(resp.read())


def test_the_server_ending_mid_fan_sweep_sends_the_fan_safe(tmp_path):
    proc = subprocess.Popen([sys.executable, "-m", "taprig", "live", "--rig", str(VENTURI_PITOT), "--port",
                             "sim://?seed=3&speed=4&watchdog_ms=0", "--no-browser", "--http-port", "0", "--quiet",
                             "--sessions", str(tmp_path)], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            start_new_session=True, cwd=tmp_path)
    try:
        base, key = proc.stdout.readline().split(": ", 1)[1].strip().split("/?key=")
        _post(base, key, "sweep-start", {"kind": "fan", "fans": "0.3:0.9:0.1", **PACE})
        for _ in range(600):  # until the fan runs for the sweep
            frame = _latest(base, key)
            if frame["sweep"]["running"] and not frame["setpoints"]["blower"]["safe"]:
                break
        else:
            raise AssertionError("the sweep did not start the fan")
        os.killpg(proc.pid, signal.SIGTERM)
        out, err = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
    assert proc.returncode == 143, err
    assert "blower 0 duty acknowledged" in err and "Traceback" not in err


# -- resume ----------------------------------------------------------------------------------------------------
def test_an_interrupted_fan_sweep_resumes_from_the_page_with_the_terminals_points(venturi):
    plan = {"kind": "fan", "fans": "0.4:0.7:0.1", **PACE}
    assert venturi.post("/api/live/record-start").status_code == 200
    assert venturi.post("/api/live/sweep-start", plan).status_code == 200
    wait_for(venturi, lambda: venturi.station.sweep.done >= 2, 120)
    venturi.post("/api/live/sweep-stop")
    wait_for(venturi, lambda: not venturi.station.sweep.running, 60)
    first = Path(venturi.post("/api/live/record-stop").get_json()["path"])
    taken = records_of(first)
    assert 2 <= len(taken) < 4
    listed = venturi.get("/api/live/resumable").get_json()["sessions"]
    assert [s["name"] for s in listed] == [first.name]
    nxt = listed[0]["next"]
    whole = terminal_plan(VENTURI_PITOT, "--fans", "0.4:0.7:0.1").planned()
    assert listed[0]["taken"] == len(taken) and nxt["number"] == len(taken) + 1
    assert nxt["fan"] == whole[len(taken)].fan and nxt["label"] == whole[len(taken)].label()
    # no new wind-off zero here: this simulated pitot's offset reads as a little flow until zeroed (the page's zero
    # refuses moving air), and the run's first zero still holds
    resp = venturi.post("/api/live/sweep-resume", {"name": first.name, "zero": False})
    assert resp.status_code == 200 and resp.get_json()["carried"] == len(taken)
    wait_for(venturi, lambda: not venturi.station.sweep.running, 120)
    assert venturi.station.sweep.message == "sweep done" and venturi.acq.setpoints["blower"] == 0.0
    second = Path(resp.get_json()["recording"])
    venturi.post("/api/live/record-stop")
    resumed = records_of(second)
    assert [(r["plan_index"], r["fan"], r["leg"]) for r in resumed] == [(p.index, p.fan, p.leg) for p in whole]
    assert [r.get("carried_from") is not None for r in resumed] == [True] * len(taken) + [False] * (4 - len(taken))
    assert records_of(first) == taken  # the first session is never changed
    # complete now: not offered, and refused by name
    assert venturi.get("/api/live/resumable").get_json()["sessions"] == []
    again = venturi.post("/api/live/sweep-resume", {"name": second.name}).get_json()
    assert again["field"] == "resume" and "nothing to resume" in again["error"]


def test_resume_refuses_another_rigs_sweep(venturi, wing, tmp_path):
    assert wing.post("/api/live/record-start").status_code == 200
    wing.post("/api/live/sweep-start", {"kind": "angle", "from_deg": 0, "to_deg": 12, "step_deg": 2, **PACE})
    wing.post("/api/live/sweep-stop")
    wait_for(wing, lambda: not wing.station.sweep.running, 60)
    path = Path(wing.post("/api/live/record-stop").get_json()["path"])
    (venturi.sessions / "wing.taprig").write_bytes(path.read_bytes())
    assert venturi.get("/api/live/resumable").get_json()["sessions"] == []
    answer = venturi.post("/api/live/sweep-resume", {"name": "wing.taprig", "zero": False}).get_json()
    assert answer["field"] == "resume" and "naca0012-20tap" in answer["error"]
    assert venturi.acq.setpoints["blower"] == 0.0
