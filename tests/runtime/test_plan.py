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
