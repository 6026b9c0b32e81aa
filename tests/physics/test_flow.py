"""Pitot-static reduction against the isentropic relation, the standard atmosphere and fluids' Reynolds number."""

import numpy as np
import pytest
from fluids.atmosphere import ATMOSPHERE_1976
from fluids.core import Reynolds as fluids_reynolds
from hypothesis import given
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from taprig.physics.flow import (
    compressibility_flag,
    dynamic_pressure,
    incompressible_speed,
    isentropic_mach,
    isentropic_speed,
    mach_number,
    pitot_dynamic_pressure,
    reynolds_number,
    stagnation_speed,
)

SEA_LEVEL = ATMOSPHERE_1976(0.0)  # fluids' 1976 standard atmosphere


def _impact_pressure(mach, p, gamma=1.4):
    """Isentropic impact pressure q_c = p[(1 + (γ−1)M²/2)^(γ/(γ−1)) − 1] (Anderson §8.7), written out."""
    return p * np.expm1(gamma / (gamma - 1.0) * np.log1p(0.5 * (gamma - 1.0) * mach**2))


@pytest.mark.parametrize(
    ("speed", "expected_mach", "expected_error"),
    # docs/REFERENCES.md "Pitot-static": +0.097 % at 30 m/s (M 0.088), +0.389 % at 60 m/s (M 0.176), ISA sea level
    [(30.0, 0.088, 0.00097), (60.0, 0.176, 0.00389)],
)
def test_incompressible_error_against_isentropic_relation(speed, expected_mach, expected_error):
    mach = mach_number(speed, SEA_LEVEL.v_sonic)
    assert_allclose(mach, expected_mach, atol=5e-4)
    qc = _impact_pressure(mach, SEA_LEVEL.P)
    error = incompressible_speed(qc, SEA_LEVEL.rho) / speed - 1.0
    assert_allclose(error, expected_error, atol=5e-6)  # the table's printed digits
    assert_allclose(error, mach**2 / 8.0, rtol=0.01)  # docs/REFERENCES.md: ≈ M²/8 (series expansion)


def test_isentropic_speed_recovers_the_speed_at_sea_level():
    speeds = np.array([5.0, 30.0, 60.0, 150.0, 300.0])
    qc = _impact_pressure(speeds / SEA_LEVEL.v_sonic, SEA_LEVEL.P)
    # exact inverse of the isentropic relation; a² = γp/ρ with fluids' ρ, p, a consistent to 1e-6
    assert_allclose(isentropic_speed(qc, SEA_LEVEL.P, SEA_LEVEL.rho), speeds, rtol=2e-6)


@given(st.floats(0.0, 0.99), st.floats(20000.0, 120000.0), st.floats(1.1, 1.67))
def test_isentropic_mach_inverts_impact_pressure(mach, p, gamma):
    assert_allclose(isentropic_mach(_impact_pressure(mach, p, gamma), p, gamma), mach, rtol=1e-9, atol=1e-9)


@given(st.floats(-2000.0, 2000.0), st.floats(0.5, 1.5))
def test_incompressible_speed_inverts_dynamic_pressure(q, rho):
    v = incompressible_speed(q, rho)
    assert_allclose(np.sign(v) * dynamic_pressure(rho, v), q, rtol=1e-12, atol=1e-9)


@given(st.floats(1.0, 5000.0), st.floats(1.0, 5000.0))
def test_isentropic_speed_is_monotonic_and_below_incompressible(q1, dq):
    # compressibility raises q_c above ½ρV² for the same V, so Bernoulli overestimates V (Anderson §8.7)
    v_low, v_high = isentropic_speed(np.array([q1, q1 + dq]), 101325.0, 1.2)
    assert v_high > v_low
    assert v_low <= incompressible_speed(q1, 1.2)


def test_pitot_coefficient_scales_the_differential():
    # ISO 3966: q = K Δp
    assert_allclose(pitot_dynamic_pressure(np.array([100.0, 250.0]), 0.998), [99.8, 249.5], rtol=1e-15)
    with pytest.raises(ValueError, match="pitot coefficient"):
        pitot_dynamic_pressure(100.0, 0.0)


def test_compressibility_flag_marks_mach_above_limit():
    mach = np.array([[0.05, 0.299], [0.301, 0.5]])
    # common practice: M > 0.3
    assert compressibility_flag(mach).tolist() == [[False, False], [True, True]]
    assert compressibility_flag(0.25, limit=0.2)


def test_reynolds_number_matches_fluids():
    mu = SEA_LEVEL.mu
    # fluids.core.Reynolds(V, D, rho, mu) = ρVD/μ
    assert_allclose(reynolds_number(SEA_LEVEL.rho, 25.0, 0.15, mu), fluids_reynolds(25.0, 0.15, SEA_LEVEL.rho, mu),
                    rtol=1e-14)


def test_block_shapes_broadcast():
    q = np.full((100, 3), 250.0)
    assert incompressible_speed(q, 1.2).shape == (100, 3)
    assert reynolds_number(1.2, np.ones(4), 0.1, 1.8e-5).shape == (4,)


@pytest.mark.parametrize(
    ("call", "message"),
    [
        (lambda: incompressible_speed(100.0, 0.0), "density"),
        (lambda: isentropic_mach(-5.0, 101325.0), "impact pressure"),
        (lambda: isentropic_speed(100.0, -1.0, 1.2), "static pressure"),
        (lambda: reynolds_number(1.2, 10.0, -0.1, 1.8e-5), "reference length"),
        (lambda: mach_number(10.0, 0.0), "speed of sound"),
    ],
)
def test_bad_inputs_raise(call, message):
    with pytest.raises(ValueError, match=message):
        call()


@pytest.mark.parametrize("speed", [10.0, 30.0, 65.0, 120.0])
def test_stagnation_speed_matches_coolprop_isentropic_expansion(speed):
    # Independent computation: CoolProp's real-gas Air expanded at constant entropy from rest (T0 = 288.15 K,
    # p0 = 101325 Pa) to the static pressure p where V = √(2 (h0 − h)) (energy equation, Anderson §8.4).
    from CoolProp.CoolProp import PropsSI
    from scipy.optimize import brentq

    t0, p0 = 288.15, 101325.0
    h0, s0, rho0 = (PropsSI(k, "T", t0, "P", p0, "Air") for k in ("H", "S", "D"))
    p = brentq(lambda p: np.sqrt(2.0 * (h0 - PropsSI("H", "P", p, "S", s0, "Air"))) - speed, 30000.0, p0 - 1e-3,
               xtol=1e-9)
    qc = p0 - p
    assert_allclose(stagnation_speed(qc, p, p0 / rho0), speed, rtol=2e-5)  # ideal gas, γ = 1.4 vs real-gas air
    # Bernoulli with the density at rest is M²/8 low (0.44 % at Mach 0.19, the figure)
    mach = speed / float(np.sqrt(1.4 * p / (rho0 * (p / p0) ** (1 / 1.4))))
    assert_allclose(1.0 - incompressible_speed(qc, rho0) / speed, mach**2 / 8.0, rtol=0.05)


def test_stagnation_speed_keeps_the_sign_of_noise_about_zero():
    v = stagnation_speed(np.array([-0.5, 0.0, 0.5]), 101325.0, 101325.0 / 1.2)
    assert v[0] == -v[2] and v[1] == 0.0 and v[2] > 0.0
    assert_allclose(v[2], np.sqrt(2 * 0.5 / 1.2), rtol=1e-5)  # Bernoulli in the limit q → 0
