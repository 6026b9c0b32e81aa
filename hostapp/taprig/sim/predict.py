"""What a rig can measure, on paper: the uncertainty of q, Cp and Cl at its design speed, before it is built.

The simulated plant gives every channel's true reading at the design speed (no noise, no lag); the reducer's own
budget (the sensors' datasheet bands, one count, JCGM 100:2008) then gives u(q), u(Cp) and u(Cl), nominal and
after a wind-off zero (which removes the offset part of each band). ``taprig check`` prints it and warns when the
sensors cannot resolve what the rig is for.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from datetime import datetime, timezone

import numpy as np

from taprig.protocol import RawBlock
from taprig.reduce import ReduceError, Reducer, ambient_for
from taprig.rig import Medium, Rig, build_calibration
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
    after a wind-off zero; the largest u(Cp) and u(Cl) likewise [-] (NaN where the rig has none); ``saturated``
    the channels whose reading leaves their sensor's range; ``warnings`` in words."""

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


def _mean(reducer: Reducer, block: RawBlock, alpha: float):
    mean = reducer.reduce_mean(block, alpha)
    coeffs = mean.default
    u_cl = coeffs.u_cl if coeffs is not None else math.nan
    return mean, float(np.nanmax(mean.u_cp)) if np.isfinite(mean.u_cp).any() else math.nan, u_cl


def predict(rig: Rig, speed: float | None = None, alpha_rad: float = math.radians(4.0)) -> Prediction:
    """Predict u(q), u(Cp), u(Cl) of ``rig`` at ``speed`` [m/s] (default its ``[operating] design_speed_m_s``) and
    ``alpha_rad`` [rad]; ReduceError when the rig states no speed or cannot be reduced."""
    speed = speed if speed is not None else rig.operating.design_speed
    if speed is None:
        raise ReduceError("no design speed stated ([operating] design_speed_m_s): nothing to predict at")
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
    nominal, u_cp, u_cl = _mean(reducer, block, alpha_rad)
    zero_counts = np.array([rig.sensor_of(i).si_to_counts(0.0) for i in channels], dtype=float)
    names = [rig.channel(i).name for i in channels]
    zero = ZeroResult(zero_counts, np.zeros(len(channels)), 100)
    cal = build_calibration(rig, names, datetime(2000, 1, 1, tzinfo=timezone.utc), zero=zero)
    zeroed, u_cp_z, u_cl_z = _mean(reducer.with_calibration(cal), block, alpha_rad)
    warnings = []
    q = nominal.q_pa
    if saturated:
        warnings.append(f"channel(s) {', '.join(saturated)} leave their sensor's range at {speed:g} m/s")
    if not zeroed.u_q_pa <= WARN_Q_REL * abs(q):
        warnings.append(f"u(q) {zeroed.u_q_pa:.3g} Pa is {zeroed.u_q_pa / abs(q):.1%} of q even after a zero "
                        f"(more than {WARN_Q_REL:.0%}): the q sensor is too wide for {q:.3g} Pa")
    if np.isfinite(u_cp_z) and u_cp_z > WARN_CP:
        warnings.append(f"u(Cp) up to {u_cp_z:.3g} after a zero (more than {WARN_CP:g}): the tap sensors are too "
                        "wide for this q")
    if np.isfinite(u_cl_z) and u_cl_z > WARN_CL:
        warnings.append(f"u(Cl) {u_cl_z:.3g} after a zero (more than {WARN_CL:g}): the rig cannot resolve Cl")
    return Prediction(float(speed), alpha_rad, q, nominal.u_q_pa, zeroed.u_q_pa, u_cp, u_cp_z, u_cl, u_cl_z,
                      tuple(saturated), tuple(warnings), nominal.uncertainty_method, zeroed.uncertainty_method)
