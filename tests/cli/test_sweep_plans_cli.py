"""`taprig sweep` plans on the simulated rig (compressed time): up and down past the stall, fan sweeps, nested
sweeps, by hand, interrupted and resumed, and refusals before anything opens."""

from __future__ import annotations

import io
import math
from pathlib import Path

import numpy as np
import pytest

from taprig.analysis import analyse_points
from taprig.cli import main
from taprig.rig import load_rig
from taprig.session.store import SessionReader

ROOT = Path(__file__).resolve().parents[2]
NACA = str(ROOT / "rigs" / "naca0012-20tap.toml")
CAMBERED = str(ROOT / "rigs" / "cambered-balance.toml")
VENTURI_PITOT = str(ROOT / "tests" / "analysis" / "venturi-pitot.toml")
FAST = "sim://?seed=2&speed=max&watchdog_ms=0"
PACE = ["--settle", "0.3", "--average", "0.5", "--spin-up", "2", "--no-dashboard"]


def exit_code(argv) -> int:
    try:
        return main([str(a) for a in argv])
    except SystemExit as exc:
        return exc.code


def records_of(path) -> list[dict]:
    with SessionReader(path) as r:
        return [e.data for e in r.points()]


def events_of(path, kind) -> list:
    with SessionReader(path) as r:
        return [e for e in r.events() if e.kind == kind]


def model_curve(rig, walls: bool = True):
    """Cl of the simulator's own section model for ``rig`` (the plant a sim:// board runs: between the tunnel's
    walls where the rig states them, or in free air; docs/simulator.md) on a fine grid of angles [rad]."""
    from taprig.sim.options import SimOptions
    from taprig.sim.plant import build_plant

    alpha = np.radians(np.arange(-4.0, 16.0, 0.05))
    return alpha, build_plant(rig, SimOptions(walls=walls)).airfoil.pressures(alpha).cl


def _stall_and_slope_agree(analysis, alpha, cl, slope: bool = True):
    """The analysis's stall within ±0.5° of the model's Cl max, its slope within 3 % of the model's over the same
    angles (issue 11's tolerances)."""
    assert analysis.stall.stalled
    assert abs(math.degrees(analysis.stall.alpha_stall - alpha[np.argmax(cl)])) <= 0.5
    if not slope:
        return
    lo, hi = analysis.fit.alpha_range
    same = (alpha >= lo - 1e-9) & (alpha <= hi + 1e-9)
    assert analysis.fit.slope == pytest.approx(np.polyfit(alpha[same], cl[same], 1)[0], rel=0.03)


def test_up_and_down_past_the_stall_finds_the_models_stall_and_slope(tmp_path, capsys):
    out = tmp_path / "s.taprig"
    code = main(["sweep", "--rig", NACA, "--port", FAST, "--from-deg", "5", "--to-deg", "15", "--step-deg", "0.5",
                 "--up-and-down", "--past-stall", "3", *PACE, "-o", str(out)])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    records = records_of(out)
    rig = load_rig(NACA)
    # as measured in the tunnel, against the model between its walls (Cl max near 11.5°: the walls' upwash)
    _stall_and_slope_agree(analyse_points(records, rig, "shape"), *model_curve(rig))
    # corrected for the walls (the default choice, what taprig sweep prints), the stall against the model in free
    # air (Cl max at its critical angle, 12°); how well the classical corrections recover the free-air slope is
    # checked where they live (tests/sim/test_walls.py)
    analysis = analyse_points(records, rig)
    _stall_and_slope_agree(analysis, *model_curve(rig, walls=False), slope=False)
    # the way up ends 3 points past the measured maximum, and comes back down without repeating the top
    legs = [(r["leg"], r["plan_alpha_rad"]) for r in records]
    up = [a for leg, a in legs if leg == "up"]
    assert [a for leg, a in legs if leg == "down"] == up[-2::-1]
    top = max(r["alpha_rad"] for r, (leg, a) in zip(records, legs) if leg == "up"
              and r["shape"]["cl"] == max(q["shape"]["cl"] for q in records if q["leg"] == "up"))
    assert sum(a > top + 1e-9 for a in up) == 3 and max(up) < math.radians(15)
    assert analysis.hysteresis is not None and analysis.unsteadiness is not None
    # every point records its setpoints and its taps' fluctuations; 1.5° past the maximum the separated suction side
    # fluctuates well above the attached level (the model's fluctuation grows with the separated extent)
    assert all(r["setpoints"]["fan"] == 0.8 and r["fan"] == 0.8 and r["cp_rms"] for r in records)
    unsteady = analysis.unsteadiness.unsteady
    assert unsteady[[a == max(up) for _, a in legs]].all() and not unsteady[list(analysis.fit.used)].any()
    assert "stall at" in captured.out and "Hysteresis" in captured.out
    # then back to safe values: the sweep itself sends them, before the run's shutdown does
    last_point_ns = max(e.host_ns for e in SessionReader(out).points())
    with SessionReader(out) as r:
        after = [e.data for e in r.events() if e.kind == "setpoint" and e.host_ns > last_point_ns]
    assert {(d["actuator"], d["value"]) for d in after[:2]} == {("fan", 0.0), ("alpha", 0.0)}


def test_venturi_fan_sweep_recovers_the_simulated_discharge_coefficient(tmp_path, capsys):
    out = tmp_path / "v.taprig"
    code = main(["sweep", "--rig", VENTURI_PITOT, "--port", FAST + "&venturi_c=0.97", "--fans", "0.4:0.7:0.15",
                 *PACE, "-o", str(out)])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    records = records_of(out)
    assert [r["fan"] for r in records] == pytest.approx([0.4, 0.55, 0.7])
    dc = analyse_points(records, load_rig(VENTURI_PITOT)).discharge
    # sim option venturi_c = 0.97 (docs/simulator.md); recovered within twice its stated standard uncertainty (k = 2)
    assert abs(dc.mean_c - 0.97) <= 2 * dc.u_mean_c and dc.u_mean_c < 0.02
    assert np.all(np.diff(dc.re_d) > 0)  # Re_D rises with the fan
    # ISO 5167-4's stated value and range beside it (ISO 5167-4:2003 §5.5, from memory)
    assert "Discharge coefficient C = " in captured.out and "ISO 5167-4 (machined convergent): C = 0.995" in captured.out
    assert "outside 2e+05…1e+06" in captured.out


def test_nested_sweep_gives_a_lift_curve_at_each_fan_setting(tmp_path, capsys):
    out = tmp_path / "n.taprig"
    code = main(["sweep", "--rig", CAMBERED, "--port", FAST, "--from-deg", "0", "--to-deg", "4", "--fans",
                 "0.5,0.8", *PACE, "-o", str(out)])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    records = records_of(out)
    assert [(r["fan"], round(math.degrees(r["plan_alpha_rad"])), r["group"]) for r in records] == [
        (0.5, 0, 0), (0.5, 2, 0), (0.5, 4, 0), (0.8, 0, 1), (0.8, 2, 1), (0.8, 4, 1)]
    re = [r["re"] for r in records]
    assert max(re[:3]) < min(re[3:])  # the higher fan setting, the higher Reynolds number
    assert "fan 0.5: Lift slope" in captured.out and "fan 0.8: Lift slope" in captured.out


def test_reynolds_sweep_of_an_airfoil_holds_the_angle(tmp_path, capsys):
    out = tmp_path / "r.taprig"
    code = main(["sweep", "--rig", CAMBERED, "--port", FAST, "--at-deg", "4", "--fans", "0.5,0.8", "--up-and-down",
                 *PACE, "-o", str(out)])
    assert code == 0, capsys.readouterr().err
    records = records_of(out)
    assert [(r["fan"], r["leg"]) for r in records] == [(0.5, "up"), (0.8, "up"), (0.5, "down")]
    assert {round(math.degrees(r["alpha_rad"]), 9) for r in records} == {4.0}


def _interrupt_after(monkeypatch, n):
    """Stop the run as Ctrl-C would (a stop request to the acquisition) once ``n`` points are taken."""
    from taprig.cli.commands import sweep as sweep_command

    original = sweep_command._SweepRun.on_point

    def on_point(self, point):
        original(self, point)
        if len(self.points) == n:
            self.acq.request_stop("stopped by Ctrl-C (SIGINT)")

    monkeypatch.setattr(sweep_command._SweepRun, "on_point", on_point)


def test_an_interrupted_sweep_resumes_where_it_stopped_with_the_same_points(tmp_path, capsys, monkeypatch):
    # the simulated section's lift peaks near 11.5° in this tunnel: on a 2° grid from 3° the maximum is at 11°
    # by far (the model's Cl there is at least 10 % above its neighbours'), so each run turns at the same point
    plan = ["--from-deg", "3", "--to-deg", "15", "--step-deg", "2", "--up-and-down", "--past-stall", "1", *PACE]
    whole, first, second = tmp_path / "whole.taprig", tmp_path / "first.taprig", tmp_path / "second.taprig"
    assert main(["sweep", "--rig", NACA, "--port", FAST, *plan, "-o", str(whole)]) == 0
    with monkeypatch.context() as m:
        _interrupt_after(m, 4)
        assert main(["sweep", "--rig", NACA, "--port", FAST, *plan, "-o", str(first)]) == 1
    captured = capsys.readouterr()
    assert f"--resume {first}" in captured.out + captured.err
    assert len(records_of(first)) == 4
    # resumed with none of the plan's options: they come from the session
    assert main(["sweep", "--rig", NACA, "--port", FAST, "--no-dashboard", "--resume", str(first),
                 "-o", str(second)]) == 0, capsys.readouterr().err
    expected, resumed = records_of(whole), records_of(second)
    key = [(r["plan_index"], r["leg"], r["plan_alpha_rad"], r["fan"]) for r in expected]
    assert [(r["plan_index"], r["leg"], r["plan_alpha_rad"], r["fan"]) for r in resumed] == key
    assert [round(math.degrees(a)) for _, _, a, _ in key] == [3, 5, 7, 9, 11, 13, 11, 9, 7, 5, 3]  # 1 past 11°
    assert [r.get("carried_from") is not None for r in resumed] == [True] * 4 + [False] * 7
    for a, b in zip(expected, resumed):  # the same flow, measured again: within the points' own uncertainty
        assert abs(a["shape"]["cl"] - b["shape"]["cl"]) <= 2 * math.hypot(a["shape"]["u_cl"], b["shape"]["u_cl"])
    # a complete sweep has nothing to resume
    assert exit_code(["sweep", "--rig", NACA, "--port", FAST, "--resume", second, "-o", tmp_path / "x.taprig"]) == 1
    assert "nothing to resume" in capsys.readouterr().err


def _rig_without_servo(tmp_path) -> str:
    text = (ROOT / "rigs" / "naca0012-20tap.toml").read_text()
    head, servo = text.split('[[actuators]]\nid = 1\nkind = "angle"')
    rest = servo.split("\n\n", 1)[1]
    path = tmp_path / "by-hand.toml"
    path.write_text(head + rest.replace('id = "naca0012-20tap"', 'id = "naca0012-by-hand"'))
    return str(path)


class ScriptedOperator(io.StringIO):
    """The operator at the terminal: answers the prompts in turn, and sets the simulated model by hand first."""

    def __init__(self, answers, devices):
        super().__init__()
        self.answers, self.devices, self.asked = list(answers), devices, 0

    def fileno(self):  # not a real terminal: the operator reads line by line
        raise io.UnsupportedOperation("fileno")

    def readline(self, *args):
        answer, hand = self.answers.pop(0)
        if hand is not None:
            self.devices[-1].hand_angle_deg = hand
        return answer


def test_sweep_by_hand_takes_the_operators_angles(tmp_path, capsys, monkeypatch):
    from taprig.link.handlers import protocol_sim

    devices = []

    class Device(protocol_sim.SimulatedDevice):
        def __init__(self, *args, **kwargs):
            super().__init__(*args, **kwargs)
            devices.append(self)

    monkeypatch.setattr(protocol_sim, "SimulatedDevice", Device)
    rig = _rig_without_servo(tmp_path)
    # confirms 0°, sets 2.5° where 2° was asked and says so, confirms 4°, then stops the sweep at 6°
    monkeypatch.setattr("sys.stdin", ScriptedOperator([("\n", 0.0), ("2.5\n", 2.5), ("\n", 4.0), ("q\n", None)],
                                                      devices))
    out = tmp_path / "h.taprig"
    code = main(["sweep", "--rig", rig, "--port", FAST, "--by-hand", "--from-deg", "0", "--to-deg", "6", *PACE,
                 "-o", str(out)])
    err = capsys.readouterr().err
    assert code == 1 and "stopped by the operator" in err
    assert "set the model to α = +0.0°" in err and "α = +6.0°" in err
    records = records_of(out)
    assert [round(math.degrees(r["alpha_rad"]), 6) for r in records] == [0.0, 2.5, 4.0]
    assert [round(math.degrees(r["plan_alpha_rad"]), 6) for r in records] == [0.0, 2.0, 4.0]
    assert all(r["by_hand"] for r in records)
    # the Cl follows the angle set by hand (thin-airfoil 2π per radian, within 20 %: the model is 0.9 of inviscid)
    cl = [r["shape"]["cl"] for r in records]
    assert cl[0] == pytest.approx(0.0, abs=0.03)
    assert cl[1] == pytest.approx(2 * math.pi * math.radians(2.5), rel=0.2)
    # the replay knows the angles too: they are recorded as events
    assert [round(math.degrees(e.data["value"]), 6) for e in events_of(out, "hand angle")] == [0.0, 2.5, 4.0]


@pytest.mark.parametrize("rig, args, message", [
    (NACA, ["--from-deg", "10", "--to-deg", "-4"], "the range runs down"),
    (NACA, ["--from-deg", "-20", "--to-deg", "10"], "refused, not clipped"),
    (NACA, ["--at-deg", "20", "--fans", "0.3,0.6"], "outside the servo's limits"),
    (NACA, ["--fans", "0.5,1.2"], "outside the fan's range"),
    (NACA, ["--fans", "0.6:0.3:0.1"], "runs down"),
    (NACA, ["--fans", "0.6,0.3"], "must rise"),
    (NACA, ["--by-hand", "--to-deg", "6"], "--by-hand is for a rig with no angle servo"),
    (NACA, ["--at-deg", "4", "--fans", "0.3,0.6", "--past-stall", "1"], "--past-stall ends an angle sweep"),
    (NACA, ["--past-stall", "-1"], "argument --past-stall"),
    (VENTURI_PITOT, [], "give the fan settings to sweep with --fans"),
    (VENTURI_PITOT, ["--fans", "0,0.5"], "safe (off) value"),
])
def test_bad_plans_are_refused_before_anything_opens(tmp_path, capsys, rig, args, message):
    out = tmp_path / "s.taprig"
    assert exit_code(["sweep", "--rig", rig, "--port", FAST, "-o", out, *args]) == 2
    err = capsys.readouterr().err
    assert message in err and "Traceback" not in err
    assert not out.exists()


@pytest.mark.parametrize("rig, plan, header, claimed", [
    ("naca0012-20tap.toml", ["--from-deg", "0", "--to-deg", "4", "--step-deg", "2"],
     ["Cl (fit, walls)", "Cl trap", "Cd_p", "Cm¼"], 1),
    ("cylinder.toml", ["--fans", "0.5,0.8"], ["Cd_p"], 1),
    ("venturi-8.toml", ["--fans", "0.5,0.8"], ["ṁ [g/s]"], 0),
    ("bump-channel.toml", ["--fans", "0.5,0.8"], [], 0),
])
def test_the_sweep_table_shows_what_the_rigs_kind_computes(tmp_path, capsys, rig, plan, header, claimed):
    # the columns follow the coefficients taprig claims for the kind (RigKind.coefficients, which `taprig check`'s
    # prediction asks too): an airfoil's Cl, Cd_p, Cm¼; a cylinder's Cd_p; a venturi's mass flow; no coefficient
    # for a bump in a channel
    from taprig.rig import RigKind, load_rig

    path = ROOT / "rigs" / rig
    code = main(["sweep", "--rig", str(path), "--port", "sim://?seed=2&speed=max&watchdog_ms=0", *plan,
                 "--settle", "0.3", "--average", "0.5", "--no-dashboard", "-o", str(tmp_path / "s.taprig")])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    lines = captured.out.splitlines()
    top = next(i for i, line in enumerate(lines) if line.lstrip().startswith("α [°]"))
    columns = [c for c in lines[top].split("  ") if c.strip()]
    assert [c.strip() for c in columns[6:]] == header  # after α, fan, leg, q, V, Re
    rows = lines[top + 1:top + 3]
    assert len(rows) == 2 and all(row.count(" ± ") == claimed for row in rows), rows
    kind = load_rig(path).kind
    assert ("Cl" in lines[top]) == ("cl" in kind.coefficients)
    assert kind is not RigKind.BUMP or not any("Cl" in line or "Cd" in line for line in lines[top:top + 3])
    if kind is RigKind.CYLINDER:
        # the simulated cylinder is in potential flow (docs/simulator.md): no pressure drag (d'Alembert's paradox,
        # common practice); the column is Cd_p ± its u
        for row in rows:
            cd, u = float(row.split()[-3]), float(row.split()[-1])
            assert abs(cd) <= 2 * u + 1e-3, row
