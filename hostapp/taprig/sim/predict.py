"""What a rig can measure, on paper: the uncertainty of q, Cp and what its kind computes, before it is built.

The simulated plant gives every channel's true reading at the design speed (no noise, no lag); the reducer's own
budget (the sensors' datasheet bands, one count, JCGM 100:2008) then gives u(q), u(Cp) and, as the rig's kind
has them, u(Cl) (an airfoil), u(Cd) (a cylinder) or the mass flow's u (a venturi), nominal and after a wind-off
zero (which removes the offset part of each band). Every figure is the reduction's own: nothing is recomputed
here. ``taprig check`` prints it and warns when the sensors cannot resolve what the rig is for.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from datetime import datetime, timezone

import numpy as np

from taprig.protocol import RawBlock
from taprig.reduce import ReduceError, ReduceOptions, Reducer, ambient_for
from taprig.rig import Medium, Rig, RigKind, build_calibration
from taprig.rig.fitting import ZeroResult
from taprig.sim.options import SimOptions
from taprig.sim.plant import build_plant, channel_values

#: Limits past which a rig cannot measure what it is for (common practice for a teaching or bench rig).
WARN_Q_REL = 0.02
WARN_CP = 0.05
WARN_CL = 0.03


@dataclass(frozen=True)
class Prediction:
    """Standard uncertainties at the design speed: ``q`` [Pa] with ``u_q`` [Pa] nominal and ``u_q_zeroed`` [Pa]
    after a wind-off zero; the largest u(Cp) likewise [-]; what the rig's kind computes from its taps, each NaN
    where the rig has none: u(Cl) [-] (an airfoil), u(Cd) [-] (a cylinder, the reduction's own integrator), the
    mass flow and its u [kg/s] (a venturi, ISO 5167-4); ``saturated`` the channels whose reading leaves their
    sensor's range; ``warnings`` in words.

    ``u_q_sensors`` and ``u_cp_sensors`` are the sensors' own share after a zero: the same reduction with the
    rig's stated, not measured, coefficients held exact (``held_exact`` names them: a suction tunnel's inlet loss
    or tunnel factor, a venturi's C and diameters). The q and Cp warnings judge that share, since they say the
    sensors are too wide; the Cl warning judges the whole.
    """

    speed: float
    alpha_rad: float
    q: float
    u_q: float
    u_q_zeroed: float
    u_cp: float
    u_cp_zeroed: float
    u_cl: float
    u_cl_zeroed: float
    saturated: tuple[str, ...]
    warnings: tuple[str, ...]
    #: How u(Cp) and u(Cl) were propagated, nominal and zeroed (the reducer's ``uncertainty_method``).
    method: str = ""
    method_zeroed: str = ""
    #: Whether the rig has an angle of attack (an airfoil): ``alpha_rad`` means nothing otherwise.
    has_angle: bool = True
    u_cd: float = math.nan
    u_cd_zeroed: float = math.nan
    mass_flow: float = math.nan
    u_mass_flow: float = math.nan
    u_mass_flow_zeroed: float = math.nan
    u_q_sensors: float = math.nan
    u_cp_sensors: float = math.nan
    held_exact: tuple[str, ...] = ()


@dataclass(frozen=True)
class _Figures:
    """What one reduction of the predicted block gives (NaN where the rig's kind has none)."""

    q: float
    u_q: float
    u_cp: float
    u_cl: float
    u_cd: float
    mass_flow: float
    u_mass_flow: float
    method: str


def _figures(reducer: Reducer, block: RawBlock, alpha: float) -> _Figures:
    """Ask the reduction for the mean of ``block`` and keep what the rig's kind computes."""
    mean = reducer.reduce_mean(block, alpha)
    coeffs = mean.default
    headline = reducer.rig.kind.coefficients[:1]  # what the kind claims first: an airfoil's Cl, a cylinder's Cd
    u_cl = coeffs.u_cl if coeffs is not None and headline == ("cl",) else math.nan
    u_cd = coeffs.u_cd_p if coeffs is not None and headline == ("cd_p",) else math.nan
    u_cp = float(np.nanmax(mean.u_cp)) if np.isfinite(mean.u_cp).any() else math.nan

    def number(x) -> float:
        return math.nan if x is None else float(x)
    return _Figures(float(mean.q_pa), float(mean.u_q_pa), u_cp, float(u_cl), float(u_cd), number(mean.mass_flow_kg_s),
                    number(mean.u_mass_flow_kg_s), mean.uncertainty_method)


def _held_exact(rig: Rig, options: ReduceOptions) -> tuple[Rig, ReduceOptions, tuple[str, ...]]:
    """``rig`` and ``options`` with the stated (not measured) coefficients' uncertainties set to zero, and their
    names: what is left of a budget is then the sensors' own share."""
    ref, names, update = rig.reference, [], {}
    if ref.inlet_loss_u:
        update["inlet_loss_u"] = 0.0
        names.append(f"inlet loss K ± {ref.inlet_loss_u:g}")
    if ref.static_factor_u:
        update["static_factor_u"] = 0.0
        names.append(f"tunnel factor ± {ref.static_factor_u:g}")
    if update:
        rig = rig.model_copy(update={"reference": ref.model_copy(update=update)})
    if rig.kind is RigKind.VENTURI:
        names.append(f"C ± {options.discharge_coefficient_u_rel:.1%}, d and D ± {options.venturi_diameter_u_rel:.2%}")
        options = replace(options, discharge_coefficient_u_rel=0.0, venturi_diameter_u_rel=0.0)
    return rig, options, tuple(names)


def predict(rig: Rig, speed: float | None = None, alpha_rad: float = math.radians(4.0)) -> Prediction:
    """Predict u(q), u(Cp) and u(Cl), u(Cd) or the mass flow's u (what the rig's kind computes) of ``rig`` at
    ``speed`` [m/s] (default its ``[operating] design_speed_m_s``) and, for an airfoil, ``alpha_rad`` [rad];
    ReduceError when the rig states no speed or cannot be reduced."""
    speed = speed if speed is not None else rig.operating.design_speed
    if speed is None:
        raise ReduceError("no design speed stated ([operating] design_speed_m_s): nothing to predict at")
    has_angle = rig.kind is RigKind.AIRFOIL
    alpha_rad = alpha_rad if has_angle else 0.0
    options = SimOptions(noise=0.0, thermal=False, lag=False)
    plant = build_plant(rig, options)
    n = 8
    values = channel_values(plant, np.full(n, float(speed)), np.full(n, alpha_rad), np.zeros((n, plant.n_taps)))
    channels = tuple(sorted(c.index for c in rig.channels))
    counts = np.empty((n, len(channels)))
    saturated = []
    for col, index in enumerate(channels):
        sensor = rig.sensor_of(index)
        value = values[:, index]
        lo, hi = sensor.range
        if np.any(value < lo) or np.any(value > hi):
            saturated.append(rig.channel(index).name)
        counts[:, col] = sensor.si_to_counts(np.clip(value, lo, hi))
    block = RawBlock(counts, channels, np.arange(n, dtype=np.int64) * 1_000_000, np.arange(n, dtype=np.int64))
    ambient = ambient_for(rig) if rig.fluid.medium is Medium.WATER else ambient_for(rig, pressure=plant.p_ambient)
    reducer = Reducer(rig, ambient=ambient)
    nominal = _figures(reducer, block, alpha_rad)
    zero_counts = np.array([rig.sensor_of(i).si_to_counts(0.0) for i in channels], dtype=float)
    names = [rig.channel(i).name for i in channels]
    zero = ZeroResult(zero_counts, np.zeros(len(channels)), 100)
    cal = build_calibration(rig, names, datetime(2000, 1, 1, tzinfo=timezone.utc), zero=zero)
    zeroed = _figures(reducer.with_calibration(cal), block, alpha_rad)
    exact_rig, exact_options, held = _held_exact(rig, reducer.options)
    sensors = _figures(Reducer(exact_rig, cal, ambient, exact_options), block, alpha_rad) if held else zeroed
    q = nominal.q
    warnings = []
    if saturated:
        warnings.append(f"channel(s) {', '.join(saturated)} leave their sensor's range at {speed:g} m/s")
    if not sensors.u_q <= WARN_Q_REL * abs(q):
        warnings.append(f"u(q) {sensors.u_q:.3g} Pa is {sensors.u_q / abs(q):.1%} of q even after a zero "
                        f"(more than {WARN_Q_REL:.0%}): the q sensor is too wide for {q:.3g} Pa")
    if np.isfinite(sensors.u_cp) and sensors.u_cp > WARN_CP:
        warnings.append(f"u(Cp) up to {sensors.u_cp:.3g} after a zero (more than {WARN_CP:g}): the tap sensors are "
                        "too wide for this q")
    if np.isfinite(zeroed.u_cl) and zeroed.u_cl > WARN_CL:
        warnings.append(f"u(Cl) {zeroed.u_cl:.3g} after a zero (more than {WARN_CL:g}): the rig cannot resolve Cl")
    return Prediction(
        float(speed), alpha_rad, q, nominal.u_q, zeroed.u_q, nominal.u_cp, zeroed.u_cp, nominal.u_cl, zeroed.u_cl,
        tuple(saturated), tuple(warnings), nominal.method, zeroed.method, has_angle, nominal.u_cd, zeroed.u_cd,
        zeroed.mass_flow, nominal.u_mass_flow, zeroed.u_mass_flow,
        sensors.u_q if held else math.nan, sensors.u_cp if held else math.nan, held,
    )
