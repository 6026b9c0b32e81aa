"""The systematic part of the uncertainty budget by calibration level: datasheet parts, zero, span reference.

Hand-computed cases (JCGM 100:2008 §5.1.2, §5.2.2), backward compatibility, and a seeded Monte Carlo of the
whole chain (sensor offsets and gains drawn per run, a wind-off zero, a manometer span, noisy runs) against the
analytic u(Cl) and u(q) (JCGM 101:2008, propagation of distributions).
"""

from __future__ import annotations

import math
from datetime import datetime, timezone

import numpy as np
import pytest
from CoolProp.CoolProp import PropsSI

from taprig.protocol import RawBlock
from taprig.reduce import ReduceOptions, Reducer
from taprig.rig import (
    CalibrationInput,
    Manometer,
    build_calibration,
    calibrate,
    calibration_from_text,
    calibration_to_text,
    manometer_pressure,
    parse_rig,
    wind_off_zero,
)

DATE = datetime(2024, 5, 1, 10, 30, tzinfo=timezone.utc)
PCT_FOR_2PA = 100.0 * 2.0 * math.sqrt(3.0) / 200000.0  # u = 2 Pa over a 200 kPa span, rectangular (GUM 4.3.7)
TAPS = [("T1", 0.3, "upper"), ("T2", 0.1, "upper"), ("T3", 0.1, "lower"), ("T4", 0.3, "lower")]
CPS = {"T1": 1.0, "T2": 0.0, "T3": -1.0, "T4": -3.0}  # docs/REFERENCES.md's Cp values
LSB = 1e-4 / math.sqrt(12.0)  # one count of the fine sensor, u = LSB/√12 (GUM F.2.2.1) [Pa]
G0 = 9.80665
G_EQUATOR, G_POLE = 9.7803253359, 9.8321849378  # WGS-84 normal gravity, equator and poles (from memory)


def _rig(airfoil_rig, taps, pct, offset=0.0, span=0.0, linearity=0.0, range_pa=None):
    """The differential test rig (a pitot differential, taps referred to the static port) with a split band."""
    text = airfoil_rig(taps, layout="differential", pct=pct)
    split = f"offset_pct_fs = {offset!r}\nspan_pct_fs = {span!r}\nlinearity_pct_fs = {linearity!r}\n"
    text = text.replace(f"accuracy_pct_fs = {pct}\n", f"accuracy_pct_fs = {pct}\n{split}")
    if range_pa is not None:
        text = text.replace("range_pa = [-100000.0, 100000.0]", f"range_pa = [{-range_pa!r}, {range_pa!r}]")
    return parse_rig(text, "budget.toml")


def _row(q):
    cp = dict(CPS)
    return [q] + [cp[name] * q for name, _, _ in TAPS]


def _u_by_tap(mean):
    return dict(zip(mean.tap_names, mean.u_cp))


def test_zeroing_removes_exactly_the_offset_part(make_block, airfoil_rig):
    # Band ±2√3 Pa (u = 2 Pa: docs/REFERENCES.md's differential case), of which 80 % in quadrature is offset:
    # u_offset = 1.6 Pa, u_rest = 1.2 Pa. Differential layout: u(Cp) = √(u_tap² + Cp² u_q²)/q (GUM §5.1.2).
    rig = _rig(airfoil_rig, TAPS, PCT_FOR_2PA, offset=0.8 * PCT_FOR_2PA)
    nominal, q = Reducer(rig), 250.0
    names = [c.name for c in rig.channels]
    block = make_block(nominal, np.tile(_row(q), (20, 1)))
    u_nominal = _u_by_tap(nominal.reduce_mean(block))
    # docs/REFERENCES.md: (u/q)√(1 + Cp²), u = 2 Pa, q = 250 Pa → 0.008000 at Cp 0, 0.025298 at Cp −3
    # (plus one count)
    assert u_nominal["T2"] == pytest.approx(0.008000, abs=2e-6) and u_nominal["T4"] == pytest.approx(0.025298, abs=2e-6)

    quiet_zero = make_block(nominal, np.zeros((50, 5))).counts  # a noiseless zero: standard error 0
    zeroed = nominal.with_calibration(build_calibration(rig, names, DATE, wind_off_zero(quiet_zero)))
    u_zeroed = _u_by_tap(zeroed.reduce_mean(make_block(zeroed, np.tile(_row(q), (20, 1)))))
    for name, cp in CPS.items():
        removed = (1.6 / q) ** 2 * (1.0 + cp**2)  # the offset part, in quadrature, through the same sensitivities
        assert u_nominal[name] ** 2 - u_zeroed[name] ** 2 == pytest.approx(removed, rel=1e-9)
        assert u_zeroed[name] == pytest.approx(math.sqrt(1.2**2 + LSB**2) / q * math.sqrt(1.0 + cp**2), rel=1e-9)

    # a real zero adds its standard error s/√n (GUM §4.2.3) per channel, by hand from the zero block itself
    noisy = make_block(nominal, np.random.default_rng(3).normal(0.0, 2.0, (400, 5))).counts
    zeroed = nominal.with_calibration(build_calibration(rig, names, DATE, wind_off_zero(noisy)))
    mean = zeroed.reduce_mean(make_block(zeroed, np.tile(_row(q), (20, 1))))
    se = noisy.std(axis=0, ddof=1) / math.sqrt(noisy.shape[0]) * 1e-4  # [Pa]
    u_channel = np.sqrt(1.2**2 + se**2 + LSB**2)
    for k, (name, _, _) in enumerate(TAPS):
        expected = math.sqrt(u_channel[k + 1] ** 2 + CPS[name] ** 2 * u_channel[0] ** 2) / q
        assert _u_by_tap(mean)[name] == pytest.approx(expected, rel=1e-9)


def _manometer_points(manometer, readings_m, gain, n=5):
    """Span blocks of a sensor with a true gain on the manifold of ``manometer`` (counts of 1e-4 Pa, zero 0)."""
    refs = [manometer_pressure(manometer.reading(r)) for r in readings_m]
    return refs, {f"point {k + 1}": np.full((n, 5), p / (gain * 1e-4)) for k, p in enumerate(refs)}


def test_span_reference_uncertainty_propagates_for_one_channel(make_block, airfoil_rig):
    # Sensor band fully attributed (rest 0), so a spanned channel's u is the calibration's alone. U-tube, water
    # at 20 °C (u(T) = 1 K), 1 mm scale, standard gravity; points 20–80 mm; true gain 1.02, a noiseless zero.
    # By hand: u_point = ρ g δ/√6, u_rel² = (|dρ/dT| u_T/ρ)² + (u_g/g)², the gain's relative u through the zero
    # √(u_rel² + u_point²/Σp²); the pitot channel's u(q) = √((u_gain q)² + LSB²) (GUM §5.1.2).
    rig = _rig(airfoil_rig, TAPS, 0.005, offset=0.004, span=0.003)
    names = tuple(c.name for c in rig.channels)
    manometer, readings = Manometer(liquid_temperature=293.15), np.array([0.02, 0.04, 0.06, 0.08])
    refs, blocks = _manometer_points(manometer, readings, 1.02)
    blocks["zero"] = np.zeros((10, 5))
    plan = CalibrationInput(names, manometer, tuple(refs), tuple(f"point {k + 1}" for k in range(4)))
    cal = calibrate(rig, plan, blocks.get, DATE)

    def water(t):  # CoolProp (IAPWS-95) at 101325 Pa
        return PropsSI("D", "T", t, "P", 101325.0, "Water")

    rho, drho = water(293.15), (water(293.16) - water(293.14)) / 0.02
    u_g = max(G0 - G_EQUATOR, G_POLE - G0) / math.sqrt(3.0)
    u_rel = math.hypot(abs(drho) / rho, u_g / G0)
    u_point = rho * G0 * 1e-3 / math.sqrt(6.0)
    p = rho * G0 * readings
    u_gain = math.sqrt(u_rel**2 + u_point**2 / np.sum(p**2))
    assert cal.channels["dq"].reference_u_rel == pytest.approx(u_gain, rel=2e-4)

    reducer, q = Reducer(rig, cal), 200.0
    mean = reducer.reduce_mean(make_block(reducer, np.tile(_row(q), (20, 1))))
    lsb = 1.02 * LSB
    assert mean.u_q_pa == pytest.approx(math.sqrt((u_gain * q) ** 2 + lsb**2), rel=2e-4)
    assert mean.u_p_pa[0] == pytest.approx(mean.u_q_pa, rel=1e-12)

    # One reference for every channel: the common gain error scales p − p∞ and q alike and cancels in Cp.
    blind = cal.model_copy(update={"channels": {n: c.model_copy(update={"reference_u_rel": 0.0})
                                                for n, c in cal.channels.items()}})
    other = Reducer(rig, blind).reduce_mean(make_block(reducer, np.tile(_row(q), (20, 1))))
    np.testing.assert_allclose(mean.u_cp, other.u_cp, rtol=1e-6)  # what is left is rounding of ~(u_gain q)²
    assert np.all(mean.u_cp < 1e-3 * u_gain)  # taken per channel, the term alone would be u_gain √(1 + Cp²)
    assert other.u_q_pa == pytest.approx(lsb, rel=1e-4)  # q keeps the reference term; without it one count is left


def test_a_rig_without_the_new_keys_behaves_as_before(make_block, airfoil_rig):
    # Before the split, every level carried the whole band: u² = u_acc² + u_residual² + u_zero² + u_LSB².
    rig = parse_rig(airfoil_rig(TAPS, layout="differential", pct=PCT_FOR_2PA), "old.toml")
    names = [c.name for c in rig.channels]
    noisy = np.random.default_rng(4).normal(0.0, 20000.0, (100, 5))
    cal = build_calibration(rig, names, DATE, wind_off_zero(noisy))
    old_text = calibration_to_text(cal)
    assert "reference_u_rel" not in old_text  # a zero-only calibration file is unchanged in form
    reducer, q = Reducer(rig, calibration_from_text(old_text)), 250.0
    mean = reducer.reduce_mean(make_block(reducer, np.tile(_row(q), (20, 1))))
    se = noisy.std(axis=0, ddof=1) / 10.0 * 1e-4
    np.testing.assert_allclose(mean.u_p_pa, np.sqrt(2.0**2 + se**2 + LSB**2), rtol=1e-9)


# -- Monte Carlo of the whole chain ------------------------------------------------------------------------------
MC_TAPS = [("U1", 0.6, "upper"), ("U2", 0.25, "upper"), ("U3", 0.05, "upper"),
           ("L1", 0.05, "lower"), ("L2", 0.25, "lower"), ("L3", 0.6, "lower")]
MC_CP = np.array([-0.3, -0.7, -1.6, 0.4, 0.05, -0.05])  # a plausible lifting distribution (values only)
SIGMA, N_RUN, N_ZERO, N_POINT = 3.0, 200, 100, 2000  # noise [Pa], scans per run / zero / span point
OIL, OIL_U = 830.0, 8.3  # a manometer oil's density and its (large) standard uncertainty [kg/m³]


def _mc_run(rng, rig, base, state: str):
    """One simulated day: a sensor set drawn from the datasheet, zeroed (and spanned), then one averaged point."""
    n_ch, q = len(rig.channels), 150.0
    offset = rng.uniform(-16.0, 16.0, n_ch)  # ±0.8 % of 2000 Pa, rectangular
    gain = 1.0 + rng.uniform(-0.006, 0.006, n_ch)  # ±0.6 % at full span, rectangular

    def counts(p_true, n):  # the true sensors read gain·p + offset + noise; nominal 1e-4 Pa per count, zero 0
        return (gain * np.asarray(p_true) + offset + rng.normal(0.0, SIGMA, (n, n_ch))) / 1e-4

    names = tuple(c.name for c in rig.channels)
    blocks = {"zero": counts(np.zeros(n_ch), N_ZERO)}
    if state == "zeroed":
        cal = build_calibration(rig, names, DATE, wind_off_zero(blocks["zero"]))
    else:
        # a 0.01 mm (micromanometer) scale: a coarse scale's reading scatter shows in the fit residual as well as
        # in u_ref, which the budget then counts twice (conservative; docs/reduction.md)
        manometer = Manometer(liquid_density=OIL, density_u=OIL_U, reading_resolution=1e-5)
        b = max(G0 - G_EQUATOR, G_POLE - G0)
        rho_true, g_true = rng.normal(OIL, OIL_U), rng.uniform(G0 - b, G0 + b)
        read = np.array([0.02, 0.04, 0.06, 0.08])
        error = rng.uniform(-5e-6, 5e-6, (2, read.size))  # two scale readings per point, ±δ/2 each
        for k, length in enumerate(read - error[0] + error[1]):
            blocks[f"point {k + 1}"] = counts(np.full(n_ch, rho_true * g_true * length), N_POINT)
        refs = tuple(manometer_pressure(manometer.reading(r)) for r in read)
        plan = CalibrationInput(names, manometer, refs, tuple(f"point {k + 1}" for k in range(read.size)))
        cal = calibrate(rig, plan, blocks.get, DATE)
    run = counts(np.concatenate(([q], MC_CP * q)), N_RUN)
    channels = tuple(c.index for c in rig.channels)
    block = RawBlock(run, channels, np.arange(N_RUN, dtype=np.int64) * 1_000_000, np.arange(N_RUN, dtype=np.int64))
    return base.with_calibration(cal).reduce_mean(block, math.radians(4.0))


@pytest.mark.parametrize("state", ["zeroed", "spanned"])
def test_monte_carlo_of_the_whole_chain_agrees_with_the_analytic_budget(state, airfoil_rig):
    # ±1 kPa sensors, band 1 % FS = offset 0.8 ⊕ span 0.6 (fully attributed). Each run draws every sensor's
    # offset and gain, takes a noisy wind-off zero (and, spanned, a manometer span whose oil density, gravity and
    # readings are drawn from the stated uncertainties), then a noisy point. The scatter of the runs' Cl and q
    # (JCGM 101:2008) must match the mean analytic u within 10 % (400 runs: ±3.5 % on a standard deviation).
    # Spanned, the oil's 1 % is one error for every channel: it shows in q and cancels in Cp and Cl.
    rig = _rig(airfoil_rig, MC_TAPS, 1.0, offset=0.8, span=0.6, range_pa=1000.0)
    base = Reducer(rig, options=ReduceOptions(autocorrelated_noise=False))
    rng = np.random.default_rng(2024)
    means = [_mc_run(rng, rig, base, state) for _ in range(400)]
    plain = np.array([m.plain.cl for m in means])
    shape = np.array([m.shape.cl for m in means])
    q = np.array([m.q_pa for m in means])
    u_plain = np.mean([math.sqrt(m.plain.u_cl**2 - m.plain.integration_u_cl**2) for m in means])  # measurement part
    u_shape = np.mean([math.sqrt(m.shape.u_cl**2 - m.shape.integration_u_cl**2) for m in means])  # measurement part
    u_q = np.mean([m.u_q_pa for m in means])
    assert np.std(plain, ddof=1) == pytest.approx(u_plain, rel=0.10)
    assert np.std(shape, ddof=1) == pytest.approx(u_shape, rel=0.10)
    assert np.std(q, ddof=1) == pytest.approx(u_q, rel=0.10)
