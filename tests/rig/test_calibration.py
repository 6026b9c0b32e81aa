"""Calibration: manometer reference pressures, zero and drift, the span fit, the file format and applying it."""

from __future__ import annotations

import math
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from taprig.rig import (
    Calibration,
    ChannelCalibration,
    ManometerReading,
    RigError,
    apply_calibration,
    build_calibration,
    calibration_from_text,
    calibration_to_text,
    conversion_for,
    drift_check,
    fit_span,
    load_calibration,
    load_rig,
    manometer_pressure,
    wind_off_zero,
)

RIGS = Path(__file__).resolve().parents[2] / "rigs"
RIG = load_rig(RIGS / "cambered-balance.toml")
TAPS = ["u1", "u2", "u3"]
SENSORS = [RIG.sensor_of(n) for n in TAPS]
DATE = datetime(2024, 5, 1, 10, 30, tzinfo=timezone.utc)


def test_manometer_vertical_water_column() -> None:
    # docs/REFERENCES.md: 50.0 mm of water at 20 °C, g = 9.80665 → 489.453 Pa (Δp = ρ g h, CoolProp density)
    assert manometer_pressure(ManometerReading(0.050, liquid_temperature=293.15)) == pytest.approx(489.453, abs=5e-4)


def test_manometer_inclined_tube() -> None:
    # docs/REFERENCES.md: 100 mm along a tube at 10°, 20 °C water → 169.985 Pa (Δp = ρ g L sin θ)
    reading = ManometerReading(0.100, angle=math.radians(10.0), liquid_temperature=293.15)
    assert manometer_pressure(reading) == pytest.approx(169.985, abs=5e-4)


def test_manometer_needs_a_density() -> None:
    with pytest.raises(ValueError, match="density"):
        manometer_pressure(ManometerReading(0.050))


def _synthetic_points(gain: float, zero: float, curvature: float = 0.0, noise: float = 0.0, seed: int = 1):
    """Counts that sensors with a true gain/zero would give at manometer readings of 0–200 mm water, 20 °C."""
    readings = np.linspace(0.0, 0.200, 6)
    p = np.array([manometer_pressure(ManometerReading(r, liquid_temperature=293.15)) for r in readings])
    slope = np.array([s.slope for s in SENSORS])
    fs = SENSORS[0].full_scale
    p_seen = p[:, None] + curvature * fs * (p[:, None] / fs) ** 2  # a bowed sensor for the linearity flag
    rng = np.random.default_rng(seed)
    counts = zero + p_seen / (gain * slope) + rng.normal(0.0, noise, (p.size, len(SENSORS)))
    return p, counts


def test_fit_recovers_known_gain_and_zero() -> None:
    p, counts = _synthetic_points(gain=1.03, zero=2060.0)
    fit = fit_span(p, counts, SENSORS)
    assert fit.gain == pytest.approx([1.03] * 3, rel=1e-9)
    assert fit.zero_counts == pytest.approx([2060.0] * 3, rel=1e-9)
    assert np.all(fit.residual_rms < 1e-6) and all(fit.ok)


def test_fit_through_a_wind_off_zero() -> None:
    p, counts = _synthetic_points(gain=0.98, zero=2040.0, noise=0.3)
    zero = wind_off_zero(2040.0 + np.random.default_rng(2).normal(0.0, 0.5, (500, 3)))
    fit = fit_span(p, counts, SENSORS, zero_counts=zero.mean)
    assert np.array_equal(fit.zero_counts, zero.mean)
    assert fit.gain == pytest.approx([0.98] * 3, rel=5e-3)


def test_linearity_flag_trips_on_a_bowed_sensor() -> None:
    p, counts = _synthetic_points(gain=1.0, zero=2048.0, curvature=0.5)
    fit = fit_span(p, counts, SENSORS, linearity_tolerance_pct_fs=0.1)
    assert not any(fit.ok) and all("linearity" in f[0] for f in fit.flags)
    straight = fit_span(*_synthetic_points(gain=1.0, zero=2048.0), SENSORS, linearity_tolerance_pct_fs=0.1)
    assert all(straight.ok)


def test_gain_flag_trips_beyond_tolerance() -> None:
    fit = fit_span(*_synthetic_points(gain=1.10, zero=2048.0), SENSORS)
    assert all(any("gain" in f for f in flags) for flags in fit.flags)


def test_span_point_outside_range_is_flagged() -> None:
    p, counts = _synthetic_points(gain=1.0, zero=2048.0)
    fit = fit_span(p * 20, 2048 + (counts - 2048) * 20, SENSORS)  # up to ~39 kPa on a 2.5 kPa sensor
    assert all(any("saturated or outside" in f for f in flags) for flags in fit.flags)


def test_fit_refuses_points_that_do_not_vary() -> None:
    with pytest.raises(ValueError, match="differ"):
        fit_span([1.0, 2.0], np.full((2, 3), 2048.0), SENSORS)


def test_zero_mean_and_standard_error() -> None:
    block = np.array([[1.0, 10.0], [3.0, 10.0], [2.0, 13.0], [2.0, 11.0]])
    z = wind_off_zero(block)
    assert z.mean == pytest.approx([2.0, 11.0])
    # s / √n with the sample standard deviation (ddof = 1): common practice
    assert z.std_error == pytest.approx([math.sqrt(2 / 3) / 2, math.sqrt(2.0) / 2])


def test_drift_check() -> None:
    start = wind_off_zero(np.array([[100.0, 200.0], [100.0, 200.0]]))
    end = wind_off_zero(np.array([[101.0, 206.0], [101.0, 206.0]]))
    d = drift_check(start, end, tolerance_counts=2.0)
    assert d.drift.tolist() == [1.0, 6.0] and d.exceeded.tolist() == [False, True] and not d.ok


def test_apply_calibration_formula_and_nominal() -> None:
    counts = np.array([[2048.0, 2100.0, 1638.0], [2000.0, 2200.0, 8191.5]])
    nominal = apply_calibration(counts, RIG, [1, 2, 0])
    expected = np.column_stack([RIG.sensor_of(i).counts_to_si(counts[:, k]) for k, i in enumerate([1, 2, 0])])
    assert np.allclose(nominal, expected)
    cal = Calibration(rig_id=RIG.id, date=DATE, channels={"u1": ChannelCalibration(zero_counts=2050.0, gain=1.02)})
    out = apply_calibration(counts, RIG, [1, 2, 0], cal)
    # value = gain · slope · (counts − zero_counts) (docs/calibration.md)
    assert np.allclose(out[:, 0], 1.02 * RIG.sensor_of(1).slope * (counts[:, 0] - 2050.0))
    assert np.allclose(out[:, 1:], nominal[:, 1:])  # channels the calibration does not list stay nominal


def test_calibration_of_another_rig_is_refused() -> None:
    cal = Calibration(rig_id="other-rig", date=DATE)
    with pytest.raises(ValueError, match="other-rig"):
        conversion_for(RIG, [1], cal)
    assert cal.problems_with(RIG) == ["calibration is for rig 'other-rig', not 'cambered-balance'"]


@pytest.mark.parametrize("fmt", ["toml", "json"])
def test_calibration_file_round_trip(fmt: str, tmp_path: Path) -> None:
    p, counts = _synthetic_points(gain=1.02, zero=2050.0, noise=0.2)
    zero = wind_off_zero(2050.0 + np.random.default_rng(3).normal(0, 0.4, (200, 3)))
    cal = build_calibration(RIG, TAPS, DATE, zero, fit_span(p, counts, SENSORS, zero.mean), 'note "quoted" é', n_points=6)
    path = tmp_path / f"cal.{fmt}"
    path.write_text(calibration_to_text(cal, fmt), encoding="utf-8")
    again = load_calibration(path)
    assert again == cal and again.format_version == 1 and again.channels["u2"].n_points == 6


def test_bad_calibration_file_names_the_key() -> None:
    text = 'format_version = 1\nrig_id = "x"\ndate = 2024-05-01T10:30:00Z\n[channels.u1]\nzero_counts = 1.0\ngian = 1.0\n'
    with pytest.raises(RigError, match=r"channels\.u1\.gian: unknown key"):
        calibration_from_text(text, "cal.toml")
    with pytest.raises(RigError, match="format_version"):
        calibration_from_text(text.replace("format_version = 1", "format_version = 9"), "cal.toml")


def test_absolute_channels_are_not_wind_off_zeroed() -> None:
    rig = load_rig(RIGS / "naca0012-20tap.toml")
    zero = wind_off_zero(np.array([[2048.0, 53540.0], [2049.0, 53541.0]]))
    cal = build_calibration(rig, ["p_static", "baro"], DATE, zero)
    assert cal.channels["p_static"].zero_counts == pytest.approx(2048.5)
    baro = rig.sensor_of("baro")
    assert cal.channels["baro"].zero_counts == pytest.approx(-baro.intercept / baro.slope)  # nominal, not the room


@given(gain=st.floats(0.8, 1.2), zero=st.floats(1500.0, 2600.0))
def test_fit_recovers_any_gain_and_zero(gain: float, zero: float) -> None:
    p, counts = _synthetic_points(gain=gain, zero=zero)
    fit = fit_span(p, counts, SENSORS)
    assert fit.gain == pytest.approx([gain] * 3, rel=1e-7)
    assert fit.zero_counts == pytest.approx([zero] * 3, rel=1e-9)


def test_a_new_zero_keeps_the_span():
    # value = gain · slope · (counts − zero): a fresh zero must change only zero_counts (common practice).
    from datetime import datetime, timezone

    from taprig.rig import Calibration, ChannelCalibration

    when = datetime(2026, 5, 1, tzinfo=timezone.utc)
    spanned = Calibration(rig_id="r", date=when, channels={
        "a": ChannelCalibration(zero_counts=100.0, gain=1.03, zero_std_error=0.2, n_points=5, residual_rms=0.4)})
    zero = Calibration(rig_id="r", date=when.replace(hour=3), operator_note="zero", channels={
        "a": ChannelCalibration(zero_counts=104.5, zero_std_error=0.1),
        "b": ChannelCalibration(zero_counts=7.0, zero_std_error=0.3)})
    merged = spanned.with_zero(zero)
    a = merged.channels["a"]
    assert (a.zero_counts, a.zero_std_error, a.gain, a.n_points, a.residual_rms) == (104.5, 0.1, 1.03, 5, 0.4)
    assert merged.channels["b"] == zero.channels["b"] and merged.date == zero.date
    assert spanned.channels["a"].zero_counts == 100.0  # frozen: the original is untouched


def test_a_rig_file_is_not_taken_for_a_calibration(tmp_path: Path) -> None:
    for rig_file in sorted(RIGS.glob("*.toml")):
        with pytest.raises(RigError) as info:
            load_calibration(rig_file)
        assert str(info.value) == f"{rig_file} is a rig file, not a calibration (taprig calibrate writes one)"
    # channels as an array of tables, the rig file's form, is enough on its own
    with pytest.raises(RigError, match="is a rig file"):
        calibration_from_text('[[channels]]\nindex = 0\nname = "p"\n', "x.toml")


def test_a_binary_file_is_not_a_calibration(tmp_path: Path) -> None:
    for name, data in (("session.toml", b"SQLite format 3\x00rest"), ("noise.json", b"\xf8\xff\xfe")):
        (tmp_path / name).write_bytes(data)
        with pytest.raises(RigError) as info:
            load_calibration(tmp_path / name)
        assert str(info.value) == (f"{tmp_path / name} is not a text TOML or JSON calibration file "
                                   "(a session? try taprig info)")


def test_a_calibration_still_loads(tmp_path: Path) -> None:
    cal = Calibration(rig_id=RIG.id, date=DATE, channels={"u1": ChannelCalibration(zero_counts=10.0, gain=1.01)})
    for suffix, fmt in ((".toml", "toml"), (".json", "json")):
        path = tmp_path / f"cal{suffix}"
        path.write_text(calibration_to_text(cal, fmt), encoding="utf-8")
        assert load_calibration(path) == cal
