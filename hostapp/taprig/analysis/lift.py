"""The lift curve of a sweep: its linear range and slope, Cl max and the stall, hysteresis, Cm slope. Pure.

Angles in radians, coefficients dimensionless.

Linear range, chosen from the data
    Starting from the two points nearest zero lift, the range grows by the next point outward while that point
    lies within ``tolerance`` (a fraction of the line's Cl, with a ``floor``) of the line through the range so
    far; then a least-squares line Cl = a + m α through the range gives the slope m and the zero-lift angle
    α₀ = −a/m (common practice: the lift curve is straight between the stalls; thin-airfoil theory gives
    m = 2π, Anderson, *Fundamentals of Aerodynamics*, §4.7).

Uncertainty of the slope and of the zero-lift angle, two parts stated apart
    *Scatter*: the standard error of the least-squares line from the residuals (GUM §H.3, the linear
    calibration example). It contains each point's noise and whatever does not repeat from point to point.

    *Systematic*: the points of one sweep share their sensors, zero and calibration, so most of each point's
    stated uncertainty u_i is one error common to every point, not scatter. It is carried through the line's
    least-squares weights as fully correlated (GUM §5.2.2, r = 1): for the slope as an error that scales the lift
    (sign of Cl_i: a gain-like error, the one that changes a slope), for the zero-lift angle as an error that
    offsets it (the one that moves α₀). With weights w_i of the slope and v_i of the line's value at α₀:
    u_sys(m) = |Σ w_i sgn(Cl_i) u_i| and u_sys(α₀) = |Σ v_i u_i| / m. This treats the whole of u_i as shared,
    which overstates the systematic part by the points' own noise (small after averaging): an upper bound.

Stall
    Cl max is the largest Cl of the points and α at Cl max its angle; the stall is reached when a later point falls
    below Cl max by more than the linear range's tolerance (common practice: stall where dCl/dα turns negative).
    The stall angle is known to within half the sweep's step on either side (``resolution``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class LinearFit:
    """A straight line through the linear range of a curve y(α) (see the module docstring).

    ``slope`` [1/rad] with ``u_slope_scatter``, ``u_slope_systematic`` and ``u_slope`` (both in quadrature);
    ``intercept`` y at α = 0; ``alpha_zero`` [rad] where the line crosses y = 0 with the same three parts
    (NaN for a line of zero slope); ``alpha_range`` (lowest, highest) angle of the points used; ``n_points``;
    ``residual_rms`` the RMS of the residuals [-]; ``used`` the indices (into the inputs) of the points used.
    """

    slope: float
    u_slope_scatter: float
    u_slope_systematic: float
    intercept: float
    alpha_zero: float
    u_alpha_zero_scatter: float
    u_alpha_zero_systematic: float
    alpha_range: tuple[float, float]
    n_points: int
    residual_rms: float
    used: tuple[int, ...]

    @property
    def u_slope(self) -> float:
        """Combined standard uncertainty of the slope [1/rad]."""
        return math.hypot(_zero_if_nan(self.u_slope_scatter), _zero_if_nan(self.u_slope_systematic))

    @property
    def u_alpha_zero(self) -> float:
        """Combined standard uncertainty of the zero-lift angle [rad]."""
        return math.hypot(_zero_if_nan(self.u_alpha_zero_scatter), _zero_if_nan(self.u_alpha_zero_systematic))

    @property
    def slope_per_deg(self) -> float:
        """Slope per degree [1/°]."""
        return self.slope * math.pi / 180.0

    def at(self, alpha) -> np.ndarray:
        """The line's value at ``alpha`` [rad]."""
        return self.intercept + self.slope * np.asarray(alpha, dtype=float)


def _zero_if_nan(x: float) -> float:
    return 0.0 if not math.isfinite(x) else x


def _finite_sorted(alpha, y, u=None):
    alpha = np.asarray(alpha, dtype=float)
    y = np.asarray(y, dtype=float)
    u = np.zeros_like(alpha) if u is None else np.asarray(u, dtype=float)
    index = np.arange(alpha.size)
    ok = np.isfinite(alpha) & np.isfinite(y)
    alpha, y, u, index = alpha[ok], y[ok], u[ok], index[ok]
    order = np.argsort(alpha, kind="stable")
    return alpha[order], y[order], np.where(np.isfinite(u[order]), u[order], 0.0), index[order]


def _line(alpha: np.ndarray, y: np.ndarray) -> tuple[float, float]:
    design = np.stack([np.ones_like(alpha), alpha], axis=1)
    coef, *_ = np.linalg.lstsq(design, y, rcond=None)
    return float(coef[0]), float(coef[1])


def _within(alpha: float, y: float, a: float, m: float, tolerance: float, floor: float) -> bool:
    predicted = a + m * alpha
    return abs(y - predicted) <= max(tolerance * abs(predicted), floor)


def _linear_range(alpha: np.ndarray, y: np.ndarray, tolerance: float, floor: float) -> tuple[int, int]:
    """Indices (lo, hi) of the linear range grown outward from the points nearest y = 0."""
    centre = int(np.argmin(np.abs(y)))
    lo, hi = (centre - 1, centre) if centre == alpha.size - 1 else (centre, centre + 1)
    # equal angles (an up-and-down sweep) join the range together
    while hi + 1 < alpha.size and alpha[hi + 1] == alpha[hi]:
        hi += 1
    while lo > 0 and alpha[lo - 1] == alpha[lo]:
        lo -= 1
    while True:
        a, m = _line(alpha[lo:hi + 1], y[lo:hi + 1])
        if hi + 1 < alpha.size and _within(alpha[hi + 1], y[hi + 1], a, m, tolerance, floor):
            hi += 1
        elif lo > 0 and _within(alpha[lo - 1], y[lo - 1], a, m, tolerance, floor):
            lo -= 1
        else:
            return lo, hi


def fit_line(alpha, y, u=None, used=None) -> LinearFit:
    """Least-squares line y = a + m α through the points with the two uncertainty parts of the module docstring.

    Parameters
    ----------
    alpha : array_like
        Angles [rad].
    y : array_like
        Values [-] (Cl, Cm…).
    u : array_like, optional
        Each point's stated standard uncertainty [-], treated as shared between the points (systematic part).
    used : sequence of int, optional
        Indices recorded as :attr:`LinearFit.used` (default: all points).

    Examples
    --------
    >>> fit = fit_line(np.radians([0.0, 2.0, 4.0]), [0.1, 0.3, 0.5])
    >>> round(fit.slope_per_deg, 6), round(math.degrees(fit.alpha_zero), 6)
    (0.1, -1.0)
    """
    alpha = np.asarray(alpha, dtype=float)
    y = np.asarray(y, dtype=float)
    u = np.zeros_like(alpha) if u is None else np.nan_to_num(np.asarray(u, dtype=float))
    n = alpha.size
    if n < 2 or np.ptp(alpha) == 0:
        raise ValueError(f"a line needs at least 2 points at different angles, got {n}")
    mean = alpha.mean()
    sxx = float(((alpha - mean) ** 2).sum())
    a, m = _line(alpha, y)
    resid = y - (a + m * alpha)
    dof = n - 2
    s2 = float(resid @ resid) / dof if dof > 0 else math.nan
    u_m_scatter = math.sqrt(s2 / sxx) if dof > 0 else math.nan
    w = (alpha - mean) / sxx  # slope weights: m = Σ w_i y_i
    u_m_sys = abs(float(np.sum(w * np.sign(y) * u)))
    alpha0 = -a / m if m != 0 else math.nan
    # the line's value at α0: Σ v_i y_i with v_i = 1/n + (α0 − ᾱ) w_i; α0 moves by −δ(value)/m
    v = 1.0 / n + (alpha0 - mean) * w if math.isfinite(alpha0) else np.full(n, math.nan)
    u_a0_scatter = math.sqrt(s2 * float(v @ v)) / abs(m) if dof > 0 and m != 0 else math.nan
    u_a0_sys = abs(float(np.sum(v * u))) / abs(m) if m != 0 else math.nan
    return LinearFit(m, u_m_scatter, u_m_sys, a, alpha0, u_a0_scatter, u_a0_sys,
                     (float(alpha.min()), float(alpha.max())), n, float(np.sqrt(np.mean(resid**2))),
                     tuple(int(i) for i in (range(n) if used is None else used)))


def linear_range_fit(alpha_rad, cl, u_cl=None, tolerance: float = 0.05, floor: float = 0.03) -> LinearFit:
    """The lift curve's linear range chosen from the points and the line through it (module docstring).

    Parameters
    ----------
    alpha_rad : array_like
        Angles of the points [rad], any order (repeated angles of an up-and-down sweep allowed).
    cl : array_like
        Lift coefficient of each point [-]; points with a non-finite angle or Cl are left out.
    u_cl : array_like, optional
        Each point's stated standard uncertainty of Cl [-] (for the systematic part).
    tolerance, floor : float
        Largest departure from the line of a point still in the range: a fraction of the line's value, and the
        least allowed departure near zero lift [-].

    Examples
    --------
    >>> a = np.radians(np.arange(-4.0, 17.0, 2.0))
    >>> cl = np.where(a < np.radians(12.5), 2 * np.pi * a, 2 * np.pi * np.radians(12) - 3 * (a - np.radians(12)))
    >>> fit = linear_range_fit(a, cl)
    >>> round(fit.slope, 3), [round(math.degrees(x)) for x in fit.alpha_range]
    (6.283, [-4, 12])
    """
    alpha, y, u, index = _finite_sorted(alpha_rad, cl, u_cl)
    if alpha.size < 3:
        raise ValueError(f"a lift curve needs at least 3 points with finite angle and Cl, got {alpha.size}")
    lo, hi = _linear_range(alpha, y, tolerance, floor)
    return fit_line(alpha[lo:hi + 1], y[lo:hi + 1], u[lo:hi + 1], used=sorted(index[lo:hi + 1]))


@dataclass(frozen=True)
class Stall:
    """Cl max and the stall of a sweep (angles [rad]).

    ``cl_max`` with ``u_cl_max`` (the point's stated uncertainty), ``alpha_cl_max``; ``stalled`` when a later
    point falls below Cl max by more than the tolerance (then ``alpha_stall`` = ``alpha_cl_max``, else NaN);
    ``resolution`` half the spacing of the points either side of the maximum [rad]; ``drop`` the fall of Cl
    from Cl max to the next point above it [-] and ``drop_per_rad`` that fall per radian (NaN without a next
    point); ``abrupt`` when the lift falls by more than a fifth of Cl max within 2° (a sudden, leading-edge-like
    stall rather than a gradual trailing-edge one; the threshold is a choice of ours, stated in the report).
    """

    cl_max: float
    u_cl_max: float
    alpha_cl_max: float
    stalled: bool
    alpha_stall: float
    resolution: float
    drop: float
    drop_per_rad: float
    abrupt: bool


def find_stall(alpha_rad, cl, u_cl=None, tolerance: float = 0.05, floor: float = 0.03) -> Stall:
    """Cl max and the stall of a sweep's points (see :class:`Stall` and the module docstring).

    Only the increasing side is looked at: the largest Cl and the points at higher angles.

    Examples
    --------
    >>> a = np.radians(np.arange(0.0, 17.0, 1.0))
    >>> cl = np.where(a <= np.radians(12), 0.1 * np.degrees(a), 1.2 - 0.3 * (np.degrees(a) - 12))
    >>> s = find_stall(a, cl)
    >>> s.stalled, round(math.degrees(s.alpha_stall), 1), round(s.cl_max, 2), s.abrupt
    (True, 12.0, 1.2, True)
    """
    alpha, y, u, _ = _finite_sorted(alpha_rad, cl, u_cl)
    if alpha.size < 3:
        raise ValueError(f"a stall search needs at least 3 points with finite angle and Cl, got {alpha.size}")
    k = int(np.argmax(y))
    cl_max, a_max = float(y[k]), float(alpha[k])
    after = alpha > a_max
    drop_all = cl_max - y[after]
    stalled = bool(drop_all.size and np.any(drop_all > max(tolerance * abs(cl_max), floor)))
    steps = np.diff(np.unique(alpha))
    near = [abs(a_max - x) for x in np.unique(alpha) if x != a_max]
    resolution = 0.5 * min(near) if near else (0.5 * float(steps.min()) if steps.size else math.nan)
    if after.any():
        j = int(np.flatnonzero(after)[0])
        drop = cl_max - float(y[j])
        drop_rate = drop / float(alpha[j] - a_max)
    else:
        drop, drop_rate = math.nan, math.nan
    within = after & (alpha <= a_max + math.radians(2.0) + 1e-12)
    abrupt = bool(within.any() and (cl_max - float(y[within].min())) > 0.2 * abs(cl_max))
    return Stall(cl_max, float(u[k]), a_max, stalled, a_max if stalled else math.nan, resolution, drop, drop_rate,
                 abrupt)


@dataclass(frozen=True)
class Hysteresis:
    """The loop between the up and the down legs of a sweep (angles [rad]).

    At each angle both legs share: ``alpha``, ``cl_up``, ``cl_down``, ``delta`` (up − down) and ``u_delta`` (the two
    points' stated uncertainties in quadrature; their shared part cancels in the difference, so this is an upper
    bound). ``significant`` where |delta| > 2 u_delta. ``area`` ∫ |Cl_up − Cl_down| dα over the shared angles
    (trapezoid) [rad]; ``alpha_range`` (lowest, highest) significant angle, NaN when none; ``largest`` the
    largest |delta| and ``alpha_largest`` its angle.
    """

    alpha: np.ndarray
    cl_up: np.ndarray
    cl_down: np.ndarray
    delta: np.ndarray
    u_delta: np.ndarray
    significant: np.ndarray
    area: float
    alpha_range: tuple[float, float]
    largest: float
    alpha_largest: float

    @property
    def present(self) -> bool:
        """True when the legs differ by more than twice their uncertainty at one angle at least."""
        return bool(self.significant.any())


def _by_angle(alpha, cl, u) -> dict[float, tuple[float, float]]:
    out: dict[float, list] = {}
    for a, c, e in zip(np.round(np.asarray(alpha, dtype=float), 9), cl, u):
        if math.isfinite(a) and math.isfinite(c):
            out.setdefault(float(a), []).append((float(c), float(e) if math.isfinite(e) else 0.0))
    return {a: (float(np.mean([v[0] for v in vals])), float(np.mean([v[1] for v in vals]))) for a, vals in out.items()}


def hysteresis(alpha_up, cl_up, alpha_down, cl_down, u_up=None, u_down=None) -> Hysteresis:
    """Compare the up and the down legs of a sweep at the angles they share (see :class:`Hysteresis`).

    Examples
    --------
    >>> a = np.radians([10.0, 12.0, 14.0, 16.0])
    >>> h = hysteresis(a, [1.0, 1.2, 0.9, 0.8], a[::-1], [0.8, 0.7, 1.2, 1.0], [0.01] * 4, [0.01] * 4)
    >>> [round(math.degrees(x)) for x in h.alpha_range], round(float(h.largest), 2)
    ([14, 14], 0.2)
    """
    u_up = np.zeros(len(cl_up)) if u_up is None else np.asarray(u_up, dtype=float)
    u_down = np.zeros(len(cl_down)) if u_down is None else np.asarray(u_down, dtype=float)
    up, down = _by_angle(alpha_up, cl_up, u_up), _by_angle(alpha_down, cl_down, u_down)
    shared = np.array(sorted(set(up) & set(down)))
    cu = np.array([up[a][0] for a in shared])
    cd = np.array([down[a][0] for a in shared])
    ud = np.hypot([up[a][1] for a in shared], [down[a][1] for a in shared]) if shared.size else np.zeros(0)
    delta = cu - cd
    significant = np.abs(delta) > 2.0 * ud
    area = float(np.sum(0.5 * (np.abs(delta[1:]) + np.abs(delta[:-1])) * np.diff(shared))) if shared.size > 1 else 0.0
    if significant.any():
        rng = (float(shared[significant].min()), float(shared[significant].max()))
    else:
        rng = (math.nan, math.nan)
    if shared.size:
        k = int(np.argmax(np.abs(delta)))
        largest, at = float(np.abs(delta[k])), float(shared[k])
    else:
        largest, at = math.nan, math.nan
    return Hysteresis(shared, cu, cd, delta, ud, significant, area, rng, largest, at)


def moment_slope(alpha_rad, cm, u_cm=None, fit: LinearFit | None = None) -> LinearFit:
    """dCm/dα about the quarter chord over the lift curve's linear range (``fit.used``), or over all points.

    Thin-airfoil theory puts the aerodynamic centre at the quarter chord, so dCm¼/dα = 0 there (Anderson,
    *Fundamentals of Aerodynamics*, §4.7); a measured slope says how far the centre lies from it.
    """
    alpha = np.asarray(alpha_rad, dtype=float)
    cm = np.asarray(cm, dtype=float)
    u = np.zeros_like(alpha) if u_cm is None else np.asarray(u_cm, dtype=float)
    idx = np.arange(alpha.size) if fit is None else np.asarray(fit.used, dtype=int)
    ok = idx[np.isfinite(alpha[idx]) & np.isfinite(cm[idx])]
    return fit_line(alpha[ok], cm[ok], np.nan_to_num(u[ok]), used=ok)


@dataclass(frozen=True)
class DragPolar:
    """The pressure-drag polar: Cd_p against Cl in order of angle, and its least pressure drag.

    ``cd_min`` with ``u_cd_min`` and the ``cl_at_cd_min``, ``alpha_at_cd_min`` [rad] of that point.
    """

    alpha: np.ndarray
    cl: np.ndarray
    cd_p: np.ndarray
    u_cl: np.ndarray
    u_cd_p: np.ndarray
    cd_min: float
    u_cd_min: float
    cl_at_cd_min: float
    alpha_at_cd_min: float


def pressure_drag_polar(alpha_rad, cl, cd_p, u_cl=None, u_cd_p=None) -> DragPolar:
    """Order the points by angle and find the least pressure drag (Cd_p from the taps only: no skin friction)."""
    alpha = np.asarray(alpha_rad, dtype=float)
    cl, cd = np.asarray(cl, dtype=float), np.asarray(cd_p, dtype=float)
    u_cl = np.full_like(alpha, math.nan) if u_cl is None else np.asarray(u_cl, dtype=float)
    u_cd = np.full_like(alpha, math.nan) if u_cd_p is None else np.asarray(u_cd_p, dtype=float)
    ok = np.isfinite(alpha) & np.isfinite(cl) & np.isfinite(cd)
    order = np.flatnonzero(ok)[np.argsort(alpha[ok], kind="stable")]
    if order.size == 0:
        raise ValueError("a drag polar needs at least 1 point with finite angle, Cl and Cd_p")
    k = order[int(np.argmin(cd[order]))]
    return DragPolar(alpha[order], cl[order], cd[order], u_cl[order], u_cd[order], float(cd[k]), float(u_cd[k]),
                     float(cl[k]), float(alpha[k]))


@dataclass(frozen=True)
class BalanceComparison:
    """Pressure-integrated lift against the load cell's, point by point.

    ``difference`` = Cl (pressures) − Cl (balance) with ``u_difference`` (the two stated uncertainties in
    quadrature: they share q, whose error partly cancels, so this is an upper bound); ``agree`` where
    |difference| ≤ 2 u_difference; ``mean_difference`` and ``rms_difference`` over the points with both.
    """

    alpha: np.ndarray
    cl_pressure: np.ndarray
    cl_balance: np.ndarray
    difference: np.ndarray
    u_difference: np.ndarray
    agree: np.ndarray
    mean_difference: float
    rms_difference: float


def balance_against_pressures(alpha_rad, cl_pressure, u_cl_pressure, cl_balance, u_cl_balance) -> BalanceComparison:
    """Compare the lift from the taps with the lift from the balance (see :class:`BalanceComparison`).

    The pressure integral misses the skin friction's share of lift (small, common practice) and sees only the
    midspan section; the balance sees the whole model, its end gaps and its support. A difference beyond the
    uncertainty is such a physical difference or an error in one of them.
    """
    alpha = np.asarray(alpha_rad, dtype=float)
    cp, cb = np.asarray(cl_pressure, dtype=float), np.asarray(cl_balance, dtype=float)
    up = np.nan_to_num(np.asarray(u_cl_pressure, dtype=float))
    ub = np.nan_to_num(np.asarray(u_cl_balance, dtype=float))
    ok = np.isfinite(alpha) & np.isfinite(cp) & np.isfinite(cb)
    if not ok.any():
        raise ValueError("no point has both a pressure-integrated and a balance lift coefficient")
    order = np.flatnonzero(ok)[np.argsort(alpha[ok], kind="stable")]
    diff = cp[order] - cb[order]
    u = np.hypot(up[order], ub[order])
    return BalanceComparison(alpha[order], cp[order], cb[order], diff, u, np.abs(diff) <= 2.0 * u,
                             float(diff.mean()), float(np.sqrt(np.mean(diff**2))))
