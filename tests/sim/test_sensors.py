"""Sensor models: tubing lag, quantisation, saturation, noise, offset drift, through the rig's transfer functions."""

from __future__ import annotations

import math

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from taprig.physics.air import sutherland_viscosity
from taprig.protocol import SetActuator, Start, Status
from taprig.sim import SimOptions
from taprig.sim.sensors import (
    DEFAULT_NOISE_FRACTION_FS,
    DEFAULT_SENSOR_VOLUME,
    SensorBank,
    digitise,
    first_order_lag,
    lag_coefficients,
    tubing_time_constant,
)

from .conftest import IDEAL


def test_tubing_time_constant_is_poiseuille_resistance_times_gas_compliance():
    length, bore, p = 1.2, 0.8e-3, 101325.0
    mu = 1.81e-5
    # Hagen–Poiseuille resistance R = 128 μ L / (π d⁴) [Pa·s/m³] and isothermal compliance C = V / p [m³/Pa]
    # (lumped RC model of a pneumatic line, from memory), evaluated here by hand
    resistance = 128 * mu * length / (math.pi * bore**4)
    volume = DEFAULT_SENSOR_VOLUME + math.pi / 4 * bore**2 * length
    assert math.isclose(tubing_time_constant(length, bore, mu, p), resistance * volume / p, rel_tol=1e-12)
    assert tubing_time_constant(0.0, bore, mu, p) == 0.0
    # the lag grows with length (R and C both ∝ L) and falls steeply with bore (R ∝ d⁻⁴)
    assert tubing_time_constant(2 * length, bore, mu, p) > 2 * tubing_time_constant(length, bore, mu, p)
    assert tubing_time_constant(length, 2 * bore, mu, p) < tubing_time_constant(length, bore, mu, p) / 3


def test_lag_is_the_exact_first_order_step_response():
    dt, tau = 1e-3, np.array([0.02, 0.05, 0.0])
    x = np.ones((200, 3))
    y, state = first_order_lag(x, lag_coefficients(dt, tau), np.zeros(3))
    t = dt * np.arange(1, 201)
    # step response of dy/dt = (x − y)/τ: y = 1 − exp(−t/τ) (common practice)
    np.testing.assert_allclose(y[:, 0], 1 - np.exp(-t / 0.02), rtol=1e-12)
    np.testing.assert_allclose(y[:, 1], 1 - np.exp(-t / 0.05), rtol=1e-12)
    np.testing.assert_array_equal(y[:, 2], 1.0)  # no tubing, no lag
    y2, _ = first_order_lag(x[:100], lag_coefficients(dt, tau), np.zeros(3))
    y3, _ = first_order_lag(x[100:], lag_coefficients(dt, tau), y2[-1])
    np.testing.assert_allclose(np.vstack([y2, y3]), y, rtol=1e-12)  # blocks chain through the state


def test_tap_pressure_follows_the_tubing_time_constant_on_the_board(host):
    h = host("cylinder", lag=True, tube_mm=3000.0, bore_mm=0.5, max_speed=12.0, watchdog_ms=0)
    opts = h.device.options
    tau = tubing_time_constant(3.0, 0.5e-3, float(sutherland_viscosity(opts.ambient_c + 273.15)), opts.ambient_pa)
    assert 0.1 < tau < 1.0
    h.send(Start(1, 1000.0, 0b11, 1))
    h.step(0.2)
    h.send(SetActuator(2, 0, 1.0))  # the fan and stream step at once (IDEAL): only the tubing lags
    start_ns = h.device.now_ns
    h.step(3 * tau)
    block = h.blocks()
    after = block.t_ns > start_ns
    stag = h.values(block)["c00"][after]  # the front tap: Cp = 1
    final = 0.5 * h.device.plant.density * 12.0**2
    # time to 63.2 % (1 − e⁻¹) of the step is the time constant (first-order system, common practice)
    t_63 = (block.t_ns[after][np.argmax(stag >= (1 - math.exp(-1)) * final)] - start_ns) * 1e-9
    assert abs(t_63 - tau) < 2e-3


def _bank(slope, intercept=0.0, lo=-32768.0, hi=32767.0) -> SensorBank:
    one = np.ones(1)
    return SensorBank(one * slope, one * intercept, 0 * one, 0 * one, one * lo, one * hi, np.ones(1, bool))


@settings(max_examples=100)
@given(value=st.floats(-400.0, 400.0), slope=st.floats(0.01, 5.0), intercept=st.floats(-50.0, 50.0))
def test_quantisation_rounds_to_the_nearest_count(value, slope, intercept):
    bank = _bank(slope, intercept, lo=-1e9, hi=1e9)
    counts = digitise(np.array([[value]]), bank)[0, 0]
    assert counts == round(counts)
    assert abs(counts * slope + intercept - value) <= slope / 2 * (1 + 1e-9)


def test_saturation_sticks_at_the_converter_rails(host, rigs):
    rig = rigs("venturi-8")
    h = host("venturi-8", max_speed=15.0)  # throat Cp −15 at q ≈ 135 Pa: far beyond its ±1 kPa sensor
    h.send(SetActuator(1, 0, 1.0))
    h.step(0.01)
    h.send(Start(2, 100.0, 0xFF, 0))
    h.step(0.3)
    block = h.blocks()
    throat = int(np.argmin(rig.tap_layout().area))
    column = list(block.channels).index(int(rig.tap_layout().channels[throat]))
    sensor = rig.sensor_of(int(rig.tap_layout().channels[throat]))
    assert np.all(block.counts[:, column] == sensor.rails[0])
    assert np.all(sensor.saturated(block.counts[:, column]))
    inlet = list(block.channels).index(int(rig.tap_layout().channels[0]))
    assert not np.any(rig.sensor_of(int(rig.tap_layout().channels[0])).saturated(block.counts[:, inlet]))


def test_white_noise_like_a_cheap_sensor(host, rigs):
    rig = rigs("cylinder")
    h = host("cylinder", base=SimOptions(seed=9, thermal=False, lag=False), watchdog_ms=0)
    h.send(Start(1, 1000.0, 0b110, 0))  # fan off: no flow, so only the sensors' noise moves the readings
    h.step(4.0, chunk_s=0.5)
    values = h.values(h.blocks())
    sigma = DEFAULT_NOISE_FRACTION_FS * rig.sensors["diff500"].full_scale
    for name in ("c00", "c15"):
        # sample standard deviation of 4000 normal draws: relative standard error 1/√(2N) ≈ 1.1 %
        assert abs(values[name].std() / sigma - 1.0) < 0.06
        assert abs(values[name].mean()) < 4 * sigma / math.sqrt(values[name].size)
    assert abs(np.corrcoef(values["c00"], values["c15"])[0, 1]) < 0.1  # independent channels


def test_offset_drifts_as_the_board_warms(host, rigs):
    h = host("cylinder", base=IDEAL, thermal=True, watchdog_ms=0)
    h.send(Start(1, 10.0, 0b10, 0))
    h.step(120.0, chunk_s=10.0)
    block = h.blocks()
    offset = h.values(block)["c00"]
    statuses = [i for i in h.items if isinstance(i, Status)]
    warming = statuses[-1].board_temp_cc - statuses[0].board_temp_cc
    assert warming > 0 and offset[-1] > offset[0] + 0.05  # the zero moves with the temperature
    assert abs(offset[0]) < 0.02  # zeroed at power-up
