"""Per-scan reduction: counts → Pa → Cp → plain coefficients, flags, determinism and bad input."""

from __future__ import annotations

import warnings

import numpy as np
import pytest

from taprig.physics.integration import section_coefficients
from taprig.protocol import RawBlock
from taprig.reduce import ChannelFlag, ReduceError, Reducer, ScanFlag, flag_names
from taprig.rig import load_rig, parse_rig

# A tiny rig with known numbers: one ratiometric pitot differential and three room-referenced taps.
TINY = """
format = 1
id = "tiny"
name = "tiny"
kind = "airfoil"
[sensors.ratio]
kind = "ratiometric"
supply_v = 5.0
a_per_pa = 0.00016
b = 0.5
adc_bits = 12
adc_ref_v = 5.0
range_pa = [-2500.0, 2500.0]
accuracy_pct_fs = 1.0
[[channels]]
index = 0
name = "dq"
encoding = "u16"
sensor = "ratio"
measures = "differential"
relative_to = "static"
[[channels]]
index = 1
name = "a"
encoding = "u16"
sensor = "ratio"
measures = "gauge"
[[channels]]
index = 2
name = "b"
encoding = "u16"
sensor = "ratio"
measures = "gauge"
[[channels]]
index = 3
name = "c"
encoding = "u16"
sensor = "ratio"
measures = "gauge"
[reference]
pitot = "dq"
static_source = "room"
[geometry]
chord_mm = 100.0
span_mm = 300.0
[section]
naca = "0012"
[[taps]]
name = "U1"
channel = "a"
x_c = 0.1
surface = "upper"
[[taps]]
name = "L1"
channel = "b"
x_c = 0.1
surface = "lower"
[[taps]]
name = "U2"
channel = "c"
x_c = 0.5
surface = "upper"
"""


@pytest.fixture(scope="module")
def tiny():
    return Reducer(parse_rig(TINY, "tiny.toml"))


def _block(counts, channels=(0, 1, 2, 3)):
    counts = np.atleast_2d(np.asarray(counts, dtype=float))
    n = counts.shape[0]
    return RawBlock(counts, tuple(channels), np.arange(n, dtype=np.int64), np.arange(n, dtype=np.int64))


def test_hand_worked_counts_to_cp(tiny):
    # Ratiometric transfer V = Vs (a p + b), counts = V / Vref · 2^12 (common practice, the sensor's definition):
    # q = 250 Pa → 4096 (0.00016·250 + 0.5) = 2211.84 counts; taps at −300, +125, 0 Pa → 1851.392, 2129.92, 2048.
    # Cp = (p − p∞)/q with p∞ = the room (an open jet, as the rig states), so Cp = −1.2, 0.5, 0 (definition,
    # common practice).
    rb = tiny.reduce(_block([2211.84, 1851.392, 2129.92, 2048.0]))
    np.testing.assert_allclose(rb.q_pa, [250.0], rtol=1e-12)
    np.testing.assert_allclose(rb.p_pa[0], [250.0, -300.0, 125.0, 0.0], atol=1e-9)
    by_tap = dict(zip(rb.tap_names, rb.cp[0]))
    assert by_tap == pytest.approx({"U1": -1.2, "L1": 0.5, "U2": 0.0}, abs=1e-12)
    # V² = 2γ/(γ−1)·(p0/ρ0)·[1 − (p∞/p0)^((γ−1)/γ)], p0 = p∞ + q, stagnation state = the room (Anderson,
    # Fundamentals of Aerodynamics, 5th ed., eqs. 8.30 and 7.32), written out with γ = 1.4; Bernoulli √(2q/ρ) with
    # the room's density is 0.08 % off at 20 m/s (series: (9/28)·q/p).
    p_a, rho = tiny.ambient.pressure, tiny.fluid.density
    expected = np.sqrt(7.0 * p_a / rho * (1.0 - (p_a / (p_a + 250.0)) ** (1.0 / 3.5)))
    np.testing.assert_allclose(rb.v_ms, expected, rtol=1e-12)
    np.testing.assert_allclose(rb.v_ms, np.sqrt(2 * 250.0 / rho), rtol=1e-3)
    assert rb.scan_flags[0] == 0
    assert "room pressure" in " ".join(tiny.assumptions)
    assert "open jet" in " ".join(tiny.assumptions)


def test_plain_integral_matches_the_trapezoid_of_the_taps(tiny):
    rb = tiny.reduce(_block([2211.84, 1851.392, 2129.92, 2048.0]), alpha_rad=0.1)
    lay = tiny.rig.tap_layout()
    ref = section_coefficients(lay.x_c, lay.y_c, rb.cp, 0.1)  # the physics integrator on the same Cp
    np.testing.assert_array_equal(rb.cl, ref.cl)
    np.testing.assert_array_equal(rb.cm_qc, ref.cm_qc)


def test_no_flow_gives_nan_and_flag_never_inf(tiny):
    zero = 2048.0  # 0 Pa on every channel
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # a division by ~0 would warn
        rb = tiny.reduce(_block([[zero, 1900.0, 2000.0, zero], [zero + 0.4, 1900.0, 2000.0, zero]]))
    assert np.all(np.isnan(rb.cp)) and not np.any(np.isinf(rb.cp))
    assert np.all(np.isnan(rb.cl))
    assert np.all(rb.scan_flags & ScanFlag.NO_FLOW)


def test_saturated_tap_is_flagged_and_left_out(tiny):
    good = [2211.84, 1851.392, 2129.92, 2048.0]
    rails = [2211.84, 4095.0, 2129.92, 2048.0]  # tap U1 at the 12-bit top rail
    rb = tiny.reduce(_block([good, rails]))
    col = rb.column_names.index("U1")
    assert rb.channel_flags[1, col] & ChannelFlag.SATURATED and not rb.channel_flags[0].any()
    assert rb.scan_flags[1] & ScanFlag.SATURATED and rb.scan_flags[1] & ScanFlag.NO_INTEGRAL
    assert np.isnan(rb.cp[1, rb.tap_names.index("U1")]) and np.isfinite(rb.cl[0])


def test_flag_counts_summarise_the_block(tiny):
    # By construction: scans 1 and 2 have tap U1 at the 12-bit rail, scan 3 has q = 0, scan 0 is clean.
    good = [2211.84, 1851.392, 2129.92, 2048.0]
    rails = [2211.84, 4095.0, 2129.92, 2048.0]
    still = [2048.0, 1900.0, 2000.0, 2048.0]
    rb = tiny.reduce(_block([good, rails, rails, still]))
    by_scan = rb.flag_counts()
    assert by_scan["SATURATED"] == 2 and by_scan["NO_INTEGRAL"] == 2 and by_scan["NO_FLOW"] == 1
    assert set(by_scan) == {name for mask in rb.scan_flags[1:] for name in flag_names(mask, ScanFlag)}
    by_channel = rb.channel_flag_counts()
    assert list(by_channel) == ["U1"]  # channels without a flagged sample are left out
    assert by_channel["U1"]["SATURATED"] == 2
    assert tiny.reduce(_block([good])).flag_counts() == {}


def test_degraded_integral_over_the_remaining_taps(make_block):
    reducer = Reducer(load_rig("rigs/cambered-balance.toml"))
    chans = tuple(c.index for c in reducer.rig.channels)
    p = np.zeros((2, len(chans)))
    p[:, 0] = 250.0  # pitot q [Pa]
    p[:, 1:8] = [-300.0, -200.0, -100.0, -50.0, 100.0, 50.0, 20.0]
    block = make_block(reducer, p)
    counts = block.counts.copy()
    counts[1, 2] = reducer.rig.sensor_of(2).rails[1]  # channel u2 (tap U2) at its converter's rail
    rb = reducer.reduce(RawBlock(counts, chans, block.t_ns, block.scan_index))
    assert rb.scan_flags[1] & ScanFlag.DEGRADED and not rb.scan_flags[0] & ScanFlag.DEGRADED
    keep = np.array([name != "U2" for name in rb.tap_names])
    lay = reducer.rig.tap_layout()
    ref = section_coefficients(lay.x_c[keep], lay.y_c[keep], rb.cp[1, keep], 0.0)  # trapezoid without U2
    assert rb.cl[1] == pytest.approx(float(ref.cl), rel=1e-12)
    assert rb.cl[0] != pytest.approx(rb.cl[1], rel=1e-6)


def test_saturation_mask_agrees_with_the_sensor_test(tiny):
    counts = np.array([[0.0, 4095.0, 2048.0, 10.0], [2048.0, 2048.0, 4096.0, -1.0]])
    rb = tiny.reduce(_block(counts))
    sensor = tiny.rig.sensor_of(0)
    expected = sensor.saturated(counts)
    assert np.array_equal((rb.channel_flags & ChannelFlag.SATURATED) != 0, expected)


def test_reference_saturated_invalidates_the_scan(tiny):
    rb = tiny.reduce(_block([4095.0, 1851.392, 2129.92, 2048.0]))
    assert rb.scan_flags[0] & ScanFlag.REFERENCE_INVALID and np.all(np.isnan(rb.cp))


def test_repeat_and_split_reductions_are_bit_identical():
    rig = load_rig("rigs/bench-64.toml")
    reducer = Reducer(rig)
    rng = np.random.default_rng(7)
    chans = tuple(c.index for c in rig.channels)
    plan = reducer.plan(chans)
    p = rng.normal(0.0, 30.0, (500, len(chans))) + np.where(np.arange(len(chans)) == plan.q.cols[0][0], 300.0, 0.0)
    block = _block(np.round(p / plan.scale + plan.zero), chans)
    a, b = reducer.reduce(block, 0.05), Reducer(rig).reduce(block, 0.05)
    halves = [reducer.reduce(RawBlock(block.counts[s], chans, block.t_ns[s], block.scan_index[s]), 0.05)
              for s in (slice(0, 250), slice(250, 500))]
    for name in ("p_pa", "cp", "q_pa", "v_ms", "re", "cl", "cd_p", "cm_qc", "scan_flags", "channel_flags"):
        assert getattr(a, name).tobytes() == getattr(b, name).tobytes(), name
        joined = np.concatenate([getattr(h, name) for h in halves])
        assert joined.tobytes() == getattr(a, name).tobytes(), name


def test_to_columns_names_and_lengths(tiny):
    rb = tiny.reduce(_block([[2211.84, 1851.392, 2129.92, 2048.0]] * 3), alpha_rad=np.radians(4.0))
    cols = rb.to_columns()
    for key in ("q_pa", "alpha_deg", "cl", "cd_p", "cm_qc", "cp.U1", "cp.L1", "p_pa.U1", "p_pa.dq"):
        assert key in cols and cols[key].shape == (3,)
    np.testing.assert_allclose(cols["alpha_deg"], 4.0)
    with pytest.raises(ValueError):
        rb.cp[0, 0] = 1.0  # a frozen value


def test_block_with_a_channel_the_rig_lacks_is_refused(tiny):
    with pytest.raises(ReduceError, match=r"channel\(s\) 9 .*does not define"):
        tiny.reduce(_block([[2048.0] * 5], channels=(0, 1, 2, 3, 9)))


def test_block_without_the_reference_channel_is_refused(tiny):
    with pytest.raises(ReduceError, match="reference channel.*dq"):
        tiny.reduce(_block([[2048.0] * 3], channels=(1, 2, 3)))


def test_block_missing_a_tap_channel_flags_it(tiny):
    rb = tiny.reduce(_block([[2211.84, 1851.392, 2129.92]], channels=(0, 1, 2)))
    assert rb.scan_flags[0] & ScanFlag.MISSING_TAPS and np.isnan(rb.cp[0, rb.tap_names.index("U2")])


def test_bad_alpha_and_counts_shape_are_refused(tiny):
    with pytest.raises(ReduceError, match="alpha_rad"):
        tiny.reduce(_block([[2048.0] * 4] * 2), alpha_rad=[0.1, 0.2, 0.3])
    with pytest.raises(ReduceError, match="shape"):
        tiny.reduce(RawBlock(np.zeros((2, 3)), (0, 1, 2, 3), np.arange(2), np.arange(2)))


def test_calibration_for_another_rig_is_refused(tiny):
    from datetime import datetime

    from taprig.rig import Calibration

    with pytest.raises(ReduceError, match="other"):
        Reducer(tiny.rig, Calibration(rig_id="other", date=datetime(2026, 1, 1)))
