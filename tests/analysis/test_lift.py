"""The analysis of a sweep's points on curves whose answers are known (thin-airfoil lines, invented stalls)."""

from __future__ import annotations

import math

import numpy as np
import pytest

from taprig.analysis import (
    balance_against_pressures, discharge_coefficient, find_stall, fit_line, hysteresis, linear_range_fit,
    moment_slope, point_table, pressure_drag_polar, unsteadiness,
)

TWO_PI = 2 * math.pi  # thin-airfoil lift slope per radian (Anderson, Fundamentals of Aerodynamics, §4.7)


def stalled_curve(alpha_deg, alpha0_deg=-2.0, stall_deg=12.0, fall=3.0):
    """Cl = 2π(α − α0) up to the stall, then falling at ``fall`` per radian (the stall's shape is invented)."""
    a = np.radians(alpha_deg)
    a0, s = math.radians(alpha0_deg), math.radians(stall_deg)
    return np.where(a <= s, TWO_PI * (a - a0), TWO_PI * (s - a0) - fall * (a - s))


def test_linear_range_stops_at_the_stall_and_recovers_the_line():
    alpha = np.arange(-6.0, 17.0, 1.0)
    fit = linear_range_fit(np.radians(alpha), stalled_curve(alpha))
    assert fit.slope == pytest.approx(TWO_PI, rel=1e-9)  # thin-airfoil line, exact data
    assert math.degrees(fit.alpha_zero) == pytest.approx(-2.0, abs=1e-9)
    assert [round(math.degrees(x)) for x in fit.alpha_range] == [-6, 12]
    assert fit.n_points == 19 and fit.residual_rms < 1e-12


def test_scatter_uncertainty_matches_the_spread_of_repeated_fits():
    # GUM §H.3: the standard error of a least-squares slope from the residuals; checked against the spread of
    # the slopes of many noisy copies of the same line (Monte Carlo, JCGM 101 in spirit).
    rng = np.random.default_rng(7)
    alpha = np.radians(np.arange(-4.0, 9.0, 1.0))
    slopes, stated = [], []
    for _ in range(400):
        cl = TWO_PI * alpha + rng.normal(0.0, 0.01, alpha.size)
        fit = fit_line(alpha, cl)
        slopes.append(fit.slope)
        stated.append(fit.u_slope_scatter)
    assert np.std(slopes, ddof=1) == pytest.approx(np.sqrt(np.mean(np.square(stated))), rel=0.1)


def test_a_shared_gain_error_is_carried_whole_into_the_slope():
    # Every point's uncertainty a fixed fraction r of its Cl, fully shared (a gain error): the slope is uncertain
    # by the same fraction, r·m (GUM §5.2.2 with r = 1), and scatter plays no part.
    alpha = np.radians(np.arange(-4.0, 9.0, 2.0))
    cl = TWO_PI * alpha
    fit = fit_line(alpha, cl, u=0.04 * np.abs(cl))
    assert fit.u_slope_systematic == pytest.approx(0.04 * TWO_PI, rel=1e-9)
    assert fit.u_slope_scatter == pytest.approx(0.0, abs=1e-12)
    # A shared offset u moves the zero-lift angle by u/m and leaves the slope alone.
    offset = fit_line(alpha, cl, u=np.full(alpha.size, 0.02))
    assert offset.u_alpha_zero_systematic == pytest.approx(0.02 / TWO_PI, rel=1e-9)
    assert offset.u_slope == pytest.approx(abs(float(np.sum((alpha - alpha.mean()) / np.sum((alpha - alpha.mean())**2)
                                                              * np.sign(cl) * 0.02))), abs=1e-12)


def test_stall_cl_max_and_how_abrupt():
    alpha = np.arange(0.0, 17.0, 1.0)
    abrupt = find_stall(np.radians(alpha), stalled_curve(alpha, 0.0, 12.0, fall=15.0))
    assert abrupt.stalled and math.degrees(abrupt.alpha_stall) == pytest.approx(12.0)
    assert abrupt.cl_max == pytest.approx(TWO_PI * math.radians(12.0))
    assert abrupt.abrupt and math.degrees(abrupt.resolution) == pytest.approx(0.5)
    gentle = find_stall(np.radians(alpha), stalled_curve(alpha, 0.0, 12.0, fall=1.5))
    assert gentle.stalled and not gentle.abrupt
    rising = find_stall(np.radians(alpha[:10]), stalled_curve(alpha[:10]))
    assert not rising.stalled and math.isnan(rising.alpha_stall)


def test_hysteresis_loop_where_the_legs_part():
    up_a = np.arange(8.0, 17.0, 1.0)
    down_a = up_a[::-1]
    up = stalled_curve(up_a, 0.0, 14.0, fall=10.0)
    down = stalled_curve(down_a, 0.0, 11.0, fall=10.0)  # reattaches late: the down leg stays low to 11°
    h = hysteresis(np.radians(up_a), up, np.radians(down_a), down, np.full(9, 0.01), np.full(9, 0.01))
    assert h.present
    assert [round(math.degrees(x)) for x in h.alpha_range] == [12, 16]
    assert h.area > 0
    same = hysteresis(np.radians(up_a), up, np.radians(down_a), up[::-1], np.full(9, 0.01), np.full(9, 0.01))
    assert not same.present and same.area == 0.0


def test_moment_slope_over_the_linear_range_only():
    alpha = np.arange(-4.0, 17.0, 1.0)
    cl = stalled_curve(alpha, 0.0, 12.0)
    cm = np.where(alpha <= 12, -0.01 * alpha / 57.29577951308232, -0.2)  # past the stall Cm breaks (invented)
    fit = linear_range_fit(np.radians(alpha), cl)
    m = moment_slope(np.radians(alpha), cm, fit=fit)
    assert m.slope == pytest.approx(-0.01, rel=1e-9)


def test_drag_polar_and_balance():
    polar = pressure_drag_polar(np.radians([4.0, -2.0, 0.0, 2.0]), [0.44, -0.22, 0.0, 0.22], [0.012, 0.009, 0.008, 0.009])
    assert polar.cd_min == pytest.approx(0.008) and polar.cl_at_cd_min == 0.0
    assert np.allclose(np.degrees(polar.alpha), [-2, 0, 2, 4])
    b = balance_against_pressures(np.radians([0.0, 4.0]), [0.01, 0.45], [0.01, 0.01], [0.0, 0.40], [0.01, 0.01])
    assert b.difference == pytest.approx([0.01, 0.05])
    assert b.agree.tolist() == [True, False]  # 0.05 > 2·√(0.01² + 0.01²)
    with pytest.raises(ValueError, match="balance"):
        balance_against_pressures([0.0], [0.1], [0.0], [math.nan], [0.0])


def test_unsteadiness_flags_points_above_the_attached_level():
    u = unsteadiness(np.radians([0, 4, 8, 12, 14]), [0.010, 0.011, 0.009, 0.012, 0.030], attached=[0, 1, 2])
    assert u.attached_level == pytest.approx(0.010)
    assert u.unsteady.tolist() == [False, False, False, False, True]
    assert math.degrees(u.first_unsteady_alpha) == pytest.approx(14)


def test_discharge_coefficient_from_the_throat_pressure():
    # ISO 5167-1 §3.3.5: C is the actual flow over the ideal flow at the same differential. With the inlet q
    # measured on its own, a throat reading Cp_ideal / C² means a discharge coefficient C exactly.
    ideal = 1 - 4.0**2  # area ratio 4 (β = 0.5): Cp_t,ideal = −15 (continuity and Bernoulli)
    cp = np.array([ideal / 0.96**2, ideal / 0.98**2])
    dc = discharge_coefficient(cp, [0.01 * 15, 0.01 * 15], ideal, [1e5, 2e5], 0.5)
    assert dc.c == pytest.approx([0.96, 0.98])
    assert dc.u_c == pytest.approx(0.5 * 0.01 * 15 / np.abs(cp) * dc.c)  # GUM §5.1.6: half the relative u of Cp
    with pytest.raises(ValueError, match="no flow"):
        discharge_coefficient([0.0], [0.0], ideal, [1.0], 0.5)


def test_point_table_reads_records_and_chooses_the_coefficients():
    records = [
        {"label": "a", "alpha_rad": 0.1, "wall_alpha_rad": 0.105, "q_pa": 100.0,
         "shape": {"cl": 0.6, "u_cl": 0.01, "cd_p": 0.01, "u_cd_p": 0.001, "cm_qc": 0.0, "u_cm_qc": 0.001},
         "corrected": {"cl": 0.58, "u_cl": 0.01, "cd_p": 0.01, "u_cd_p": 0.001, "cm_qc": 0.0, "u_cm_qc": 0.001},
         "cp_rms": {"U1": 0.03, "U2": 0.04, "L1": 0.5}, "leg": "up"},
        {"label": "b", "alpha_rad": -0.1, "plain": {"cl": -0.6, "u_cl": 0.01, "cd_p": None}, "cp_rms": {"L1": 0.02}},
    ]
    best = point_table(records, "best", upper_taps=["U1", "U2"], lower_taps=["L1"])
    assert best.cl.tolist() == [0.58, -0.6] and best.alpha_rad.tolist() == [0.105, -0.1]
    assert best.cp_rms_suction[0] == pytest.approx(math.sqrt((0.03**2 + 0.04**2) / 2))
    assert best.cp_rms_suction[1] == pytest.approx(0.02)  # below zero the lower surface is the suction side
    assert math.isnan(best.cd_p[1]) and best.leg == ("up", "")
    shape = point_table(records, "shape")
    assert shape.cl.tolist() == [0.6, -0.6] and shape.alpha_rad.tolist() == [0.1, -0.1]
    with pytest.raises(ValueError, match="expected one of"):
        point_table(records, "walls")


def test_a_point_with_a_sensor_state_enters_no_lift_fit_nor_cl_max():
    # project rule: a saturated or out-of-range reading is a state, not a number. A point flagged so, with a Cl
    # that would otherwise be the maximum and bend the slope, is left out of the fit and of Cl max.
    from pathlib import Path

    from taprig.analysis import analyse_points
    from taprig.rig import load_rig

    rig = load_rig(Path(__file__).resolve().parents[2] / "rigs" / "naca0012-20tap.toml")
    alphas = np.radians(np.arange(-4.0, 9.0, 2.0))
    records = []
    for i, alpha in enumerate(alphas):
        cl = 2 * np.pi * 0.9 * alpha  # thin-airfoil slope less 10 % (common practice, a plausible section)
        flags = []
        if i == len(alphas) - 1:
            cl, flags = 2.5, ["SATURATED", "DEGRADED"]  # a tap at its rails: not a lift to fit
        records.append({"label": f"a{i}", "alpha_rad": float(alpha), "flags": flags, "q_pa": 200.0, "u_q_pa": 1.0,
                        "plain": {"cl": float(cl), "u_cl": 0.01, "cd_p": 0.01, "u_cd_p": 0.001, "cm_qc": 0.0,
                                  "u_cm_qc": 0.001, "method": "trapezoid"}})
    a = analyse_points(records, rig)
    assert a.fit is not None and len(alphas) - 1 not in a.fit.used
    assert a.fit.slope == pytest.approx(2 * np.pi * 0.9, rel=1e-6)
    assert a.stall is not None and a.stall.cl_max < 2.0
