"""Flow models of the simulated rig (pure): the tunnel stream and the pressure coefficients of simple bodies.

Every model here is a function of values to values. The tunnel gives, per scan, the free-stream speed, static
and total pressure from the fan's state and the ambient; the bodies give a pressure coefficient per tap, so the
pressure at a tap is ``p∞ + Cp · q``. The airfoil, which needs the panel method and a stall model, lives in
:mod:`taprig.sim.airfoil`.

The tunnel draws from the room. By default it is an open-circuit suction tunnel: its total pressure is the
ambient pressure less the inlet loss, and its static pressure lies ``q`` below that; a blower tunnel (static above
the room) and an open jet (static = room) are the other cases a rig file can state. Air expands isentropically
from rest in the room; a water channel is the same stream, incompressible, with the fluid's density.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from taprig.physics.flow import dynamic_pressure
from taprig.physics.venturi import ideal_station_cp

#: Total-pressure loss of a bell-mouth inlet and screens, as a fraction of q (from memory: a well-rounded
#: inlet with one or two screens loses of the order of 0.05–0.2 q).
DEFAULT_INLET_LOSS = 0.1
#: Fraction of the ideal pressure recovery that a conical diffuser reaches downstream of a venturi throat
#: (from memory: ISO 5167-4 classical venturis lose 5–20 % of Δp permanently).
DEFAULT_DIFFUSER_EFFICIENCY = 0.85


#: Static pressure of a blower tunnel's closed test section above the room, × q: the diffuser downstream recovers
#: part of q before the air leaves into the room (from memory: of the order of 0.2–0.5 q).
BLOWER_STATIC_RISE = 0.3
#: The kinds of tunnel the simulator builds: where its test-section static lies against the room.
TUNNEL_KINDS = ("suction", "blower", "open-jet")


@dataclass(frozen=True)
class Stream:
    """The free stream of a block of scans (arrays over scans, SI).

    ``speed`` [m/s], ``density`` [kg/m³] of the room air, ``q`` the impact pressure p0 − p∞ a pitot-static probe
    reads [Pa] (the reference of every tap's Cp), ``p_static`` and ``p_total`` absolute pressures in the test
    section [Pa], ``p_ambient`` the room's absolute pressure [Pa].
    """

    speed: np.ndarray
    density: float
    q: np.ndarray
    p_static: np.ndarray
    p_total: np.ndarray
    p_ambient: float


def tunnel_stream(speed: ArrayLike, density: float, p_ambient: float, inlet_loss: float = DEFAULT_INLET_LOSS,
                  kind: str = "suction", compressible: bool = True, gamma: float = 1.4) -> Stream:
    r"""Free stream of a tunnel drawing its air from the room, at rest at the room's pressure and temperature.

    .. math::
        q_d = \tfrac12 \rho_a V^2, \qquad
        \frac{T}{T_0} = 1 - \frac{\gamma - 1}{2\gamma}\,\frac{V^2}{p_a/\rho_a}, \qquad
        p_\infty = p_0 \left(\frac{T}{T_0}\right)^{\gamma/(\gamma - 1)}

    with, by ``kind``: ``suction`` (open circuit, the fan downstream) p0 = p_a − K q_d; ``blower`` (the fan
    upstream, a diffuser to the room after the test section) p∞ = p_a + 0.3 q_d; ``open-jet`` (discharging into
    the room) p∞ = p_a. A liquid (``compressible=False``): p0 − p∞ = q_d.

    Parameters
    ----------
    speed : array_like
        Test-section speed V per scan [m/s].
    density : float
        Density of the fluid at rest in the room ρ_a [kg/m³].
    p_ambient : float
        Room (barometric) pressure p_a [Pa].
    inlet_loss : float
        Total-pressure loss coefficient of a suction tunnel's inlet and screens K [-].
    kind : str
        ``suction``, ``blower`` or ``open-jet``.
    compressible : bool
        Isentropic expansion of a gas (True) or a liquid (False).
    gamma : float
        Ratio of specific heats γ [-].

    Returns
    -------
    Stream
        Speed, density, impact pressure q, static and total pressure per scan.

    References
    ----------
    Energy equation and isentropic relation (Anderson, *Fundamentals of Aerodynamics*, 5th ed., eqs. 8.30, 7.32);
    Bernoulli's equation with a loss coefficient (common practice).

    Examples
    --------
    >>> s = tunnel_stream([10.0], 1.2, 101325.0, inlet_loss=0.0, compressible=False)
    >>> float(s.q[0]), float(s.p_static[0])
    (60.0, 101265.0)
    """
    if kind not in TUNNEL_KINDS:
        raise ValueError(f"tunnel kind {kind!r}: expected one of {', '.join(TUNNEL_KINDS)}")
    v = np.asarray(speed, dtype=float)
    q_d = dynamic_pressure(density, v)
    if compressible:
        expansion = (1.0 - (gamma - 1.0) / (2.0 * gamma) * v**2 * density / p_ambient) ** (gamma / (gamma - 1.0))
    else:
        expansion = None
    if kind == "suction":
        p_total = p_ambient - inlet_loss * q_d
        p_static = p_total * expansion if compressible else p_total - q_d
    else:
        p_static = p_ambient + (BLOWER_STATIC_RISE * q_d if kind == "blower" else 0.0 * q_d)
        p_total = p_static / expansion if compressible else p_static + q_d
    return Stream(v, float(density), p_total - p_static, p_static, p_total, float(p_ambient))


def fan_speed(fan_value: ArrayLike, max_speed: float, unit: str) -> np.ndarray:
    r"""Steady speed the fan drives the stream to.

    .. math:: V = V_{max}\, d \quad\text{(duty } d\text{, unit "1" or "%")}, \qquad V = u \quad\text{(unit "m/s")}

    A fan's flow grows in proportion to its speed (fan affinity law), and a small DC fan's speed roughly in
    proportion to its PWM duty.

    Parameters
    ----------
    fan_value : array_like
        Fan actuator value, as the device sees it [duty 0–1, % or m/s].
    max_speed : float
        Test-section speed at full duty V_max [m/s].
    unit : str
        The actuator's unit from the rig file.

    Returns
    -------
    ndarray
        Target speed [m/s].

    References
    ----------
    Fan affinity laws (common practice); the linear duty–speed law is an approximation (from memory).
    """
    value = np.asarray(fan_value, dtype=float)
    if unit.strip() in ("m/s", "m s-1"):
        return np.maximum(value, 0.0)
    scale = 0.01 if unit.strip() == "%" else 1.0
    return max_speed * np.clip(value * scale, 0.0, 1.0)


def venturi_station_cp(areas: ArrayLike, reference_area: float, efficiency: float,
                       discharge_coefficient: float = 1.0) -> np.ndarray:
    r"""Station Cp along a venturi: ideal upstream of the throat, partial recovery downstream.

    .. math::
        C_p^{ideal} = 1 - (A_{ref}/A)^2, \qquad
        C_p = C_p^{th} + \eta_d\,(C_p^{ideal} - C_p^{th}) \ \text{downstream of the throat}

    With a discharge coefficient C < 1 the convergent and the throat behave as if their areas were C times
    smaller (the boundary layer's displacement): upstream stations and the throat read Cp^ideal / C², so the
    ISO 5167-1 flow of the throat differential is C times the ideal one (ISO 5167-1:2003 §3.3.5, the definition
    of C; the uniform scaling along the convergent is a simplification of ours).

    Parameters
    ----------
    areas : array_like
        Station areas A in flow order [m²].
    reference_area : float
        Area of the reference (inlet) station A_ref [m²].
    efficiency : float
        Diffuser efficiency η_d: the fraction of the ideal recovery reached [-], ≤ 1.
    discharge_coefficient : float
        Discharge coefficient C of the convergent and throat [-], 0 < C ≤ 1 (1: ideal).

    Returns
    -------
    ndarray
        Cp per station, referred to the reference station's static and dynamic pressure [-].

    References
    ----------
    Continuity and Bernoulli for the ideal part (common practice); a diffuser efficiency to describe the
    permanent loss (common practice, e.g. ISO 5167-4 §5.8 on the pressure loss).

    Examples
    --------
    >>> venturi_station_cp([4.0, 1.0, 4.0], 4.0, 0.8).round(6).tolist()
    [0.0, -15.0, -3.0]
    """
    a = np.asarray(areas, dtype=float)
    ideal = ideal_station_cp(a, reference_area)
    throat = int(np.argmin(a))
    cp = ideal / discharge_coefficient**2
    cp[throat + 1 :] = cp[throat] + efficiency * (ideal[throat + 1 :] - ideal[throat])
    return cp


def bump_cp(bump_height: ArrayLike, channel_height: float) -> np.ndarray:
    r"""Wall Cp over a curved plate (bump) in a channel, quasi-one-dimensional continuity and Bernoulli.

    .. math:: C_p = 1 - \left(\frac{H}{H - y_b}\right)^2

    Parameters
    ----------
    bump_height : array_like
        Local height of the bump above the channel floor y_b at each tap [m].
    channel_height : float
        Channel height H [m], > every y_b.

    Returns
    -------
    ndarray
        Cp at the taps [-], referred to the stream upstream of the bump.

    References
    ----------
    One-dimensional continuity and Bernoulli (common practice); streamline curvature is neglected, which holds
    for a bump long against its height.

    Examples
    --------
    >>> float(bump_cp(0.5, 1.0))
    -3.0
    """
    y = np.asarray(bump_height, dtype=float)
    return 1.0 - (channel_height / (channel_height - y)) ** 2


def first_order_response(start: float, target: float, t: ArrayLike, tau: float) -> np.ndarray:
    r"""Response of a first-order lag to a step from ``start`` to ``target`` at t = 0.

    .. math:: x(t) = x_\infty + (x_0 - x_\infty)\,e^{-t/\tau}

    Parameters
    ----------
    start : float
        Value at t = 0 x_0 [any unit].
    target : float
        Final value x_∞ [same unit].
    t : array_like
        Times since the step [s], ≥ 0.
    tau : float
        Time constant τ [s], > 0.

    Returns
    -------
    ndarray
        x(t) [same unit].

    References
    ----------
    Solution of dx/dt = (x_∞ − x)/τ (common practice).
    """
    return target + (start - target) * np.exp(-np.asarray(t, dtype=float) / tau)


def rate_limited(start: float, target: float, t: ArrayLike, rate: float) -> np.ndarray:
    r"""Position of an actuator slewing from ``start`` toward ``target`` at a bounded rate.

    .. math:: x(t) = x_0 + \operatorname{clip}(x_\infty - x_0,\; -r t,\; r t)

    Parameters
    ----------
    start : float
        Position at t = 0 [unit].
    target : float
        Commanded position [unit].
    t : array_like
        Times since the command [s], ≥ 0.
    rate : float
        Largest slew rate r [unit/s]; infinite for an ideal actuator.

    Returns
    -------
    ndarray
        x(t) [unit].

    References
    ----------
    Slew-rate limit of a servo (common practice).
    """
    t = np.asarray(t, dtype=float)
    if np.isinf(rate):
        return np.where(t > 0.0, target, start)
    reach = rate * t
    return start + np.clip(target - start, -reach, reach)
