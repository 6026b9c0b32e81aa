"""The split of a sensor's accuracy band, the calibration levels, and the span calibration's reference uncertainty."""

from __future__ import annotations

import math
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
import pytest
from CoolProp.CoolProp import PropsSI
from scipy import stats

from taprig.rig import (
    CalibrationLevel,
    ChannelCalibration,
    Manometer,
    RigError,
    calibrate,
    fit_span,
    load_rig,
    parse_input_toml,
    parse_rig,
)

RIGS = Path(__file__).resolve().parents[2] / "rigs"
NACA = (RIGS / "naca0012-20tap.toml").read_text(encoding="utf-8")
DATE = datetime(2024, 5, 1, 10, 30, tzinfo=timezone.utc)
G0 = 9.80665  # standard gravity (CGPM 1901)
# WGS-84 normal gravity at the equator and at the poles (from memory: 9.7803253359 and 9.8321849378 m/s²)
G_EQUATOR, G_POLE = 9.7803253359, 9.8321849378


def _water(t_c: float) -> tuple[float, float]:
    """Water density [kg/m³] and dρ/dT [kg/m³/K] at 101325 Pa from CoolProp (IAPWS-95), central difference."""
    def rho(t):
        return PropsSI("D", "T", t, "P", 101325.0, "Water")

    t = 273.15 + t_c
    return rho(t), (rho(t + 0.01) - rho(t - 0.01)) / 0.02


def _without_split(text: str) -> str:
    lines = [ln for ln in text.splitlines(keepends=True)
             if not ln.startswith(("offset_pct_fs", "span_pct_fs", "linearity_pct_fs"))]
    return "".join(lines)


def test_datasheet_parts_by_calibration_level() -> None:
    # Example rig: ±1 kPa (FS 2000 Pa), band 0.25 % FS = offset 0.15 ⊕ span 0.15 ⊕ linearity 0.1 ⊕ rest; each
    # part a rectangular bound, u = bound/√3 (JCGM 100:2008 §4.3.7); the span part a gain error (docs/rig-file.md).
    tap = load_rig(RIGS / "naca0012-20tap.toml").sensors["tap"]
    assert (tap.accuracy_pct_fs, tap.offset_pct_fs, tap.span_pct_fs, tap.linearity_pct_fs) == (0.25, 0.15, 0.15, 0.1)
    fs, r3 = 2000.0 / 100.0, math.sqrt(3.0)
    rest = math.sqrt(0.25**2 - 0.15**2 - 0.15**2 - 0.1**2)
    assert tap.unattributed_pct_fs == pytest.approx(rest, rel=1e-12)
    assert tap.datasheet_uncertainty(CalibrationLevel.NOMINAL) == pytest.approx(
        (fs * math.sqrt(0.25**2 - 0.15**2) / r3, 0.0015 / r3), rel=1e-12)
    assert tap.datasheet_uncertainty(CalibrationLevel.ZEROED) == pytest.approx(
        (fs * math.sqrt(0.25**2 - 0.15**2 - 0.15**2) / r3, 0.0015 / r3), rel=1e-12)
    assert tap.datasheet_uncertainty(CalibrationLevel.SPANNED) == pytest.approx((fs * rest / r3, 0.0), rel=1e-12)


def test_a_sensor_without_the_split_keeps_its_whole_band() -> None:
    # Backward compatibility: no offset/span/linearity keys → the whole band at every level, as before.
    tap = parse_rig(_without_split(NACA), "old.toml").sensors["tap"]
    assert (tap.offset_pct_fs, tap.span_pct_fs, tap.linearity_pct_fs) == (0.0, 0.0, 0.0)
    for level in CalibrationLevel:
        assert tap.datasheet_uncertainty(level) == (pytest.approx(tap.accuracy, rel=1e-12), 0.0)


def test_parts_larger_than_the_band_are_refused_naming_the_sensor() -> None:
    text = NACA.replace("offset_pct_fs = 0.15", "offset_pct_fs = 0.22", 1)  # the first: sensors.probe
    message = r"sensors\.probe: .*combine in quadrature to 0\.28\d* % FS, more than accuracy_pct_fs = 0\.25"
    with pytest.raises(RigError, match=message):
        parse_rig(text, "split.toml")


def test_channel_calibration_level() -> None:
    assert ChannelCalibration(zero_counts=1.0).level is CalibrationLevel.NOMINAL  # a zero of unknown provenance
    assert ChannelCalibration(zero_counts=1.0, zero_std_error=0.0).level is CalibrationLevel.ZEROED
    assert ChannelCalibration(zero_counts=1.0, gain=1.01, n_points=4).level is CalibrationLevel.SPANNED


def test_manometer_reference_uncertainty_inclined_tube() -> None:
    # Δp = ρ g L sin θ; u(L) = δ/√6 (two scale readings of δ/√12 each, GUM F.2.2.1); relative part from
    # u(ρ) = |dρ/dT| u(T), u(g) = the largest gap of standard gravity to sea-level normal gravity / √3, and
    # u(θ) cot θ (GUM §5.1.2, sensitivities by hand). Water from CoolProp.
    theta, u_theta = math.radians(10.0), math.radians(0.1)
    m = Manometer(angle=theta, liquid_temperature=293.15)
    rho, drho = _water(20.0)
    u_g = max(G0 - G_EQUATOR, G_POLE - G0) / math.sqrt(3.0)
    u_point, u_rel = m.reference_uncertainty()
    assert u_point == pytest.approx(rho * G0 * math.sin(theta) * 1e-3 / math.sqrt(6.0), rel=1e-5)
    expected = math.sqrt((abs(drho) * 1.0 / rho) ** 2 + (u_g / G0) ** 2 + (u_theta / math.tan(theta)) ** 2)
    assert u_rel == pytest.approx(expected, rel=1e-4)


def test_manometer_uncertainty_keys_and_reference_sensor_points() -> None:
    rig = load_rig(RIGS / "cambered-balance.toml")
    text = """channels = ["u1"]
[manometer]
liquid_density_kg_m3 = 830.0
liquid_density_u_kg_m3 = 4.15
gravity_u_m_s2 = 0.0
reading_resolution_mm = 0.5
[[points]]
reference_pa = 400.0
reference_u_pa = 0.8
counts = [[2700.0]]
[[points]]
reading_mm = 50.0
counts = [[2400.0]]
"""
    plan = parse_input_toml(text, "points.toml", rig)
    assert plan.reference_u == (0.8, None)
    u_point, u_rel = plan.manometer.reference_uncertainty()
    assert u_rel == pytest.approx(4.15 / 830.0, rel=1e-12)  # vertical tube, g exact: density alone
    assert u_point == pytest.approx(830.0 * G0 * 0.5e-3 / math.sqrt(6.0), rel=1e-12)
    with pytest.raises(RigError, match=r"manometer: manometer\.angle_u_deg must be a standard uncertainty ≥ 0"):
        parse_input_toml(text.replace("gravity_u_m_s2 = 0.0", "angle_u_deg = -1.0"), "points.toml", rig)
    with pytest.raises(RigError, match=r"points\[1\]\.reference_u_pa: belongs to a reference_pa point"):
        parse_input_toml(text.replace("reading_mm = 50.0", "reading_mm = 50.0\nreference_u_pa = 1.0"), "p.toml", rig)


def test_span_through_a_zero_records_the_reference_uncertainty() -> None:
    # A line through the zero: m = Σ d p / Σ d², so δm/m = Σ p_i δp_i / Σ p² for counts ∝ p: independent
    # reading errors add as u_point² Σ p² / (Σ p²)², the common relative error passes whole (GUM §5.1.2).
    rig = load_rig(RIGS / "cambered-balance.toml")
    sensor = rig.sensor_of("u1")
    manometer = Manometer(liquid_temperature=293.15)
    readings = np.array([0.04, 0.08, 0.12, 0.16])
    p = readings * _water(20.0)[0] * G0  # ρ g L with CoolProp's water at 20 °C
    zero_counts = 2048.0
    blocks = {"zero": np.full((10, 1), zero_counts)}
    blocks |= {f"point {k + 1}": np.full((5, 1), zero_counts + pk / (1.01 * sensor.slope)) for k, pk in enumerate(p)}
    text = 'channels = ["u1"]\n' + "".join(f"[[points]]\nreading_mm = {1000 * r:.1f}\n" for r in readings)
    cal = calibrate(rig, parse_input_toml(text, "p.toml", rig), blocks.get, DATE)
    entry = cal.channels["u1"]
    u_point, u_rel = manometer.reference_uncertainty()
    assert entry.gain == pytest.approx(1.01, rel=1e-6) and entry.level is CalibrationLevel.SPANNED
    assert entry.reference_u_rel == pytest.approx(math.sqrt(u_rel**2 + u_point**2 / np.sum(p**2)), rel=1e-6)


def test_free_zero_span_fit_standard_errors_match_scipy() -> None:
    # Without a wind-off zero the fitted zero's standard error is the line's prediction error at c0, checked
    # against scipy.stats.linregress (slope, intercept and their standard errors; cov(m, b) = −c̄ se_m²).
    sensor = load_rig(RIGS / "cambered-balance.toml").sensor_of("u1")
    rng = np.random.default_rng(5)
    p = np.linspace(100.0, 1500.0, 7)
    counts = 2050.0 + p / (0.99 * sensor.slope) + rng.normal(0.0, 2.0, p.size)
    fit = fit_span(p, counts[:, None], [sensor], reference_u=0.5, reference_u_rel=0.002)
    lr = stats.linregress(counts, p)
    c0 = -lr.intercept / lr.slope
    cov = -counts.mean() * lr.stderr**2
    se_p = math.sqrt(lr.intercept_stderr**2 + c0**2 * lr.stderr**2 + 2 * c0 * cov)
    assert fit.zero_counts[0] == pytest.approx(c0, rel=1e-9)
    assert fit.zero_std_error[0] == pytest.approx(se_p / abs(lr.slope), rel=1e-9)
    # gain: w_i = (c_i − c̄)/S_cc; independent part Σ (w_i u)², the common relative part whole
    w = (counts - counts.mean()) / np.sum((counts - counts.mean()) ** 2)
    expected = math.sqrt(np.sum((w * 0.5) ** 2) / lr.slope**2 + 0.002**2)
    assert fit.gain_u_reference[0] == pytest.approx(expected, rel=1e-9)
