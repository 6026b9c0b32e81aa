"""The physical plant of a simulated rig (pure): from the flow's state to the true value every channel sees.

:func:`build_plant` reads a :class:`taprig.rig.Rig` once and works out what each device channel is connected to
(a tap, the pitot-static probe, the room, a balance) and what its reading is relative to (vacuum, the room, the
free-stream static or another port). :func:`channel_values` then turns a block of per-scan flow states (stream
speed, angle of attack, fluctuation draws) into a scans × channels array of true SI values (Pa or N), before any
sensor defect. The port pressures are gathered in one matrix so every reading is one fancy-indexed subtraction.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from taprig.physics.air import AirState
from taprig.physics.constants import ZERO_CELSIUS
from taprig.physics.flow import cylinder_cp
from taprig.physics.images import WalledPanelModel
from taprig.physics.sections import SectionShape
from taprig.physics.water import water_density
from taprig.rig.model import Measures, Medium, Rig, RigKind
from taprig.rig.sensors import Quantity
from taprig.sim.airfoil import AirfoilFlow, StallModel
from taprig.sim.flows import (
    DEFAULT_DIFFUSER_EFFICIENCY,
    bump_cp,
    tunnel_stream,
    venturi_station_cp,
)
from taprig.sim.options import SimOptions

# Columns of the port-pressure matrix before the taps.
_ZERO, _AMBIENT, _STATIC, _TOTAL, _PITOT, _LIFT, _DRAG = range(7)
_FIRST_TAP = 7
#: Skin-friction drag coefficient of a section added to its pressure drag on a drag balance (from memory: about
#: 2 × 0.005 for both surfaces at a bench Reynolds number of 10⁵).
FRICTION_DRAG = 0.01
#: Pressure fluctuation of the free stream at a tap of a body without a stall model, rms Cp (common practice:
#: a bench tunnel's turbulence of the order of 0.5 %).
STREAM_RMS = 0.005


@dataclass(frozen=True, eq=False)
class Plant:
    """What every device channel of a rig sees, precomputed (immutable).

    ``port`` and ``relative`` give, per device channel position, the columns of the port matrix whose
    difference is the channel's true value; ``tap_cp`` is the fixed Cp of a body's taps (venturi, cylinder,
    bump), ``airfoil`` the pressure model of a section (None otherwise).
    """

    rig: Rig
    n_channels: int
    density: float
    p_ambient: float
    port: np.ndarray
    relative: np.ndarray
    tap_cp: np.ndarray
    airfoil: AirfoilFlow | None
    pitot_coefficient: float
    force_area: float
    inlet_loss: float
    tunnel: str = "suction"
    compressible: bool = True

    @property
    def n_taps(self) -> int:
        """Number of taps."""
        return self.tap_cp.size


def fluid_density(rig: Rig, options: SimOptions) -> float:
    """Density of the rig's fluid [kg/m³]: moist air (CIPM-2007) at the room's state, or water at its temperature."""
    if rig.fluid.medium is Medium.WATER:
        return float(water_density(rig.fluid.temperature))
    air = AirState(options.ambient_c + ZERO_CELSIUS, ambient_pressure(rig, options), options.humidity)
    return air.density


def ambient_pressure(rig: Rig, options: SimOptions) -> float:
    """Barometric pressure of the room [Pa]: the rig file's, else the option's."""
    return rig.fluid.ambient_pressure or options.ambient_pa


def build_plant(rig: Rig, options: SimOptions) -> Plant:
    """Work out every channel's ports and the taps' flow model for ``rig`` (see :class:`Plant`)."""
    layout = rig.tap_layout()
    n_channels = max(c.index for c in rig.channels) + 1
    tap_port = {int(ch): _FIRST_TAP + i for i, ch in enumerate(layout.channels)}
    ref, balance = rig.reference, rig.balance
    named = {ref.static: _STATIC, ref.total: _TOTAL, ref.pitot: _PITOT, ref.atmosphere: _AMBIENT}
    if balance is not None:
        named.update({balance.lift: _LIFT, balance.drag: _DRAG})
    named.pop(None, None)
    port = np.zeros(n_channels, dtype=int)
    for ch in rig.channels:
        is_pressure = rig.sensors[ch.sensor].quantity is Quantity.PRESSURE
        port[ch.index] = tap_port.get(ch.index, named.get(ch.name, _AMBIENT if is_pressure else _ZERO))
    relative = np.zeros(n_channels, dtype=int)
    for ch in rig.channels:
        relative[ch.index] = _relative_port(ch, port, rig)
    tap_cp, airfoil = _body(rig, layout, options)
    geometry = rig.geometry
    span = geometry.span or geometry.tunnel_width or 1.0
    length = geometry.chord or geometry.diameter or 1.0
    return Plant(
        rig, n_channels, fluid_density(rig, options), ambient_pressure(rig, options), port, relative, tap_cp,
        airfoil, ref.pitot_coefficient, span * length, options.inlet_loss, options.tunnel,
        rig.fluid.medium is Medium.AIR,
    )


def _relative_port(channel, port: np.ndarray, rig: Rig) -> int:
    """Column a channel's reading is referred to (vacuum, room, static, total or another channel's port)."""
    if channel.measures is None or channel.measures is Measures.ABSOLUTE:
        return _ZERO
    if channel.measures is Measures.GAUGE:
        return _AMBIENT
    target = channel.relative_to or "static"
    if target == "static":
        return _STATIC
    if target == "total":
        return _TOTAL
    return int(port[rig.index_of(target)])


#: Largest chord/height the simulated walls take; a model larger than that is simulated in free air.
MAX_WALLED_CHORD_RATIO = 0.8
#: Angle-of-attack pivot when the rig file gives none [x/c] (common practice: the quarter chord).
DEFAULT_PIVOT_X_C = 0.25


def walled_chord_ratio(rig: Rig, options: SimOptions) -> float | None:
    """c/h of an airfoil the simulator puts between a floor and a ceiling, else None (free air).

    Walls are simulated for an airfoil in air when the rig file states its chord and the tunnel height, the
    tunnel is closed (not ``open-jet``), the ``walls`` option is on and c/h ≤ ``MAX_WALLED_CHORD_RATIO``. A water
    channel's height is the depth under a free surface, which is not a wall: it stays free air.
    """
    g = rig.geometry
    if not options.walls or options.tunnel == "open-jet" or rig.kind is not RigKind.AIRFOIL \
            or rig.fluid.medium is not Medium.AIR or None in (g.chord, g.tunnel_height):
        return None
    ratio = g.chord / g.tunnel_height
    return ratio if ratio <= MAX_WALLED_CHORD_RATIO else None


@lru_cache(maxsize=8)
def _walled_model(name: str, x: bytes, y: bytes, ratio: float, pivot: float) -> WalledPanelModel:
    """The walled panel solution of one shape and tunnel, solved once per process (a few hundred ms)."""
    shape = SectionShape(name, np.frombuffer(x), np.frombuffer(y))
    return WalledPanelModel(shape, ratio, pivot)


def walled_model(shape: SectionShape, ratio: float, pivot_x_c: float | None) -> WalledPanelModel:
    """:class:`WalledPanelModel` of ``shape`` at c/h ``ratio`` turning about ``pivot_x_c`` (cached)."""
    pivot = DEFAULT_PIVOT_X_C if pivot_x_c is None else float(pivot_x_c)
    return _walled_model(shape.name, shape.x.tobytes(), shape.y.tobytes(), float(ratio), pivot)


def _body(rig: Rig, layout, options: SimOptions) -> tuple[np.ndarray, AirfoilFlow | None]:
    """The taps' Cp model: a fixed Cp per tap, or the airfoil's pressure model (between walls where stated)."""
    n = len(layout.names)
    if rig.kind is RigKind.AIRFOIL and rig.section is not None and n:
        stall = StallModel(
            critical_angle=math.radians(options.stall_deg), slope_factor=0.9 if options.viscous else 1.0
        )
        ratio = walled_chord_ratio(rig, options)
        shape = rig.section.shape
        walls = None if ratio is None else walled_model(shape, ratio, rig.geometry.pivot_x_c)
        return np.zeros(n), AirfoilFlow(shape, layout.x_c, layout.upper, stall, walls=walls,
                                       friction_drag=FRICTION_DRAG)
    if rig.kind is RigKind.VENTURI and n:
        inlet = layout.names.index(rig.reference.inlet) if rig.reference.inlet in layout.names else 0
        return venturi_station_cp(layout.area, float(layout.area[inlet]), DEFAULT_DIFFUSER_EFFICIENCY,
                                  options.venturi_c), None
    if rig.kind is RigKind.CYLINDER and n:
        return cylinder_cp(layout.theta), None
    if rig.kind is RigKind.BUMP and n:
        chord = rig.geometry.chord or 1.0
        height = rig.geometry.tunnel_height or 10.0 * chord
        bump = np.where(layout.upper, np.maximum(layout.y_c, 0.0), 0.0) * chord
        return bump_cp(bump, height), None
    return np.zeros(n), None


def channel_values(plant: Plant, speed: np.ndarray, alpha: np.ndarray, draws: np.ndarray) -> np.ndarray:
    r"""True value of every channel for a block of scans.

    .. math:: p_{tap} = p_\infty + (C_p + \sigma_{C_p}\,\xi)\,q, \qquad
              L = C_l\, q\, c\, b, \qquad \text{reading} = p_{port} - p_{relative}

    Parameters
    ----------
    plant : Plant
        The rig's precomputed plant.
    speed : ndarray
        Stream speed per scan (test section, or the venturi's inlet station) [m/s].
    alpha : ndarray
        Angle of attack per scan [rad] (ignored by bodies without one).
    draws : ndarray
        Standard normal draws for the flow fluctuations, scans × taps, already scaled by the noise option [-].

    Returns
    -------
    ndarray
        Channel values, scans × channels [Pa for pressures, N for forces].

    References
    ----------
    Definition of the pressure coefficient and of the lift coefficient (common practice).
    """
    stream = tunnel_stream(speed, plant.density, plant.p_ambient, plant.inlet_loss, plant.tunnel, plant.compressible)
    n_scans = speed.size
    if plant.airfoil is not None:
        section = plant.airfoil.pressures(alpha)
        cp, rms, cl, cd = section.cp, section.cp_rms, section.cl, section.cd + FRICTION_DRAG
    else:
        cp = np.broadcast_to(plant.tap_cp, (n_scans, plant.n_taps))
        rms, cl, cd = STREAM_RMS, np.zeros(n_scans), np.zeros(n_scans)
    q = stream.q
    ports = np.empty((n_scans, _FIRST_TAP + plant.n_taps))
    ports[:, _ZERO] = 0.0
    ports[:, _AMBIENT] = plant.p_ambient
    ports[:, _STATIC] = stream.p_static
    ports[:, _TOTAL] = stream.p_total
    ports[:, _PITOT] = stream.p_static + q / plant.pitot_coefficient
    ports[:, _LIFT] = cl * q * plant.force_area
    ports[:, _DRAG] = cd * q * plant.force_area
    ports[:, _FIRST_TAP:] = stream.p_static[:, None] + (cp + rms * draws) * q[:, None]
    return ports[:, plant.port] - ports[:, plant.relative]
