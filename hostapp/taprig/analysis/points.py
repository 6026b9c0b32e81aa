"""A sweep's points as columns of numbers: the input of every analysis here. Pure.

A captured point is stored in a session as a JSON record (``taprig.runtime.acquisition.point_record``: SI units,
null for a value that is not there). :func:`point_table` turns a list of such records, live or read back from a
file, into arrays, one entry per point, with NaN where a point has no value. The choice of coefficients is made
here once: ``"corrected"`` (shape-aware fit after 2-D wall corrections, angles corrected too), ``"shape"`` (the
shape-aware fit at the commanded angle), ``"plain"`` (trapezoid), or ``"best"`` (corrected where there is one,
else shape, else plain; the angle follows the choice).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Mapping, Sequence

import numpy as np

COEFFICIENT_CHOICES = ("best", "corrected", "shape", "plain")


def _num(value) -> float:
    try:
        x = float(value)
    except (TypeError, ValueError):
        return math.nan
    return x


@dataclass(frozen=True, eq=False)
class PointTable:
    """Columns of a sweep's points (one entry per point, NaN where missing). Angles [rad], q [Pa], the rest [-].

    ``alpha_rad`` is the angle the coefficients belong to (wall-corrected when the coefficients are);
    ``alpha_set_rad`` the commanded (geometric) angle. ``cp_rms_suction`` is the RMS over the suction-side taps (upper
    at α ≥ 0, lower below) of each tap's Cp fluctuation (its standard deviation over the point's scans), NaN where
    not recorded. ``leg`` is
    ``"up"``, ``"down"`` or ``""``; ``fan`` the fan setting of the point (NaN when not recorded); ``method`` the
    coefficients chosen for each point.
    """

    labels: tuple[str, ...]
    alpha_rad: np.ndarray
    alpha_set_rad: np.ndarray
    cl: np.ndarray
    u_cl: np.ndarray
    cd_p: np.ndarray
    u_cd_p: np.ndarray
    cm_qc: np.ndarray
    u_cm_qc: np.ndarray
    q_pa: np.ndarray
    u_q_pa: np.ndarray
    v_ms: np.ndarray
    u_v_ms: np.ndarray
    re: np.ndarray
    u_re: np.ndarray
    cl_balance: np.ndarray
    u_cl_balance: np.ndarray
    mass_flow_kg_s: np.ndarray
    cp_rms_suction: np.ndarray
    fan: np.ndarray
    leg: tuple[str, ...]
    method: tuple[str, ...]

    def __len__(self) -> int:
        return len(self.labels)

    def select(self, mask) -> PointTable:
        """The points where ``mask`` is true (a boolean array or index array)."""
        idx = np.flatnonzero(np.asarray(mask)) if np.asarray(mask).dtype == bool else np.asarray(mask, dtype=int)
        values = {}
        for name in self.__dataclass_fields__:
            col = getattr(self, name)
            values[name] = tuple(col[i] for i in idx) if isinstance(col, tuple) else col[idx]
        return PointTable(**values)


def _coefficients(record: Mapping, choice: str) -> tuple[Mapping | None, bool]:
    """The chosen coefficients of a record and whether they are wall-corrected."""
    if choice not in COEFFICIENT_CHOICES:
        raise ValueError(f"coefficients {choice!r}: expected one of {', '.join(COEFFICIENT_CHOICES)}")
    order = {"best": ("corrected", "shape", "plain"), "corrected": ("corrected",), "shape": ("shape", "plain"),
             "plain": ("plain",)}[choice]
    for name in order:
        c = record.get(name)
        if name == "corrected" and record.get("wall_alpha_rad") is None:
            continue  # corrected coefficients without their corrected angle would pair the wrong numbers
        if isinstance(c, Mapping) and c.get("cl") is not None:
            return c, name == "corrected"
    return None, False


def point_table(records: Sequence[Mapping], coefficients: str = "best", upper_taps: Sequence[str] = (),
                lower_taps: Sequence[str] = ()) -> PointTable:
    """Columns of ``records`` (point records, see the module docstring).

    ``upper_taps`` and ``lower_taps`` name the taps of each surface of a section, whose Cp fluctuation makes
    :attr:`PointTable.cp_rms_suction`; a record carrying ``cp_rms`` (tap → rms Cp) gives the RMS over them.
    """
    cols: dict[str, list] = {name: [] for name in PointTable.__dataclass_fields__}
    for rec in records:
        c, corrected = _coefficients(rec, coefficients)
        alpha_set = _num(rec.get("alpha_rad"))
        alpha = _num(rec.get("wall_alpha_rad")) if corrected else alpha_set
        cols["labels"].append(str(rec.get("label", "")))
        cols["alpha_rad"].append(alpha)
        cols["alpha_set_rad"].append(alpha_set)
        for name in ("cl", "u_cl", "cd_p", "u_cd_p", "cm_qc", "u_cm_qc"):
            cols[name].append(_num(c.get(name)) if c is not None else math.nan)
        for name in ("q_pa", "u_q_pa", "v_ms", "u_v_ms", "re", "u_re", "cl_balance", "u_cl_balance", "mass_flow_kg_s", "fan"):
            cols[name].append(_num(rec.get(name)))
        rms = rec.get("cp_rms")
        suction = tuple(upper_taps) if not alpha_set < 0 else tuple(lower_taps)
        if isinstance(rms, Mapping) and suction:
            values = np.array([_num(rms.get(t)) for t in suction])
            values = values[np.isfinite(values)]
            cols["cp_rms_suction"].append(float(np.sqrt(np.mean(values**2))) if values.size else math.nan)
        else:
            cols["cp_rms_suction"].append(math.nan)
        cols["leg"].append(str(rec.get("leg") or ""))
        cols["method"].append(str(c.get("method", "")) if c is not None else "")
    out = {}
    for name, values in cols.items():
        out[name] = tuple(values) if name in ("labels", "leg", "method") else np.asarray(values, dtype=float)
    return PointTable(**out)
