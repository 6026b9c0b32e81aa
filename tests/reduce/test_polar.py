"""Lift-curve summary: slope, zero-lift angle, stall detection."""

import math

import numpy as np
import pytest

from taprig.reduce.polar import lift_curve


def test_thin_airfoil_line_and_stall():
    # Thin-airfoil theory: Cl = 2π(α − α0) below the stall (here α0 = −2°, the zero-lift angle of a cambered
    # section; the stall shape is invented for the test).
    a = np.radians(np.arange(-6.0, 19.0, 1.0))
    a0 = math.radians(-2.0)
    cl = np.where(a <= math.radians(13), 2 * math.pi * (a - a0), 2 * math.pi * (math.radians(13) - a0) - 2.5 * (a - math.radians(13)))
    rng = np.random.default_rng(3)
    curve = lift_curve(a, cl + rng.normal(0, 0.01, a.size))
    assert curve.slope == pytest.approx(2 * math.pi, rel=0.02)
    assert math.degrees(curve.alpha_zero_lift) == pytest.approx(-2.0, abs=0.2)
    assert curve.stalled and math.degrees(curve.alpha_stall) == pytest.approx(13.0, abs=1.0)
    assert math.degrees(curve.linear_range[1]) <= 13.5


def test_no_stall_reached():
    a = np.radians(np.arange(-4.0, 9.0, 2.0))
    curve = lift_curve(a, 2 * math.pi * a)
    assert not curve.stalled and math.isnan(curve.alpha_stall)
    assert curve.cl_max == pytest.approx(2 * math.pi * math.radians(8))


def test_too_few_points():
    with pytest.raises(ValueError, match="at least 3 points"):
        lift_curve([0.0, 0.1, math.nan], [0.0, 0.6, 1.0])


def test_lift_curve_ignores_a_post_stall_point_for_the_slope():
    # Points of a demo-like sweep: 2π-ish below 12°, a drop at 14° (invented numbers, shape only).
    a = np.radians([-4, -2, 0, 2, 4, 6, 8, 10, 12, 14])
    cl = np.array([-0.395, -0.198, 0.0, 0.2, 0.399, 0.598, 0.791, 0.98, 1.174, 0.826])
    curve = lift_curve(a, cl)
    assert math.degrees(curve.linear_range[1]) == pytest.approx(12)
    assert curve.slope * math.pi / 180 == pytest.approx(0.098, abs=0.002)
    assert curve.stalled and math.degrees(curve.alpha_stall) == pytest.approx(12)
