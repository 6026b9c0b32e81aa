"""Sweep plans (taprig.runtime.plan): order, legs, nesting, the turn past the stall, resuming. Pure."""

from __future__ import annotations

import math

import pytest

from taprig.runtime.plan import PlanError, SweepPlan, point_record_keys

DEG = math.pi / 180


def _angles(*deg):
    return tuple(d * DEG for d in deg)


def _walk(plan, cl_of=None):
    """Every point of ``plan``, fed records whose Cl is ``cl_of(angle in degrees)`` (as a sweep would be)."""
    records, points = [], []
    while (p := plan.next_point(records)) is not None:
        points.append(p)
        record = point_record_keys(p)
        if p.alpha_rad is not None:
            record["alpha_rad"] = p.alpha_rad
            if cl_of is not None:
                record["shape"] = {"cl": cl_of(p.alpha_rad / DEG), "u_cl": 0.01}
        records.append(record)
    return points, records


def test_up_and_down_visits_each_angle_twice_but_the_top_once():
    plan = SweepPlan("angle", _angles(0, 2, 4, 6), (0.8,), up_and_down=True)
    points = plan.planned()
    assert [round(p.alpha_rad / DEG) for p in points] == [0, 2, 4, 6, 4, 2, 0]
    assert [p.leg for p in points] == ["up"] * 4 + ["down"] * 3
    assert [p.index for p in points] == list(range(7)) and {p.fan for p in points} == {0.8}


def test_nested_sweep_runs_the_angles_at_each_fan_setting_in_turn():
    points = SweepPlan("angle", _angles(0, 5), (0.4, 0.8)).planned()
    assert [(p.fan, round(p.alpha_rad / DEG), p.group) for p in points] == [(0.4, 0, 0), (0.4, 5, 0), (0.8, 0, 1),
                                                                             (0.8, 5, 1)]


def test_fan_sweep_holds_its_angle_or_none():
    points = SweepPlan("fan", _angles(4), (0.3, 0.6, 0.9), up_and_down=True).planned()
    assert [p.fan for p in points] == [0.3, 0.6, 0.9, 0.6, 0.3]
    assert {round(p.alpha_rad / DEG) for p in points} == {4}
    assert {p.alpha_rad for p in SweepPlan("fan", (), (0.3, 0.6)).planned()} == {None}


def _stalling(deg):  # a lift curve with its maximum at 10° and a fall of 0.2 per degree beyond (invented)
    return 0.1 * deg if deg <= 10 else 1.0 - 0.2 * (deg - 10)


@pytest.mark.parametrize("past", [1, 2, 3])
def test_the_way_up_ends_a_set_number_of_points_past_the_stall(past):
    plan = SweepPlan("angle", _angles(*range(0, 16)), (0.8,), up_and_down=True, past_stall=past)
    points, _ = _walk(plan, _stalling)
    up = [round(p.alpha_rad / DEG) for p in points if p.leg == "up"]
    down = [round(p.alpha_rad / DEG) for p in points if p.leg == "down"]
    assert up == list(range(0, 11 + past))  # the maximum at 10°, then `past` points beyond it
    assert down == list(range(10 + past - 1, -1, -1))


def test_without_a_stall_the_way_up_runs_to_the_end_of_the_range():
    plan = SweepPlan("angle", _angles(*range(0, 8)), (0.8,), past_stall=2)
    points, _ = _walk(plan, lambda d: 0.1 * d)
    assert len(points) == 8


def test_the_same_records_give_the_same_next_point_so_a_resume_takes_the_rest():
    plan = SweepPlan("angle", _angles(*range(0, 16)), (0.5, 0.8), up_and_down=True, past_stall=2)
    points, records = _walk(plan, _stalling)
    for k in range(len(records)):
        assert plan.next_point(records[:k]) == points[k]
    assert plan.next_point(records) is None


def test_points_of_another_plan_are_refused():
    _, records = _walk(SweepPlan("angle", _angles(0, 2, 4), (0.8,)))
    with pytest.raises(PlanError, match="another sweep"):
        SweepPlan("angle", _angles(0, 3, 6), (0.8,)).next_point(records)


def test_stored_plan_round_trips_and_bad_ones_are_named():
    plan = SweepPlan("angle", _angles(-2, 0, 2), (0.5, 0.8), up_and_down=True, past_stall=1)
    assert SweepPlan.from_dict(plan.to_dict()) == plan
    with pytest.raises(PlanError, match="not one"):
        SweepPlan.from_dict({"angles_rad": [0, 1]})


@pytest.mark.parametrize("kwargs, message", [
    (dict(inner="angle", angles_rad=_angles(4, 2, 0)), "must rise"),
    (dict(inner="angle", angles_rad=_angles(4)), "at least 2"),
    (dict(inner="fan", fans=(0.5, 0.4)), "must rise"),
    (dict(inner="fan", fans=(0.4, 0.5), past_stall=1), "angle sweep"),
    (dict(inner="angle", angles_rad=_angles(0, float("nan"))), "finite"),
])
def test_plans_that_cannot_run_are_refused(kwargs, message):
    with pytest.raises(PlanError, match=message):
        SweepPlan(**kwargs)


# -- plans from what the operator typed (the terminal's options and the page's form) ------------------------------
def test_fan_settings_as_a_list_or_a_range_and_refusals_name_the_field():
    from taprig.runtime.plan import FieldError, parse_fan_settings

    assert parse_fan_settings("0.3,0.5,0.8") == (0.3, 0.5, 0.8)
    assert parse_fan_settings("0.3:0.9:0.2") == (0.3, 0.5, 0.7, 0.9)  # TO included when a step lands on it
    assert parse_fan_settings("0.3:0.8:0.2") == (0.3, 0.5, 0.7)
    for text, words in (("0.6:0.3:0.1", "runs down"), ("0.6,0.3", "must rise"), ("a,b", "FROM:TO:STEP"),
                        ("0.1:0.5:0", "FROM:TO:STEP"), ("nan,1", "finite")):
        with pytest.raises(FieldError, match=words) as caught:
            parse_fan_settings(text)
        assert caught.value.field == "fans"


def test_the_request_decides_the_kind_of_plan_as_the_terminal_does():
    from pathlib import Path

    from taprig.rig import load_rig
    from taprig.runtime.plan import FieldError, SweepRequest, plan_from_request

    rigs = Path(__file__).resolve().parents[2] / "rigs"
    wing, venturi = load_rig(rigs / "naca0012-20tap.toml"), load_rig(rigs / "venturi-8.toml")
    angle = plan_from_request(wing, SweepRequest(None, 0.8, 0, 4, 2))
    assert angle == SweepPlan("angle", _angles(0, 2, 4), (0.8,))
    nested = plan_from_request(wing, SweepRequest((0.5, 0.8), 0.8, 0, 4, 2))
    assert nested.inner == "angle" and nested.fans == (0.5, 0.8)
    re_sweep = plan_from_request(wing, SweepRequest((0.5, 0.8), at_deg=4))
    assert re_sweep == SweepPlan("fan", _angles(4), (0.5, 0.8))
    assert plan_from_request(venturi, SweepRequest((0.4, 0.7))) == SweepPlan("fan", (), (0.4, 0.7))
    left = plan_from_request(wing, SweepRequest(None, None, 0, 4, 2))  # the page's angle sweep: fan as it is
    assert left.fans == ()
    for rig, req, field in ((wing, SweepRequest((0.5, 0.8), inner="fan"), "at_deg"),
                            (venturi, SweepRequest(None, 0.8, 0, 4, 2, inner="angle"), "by_hand"),
                            (venturi, SweepRequest((0.0, 0.5)), "fans"),
                            (wing, SweepRequest(None, 0.8, 0, 20, 2), "to_deg"),
                            (wing, SweepRequest(None, 1.5, 0, 4, 2), "fan"),
                            (wing, SweepRequest((0.5, 0.8), at_deg=4, past_stall=1), "past_stall")):
        with pytest.raises(FieldError) as caught:
            plan_from_request(rig, req)
        assert caught.value.field == field
