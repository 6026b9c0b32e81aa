"""Edge unit conversions against scipy.constants and the conventional definitions (NIST SP 811)."""

import numpy as np
import pytest
import scipy.constants as sc
from hypothesis import given
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from taprig.physics.hydrostatics import column_pressure
from taprig.physics.units import Unit, convert, from_si, to_si
from taprig.physics.water import water_density


def test_pressure_units_against_scipy_constants():
    # scipy.constants (CODATA / exact definitions)
    assert_allclose(to_si(1.0, Unit.PSI), sc.psi, rtol=1e-15)
    assert_allclose(to_si(1.0, Unit.BAR), sc.bar, rtol=1e-15)
    assert_allclose(to_si(1.0, Unit.MBAR), sc.bar / 1000.0, rtol=1e-15)
    assert_allclose(to_si(1.0, Unit.KPA), sc.kilo, rtol=1e-15)
    assert_allclose(to_si(1.0, Unit.HPA), sc.hecto, rtol=1e-15)
    # scipy's mmHg is the torr (atm/760); the conventional mmHg is 1.4e-7 larger (NIST SP 811, B.8)
    assert_allclose(to_si(1.0, Unit.MMHG), sc.mmHg, rtol=2e-7)
    assert_allclose(to_si(1.0, Unit.MMHG), 133.322387415, rtol=1e-12)


def test_water_columns_are_the_conventional_ones():
    # NIST SP 811 (2008) B.8: millimetre of water, conventional = 9.80665 Pa exactly; inch = 25.4 of them
    assert_allclose(to_si(1.0, Unit.MMH2O), 9.80665, rtol=1e-15)
    assert_allclose(to_si(1.0, Unit.INH2O), 25.4 * 9.80665, rtol=1e-15)  # 249.08891 Pa (from memory)
    # a real column of water at 4 °C (Tanaka 2001: 999.975 kg/m³) is 25 ppm smaller than the conventional unit
    real = column_pressure(1e-3, water_density(277.15))
    assert_allclose(real / to_si(1.0, Unit.MMH2O) - 1.0, -25e-6, atol=1e-6)


@pytest.mark.parametrize(("value", "scale"), [(20.0, "Celsius"), (68.0, "Fahrenheit"), (300.0, "Kelvin")])
def test_temperatures_against_scipy(value, scale):
    unit = {"Celsius": Unit.CELSIUS, "Fahrenheit": Unit.FAHRENHEIT, "Kelvin": Unit.KELVIN}[scale]
    # scipy.constants.convert_temperature
    assert_allclose(to_si(value, unit), sc.convert_temperature(value, scale, "Kelvin"), rtol=1e-14)


def test_angles_and_speeds():
    assert_allclose(to_si(180.0, Unit.DEGREE), np.pi, rtol=1e-15)  # definition of the degree
    assert_allclose(to_si(36.0, Unit.KILOMETRE_PER_HOUR), 10.0, rtol=1e-15)
    assert_allclose(convert(np.array([0.0, 100.0]), Unit.CELSIUS, Unit.FAHRENHEIT), [32.0, 212.0], rtol=1e-14)


@given(st.floats(-1e6, 1e6), st.sampled_from(list(Unit)))
def test_round_trip(value, unit):
    assert_allclose(from_si(to_si(value, unit), unit), value, rtol=1e-12, atol=1e-9)


@pytest.mark.parametrize(
    ("text", "unit"),
    [("Pa", Unit.PA), ("kPa", Unit.KPA), ("mmH2O", Unit.MMH2O), ("mm H2O", Unit.MMH2O), ("inH₂O", Unit.INH2O),
     ("°C", Unit.CELSIUS), ("degC", Unit.CELSIUS), ("K", Unit.KELVIN), ("degrees", Unit.DEGREE), ("psi", Unit.PSI),
     ("mbar", Unit.MBAR)],
)
def test_parse_accepts_common_spellings(text, unit):
    assert Unit.parse(text) is unit


def test_parse_and_convert_reject_bad_requests():
    with pytest.raises(ValueError, match="unknown unit 'furlong'"):
        Unit.parse("furlong")
    with pytest.raises(ValueError, match="cannot convert Pa"):
        convert(1.0, Unit.PA, Unit.KELVIN)
