"""The analysis's results in words (taprig.analysis.wording): every number with its uncertainty, every state and
every analysis that could not be made in words, and never the text of a missing number ("nan", "inf", "None").

Results are built two ways: by the analysis itself on curves whose answers are known (thin-airfoil lines,
invented stalls, as tests/analysis/test_lift.py), and by hand with NaN and None in every field a record or a
failed computation can leave empty.
"""

from __future__ import annotations

import math
import re
from types import SimpleNamespace

import numpy as np
import pytest

from taprig.analysis import (
    ISO_MACHINED, BalanceComparison, DischargeCoefficient, Hysteresis, LinearFit, Stall, SweepAnalysis, Unsteadiness,
    VenturiStations, balance_against_pressures, discharge_coefficient, find_stall, hysteresis, linear_range_fit,
    point_table, unsteadiness, wording,
)
from taprig.analysis.wording import pm, pm_exponent, reynolds

TWO_PI = 2 * math.pi  # thin-airfoil lift slope per radian (Anderson, Fundamentals of Aerodynamics, §4.7)
NAN = math.nan
MISSING = re.compile(r"\b(nan|inf|none|null)\b", re.IGNORECASE)


def no_missing_text(lines) -> None:
    for line in lines:
        assert not MISSING.search(line), f"a missing number written as text: {line!r}"
        assert "±  " not in line and " ± ." not in line and "± )" not in line, line


def every_pm_is_gum_rounded(lines) -> None:
    """Each ``x ± u`` shows u to two significant digits and x to the same place (GUM, JCGM 100:2008 §7.2.6)."""
    found = 0
    for line in lines:
        for m in re.finditer(r"(-?\d+(?:\.(\d+))?) ± (\d+)(?:\.(\d+))?", line):
            found += 1
            assert len(m.group(2) or "") == len(m.group(4) or ""), f"value and u to different places: {m.group(0)}"
            digits = (m.group(3) + (m.group(4) or "")).lstrip("0")
            assert 1 <= len(digits) <= 2 or digits.endswith("0" * (len(digits) - 2)), m.group(0)
    assert found, "no value with its uncertainty in these lines"


def stalled_curve(alpha_deg, alpha0_deg=-2.0, stall_deg=12.0, fall=3.0):
    a, a0, s = np.radians(alpha_deg), math.radians(alpha0_deg), math.radians(stall_deg)
    return np.where(a <= s, TWO_PI * (a - a0), TWO_PI * (s - a0) - fall * (a - s))


def analysis(**fields) -> SweepAnalysis:
    table = point_table([])
    base = dict(rig=SimpleNamespace(balance=None), coefficients="best", table=table)
    return SweepAnalysis(**{**base, **fields})


def measured_sweep(balance: bool = True) -> SweepAnalysis:
    """An up-and-down sweep analysed by the analysis itself (invented stall, hysteresis above it)."""
    alpha_deg = np.arange(-4.0, 17.0, 2.0)
    rng = np.random.default_rng(3)
    cl = stalled_curve(alpha_deg) + rng.normal(0, 0.004, alpha_deg.size)
    u = np.full(alpha_deg.size, 0.01)
    a = np.radians(alpha_deg)
    down_cl = np.where(alpha_deg >= 12, cl - 0.3, cl)
    fit = linear_range_fit(a, cl, u)
    table = SimpleNamespace(method=("shape+walls",) * a.size, u_cl_balance=u, alpha_rad=a, alpha_set_rad=a, leg=())
    return SweepAnalysis(rig=SimpleNamespace(balance=object() if balance else None), coefficients="best",
                         table=table, fit=fit, stall=find_stall(a, cl, u),
                         hysteresis=hysteresis(a, cl, a, down_cl, u, u),
                         unsteadiness=unsteadiness(a, np.where(alpha_deg >= 14, 0.05, 0.01), attached=fit.used),
                         balance=balance_against_pressures(a, cl, u, cl + 0.02, u))


# -- numbers -------------------------------------------------------------------------------------------------------

@pytest.mark.parametrize("value, u, text", [
    (0.60543, 0.10149, "0.61 ± 0.10"),      # GUM §7.2.6: u to two significant digits, the value to match
    (153.8136, 0.9734, "153.81 ± 0.97"),
    (-0.00134, 0.000163, "-0.00134 ± 0.00016"),
    (-0.0131, 2.61, "0.0 ± 2.6"),           # rounds to zero: no negative zero
    (1.0, NAN, None), (NAN, 0.1, None), (None, 0.1, None), (1.0, None, None), ("x", 0.1, None), (math.inf, 1, None),
])
def test_pm_writes_a_value_with_its_uncertainty_or_nothing(value, u, text):
    assert pm(value, u) == text


def test_a_reynolds_number_keeps_the_digits_of_its_uncertainty():
    # (m ± u_m)e k: a six-digit Re would hide the two significant digits of its u (GUM §7.2.6)
    assert pm_exponent(135232.0, 616.0) == "(1.3523 ± 0.0062)e5"
    assert reynolds(135232.0, 616.0) == "(1.3523 ± 0.0062)e5"
    assert reynolds(135232.0, None) == "≈ 1.4e+05 (u not stated)"  # a description of the conditions, marked so
    assert reynolds(None, None) == reynolds(NAN, 5.0) == "–"
    assert pm_exponent(0.0, 1.0) is None


# -- the lift curve, measured ------------------------------------------------------------------------------------

def test_lift_lines_give_every_number_with_its_uncertainty_and_what_it_rests_on():
    a = measured_sweep()
    lines = wording.lift_lines(a)
    no_missing_text(lines)
    every_pm_is_gum_rounded(lines)
    text = " ".join(lines)
    fit, stall = a.fit, a.stall
    per_deg = math.pi / 180
    # the combined standard uncertainty first, its two parts named (lift.py's module docstring)
    assert f"Lift slope {pm(fit.slope, fit.u_slope, per_deg)} per degree" in text
    assert f"{pm(fit.slope, fit.u_slope)} per radian" in text
    assert "scatter" in text and "shared systematic" in text
    assert "angles corrected for the walls" in text  # the coefficients' method says "walls"
    assert f"thin-airfoil theory: 2π per radian = {TWO_PI * per_deg:.4f} per degree" in text
    assert f"Zero-lift angle {pm(fit.alpha_zero, fit.u_alpha_zero, 180 / math.pi)}°" in text
    assert f"Cl max {pm(stall.cl_max, stall.u_cl_max)} at α = {math.degrees(stall.alpha_cl_max):.1f}°" in text
    assert f"stall at {math.degrees(stall.alpha_stall):.1f}° ± {math.degrees(stall.resolution):.1f}°" in text
    h = a.hysteresis
    k = int(np.argmax(np.abs(h.delta)))
    assert f"Cl(up) − Cl(down) is {pm(h.delta[k], h.u_delta[k])}" in text
    assert "Balance against pressures" in text
    assert "Unsteady (separated) flow from α = 14.0°" in text and "a threshold of ours" in text


def test_lift_lines_of_an_analysis_that_could_not_be_made_are_its_reasons():
    reasons = {"fit": "a lift curve needs at least 3 points with finite angle and Cl, got 2",
               "hysteresis": "one-way sweep: run it up and back down (--up-and-down) to see hysteresis",
               "unsteadiness": "the points carry no pressure fluctuations (recorded by an older version)",
               "balance": "no balance on this rig"}
    lines = wording.lift_lines(analysis(reasons=reasons, rig=SimpleNamespace(balance=object())))
    no_missing_text(lines)
    assert lines == ["No lift curve: " + reasons["fit"] + ".", "Hysteresis: " + reasons["hysteresis"] + ".",
                     "Balance: no balance on this rig.", "Unsteadiness: " + reasons["unsteadiness"] + "."]
    assert "±" not in " ".join(lines)


# -- the lift curve, with NaN and None where a computation left nothing ------------------------------------------

def test_a_fit_without_uncertainties_gives_no_value():
    fit = LinearFit(0.11, NAN, NAN, 0.2, NAN, NAN, NAN, (0.0, 0.1), 2, NAN, (0, 1))
    lines = [wording.slope_sentence(fit), wording.zero_lift_sentence(fit)]
    no_missing_text(lines)
    assert "±" not in " ".join(lines) and "0.11" not in lines[0]
    assert "no value is given" in lines[0] and "not given (the line has no slope)" in lines[1]
    # one part missing: the value stands on the other, and the missing one is named, never written as a number
    fit = LinearFit(TWO_PI, NAN, 0.2, 0.2, -0.03, NAN, 0.001, (0.0, 0.1), 2, NAN, (0, 1))
    line = wording.slope_sentence(fit)
    no_missing_text([line])
    assert pm(TWO_PI, 0.2, math.pi / 180) in line and "scatter not stated (too few points)" in line


def test_stall_hysteresis_balance_and_unsteadiness_with_missing_numbers_say_so_in_words():
    stall = Stall(NAN, NAN, math.radians(12.0), True, math.radians(12.0), NAN, NAN, NAN, False)
    h = Hysteresis(np.radians([10.0, 12.0]), np.array([1.0, NAN]), np.array([0.7, 0.8]), np.array([0.3, NAN]),
                   np.array([NAN, NAN]), np.array([True, False]), NAN, (math.radians(10.0),) * 2, NAN, NAN)
    b = BalanceComparison(np.radians([0.0]), np.array([NAN]), np.array([0.1]), np.array([NAN]), np.array([NAN]),
                          np.array([False]), NAN, NAN)
    un = Unsteadiness(np.array([NAN]), np.array([False]), NAN, 1.3, NAN)
    lines = [wording.stall_sentence(stall), wording.hysteresis_sentence(h), wording.hysteresis_sentence(None),
             wording.balance_sentence(b, np.array([NAN])), wording.balance_sentence(None, np.array([0.01]), "why"),
             wording.unsteadiness_sentence(un), wording.unsteadiness_sentence(None)]
    no_missing_text(lines)
    assert "±" not in " ".join(lines[:1] + lines[2:])
    assert "no value is given" in lines[0] and "stall at 12.0°" in lines[0] and "half the spacing" not in lines[0]
    assert lines[1].startswith("Hysteresis: up and down legs differ") and "largest" not in lines[1]
    assert lines[2] == "Hysteresis: not measured."
    assert lines[3] == "Balance: its uncertainty was not recorded (older session)." and lines[4] == "Balance: why."
    assert lines[5].startswith("Unsteadiness: no attached point") and lines[6] == "Unsteadiness: not recorded."
    # a moment slope with no uncertainty is left out, not written bare
    assert wording.moment_sentence(LinearFit(0.01, NAN, NAN, 0, NAN, NAN, NAN, (0, 1), 2, NAN, (0, 1))) is None


def test_a_sweep_that_does_not_stall_says_so_with_cl_max_and_its_uncertainty():
    alpha = np.radians(np.arange(-4.0, 9.0, 2.0))
    cl = TWO_PI * (alpha + math.radians(2.0))
    stall = find_stall(alpha, cl, np.full(alpha.size, 0.02))
    line = wording.stall_sentence(stall)
    assert not stall.stalled and f"Cl max {pm(stall.cl_max, 0.02)} at α = 8.0°" in line
    assert "no stall within the sweep" in line


# -- Reynolds sweep, cylinder points, venturi ----------------------------------------------------------------------

def test_reynolds_lines_give_re_and_each_coefficient_with_its_uncertainty_and_skip_missing_ones():
    records = [{"alpha_rad": 0.07, "re": 1.2e5, "u_re": 700.0, "plain": {"cl": 0.5, "u_cl": 0.01, "cd_p": 0.01,
                                                                        "u_cd_p": None, "cm_qc": -0.05,
                                                                        "u_cm_qc": 0.002}},
               {"alpha_rad": 0.07, "re": None, "u_re": None, "plain": {"cl": 0.5, "u_cl": 0.01}},
               {"alpha_rad": 0.07, "re": 0.8e5, "u_re": None, "plain": {"cl": None}}]
    lines = wording.reynolds_lines(analysis(table=point_table(records)))
    no_missing_text(lines)
    assert lines[0].startswith("A sweep of the fan at α = 4.0°") and len(lines) == 3  # the point with no Re: left out
    assert lines[1] == "Re ≈ 8.0e+04 (u not stated)."
    assert lines[2] == "Re (1.2000 ± 0.0070)e5, Cl 0.500 ± 0.010, Cm¼ -0.0500 ± 0.0020."  # Cd_p has no u: left out


@pytest.mark.parametrize("state", ["no flow", "saturated", "bad calibration", "reference invalid", "implausible"])
def test_a_point_in_a_state_is_the_state_in_words(state):
    line = wording.drag_point_line("fan high", {"cd_p": 0.9, "u_cd_p": 0.01}, {"re": 2e4, "u_re": 100.0}, state)
    assert line == f"fan high: {state.upper()}, no numbers shown." and not re.search(r"\d", line)


def test_a_cylinder_point_gives_cd_p_and_re_each_with_its_uncertainty():
    line = wording.drag_point_line("fan 0.4", {"cd_p": 1.1834, "u_cd_p": 0.0213}, {"re": 21870.0, "u_re": 164.0})
    assert line == "fan 0.4: Cd_p 1.183 ± 0.021 (pressure drag only), Re (2.187 ± 0.016)e4."
    assert wording.drag_point_line("p", {"cd_p": 1.1, "u_cd_p": None}, {}) is None
    assert "Re ≈ 2.2e+04 (u not stated)" in wording.drag_point_line("p", {"cd_p": 1.1, "u_cd_p": 0.1}, {"re": 21870})


def _venturi(dc, reasons=None, u_re=None, outside=()):
    stations = VenturiStations(("inlet", "throat"), np.array([0.0, 0.05]), np.array([1.0, 0.25]),
                               np.array([0.0, -15.0]), 1, 0.5, 0.04)
    n = 0 if dc is None else len(dc.re_d)
    table = point_table([{"re": None if dc is None else dc.re_d[i], "u_re": None if u_re is None else u_re[i]}
                         for i in range(n)])
    return SweepAnalysis(rig=SimpleNamespace(balance=None), coefficients="best", table=table, stations=stations,
                         discharge=dc, iso_outside=tuple(outside), reasons=reasons or {})


def test_venturi_lines_give_c_and_re_d_with_their_uncertainties_and_the_standard_beside_them():
    # C = sqrt(Cp_ideal / Cp) (tests/analysis/test_lift.py's venturi check; our rearrangement of ISO 5167-1 eq. (1))
    dc = discharge_coefficient([-15.0 / 0.97**2, -15.0 / 0.975**2, -1.0], [0.2, 0.2, NAN], -15.0,
                               [3e4, 4e4, 5e4], 0.5)
    outside = ISO_MACHINED.outside(3e4, 0.5, 0.04)
    lines = wording.venturi_lines(_venturi(dc, u_re=[200.0, 300.0, 400.0], outside=outside), ISO_MACHINED)
    no_missing_text(lines)
    text = " ".join(lines)
    assert f"Discharge coefficient C = {pm(dc.mean_c, dc.u_mean_c)} over Re_D from (3.000 ± 0.020)e4 to " \
           "(4.000 ± 0.030)e4" in text  # the third point has no u(C): not part of the range
    assert f"Re_D (3.000 ± 0.020)e4: C {pm(dc.c[0], dc.u_c[0])}" in text
    assert "ISO 5167-4 (machined convergent): C = 0.995 ± 1 %" in text and "Outside the standard's range: Re_D" in text
    short = wording.venturi_lines(_venturi(dc), ISO_MACHINED, per_point=False)
    assert not any(line.startswith("  Re_D") for line in short) and len(short) == len(lines) - 3


def test_a_venturi_without_its_own_flow_reference_says_why_c_is_not_measured():
    why = "the flow rate is worked out from the venturi itself with an assumed C = 0.995"
    lines = wording.venturi_lines(_venturi(None, {"discharge": why}), ISO_MACHINED)
    no_missing_text(lines)
    assert f"C not measured: {why}." in lines and not any(line.startswith("Discharge coefficient C =") for line in lines)
    nan_c = DischargeCoefficient(np.array([3e4]), np.array([NAN]), np.array([NAN]), NAN, NAN, 0.5)
    lines = wording.venturi_lines(_venturi(nan_c), ISO_MACHINED)
    no_missing_text(lines)
    assert "Discharge coefficient: no uncertainty could be stated, so no value is given." in lines


def test_brief_phrases_carry_their_uncertainties_and_leave_out_what_has_none():
    a = measured_sweep(balance=False)
    phrases = wording.brief(a)
    no_missing_text(phrases)
    every_pm_is_gum_rounded(phrases)
    assert phrases[0].startswith("lift slope ") and any(p.startswith("stall at ") and "±" in p for p in phrases)
    empty = analysis(fit=LinearFit(0.1, NAN, NAN, 0, NAN, NAN, NAN, (0, 1), 2, NAN, (0, 1)),
                     stall=Stall(1.0, NAN, 0.2, False, NAN, NAN, NAN, NAN, False))
    assert wording.brief(empty) == []
