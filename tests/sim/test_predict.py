"""taprig check's prediction of u(q), u(Cp), u(Cl) at the design speed, against a simulated run of the same rig."""

from __future__ import annotations

import math

import numpy as np
import pytest

from taprig.protocol import SetActuator, Start
from taprig.reduce import Reducer, ambient_for
from taprig.rig import parse_rig
from taprig.rig.model import ActuatorKind
from taprig.sim.options import SimOptions
from taprig.sim.plant import build_plant, channel_values
from taprig.sim.predict import WARN_CL, WARN_CP, WARN_Q_REL, predict

from .conftest import RIGS


def test_prediction_is_what_a_noiseless_run_reports(host, rigs):
    # the same budget reached the long way: the simulated board at the design speed, its frames decoded and
    # reduced (noise, lag and drift off, so only the sensors' datasheet bands remain)
    rig = rigs("cylinder")
    p = predict(rig)
    h = host("cylinder", max_speed=p.speed)
    n = len(h.device.description.channels)
    h.send(SetActuator(1, 0, 1.0))
    h.step(0.01)
    h.send(Start(2, 200.0, (1 << n) - 1, 0))
    h.step(0.2)
    opts = h.device.options
    ambient = ambient_for(rig, pressure=opts.ambient_pa, temperature=opts.ambient_c + 273.15,
                          relative_humidity=opts.humidity)
    mean = Reducer(rig, ambient=ambient).reduce_mean(h.blocks(), p.alpha_rad)
    assert mean.q_pa == pytest.approx(p.q, rel=0.01)
    assert mean.u_q_pa == pytest.approx(p.u_q, rel=0.02)
    assert float(np.nanmax(mean.u_cp)) == pytest.approx(p.u_cp, rel=0.05)


def _too_wide_water_rig():
    """The water example with its low-range differential parts swapped for ±5 kPa ones (the sensors it once had):
    the q of 80 Pa at its design speed is then a few counts of the band."""
    text = (RIGS / "water-hydrofoil.toml").read_text(encoding="utf-8")
    for part in ("250.0", "1000.0"):
        assert f"pmin_pa = -{part}\npmax_pa = {part}" in text
        text = text.replace(f"pmin_pa = -{part}\npmax_pa = {part}", "pmin_pa = -5000.0\npmax_pa = 5000.0")
    return parse_rig(text, "water-wide.toml")


def test_a_rig_whose_sensors_cannot_resolve_its_q_is_warned(rigs):
    water = predict(_too_wide_water_rig())  # ±5 kPa parts for an 80 Pa q
    assert water.u_q_zeroed > WARN_Q_REL * water.q
    assert any("q sensor is too wide" in w for w in water.warnings)
    assert any("tap sensors are too wide" in w for w in water.warnings)
    cylinder = predict(rigs("cylinder"))  # ±500 Pa differential sensors for a 135 Pa q
    assert not cylinder.warnings
    assert cylinder.u_q_zeroed <= cylinder.u_q  # a wind-off zero removes the offset part


EXAMPLES = sorted(p.stem for p in RIGS.glob("*.toml"))


@pytest.mark.parametrize("stem", EXAMPLES)
def test_every_example_rig_resolves_what_it_is_for_at_its_design_speed(rigs, stem):
    # issue 10, item 7: every example's sensors are sized so the check has nothing to warn about
    p = predict(rigs(stem))
    assert p.warnings == ()
    assert p.saturated == ()
    assert p.u_q_zeroed <= WARN_Q_REL * p.q
    assert p.u_cp_zeroed <= WARN_CP or p.u_cp_sensors <= WARN_CP
    assert not p.u_cl_zeroed > WARN_CL  # NaN where the rig has no Cl


#: Examples left out of the top-speed range check, and why (docs/rig-file.md, the examples).
RANGE_EXCEPTIONS = {
    # the simulator's cylinder is potential flow (Cp −3 at 90°, about −1.1 kPa at 25 m/s); a real subcritical
    # cylinder peaks near Cp −1.2, which its ±500 Pa parts hold
    "cylinder": "potential-flow simulator",
    # the 64-channel soak rig fills a full description; its sizing is not an example of anything
    "bench-64": "soak rig",
}


@pytest.mark.parametrize("stem", [s for s in EXAMPLES if s not in RANGE_EXCEPTIONS])
def test_every_example_stays_inside_its_sensor_ranges_at_top_speed_over_its_angles(rigs, stem):
    # the true value each channel sees (the simulated plant, no noise) at the rig's stated top speed, over the
    # angle actuator's whole range in 0.5° steps, with the flow's fluctuation at ±3 standard deviations
    rig = rigs(stem)
    plant = build_plant(rig, SimOptions(noise=0.0, thermal=False, lag=False))
    angle = next((a for a in rig.actuators if a.kind is ActuatorKind.ANGLE), None)
    alphas = np.radians(np.arange(math.degrees(angle.min), math.degrees(angle.max) + 0.25, 0.5)) if angle \
        else np.zeros(1)
    speed = np.full(alphas.size, rig.operating.max_speed)
    for sigma in (-3.0, 0.0, 3.0):
        values = channel_values(plant, speed, alphas, np.full((alphas.size, plant.n_taps), sigma))
        for c in rig.channels:
            lo, hi = rig.sensor_of(c.index).range
            v = values[:, c.index]
            assert lo <= v.min() and v.max() <= hi, f"{stem}: {c.name} reads {v.min():.0f} .. {v.max():.0f}"


def _band(fs: float, total: float, offset: float, span: float, reading: float, lsb: float) -> float:
    """Standard uncertainty of one reading after a wind-off zero, from a datasheet band written out by hand.

    The band's parts are rectangular bounds (u = bound/√3, JCGM 100:2008 §4.3.7) adding in quadrature; a zero
    removes the offset part; the span part is a gain error (s % of FS at full span, so s/100 of the reading);
    one count's quantisation is LSB/√12 (GUM F.2.2.1).
    """
    constant = fs / 100.0 * math.sqrt(total**2 - offset**2 - span**2) / math.sqrt(3.0)
    gain = span / 100.0 / math.sqrt(3.0) * abs(reading)
    return math.sqrt(constant**2 + gain**2 + lsb**2 / 12.0)


BRIDGE_COUNTS = 14745 - 1638  # a 14-bit bridge's 10-90 % window (from memory: 0x0666-0x3999)


def test_predicted_u_of_q_agrees_with_a_hand_budget_of_the_q_sensors(rigs):
    # Independent computation: the q sensors' datasheet bands from the rig files, combined by the law of
    # propagation of uncertainty for uncorrelated inputs (JCGM 100:2008 §5.1.2, eq. 10).
    # naca0012-20tap: q = p_total − p_static, two ±500 Pa gauge bridges (band 0.25 % FS: offset 0.15, span 0.15).
    # In the suction tunnel the total port reads −K q and the static port −(1 + K) q against the room (K = 0.1,
    # the simulated tunnel's inlet loss).
    naca = rigs("naca0012-20tap")
    probe = naca.sensors["probe"]
    assert (probe.range, probe.accuracy_pct_fs, probe.offset_pct_fs, probe.span_pct_fs) == ((-500.0, 500.0), 0.25, 0.15, 0.15)
    p = predict(naca)
    lsb = 1000.0 / BRIDGE_COUNTS
    u_total = _band(1000.0, 0.25, 0.15, 0.15, -0.1 * p.q, lsb)
    u_static = _band(1000.0, 0.25, 0.15, 0.15, -1.1 * p.q, lsb)
    assert p.u_q_zeroed == pytest.approx(math.hypot(u_total, u_static), rel=0.01)
    # water-hydrofoil: q from one ±250 Pa differential bridge across the pitot's ports (band 0.5 %: offset 0.4,
    # span 0.25); each tap Cp_i = r_i / q from its own ±1 kPa part referred to the static line (same band), so
    # u(Cp_i)² = (u(r_i)/q)² + (Cp_i u(q)/q)² (GUM §5.1.2, the sensitivities 1/q and −r_i/q²).
    water = rigs("water-hydrofoil")
    assert (water.sensors["q250"].range, water.sensors["q250"].accuracy_pct_fs) == ((-250.0, 250.0), 0.5)
    assert (water.sensors["wet1k"].range, water.sensors["wet1k"].offset_pct_fs) == ((-1000.0, 1000.0), 0.4)
    p = predict(water)
    u_q = _band(500.0, 0.5, 0.4, 0.25, p.q, 500.0 / BRIDGE_COUNTS)
    assert p.u_q_zeroed == pytest.approx(u_q, rel=0.01)
    plant = build_plant(water, SimOptions(noise=0.0, thermal=False, lag=False))
    values = channel_values(plant, np.array([p.speed]), np.array([p.alpha_rad]), np.zeros((1, plant.n_taps)))[0]
    taps = [water.index_of(t.channel) for t in water.taps]
    u_cp = [math.hypot(_band(2000.0, 0.5, 0.4, 0.25, values[i], 2000.0 / BRIDGE_COUNTS) / p.q,
                       values[i] / p.q * u_q / p.q) for i in taps]
    assert p.u_cp_zeroed == pytest.approx(max(u_cp), rel=0.01)


def test_the_prediction_names_what_each_kind_computes(rigs):
    # an airfoil: α and Cl; a cylinder: Cd from the reduction's own integrator, no α, no Cl; a venturi: the
    # stations' Cp and the ISO 5167-4 mass flow, no α; a wall bump: Cp only
    airfoil, cylinder, venturi, bump = (predict(rigs(s)) for s in ("naca0012-20tap", "cylinder", "venturi-8",
                                                                    "bump-channel"))
    assert airfoil.has_angle and math.isfinite(airfoil.u_cl_zeroed) and math.isnan(airfoil.u_cd_zeroed)
    assert not cylinder.has_angle and math.isnan(cylinder.u_cl_zeroed) and 0 < cylinder.u_cd_zeroed < 0.05
    assert not venturi.has_angle and math.isnan(venturi.u_cl_zeroed) and math.isnan(venturi.u_cd_zeroed)
    assert 0 < venturi.u_mass_flow_zeroed < 0.02 * venturi.mass_flow
    assert not bump.has_angle and math.isnan(bump.u_cl_zeroed) and math.isnan(bump.u_cd_zeroed)
    # the venturi's station Cp is referred to q1 from the ISO flow equation, so C's ±0.5 % sits in the throat's
    # Cp (−15 × 1 %); the sensors' own share, with C and the diameters held exact, is what the warning judges
    assert venturi.u_cp_zeroed > WARN_CP > venturi.u_cp_sensors
    assert any(h.startswith("C ± 0.5%") for h in venturi.held_exact)


def test_a_rig_without_a_design_speed_says_so(rigs):
    from taprig.reduce import ReduceError

    rig = rigs("cylinder").model_copy(update={"operating": rigs("cylinder").operating.model_copy(
        update={"design_speed": None})})
    with pytest.raises(ReduceError, match="no design speed"):
        predict(rig)
