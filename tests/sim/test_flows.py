"""Simulated pressures against published formulas: venturi, cylinder, panel method, and the facts of the trade.

Every check runs the whole board (flow model → sensor → counts → wire → decoder) with noise, lag and drift off,
and converts the counts back with the rig's own transfer functions; tolerances are a few quantisation steps.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from CoolProp.HumidAirProp import HAPropsSI

from taprig.physics.integration import trapezoid_weights
from taprig.physics.panel import PanelModel
from taprig.physics.sections import cosine_stations, naca4
from taprig.protocol import SetActuator, Start
from taprig.sim.airfoil import AirfoilFlow, StallModel
from taprig.sim.plant import walled_model
from taprig.sim.flows import DEFAULT_DIFFUSER_EFFICIENCY


def _steady(h, fan: float = 1.0, angle_deg: float | None = None, rate: float = 200.0, seconds: float = 0.2):
    """Set the fan (and angle), stream every channel and return the decoded SI values of the run."""
    n = len(h.device.description.channels)
    h.send(SetActuator(1, 0, fan))
    if angle_deg is not None:
        h.send(SetActuator(2, 1, angle_deg))
    h.step(0.01)  # the actuators move just after their command
    h.send(Start(3, rate, (1 << n) - 1, 0))
    h.step(seconds)
    return h.values(h.blocks())


def _air_density(temperature_c: float, pressure: float, humidity: float) -> float:
    # CoolProp's humid-air model, an independent reference for the CIPM-2007 density the board uses
    # (docs/REFERENCES.md: they agree within 40 ppm).
    return 1.0 / HAPropsSI("Vha", "T", temperature_c + 273.15, "P", pressure, "R", humidity)


def test_venturi_stations_follow_bernoulli_upstream_and_recover_partly(host, rigs):
    speed = 8.0
    h = host("venturi-8", max_speed=speed)
    values = _steady(h)
    rig = rigs("venturi-8")
    layout = rig.tap_layout()
    # the inlet station reads against the room, every other station against the inlet's line: p_i − p_1 directly
    inlet = rig.channel(int(layout.channels[0])).name
    assert all(rig.channel(int(c)).relative_to == inlet for c in layout.channels[1:])
    p = np.array([0.0] + [values[rig.channel(int(c)).name].mean() for c in layout.channels[1:]])
    opts = h.device.options
    q = 0.5 * _air_density(opts.ambient_c, opts.ambient_pa, opts.humidity) * speed**2
    cp = p / q
    ideal = 1.0 - (layout.area[0] / layout.area) ** 2  # continuity + Bernoulli (docs/REFERENCES.md, venturi)
    throat = int(np.argmin(layout.area))
    # one count of the widest station sensor up to the throat [Pa] (14-bit bridge, 10-90 % window)
    lsb = max(rig.sensor_of(int(c)).slope for c in layout.channels[: throat + 1])
    np.testing.assert_allclose(cp[: throat + 1], ideal[: throat + 1], rtol=2e-4, atol=2 * lsb / q)
    assert int(np.argmin(p)) == throat  # the narrowest station has the lowest pressure (common practice)
    # downstream the diffuser recovers only part of the drop (recovery below 100 %, common practice)
    assert np.all(cp[throat + 1 :] < ideal[throat + 1 :] - 0.05)
    outlet = np.isclose(layout.area, layout.area[0]) & (np.arange(p.size) > throat)
    recovery = (cp[outlet] - cp[throat]) / (0.0 - cp[throat])
    np.testing.assert_allclose(recovery, DEFAULT_DIFFUSER_EFFICIENCY, atol=1e-3)


def test_cylinder_taps_follow_potential_flow(host, rigs):
    h = host("cylinder", max_speed=15.0)
    values = _steady(h)
    rig = rigs("cylinder")
    layout = rig.tap_layout()
    q = values[rig.reference.pitot].mean() * rig.reference.pitot_coefficient
    assert all(rig.channel(int(c)).relative_to == "static" for c in layout.channels)  # taps read p - p∞
    cp = np.array([values[rig.channel(int(c)).name].mean() / q for c in layout.channels])
    # circular cylinder in potential flow, Cp = 1 - 4 sin²θ (docs/REFERENCES.md, potential-flow theory)
    np.testing.assert_allclose(cp, 1.0 - 4.0 * np.sin(layout.theta) ** 2, atol=3e-3)


@pytest.mark.parametrize("walls", [False, True])
@pytest.mark.parametrize("angle_deg", [-3.0, 4.0, 8.0])
def test_airfoil_taps_are_the_panel_method_below_the_stall(host, rigs, angle_deg, walls):
    rig = rigs("naca0012-20tap")
    h = host("naca0012-20tap", viscous=False, max_speed=20.0, walls=walls)
    values = _steady(h, fan=0.8, angle_deg=angle_deg)
    layout = rig.tap_layout()
    static = values[rig.reference.static].mean()
    q = values[rig.reference.total].mean() - static
    cp = np.array([(values[rig.channel(int(c)).name].mean() - static) / q for c in layout.channels])
    # the inviscid distribution of the aero engineer's panel model (itself checked against Joukowski's exact
    # solution in tests/physics), in free air or between the closed test section's walls (the images solution,
    # checked in tests/physics/test_images.py); the simulator must hand it through unchanged below the stall
    shape = rig.section.shape
    model = walled_model(shape, rig.geometry.chord / rig.geometry.tunnel_height, rig.geometry.pivot_x_c) \
        if walls else PanelModel(shape)
    expected = model.cp_at_arc(math.radians(angle_deg), shape.arc_length_at(layout.x_c, layout.upper))
    lsb = 5.0 / 4095 / (5.0 * 0.00016)  # 12-bit ratiometric: one count [Pa]
    np.testing.assert_allclose(cp, expected, atol=3 * lsb / q)


@pytest.mark.parametrize(("designation", "angle_deg"), [("2412", 6.0), ("0012", 8.0)])
def test_lower_surface_above_static_and_upper_surface_carries_most_lift(designation, angle_deg):
    # at a positive angle below the stall the lower surface sees pressures above the free-stream static and the
    # upper surface's suction carries most of the lift (common practice: every pressure plot of a lifting
    # section). A thick symmetric section needs a few degrees before its whole lower surface is above static
    # (its thickness alone gives suction on both sides), hence 8° for the 0012.
    x = cosine_stations(60)[1:-1]
    taps_x = np.concatenate([x[::-1], x])
    upper = np.concatenate([np.ones(x.size, bool), np.zeros(x.size, bool)])
    shape = naca4(designation)
    flow = AirfoilFlow(shape, taps_x, upper)
    cp = flow.pressures(np.array([math.radians(angle_deg)])).cp[0]
    assert np.all(cp[~upper][x > 0.02] > 0.0)
    y = np.where(upper, shape.surface_y(taps_x, True), shape.surface_y(taps_x, False))
    w = trapezoid_weights(taps_x, y).normal
    from_upper, from_lower = np.sum(w[upper] * cp[upper]), np.sum(w[~upper] * cp[~upper])
    assert from_upper > 0.0 and from_lower > 0.0
    assert from_upper > 2.0 * from_lower


@pytest.mark.parametrize("designation", ["0012", "2412"])
def test_lift_grows_to_the_stall_then_falls(designation):
    stall = StallModel()
    flow = AirfoilFlow(naca4(designation), [0.3], [True], stall)
    critical = flow.zero_lift_angle + stall.critical_angle
    below = np.linspace(flow.zero_lift_angle, critical, 25)
    above = critical + np.radians([1.0, 2.0, 4.0, 6.0])
    cl_below, cl_above = flow.pressures(below).cl, flow.pressures(above).cl
    assert np.all(np.diff(cl_below) > 0.0)  # lift grows with angle up to the stall (common practice)
    assert np.all(cl_above < cl_below[-1] * 0.95)  # and falls beyond it
    assert np.all(np.diff(cl_above) < 0.0)


def test_stalled_upper_surface_flattens_behind_a_separation_point_that_moves_forward():
    x = np.linspace(0.05, 0.95, 19)
    flow = AirfoilFlow(naca4("0012"), x, np.ones(x.size, bool))
    critical = flow.stall.critical_angle
    res = flow.pressures(critical + np.radians([2.0, 5.0]))
    assert res.separation[1] < res.separation[0] < 1.0  # the separation point moves forward with angle
    for cp, sep, rms in zip(res.cp, res.separation, res.cp_rms):
        behind = x > sep
        assert behind.sum() >= 3
        np.testing.assert_allclose(cp[behind], cp[behind][0], atol=1e-12)  # flat behind the separation
        assert np.all(rms[behind] > 10 * rms[~behind].max(initial=flow.stall.attached_rms))
    assert res.cp_rms[1].max() > res.cp_rms[0].max()  # fluctuations grow with the separation
    attached = flow.pressures(np.array([critical - math.radians(1.0)]))
    assert attached.separation[0] == 1.0 and np.ptp(attached.cp_rms) == 0.0


def test_balance_reads_the_lift_of_the_tap_pressures(host, rigs):
    rig = rigs("cambered-balance")
    h = host("cambered-balance", max_speed=20.0)
    values = _steady(h, fan=0.9, angle_deg=7.0)
    g = rig.geometry
    q = values[rig.reference.pitot].mean()
    flow = h.device.plant.airfoil
    cl = float(flow.pressures(np.array([math.radians(7.0)])).cl[0])
    # lift = Cl q c b (definition of the lift coefficient, common practice)
    np.testing.assert_allclose(values[rig.balance.lift].mean(), cl * q * g.chord * g.span, rtol=2e-3)


def test_water_channel_uses_the_density_of_water(host, rigs):
    from CoolProp.CoolProp import PropsSI

    rig = rigs("water-hydrofoil")
    h = host("water-hydrofoil", max_speed=0.5)
    values = _steady(h, fan=0.8, angle_deg=0.0)
    q = values[rig.reference.pitot].mean()  # one differential part across the pitot's total and static ports
    rho = PropsSI("D", "T", rig.fluid.temperature, "P", 101325.0, "Water")  # IAPWS-95 via CoolProp
    np.testing.assert_allclose(q, 0.5 * rho * 0.4**2, rtol=0.01)
