"""Air properties against CIPM-2007 reference values, CoolProp's humid-air model and the 1976 standard atmosphere."""

import numpy as np
import pytest
from CoolProp.CoolProp import HAPropsSI, PropsSI
from fluids.atmosphere import ATMOSPHERE_1976
from hypothesis import given
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from taprig.physics.air import (
    AirState,
    dry_air_density_ideal,
    kinematic_viscosity,
    moist_air_density,
    saturation_vapour_pressure,
    speed_of_sound,
    sutherland_viscosity,
    vapour_mole_fraction,
)
from taprig.physics.units import Unit, to_si


@pytest.mark.parametrize(
    ("celsius", "expected"),
    # docs/REFERENCES.md "Air": CIPM-2007 evaluated by hand (Picard et al. 2008, constants from memory),
    # 50 % RH, 400 ppm
    [(15.0, 1.221631), (20.0, 1.199314), (25.0, 1.177315)],
)
def test_moist_air_density_matches_cipm_hand_values(celsius, expected):
    rho = moist_air_density(273.15 + celsius, 101325.0, 0.5, 0.0004)
    assert_allclose(rho, expected, rtol=1e-6)  # six printed digits


@pytest.mark.parametrize("celsius", [15.0, 20.0, 25.0, 30.0])
@pytest.mark.parametrize("rh", [0.0, 0.5, 0.9])
def test_moist_air_density_agrees_with_coolprop_humid_air(celsius, rh):
    t = 273.15 + celsius
    # CoolProp HAPropsSI (Hyland-Wexler / virial humid-air model); Vha is volume per kg of humid air.
    # docs/REFERENCES.md shows +38 ppm at 20 °C; 1e-4 covers the two formulations over this range.
    reference = 1.0 / HAPropsSI("Vha", "T", t, "P", 101325.0, "R", rh)
    assert_allclose(moist_air_density(t, 101325.0, rh), reference, rtol=1e-4)


@pytest.mark.parametrize(
    ("celsius", "mmhg", "rh", "expected"),
    # Gupta, Mass Metrology, appendix (quoted second-hand in docs/REFERENCES.md); 7e-5 gap noted there, tolerance 1e-4
    [(10.0, 730.0, 0.4, 1.19569), (40.0, 760.0, 0.4, 1.11497)],
)
def test_moist_air_density_published_table(celsius, mmhg, rh, expected):
    p = to_si(mmhg, Unit.MMHG)
    assert_allclose(moist_air_density(273.15 + celsius, p, rh), expected, rtol=1e-4)


def test_saturation_vapour_pressure_agrees_with_iapws95():
    t = np.array([288.15, 293.15, 298.15, 303.15])
    # CoolProp PropsSI('P','T',T,'Q',0,'Water') is IAPWS-95; CIPM-2007 states agreement well within 0.1 %
    reference = [PropsSI("P", "T", ti, "Q", 0, "Water") for ti in t]
    assert_allclose(saturation_vapour_pressure(t), reference, rtol=1e-3)


def test_dry_ideal_density_and_humidity_gap():
    # docs/REFERENCES.md "Air": ideal gas, R = 287.05 → 1.204118, 0.40 % above the 50 % RH CIPM value
    dry = dry_air_density_ideal(293.15, 101325.0)
    assert_allclose(dry, 1.204118, rtol=1e-6)
    assert_allclose(dry / moist_air_density(293.15, 101325.0, 0.5) - 1.0, 0.0040, atol=5e-5)


@pytest.mark.parametrize(
    ("celsius", "expected"),
    # docs/REFERENCES.md "Air": Sutherland with μ0 1.716e-5, T0 273.15, S 110.4 (White, from memory)
    [(15.0, 1.78930e-5), (25.0, 1.83715e-5)],
)
def test_sutherland_viscosity_values(celsius, expected):
    assert_allclose(sutherland_viscosity(273.15 + celsius), expected, rtol=3e-6)


@pytest.mark.parametrize("celsius", [5.0, 15.0, 25.0, 35.0])
def test_sutherland_viscosity_near_coolprop_air(celsius):
    t = 273.15 + celsius
    # CoolProp pseudo-pure Air (Lemmon et al. 2004); docs/REFERENCES.md: CoolProp 0.38–0.42 % higher, tolerance 0.5 %
    assert_allclose(sutherland_viscosity(t), PropsSI("V", "T", t, "P", 101325.0, "Air"), rtol=5e-3)


@pytest.mark.parametrize("altitude", [0.0, 1000.0])
def test_standard_atmosphere_properties(altitude):
    atm = ATMOSPHERE_1976(altitude)  # fluids' 1976 US standard atmosphere (geometric altitude)
    # dry air: 1976 atmosphere's R = 287.053 vs our 287.05 is 10 ppm, so 2e-5 on density
    assert_allclose(dry_air_density_ideal(atm.T, atm.P), atm.rho, rtol=2e-5)
    assert_allclose(sutherland_viscosity(atm.T), atm.mu, rtol=5e-5)  # docs/REFERENCES.md: β-form agrees to 5e-5
    assert_allclose(speed_of_sound(atm.T), atm.v_sonic, rtol=1e-5)


def test_standard_atmosphere_reference_row():
    # docs/REFERENCES.md: sea level 1.224999 kg/m³, 1.789380e-5 Pa·s, 340.294 m/s (fluids ATMOSPHERE_1976)
    assert_allclose(dry_air_density_ideal(288.15, 101325.0), 1.224999, rtol=2e-5)
    assert_allclose(sutherland_viscosity(288.15), 1.789380e-5, rtol=5e-5)
    assert_allclose(speed_of_sound(288.15), 340.294, rtol=1e-5)


def test_kinematic_viscosity_and_air_state_are_consistent():
    air = AirState(temperature=293.15, pressure=101325.0, relative_humidity=0.5)
    assert_allclose(air.density, 1.199314, rtol=1e-6)  # docs/REFERENCES.md CIPM value
    assert_allclose(air.kinematic_viscosity, kinematic_viscosity(air.viscosity, air.density), rtol=1e-15)
    assert_allclose(air.speed_of_sound, speed_of_sound(293.15), rtol=1e-15)


def test_functions_broadcast_over_arrays():
    t = np.linspace(283.15, 303.15, 5)[:, None]
    rh = np.array([0.0, 0.5, 1.0])[None, :]
    rho = moist_air_density(t, 101325.0, rh)
    assert rho.shape == (5, 3)
    assert_allclose(rho[2, 1], moist_air_density(293.15, 101325.0, 0.5), rtol=1e-15)


@given(
    st.floats(283.15, 313.15),
    st.floats(60000.0, 110000.0),
    st.floats(0.0, 0.99),
)
def test_density_falls_with_humidity_and_temperature(t, p, rh):
    # water vapour (18 g/mol) displaces heavier air (29 g/mol): moist air is lighter; warmer air is lighter
    assert moist_air_density(t, p, rh + 0.01) < moist_air_density(t, p, rh)
    assert moist_air_density(t + 1.0, p, rh) < moist_air_density(t, p, rh)
    # below saturation: x_v ≤ f·p_sv/p, with f < 1.01 over this range (Picard et al. 2008, eq. A1.2)
    assert 0.0 <= vapour_mole_fraction(t, p, rh) < 1.01 * saturation_vapour_pressure(t) / p


@given(st.floats(200.0, 400.0), st.floats(1.0, 50.0))
def test_viscosity_rises_with_temperature(t, dt):
    assert sutherland_viscosity(t + dt) > sutherland_viscosity(t)


@pytest.mark.parametrize(
    ("call", "message"),
    [
        (lambda: moist_air_density(-5.0, 101325.0, 0.5), "temperature"),
        (lambda: moist_air_density(293.15, 101325.0, 1.2), "relative humidity"),
        (lambda: moist_air_density(293.15, 101325.0, -0.1), "relative humidity"),
        (lambda: moist_air_density(293.15, 0.0, 0.5), "pressure"),
        (lambda: moist_air_density(293.15, 101325.0, np.nan), "relative humidity"),
        (lambda: sutherland_viscosity(np.array([290.0, -1.0])), "temperature"),
        (lambda: AirState(temperature=0.0), "temperature"),
        (lambda: AirState(relative_humidity=2.0), "relative humidity"),
    ],
)
def test_bad_inputs_raise_clear_value_errors(call, message):
    with pytest.raises(ValueError, match=message):
        call()
