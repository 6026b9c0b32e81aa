"""Everything the analysis says about one sweep, in one call: :func:`analyse_points`. Pure.

The CLI's closing lines, the report's pages and the dashboard's panels all show this one result, so they cannot
disagree. An analysis that cannot be made is not left out silently: its place holds a sentence saying why
(``reasons``), e.g. "no stall within the sweep" or "no flow reference of its own: the discharge coefficient
cannot be measured".
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Mapping, Sequence

import numpy as np

from taprig.analysis.lift import (
    BalanceComparison, DragPolar, Hysteresis, LinearFit, Stall, balance_against_pressures, find_stall, hysteresis,
    linear_range_fit, moment_slope, pressure_drag_polar,
)
from taprig.analysis.points import PointTable, point_table
from taprig.analysis.unsteady import Unsteadiness, unsteadiness
from taprig.analysis.venturi import ISO_MACHINED, DischargeCoefficient, discharge_coefficient, sensor_state, \
    station_comparison
from taprig.rig import Rig, RigKind


@dataclass(frozen=True)
class VenturiStations:
    """A venturi's stations (flow order) with their ideal Cp referred to the inlet and the throat's index."""

    names: tuple[str, ...]
    x_m: np.ndarray
    area_m2: np.ndarray
    cp_ideal: np.ndarray
    throat: int
    beta: float
    inlet_diameter_m: float


@dataclass(frozen=True, eq=False)
class SweepAnalysis:
    """The analysis of a sweep's points (see the module docstring). Fields an analysis could not fill are None
    and ``reasons`` (name → sentence) says why."""

    rig: Rig
    coefficients: str
    table: PointTable
    fit: LinearFit | None = None
    stall: Stall | None = None
    moment: LinearFit | None = None
    polar: DragPolar | None = None
    hysteresis: Hysteresis | None = None
    unsteadiness: Unsteadiness | None = None
    balance: BalanceComparison | None = None
    stations: VenturiStations | None = None
    discharge: DischargeCoefficient | None = None
    iso_outside: tuple[str, ...] = ()
    fan_groups: tuple[float, ...] = ()
    reasons: dict = field(default_factory=dict)

    @property
    def up(self) -> np.ndarray:
        """Mask of the points on the way up (or of a one-way sweep)."""
        return np.array([leg != "down" for leg in self.table.leg], dtype=bool)


def venturi_stations(rig: Rig) -> VenturiStations | None:
    """The stations of a venturi rig (None for another kind or without distinct areas)."""
    if rig.kind is not RigKind.VENTURI:
        return None
    layout = rig.tap_layout()
    area = np.asarray(layout.area, dtype=float)
    if area.size < 2 or np.unique(area).size < 2:
        return None
    throat = int(np.argmin(area))
    return VenturiStations(tuple(layout.names), np.asarray(layout.x, dtype=float), area, station_comparison(area),
                           throat, math.sqrt(area[throat] / area[0]), math.sqrt(4 * area[0] / math.pi))


def has_own_flow_reference(rig: Rig) -> bool:
    """True when q comes from a probe (pitot-static, or static and total), not from the venturi itself."""
    ref = rig.reference
    return ref.pitot is not None or (ref.static is not None and ref.total is not None)


def surfaces(rig: Rig) -> tuple[list[str], list[str]]:
    """Names of the upper- and the lower-surface taps of a section (empty for other kinds)."""
    layout = rig.tap_layout()
    if layout.upper is None:
        return [], []
    return ([n for n, u in zip(layout.names, layout.upper) if u], [n for n, u in zip(layout.names, layout.upper) if not u])


def _try(reasons: dict, name: str, func, *args, **kwargs):
    try:
        return func(*args, **kwargs)
    except ValueError as exc:
        reasons[name] = str(exc)
        return None


def analyse_points(records: Sequence[Mapping], rig: Rig, coefficients: str = "best") -> SweepAnalysis:
    """Analyse a sweep's point records (see the module docstring and :mod:`taprig.analysis`).

    A sweep over several fan settings is analysed at the first fan setting for the lift curve (the report draws
    every setting); ``fan_groups`` lists the settings.
    """
    upper, lower = surfaces(rig)
    table = point_table(records, coefficients, upper, lower)
    reasons: dict = {}
    fans = tuple(sorted({float(f) for f in table.fan if math.isfinite(f)}))
    out = dict(rig=rig, coefficients=coefficients, table=table, fan_groups=fans, reasons=reasons)
    if rig.kind in (RigKind.AIRFOIL,) and len(table):
        first = np.isclose(table.fan, fans[0]) if fans else np.ones(len(table), dtype=bool)
        up = np.array([leg != "down" for leg in table.leg]) & first
        down = np.array([leg == "down" for leg in table.leg]) & first
        a, u = table.alpha_rad, table.u_cl
        # a point with a sensor saturated or beyond its rated range is a state: it enters no fit, stall or Cl max
        in_state = np.array([bool(sensor_state(r.get("flags"))) for r in records], dtype=bool)
        cl = np.where(in_state, np.nan, table.cl)
        fit = _try(reasons, "fit", linear_range_fit, a[up], cl[up], u[up])
        if fit is not None:  # indices into the whole table
            fit = _reindex(fit, np.flatnonzero(up))
        out["fit"] = fit
        stall = _try(reasons, "stall", find_stall, a[up], cl[up], u[up])
        out["stall"] = stall
        if stall is not None and not stall.stalled:
            reasons["stall"] = "no stall within the sweep: the lift still rises at its highest angle"
        if fit is not None and np.isfinite(table.cm_qc[list(fit.used)]).sum() >= 2:
            out["moment"] = _try(reasons, "moment", moment_slope, a, table.cm_qc, table.u_cm_qc, fit)
        out["polar"] = _try(reasons, "polar", pressure_drag_polar, a[first], cl[first], table.cd_p[first],
                            u[first], table.u_cd_p[first])
        if down.any():  # paired by the commanded angle: a wall-corrected angle differs with the lift itself
            s = table.alpha_set_rad
            out["hysteresis"] = hysteresis(s[up], cl[up], s[down], cl[down], u[up], u[down])
        else:
            reasons["hysteresis"] = "one-way sweep: run it up and back down (--up-and-down) to see hysteresis"
        if np.isfinite(table.cp_rms_suction).any():
            out["unsteadiness"] = unsteadiness(a, table.cp_rms_suction, attached=fit.used if fit else None)
        else:
            reasons["unsteadiness"] = "the points carry no pressure fluctuations (recorded by an older version)"
        if rig.balance is not None:
            out["balance"] = _try(reasons, "balance", balance_against_pressures, a, cl, u, table.cl_balance,
                                  table.u_cl_balance)
        else:
            reasons["balance"] = "no balance on this rig"
    stations = venturi_stations(rig)
    out["stations"] = stations
    if stations is not None and len(table):
        throat = stations.names[stations.throat]
        if not has_own_flow_reference(rig):
            reasons["discharge"] = ("the flow rate is worked out from the venturi itself with an assumed C = "
                                    f"{ISO_MACHINED.c:g}; measuring C needs a flow reference of its own (a pitot-"
                                    "static probe at the inlet, or a flow meter)")
        else:
            cp_t = [_num((r.get("cp") or {}).get(throat)) for r in records]
            u_t = [_num((r.get("u_cp") or {}).get(throat)) for r in records]
            states = [sensor_state(r.get("flags")) for r in records]  # such a point gives no C: a state instead
            dc = _try(reasons, "discharge", discharge_coefficient, cp_t, u_t, float(stations.cp_ideal[stations.throat]),
                      table.re, stations.beta, states=states)
            out["discharge"] = dc
            if dc is not None:
                re = dc.re_d[np.isfinite(dc.c)]
                outside = set()
                for value in (re.min(), re.max()):
                    outside.update(ISO_MACHINED.outside(float(value), stations.beta, stations.inlet_diameter_m))
                out["iso_outside"] = tuple(sorted(outside))
    return SweepAnalysis(**out)


def _num(value) -> float:
    try:
        return float(value)
    except (TypeError, ValueError):
        return math.nan


def _reindex(fit: LinearFit, index: np.ndarray) -> LinearFit:
    from dataclasses import replace

    return replace(fit, used=tuple(int(index[i]) for i in fit.used))
