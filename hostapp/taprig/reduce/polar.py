"""The lift curve of a sweep: lift slope, zero-lift angle, maximum lift and the stall. Pure.

A sweep gives points (α_i, Cl_i). The uncertainties of neighbouring points of one sweep are mostly shared (the
same sensors, zero and calibration), so they say little about the *shape* of the curve; the linear range is found
from the points' scatter instead: starting from the two points nearest α = 0, the range grows by the next point
outward while that point lies within ``tolerance`` (a fraction of the predicted Cl, with a floor) of the line
through the range so far. The slope and the zero-lift angle come from a least-squares line through that range,
its standard uncertainty from the residual scatter. The stall is the angle of the largest Cl when a later point
falls below it by more than the same tolerance (common practice: the stall is where dCl/dα turns negative).
Angles in radians throughout.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class LiftCurve:
    """Summary of a lift curve, SI (angles in radians).

    ``slope`` is dCl/dα [1/rad] with ``u_slope`` (NaN from only two points); ``alpha_zero_lift`` [rad];
    ``linear_range`` the (lowest, highest) angle of the points used for the line; ``cl_max`` and ``alpha_cl_max``;
    ``stalled`` is true when lift falls after ``alpha_cl_max`` (then ``alpha_stall`` = ``alpha_cl_max``, else NaN:
    the sweep did not reach the stall).
    """

    slope: float
    u_slope: float
    alpha_zero_lift: float
    linear_range: tuple[float, float]
    cl_max: float
    alpha_cl_max: float
    stalled: bool
    alpha_stall: float


def _line(alpha: np.ndarray, cl: np.ndarray) -> tuple[float, float, float]:
    """Least-squares line Cl = a + b α: returns (a, b, u(b)) with u(b) from the residual scatter."""
    design = np.stack([np.ones_like(alpha), alpha], axis=1)
    coef, *_ = np.linalg.lstsq(design, cl, rcond=None)
    resid = cl - design @ coef
    dof = alpha.size - 2
    s2 = float(resid @ resid) / dof if dof > 0 else math.nan
    cov = np.linalg.inv(design.T @ design) * s2
    return float(coef[0]), float(coef[1]), float(math.sqrt(cov[1, 1])) if dof > 0 else math.nan


def _within(alpha: float, cl: float, a0: float, slope: float, tolerance: float, floor: float) -> bool:
    predicted = a0 + slope * alpha
    return abs(cl - predicted) <= max(tolerance * abs(predicted), floor)


def lift_curve(alpha_rad, cl, tolerance: float = 0.05, floor: float = 0.03) -> LiftCurve:
    """Lift slope, zero-lift angle, Cl max and stall of a sweep.

    Parameters
    ----------
    alpha_rad : array_like
        Angles of attack of the points [rad], any order.
    cl : array_like
        Section lift coefficient at each angle [-].
    tolerance : float
        Largest departure from the line of a point still in the linear range, as a fraction of the line's Cl [-].
    floor : float
        Smallest allowed departure, for points near zero lift [-].

    Examples
    --------
    >>> a = np.radians(np.arange(-4.0, 17.0, 2.0))
    >>> cl = np.where(a < np.radians(12.5), 2 * np.pi * a, 2 * np.pi * np.radians(12) - 3 * (a - np.radians(12)))
    >>> curve = lift_curve(a, cl)
    >>> round(curve.slope, 3), round(math.degrees(curve.alpha_stall), 1)
    (6.283, 12.0)
    """
    alpha = np.asarray(alpha_rad, dtype=float)
    cl = np.asarray(cl, dtype=float)
    ok = np.isfinite(alpha) & np.isfinite(cl)
    alpha, cl = alpha[ok], cl[ok]
    if alpha.size < 3:
        raise ValueError(f"a lift curve needs at least 3 points with finite angle and Cl, got {alpha.size}")
    order = np.argsort(alpha)
    alpha, cl = alpha[order], cl[order]
    centre = int(np.argmin(np.abs(alpha)))
    lo, hi = (centre - 1, centre) if centre == alpha.size - 1 else (centre, centre + 1)
    while True:
        a0, slope, _ = _line(alpha[lo:hi + 1], cl[lo:hi + 1])
        if hi + 1 < alpha.size and _within(alpha[hi + 1], cl[hi + 1], a0, slope, tolerance, floor):
            hi += 1
        elif lo > 0 and _within(alpha[lo - 1], cl[lo - 1], a0, slope, tolerance, floor):
            lo -= 1
        else:
            break
    a0, slope, u_slope = _line(alpha[lo:hi + 1], cl[lo:hi + 1])
    k = int(np.argmax(cl))
    drop = cl[k] - cl[k + 1:]
    stalled = bool(drop.size and np.any(drop > max(tolerance * abs(cl[k]), floor)))
    return LiftCurve(slope, u_slope, -a0 / slope if slope else math.nan, (float(alpha[lo]), float(alpha[hi])),
                     float(cl[k]), float(alpha[k]), stalled, float(alpha[k]) if stalled else math.nan)
