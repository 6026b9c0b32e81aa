"""Venturi stations and ISO 5167-4 mass flow against docs/REFERENCES.md and fluids.flow_meter."""

import numpy as np
import pytest
from fluids.flow_meter import differential_pressure_meter_solver, flow_meter_discharge, nozzle_expansibility
from hypothesis import given
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from taprig.physics.venturi import (
    ISO5167_MACHINED_VENTURI_C,
    beta_ratio,
    ideal_station_cp,
    pressure_recovery_fraction,
    station_pressures,
    station_speeds,
    velocity_of_approach_factor,
    venturi_expansibility,
    venturi_mass_flow,
)

# docs/REFERENCES.md "Venturi": D = 50 mm, d = 25 mm, air at 20 °C (ρ1 = 1.204575, κ = 1.4), p1 = 101325 Pa,
# Δp = 500 Pa
D, DT, RHO1, KAPPA, P1, DP = 0.050, 0.025, 1.204575, 1.4, 101325.0, 500.0
MU_AIR = 1.8e-5  # only used by fluids to compute Re (C is fixed for this meter type); common practice value


def _area(d):
    return np.pi / 4.0 * d**2


def test_throat_cp_for_area_ratio_four():
    # docs/REFERENCES.md: throat of D/d = 2 referred to the pipe: Cp = 1 − 4² = −15 (Bernoulli)
    assert_allclose(ideal_station_cp(_area(DT), _area(D)), -15.0, rtol=1e-14)
    assert_allclose(ideal_station_cp(_area(D), _area(D)), 0.0, atol=1e-15)


@given(
    st.floats(1.0, 50.0),
    st.floats(0.5, 1.5),
    st.lists(st.floats(1e-4, 1e-2), min_size=1, max_size=8),
)
def test_stations_conserve_mass_and_total_pressure(v_ref, rho, areas):
    a_ref = 2e-3
    areas = np.array(areas)
    v = station_speeds(v_ref, a_ref, areas)
    p = station_pressures(1000.0, v_ref, rho, a_ref, areas)
    assert_allclose(v * areas, v_ref * a_ref, rtol=1e-12)  # continuity
    assert_allclose(p + 0.5 * rho * v**2, 1000.0 + 0.5 * rho * v_ref**2, rtol=1e-11)  # Bernoulli


def test_beta_and_velocity_of_approach():
    beta = beta_ratio(DT, D)
    assert_allclose(beta, 0.5, rtol=1e-15)
    # docs/REFERENCES.md: E = 1.032796 = 1/√(1 − β⁴) (ISO 5167-1 §3.3.6)
    assert_allclose(velocity_of_approach_factor(beta), 1.032796, atol=5e-7)


def test_expansibility_matches_reference_and_fluids():
    # docs/REFERENCES.md: ε = 0.9971189; fluids.flow_meter.nozzle_expansibility implements the same ISO 5167-4 formula
    eps = venturi_expansibility(0.5, P1, DP, KAPPA)
    assert_allclose(eps, 0.9971189, atol=5e-8)
    assert_allclose(eps, nozzle_expansibility(D, DT, P1, P1 - DP, KAPPA), rtol=1e-13)


@given(st.floats(0.3, 0.8), st.floats(1.0, 25000.0), st.floats(1.1, 1.67))
def test_expansibility_agrees_with_fluids_across_range(beta, dp, kappa):
    p1 = 101325.0
    expected = nozzle_expansibility(D, D * beta, p1, p1 - dp, kappa)  # fluids: same ISO 5167-4 equation
    # fluids forms (P1 − P2 τ^(−1/κ))/(P1 − P2), which loses ~1e-16·p1/Δp to cancellation: rtol 1e-9 from 1 Pa
    assert_allclose(venturi_expansibility(beta, p1, dp, kappa), expected, rtol=1e-9)


def test_expansibility_tends_to_one_for_vanishing_differential():
    # ISO 5167-4: ε → 1 as Δp → 0 (the limit of the formula); smooth through the tiny-Δp region
    eps = venturi_expansibility(0.5, 101325.0, np.array([0.0, 1e-60, 1e-9, 1e-3]))
    assert_allclose(eps, 1.0, atol=1e-8)
    assert np.all(np.diff(eps) <= 0.0)


@given(st.floats(0.3, 0.8), st.floats(0.0, 20000.0), st.floats(1.0, 5000.0))
def test_expansibility_falls_with_differential(beta, dp, step):
    # a larger fractional pressure drop expands the gas more (ISO 5167-4 §5.6): ε decreases from 1
    assert venturi_expansibility(beta, 101325.0, dp + step) < venturi_expansibility(beta, 101325.0, dp) <= 1.0


def test_mass_flow_matches_reference_and_fluids():
    eps = venturi_expansibility(beta_ratio(DT, D), P1, DP, KAPPA)
    qm = venturi_mass_flow(DT, D, DP, RHO1, ISO5167_MACHINED_VENTURI_C, eps)
    # docs/REFERENCES.md: 1.7457066e-2 kg/s (fluids differential_pressure_meter_solver; by hand identical to 4e-14)
    assert_allclose(qm, 1.7457066e-2, rtol=1e-7)
    solved = differential_pressure_meter_solver(
        D=D, rho=RHO1, mu=MU_AIR, k=KAPPA, D2=DT, P1=P1, P2=P1 - DP,
        meter_type="machined convergent venturi tube",
    )
    assert_allclose(qm, solved, rtol=1e-12)


def test_mass_flow_without_expansibility():
    # docs/REFERENCES.md: with ε = 1, 1.750751e-2 kg/s; fluids.flow_meter_discharge with C = 0.995, ε = 1
    qm = venturi_mass_flow(DT, D, DP, RHO1)
    assert_allclose(qm, 1.750751e-2, rtol=3e-7)
    assert_allclose(qm, flow_meter_discharge(D, DT, P1, P1 - DP, RHO1, 0.995, 1.0), rtol=1e-12)


def test_mass_flow_is_continuity_with_ideal_bernoulli():
    # with C = ε = 1 the ISO formula is continuity + Bernoulli: ṁ = ρ A_t V_t, Δp = ½ρ(V_t² − V_1²)
    v1 = 8.0
    v_throat = station_speeds(v1, _area(D), _area(DT))
    dp = -station_pressures(0.0, v1, RHO1, _area(D), _area(DT))
    qm = venturi_mass_flow(DT, D, dp, RHO1, discharge_coefficient=1.0)
    assert_allclose(qm, RHO1 * _area(DT) * v_throat, rtol=1e-12)


def test_pressure_recovery():
    # common practice: an ideal diffuser recovers the whole drop; the outlet returns to the inlet pressure
    assert_allclose(pressure_recovery_fraction(0.0, -500.0, 0.0), 1.0)
    assert_allclose(pressure_recovery_fraction(np.array([0.0, 0.0]), np.array([-400.0, -500.0]), -100.0),
                    [0.75, 0.8])
    assert np.isnan(pressure_recovery_fraction(10.0, 10.0, 5.0))


@pytest.mark.parametrize(
    ("call", "message"),
    [
        (lambda: ideal_station_cp(-1e-3, 2e-3), "station area"),
        (lambda: ideal_station_cp(1e-3, 0.0), "reference area"),
        (lambda: station_speeds(10.0, 2e-3, np.array([1e-3, -1e-3])), "station area"),
        (lambda: beta_ratio(0.05, 0.05), "smaller than the pipe"),
        (lambda: velocity_of_approach_factor(1.2), "beta"),
        (lambda: venturi_expansibility(0.5, 1000.0, 2000.0), "smaller than the absolute"),
        (lambda: venturi_mass_flow(DT, D, -10.0, RHO1), "differential"),
        (lambda: venturi_mass_flow(DT, D, 10.0, RHO1, discharge_coefficient=0.0), "discharge coefficient"),
    ],
)
def test_bad_inputs_raise(call, message):
    with pytest.raises(ValueError, match=message):
        call()
