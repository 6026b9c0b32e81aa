"""Steady state before averaging: the rolling means of q and the coefficients must stay within a tolerance.

A point averaged while the fan is still spinning up, or while the tubing still fills after an angle step, is a
confident wrong number (a sweep's first point read q 140 Pa against 153 steady). :func:`steady_state` looks at the
last ``hold_s`` of a signal, split into ``windows`` equal windows: the signal is steady when the spread of the
window means (largest minus smallest) is within the tolerance, plus what the noise alone would give (two
standard errors of a difference of two window means), and the straight-line trend across the whole hold is
within the tolerance too, plus what the noise alone would give (two standard errors of the fitted change). Pure:
arrays in, a verdict out; the sweep calls it on the newest data until it says steady or its timeout passes.

Why the trend: a slow first-order settle (a fan with a long spin-up) changes the window means by less than their
noise, so the spread alone passed while q was still short of its steady value: with the simulator's fan at a
3 s time constant, the sweep's first point read 151.9 Pa against 153.5 Pa steady (1.1 % short by the fan model;
the spread allowed 1.29 Pa). The line fitted to every scan of the hold sees the same drift with a far smaller
error.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np

from taprig.physics.uncertainty import effective_sample_count


@dataclass(frozen=True)
class SteadyCriteria:
    """When a point may be averaged.

    ``hold_s`` [s]: how long the signals must have stayed steady (at least the averaging time); ``windows``: into
    how many windows the hold is cut; ``q_rel`` [-]: tolerance on q, relative to its mean; ``coefficient`` [-]:
    tolerance on Cl, Cd_p, Cm and Cl(balance), absolute; ``timeout_s`` [s of device time]: how long to wait before
    saying the flow did not settle.
    """

    hold_s: float = 3.0
    windows: int = 3
    q_rel: float = 0.002
    coefficient: float = 0.005
    timeout_s: float = 30.0

    def __post_init__(self) -> None:
        if not (self.hold_s > 0 and self.windows >= 2 and self.q_rel > 0 and self.coefficient > 0
                and self.timeout_s > 0):
            raise ValueError("steady criteria: hold_s, q_rel, coefficient and timeout_s must be > 0, windows ≥ 2")


@dataclass(frozen=True)
class Steadiness:
    """The verdict: ``steady``; per signal the ``spread`` of its window means and the ``allowed`` spread (tolerance
    plus noise allowance), in the signal's unit; ``reason`` in words when not steady."""

    steady: bool
    spread: dict = field(default_factory=dict)
    allowed: dict = field(default_factory=dict)
    reason: str = ""
    #: per signal: the fitted straight line's change across the hold, and the change allowed (tolerance + noise)
    trend: dict = field(default_factory=dict)
    trend_allowed: dict = field(default_factory=dict)

    def as_record(self) -> dict:
        """The verdict's figures as JSON-able data (a point's record), per signal, in its unit."""
        def num(x):
            return float(x) if x is not None and math.isfinite(x) else None

        return {name: {"spread": num(self.spread[name]), "allowed": num(self.allowed[name]),
                       "trend": num(self.trend.get(name)), "trend_allowed": num(self.trend_allowed.get(name))}
                for name in self.spread}


def steady_state(t_s, signals: Mapping[str, object], tolerances: Mapping[str, float], hold_s: float,
                 windows: int = 3) -> Steadiness:
    r"""Whether every signal stayed within its tolerance over the last ``hold_s``.

    .. math::
        \max_k \bar x_k - \min_k \bar x_k \le \tau + 2\sqrt{2}\,\max_k \frac{s_k}{\sqrt{n_k}}, \qquad
        |\hat b|\,H \le \tau + 2\,\frac{s\,H}{\sigma_t \sqrt{n}}

    with \bar x_k the mean of the finite samples of window k, s_k the standard deviation of their scatter about the
    window's straight-line trend and n_k their effective number (serial correlation,
    :func:`~taprig.physics.uncertainty.effective_sample_count`); \hat b the slope of the straight line fitted to
    the whole hold H, s the scatter about it, σ_t the standard deviation of the sample times and n the effective
    number of samples (the standard error of a least-squares slope, with serial correlation).

    Parameters
    ----------
    t_s : array_like
        Sample times [s], increasing.
    signals : mapping of str to array_like
        Each signal's samples at ``t_s`` (NaN where it has no value: no flow, a left-out scan).
    tolerances : mapping of str to float
        Allowed spread of each signal's window means, in its unit (absolute).
    hold_s : float
        Span the signals must have stayed steady [s].
    windows : int
        Windows the span is cut into (≥ 2).

    Returns
    -------
    Steadiness

    References
    ----------
    Common practice (a settling criterion on rolling means); the noise allowance is the standard error of a
    difference of two means (JCGM 100:2008 §4.2.3, independent samples), and that of the trend the standard error
    of a least-squares slope (common practice; any regression text).

    Examples
    --------
    >>> t = np.arange(0, 2.0, 0.01)
    >>> steady_state(t, {"q": 100 + 0 * t}, {"q": 0.5}, 1.5).steady
    True
    >>> steady_state(t, {"q": 100 + 5 * t}, {"q": 0.5}, 1.5).reason
    'q moved by 5.03 over the last 1.5 s (allowed 0.5)'
    """
    t = np.asarray(t_s, dtype=float)
    if t.size < 2 * windows or t[-1] - t[0] < 0.95 * hold_s:
        return Steadiness(False, reason=f"less than {hold_s:g} s of data yet")
    start = t[-1] - hold_s
    edges = start + hold_s * np.arange(windows + 1) / windows
    which = np.clip(np.searchsorted(edges, t, side="right") - 1, 0, windows - 1)
    inside = t >= start
    spread, allowed, trend, trend_allowed, worst = {}, {}, {}, {}, ""
    for name, values in signals.items():
        x = np.asarray(values, dtype=float)
        means, errors = [], []
        for k in range(windows):
            sel = inside & (which == k) & np.isfinite(x)
            w, tw = x[sel], t[sel]
            if w.size < 4:
                return Steadiness(False, spread, allowed, f"{name} has no value in part of the last {hold_s:g} s")
            means.append(float(w.mean()))
            # the noise about the window's own trend, with its serial correlation (tubing lag, turbulence)
            resid = w - np.polyval(np.polyfit(tw - tw[0], w, 1), tw - tw[0])
            n_eff = float(effective_sample_count(resid))
            errors.append(float(resid.std(ddof=2)) / math.sqrt(n_eff))
        spread[name] = max(means) - min(means)
        allowed[name] = float(tolerances[name]) + 2.0 * math.sqrt(2.0) * max(errors)
        trend[name], trend_allowed[name] = _trend(t[inside], x[inside], hold_s, float(tolerances[name]))
        if spread[name] > allowed[name] and not worst:
            worst = (f"{name} moved by {spread[name]:.3g} over the last {hold_s:g} s "
                     f"(allowed {allowed[name]:.3g})")
        elif abs(trend[name]) > trend_allowed[name] and not worst:
            worst = (f"{name} is still drifting: {trend[name]:+.3g} over the last {hold_s:g} s by its trend "
                     f"(allowed {trend_allowed[name]:.3g})")
    return Steadiness(not worst, spread, allowed, worst, trend, trend_allowed)


def _trend(t, x, hold_s: float, tolerance: float) -> tuple[float, float]:
    """The fitted straight line's change over ``hold_s`` and the change allowed: ``tolerance`` plus two standard
    errors of it (the least-squares slope's, with the scatter's serial correlation)."""
    keep = np.isfinite(x)
    t, x = t[keep] - t[keep][0], x[keep]
    slope, intercept = np.polyfit(t, x, 1)
    resid = x - (slope * t + intercept)
    n_eff = float(effective_sample_count(resid))
    se = float(resid.std(ddof=2)) / (float(t.std()) * math.sqrt(max(n_eff, 3.0)))
    return float(slope) * hold_s, tolerance + 2.0 * se * hold_s


def block_steadiness(reduced, criteria: SteadyCriteria) -> Steadiness:
    """:func:`steady_state` of a reduced block's q and coefficients under ``criteria`` (q's tolerance relative to
    its mean; Cl, Cd_p, Cm¼ and Cl(balance) where the rig has them)."""
    t = (np.asarray(reduced.t_ns, dtype=np.int64) - int(reduced.t_ns[0])) / 1e9
    q = np.asarray(reduced.q_pa, dtype=float)
    q_mean = float(np.nanmean(q)) if np.isfinite(q).any() else 0.0
    signals = {"q": q}
    tolerances = {"q": criteria.q_rel * abs(q_mean)}
    for name in ("cl", "cd_p", "cm_qc", "cl_balance"):
        values = getattr(reduced, name, None)
        if values is not None and np.isfinite(values).any():
            signals[name] = values
            tolerances[name] = criteria.coefficient
    return steady_state(t, signals, tolerances, criteria.hold_s, criteria.windows)
