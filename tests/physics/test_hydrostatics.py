"""Manometer columns and gravity against docs/REFERENCES.md and fluids' gravity formula."""

import numpy as np
import pytest
from fluids import gravity as fluids_gravity
from hypothesis import given
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from taprig.physics.air import moist_air_density
from taprig.physics.constants import STANDARD_GRAVITY
from taprig.physics.hydrostatics import column_pressure, inclined_height, normal_gravity, well_manometer_height
from taprig.physics.water import water_density


def test_vertical_water_column_reference_rows():
    rho_w = water_density(293.15)
    # docs/REFERENCES.md "Water and manometers": 50.0 mm, 20 °C water, g = 9.80665 → 489.453 Pa
    assert_allclose(column_pressure(0.050, rho_w), 489.453, atol=1e-3)
    # same with the air-leg correction ρw − ρair (air 20 °C, 101325 Pa, 50 % RH by CIPM-2007) → 488.865 Pa
    rho_air = moist_air_density(293.15, 101325.0, 0.5)
    assert_allclose(column_pressure(0.050, rho_w, air_density=rho_air), 488.865, atol=1e-3)
    # conventional water (1000 kg/m³) → 490.333 Pa
    assert_allclose(column_pressure(0.050, 1000.0, STANDARD_GRAVITY), 490.333, atol=1e-3)


def test_inclined_tube_reference_row():
    # docs/REFERENCES.md: 100 mm along a tube at 10°, 20 °C water → 17.365 mm vertical, 169.985 Pa
    h = inclined_height(0.100, np.radians(10.0))
    assert_allclose(h, 0.017365, atol=5e-7)
    assert_allclose(column_pressure(h, water_density(293.15)), 169.985, atol=1e-3)


def test_well_type_gauge_adds_reservoir_drop():
    # common practice: a well of area A loses L·a/A of level while the tube gains L·sinθ
    assert_allclose(well_manometer_height(0.1, np.radians(10.0), 0.0), inclined_height(0.1, np.radians(10.0)))
    assert_allclose(well_manometer_height(0.1, np.pi / 2, 0.02), 0.1 * 1.02, rtol=1e-15)


def test_normal_gravity_at_equator_and_pole():
    # WGS-84 defining normal gravity (NIMA TR8350.2, Table 3.4, from memory): γe = 9.7803253359, γp = 9.8321849378
    assert_allclose(normal_gravity(0.0), 9.7803253359, rtol=1e-12)
    assert_allclose(normal_gravity(np.pi / 2), 9.8321849378, rtol=1e-10)


@pytest.mark.parametrize("latitude_deg", [0.0, 20.0, 45.0, 52.5, 70.0, 90.0])
@pytest.mark.parametrize("height", [0.0, 500.0, 2500.0])
def test_normal_gravity_agrees_with_fluids_crc_formula(latitude_deg, height):
    # fluids.gravity: the CRC Handbook's truncated series on the older (1967-type) ellipsoid, with the same free-air
    # term; it sits up to 1.1e-4 m/s² (11 ppm, at the pole) from the closed WGS-84 form, so rtol 1.5e-5
    expected = fluids_gravity(latitude_deg, height)
    assert_allclose(normal_gravity(np.radians(latitude_deg), height), expected, rtol=1.5e-5)


@given(st.floats(0.0, 1.5), st.floats(0.001, 1.0))
def test_gravity_rises_towards_the_poles(phi, dphi):
    assert normal_gravity(min(phi + dphi, np.pi / 2)) >= normal_gravity(phi)


@given(st.floats(-1.0, 1.0), st.floats(500.0, 14000.0), st.floats(0.0, 1.3))
def test_column_is_linear_and_air_leg_lowers_it(h, rho_l, rho_a):
    full = column_pressure(h, rho_l)
    assert_allclose(column_pressure(2.0 * h, rho_l), 2.0 * full, rtol=1e-12, atol=1e-12)
    assert abs(column_pressure(h, rho_l, air_density=rho_a)) <= abs(full)


@pytest.mark.parametrize(
    ("call", "message"),
    [
        (lambda: column_pressure(0.05, -1000.0), "liquid density"),
        (lambda: column_pressure(0.05, 1000.0, gravity=0.0), "gravity"),
        (lambda: column_pressure(0.05, 1.0, air_density=1.2), "air density"),
        (lambda: inclined_height(0.1, 0.0), "inclination"),
        (lambda: inclined_height(0.1, 2.0), "inclination"),
        (lambda: well_manometer_height(0.1, 0.2, 1.5), "area ratio"),
        (lambda: normal_gravity(2.0), "latitude"),
    ],
)
def test_bad_inputs_raise(call, message):
    with pytest.raises(ValueError, match=message):
        call()
