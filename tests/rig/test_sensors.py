"""Sensor transfer functions: hand-worked datasheet-style examples and counts ↔ SI round trips."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from pydantic import TypeAdapter

from taprig.rig import DifferentialSensor, DigitalBridgeSensor, LinearSensor, Quantity, RatiometricSensor, Sensor

SENSOR = TypeAdapter(Sensor)

RATIO = {"kind": "ratiometric", "supply_v": 5.0, "a_per_pa": 0.00016, "b": 0.5, "adc_bits": 12, "adc_ref_v": 5.0,
         "range_pa": [-2500.0, 2500.0], "accuracy_pct_fs": 2.5}
BRIDGE = {"kind": "digital_bridge", "pmin_pa": -1000.0, "pmax_pa": 1000.0, "output": "10-90", "accuracy_pct_fs": 0.25}
LINEAR = {"kind": "linear", "gain_n_per_count": 2.4e-6, "offset_n": 0.5, "range_n": [-50.0, 50.0], "accuracy_pct_fs": 0.05}
DIFF = {"kind": "differential", "counts_per_pa": 60.0, "zero_counts": 3.0, "range_pa": [-500.0, 500.0], "accuracy_pct_fs": 0.3}


def test_ratiometric_hand_worked() -> None:
    s = SENSOR.validate_python(RATIO)
    assert isinstance(s, RatiometricSensor)
    # common practice (datasheet-style formula): V = Vs (a p + b) = 5 (0.16 + 0.5) = 3.3 V at 1000 Pa;
    # counts = V / Vref · 2^12 = 3.3 / 5 · 4096 = 2703.36
    assert float(s.pa_to_counts(1000.0)) == pytest.approx(2703.36)
    assert float(s.counts_to_pa(2048)) == pytest.approx(0.0, abs=1e-9)  # mid-supply is 0 Pa (b = 0.5)


def test_ratiometric_with_separate_reference() -> None:
    s = SENSOR.validate_python(RATIO | {"adc_ref_v": 3.3, "adc_bits": 16, "supply_v": 3.3})
    # common practice: 3.3 V supply, 0 Pa → 0.5 · 3.3 V = 1.65 V → 1.65/3.3 · 65536 = 32768 counts
    assert float(s.pa_to_counts(0.0)) == pytest.approx(32768.0)


@pytest.mark.parametrize("output,lo,hi", [("10-90", 1638, 14745), ("5-95", 819, 15563)])
def test_digital_bridge_hand_worked(output: str, lo: int, hi: int) -> None:
    s = SENSOR.validate_python(BRIDGE | {"output": output})
    assert isinstance(s, DigitalBridgeSensor)
    # common practice: p = (counts − c_lo)(pmax − pmin)/(c_hi − c_lo) + pmin; window counts from memory
    assert s.counts_to_pa([lo, hi, (lo + hi) / 2]) == pytest.approx([-1000.0, 1000.0, 0.0])
    assert s.range_pa == (-1000.0, 1000.0) and s.full_scale_pa == 2000.0


def test_linear_force_sensor_hand_worked() -> None:
    s = SENSOR.validate_python(LINEAR)
    assert isinstance(s, LinearSensor) and s.quantity is Quantity.FORCE and s.unit == "N"
    assert float(s.counts_to_si(1_000_000)) == pytest.approx(2.4 + 0.5)  # gain · counts + offset
    with pytest.raises(ValueError, match="force"):
        s.counts_to_pa(1)  # a load cell is never read as a pressure
    # 24-bit signed converter rails at −2^23 and 2^23 − 1
    assert s.saturated([-(2**23), 0, 2**23 - 1]).tolist() == [True, False, True]


def test_differential_hand_worked() -> None:
    s = SENSOR.validate_python(DIFF)
    assert isinstance(s, DifferentialSensor)
    assert float(s.counts_to_pa(603.0)) == pytest.approx(10.0)  # (603 − 3) / 60


def test_accuracy_is_a_standard_uncertainty() -> None:
    s = SENSOR.validate_python(RATIO)
    # ±2.5 % of the 5000 Pa span read as a rectangular bound: u = 125 / √3 Pa (GUM, JCGM 100:2008, 4.3.7)
    assert s.accuracy_bound == pytest.approx(125.0)
    assert s.accuracy_pa == pytest.approx(125.0 / math.sqrt(3.0))


def test_saturation_and_range_flags() -> None:
    s = SENSOR.validate_python(RATIO)
    counts = np.array([0, 100, 2048, 4095])
    assert s.saturated(counts).tolist() == [True, False, False, True]
    # 100 counts → (100/4096 − 0.5)/0.00016 = −2972.6 Pa, beyond the −2500 Pa rating
    assert s.out_of_range(counts).tolist() == [True, True, False, True]


@given(
    kind=st.sampled_from([RATIO, BRIDGE, LINEAR | {"kind": "linear"}, DIFF]),
    counts=st.lists(st.floats(-1e7, 1e7, allow_nan=False), min_size=1, max_size=20),
)
def test_round_trip_counts_to_si_and_back(kind: dict, counts: list[float]) -> None:
    s = SENSOR.validate_python(kind)
    c = np.array(counts)
    assert np.allclose(s.si_to_counts(s.counts_to_si(c)), c, rtol=1e-9, atol=1e-6)


@given(
    a=st.floats(1e-6, 1e-2), b=st.floats(0.05, 0.5), bits=st.integers(10, 24),
    p=st.lists(st.floats(-5000, 5000), min_size=1, max_size=10),
)
def test_ratiometric_round_trip_pa(a: float, b: float, bits: int, p: list[float]) -> None:
    s = SENSOR.validate_python(RATIO | {"a_per_pa": a, "b": b, "adc_bits": bits})
    assert np.allclose(s.counts_to_pa(s.pa_to_counts(p)), p, rtol=1e-9, atol=1e-6)


@pytest.mark.parametrize(
    "table,message",
    [
        (RATIO | {"a_per_pa": 0.0}, "must not be 0"),
        (BRIDGE | {"pmin_pa": 5.0, "pmax_pa": 5.0}, "min < max"),
        (LINEAR | {"gain_pa_per_count": 1.0}, "mixes pressure keys"),
        ({"kind": "linear", "offset_n": 0.0, "accuracy_pct_fs": 1.0}, "needs gain_n_per_count and range_n"),
        (DIFF | {"accuracy_pct_fs": 150.0}, "less than or equal to 100"),
    ],
)
def test_bad_sensor_tables_are_refused(table: dict, message: str) -> None:
    with pytest.raises(ValueError, match=message):
        SENSOR.validate_python(table)
