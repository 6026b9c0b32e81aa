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

After a fan change a flat line over a short hold is not enough either: the line's slope is only known to its noise,
and a slow approach hides in that noise (with a 4.5 s fan lag the sweep's first point passed 1.04 % short of
steady). So the first point after a fan change must also pass :func:`approach_bound`: an upper bound on what
remains of the approach to steady, from the fitted rate and the time constant that rate implies, within the q
tolerance.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field, replace

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
    #: [s of device time from the fan change]: how long the first point after a fan change may wait for the
    #: approach to steady (:func:`approach_bound`) before saying the fan did not settle
    spin_up_timeout_s: float = 90.0

    def __post_init__(self) -> None:
        if not (self.hold_s > 0 and self.windows >= 2 and self.q_rel > 0 and self.coefficient > 0
                and self.timeout_s > 0 and self.spin_up_timeout_s > 0):
            raise ValueError("steady criteria: hold_s, q_rel, coefficient, timeout_s and spin_up_timeout_s must be "
                             "> 0, windows ≥ 2")


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
    #: after a fan change: :meth:`Approach.as_record` of the bound on the approach still to come (else empty)
    approach: dict = field(default_factory=dict)

    def as_record(self) -> dict:
        """The verdict's figures as JSON-able data (a point's record), per signal, in its unit."""
        def num(x):
            return float(x) if x is not None and math.isfinite(x) else None

        record = {name: {"spread": num(self.spread[name]), "allowed": num(self.allowed[name]),
                         "trend": num(self.trend.get(name)), "trend_allowed": num(self.trend_allowed.get(name))}
                  for name in self.spread}
        if self.approach:
            record["q"] = {**record.get("q", {}), "approach": dict(self.approach)}
        return record


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


@dataclass(frozen=True)
class Approach:
    """The bound on what remains of the approach to steady after a fan change: ``gap_rel`` [-], the upper bound on
    how far q at the hold's centre is still short of (or above) its steady value, relative to it (inf when the
    data cannot bound it: the flow still changes as fast as it did on average since the change); ``allowed_rel``
    [-]; ``tau_s`` [s], the time constant the bound implies; ``since_s`` [s] from the fan change to the hold's
    centre; ``hold_s`` [s], the span of the fitted line used; ``steady``: ``gap_rel`` ≤ ``allowed_rel``."""

    steady: bool
    gap_rel: float
    allowed_rel: float
    tau_s: float
    since_s: float
    hold_s: float

    def as_record(self) -> dict:
        def num(x):
            return float(x) if math.isfinite(x) else None

        return {"gap_rel": num(self.gap_rel), "allowed_rel": float(self.allowed_rel), "tau_s": num(self.tau_s),
                "since_s": float(self.since_s), "hold_s": float(self.hold_s)}


def approach_bound(t_s, q, q_before: float, tolerance_rel: float, hold_s: float) -> Approach:
    r"""An upper bound on the approach to steady still to come, ``t_s`` [s] after a fan change.

    The stream speed (∝ √q) is taken to follow the fan with a first-order lag, possibly after a slew: the speed's
    remaining gap g at a time t after the change is its rate times the time constant, g = ṡ τ, and the change so far
    Δ = s(t) − s₀ fixes τ:

    .. math::
        \Delta = \dot s\,\tau\,(e^{t/\tau} - 1), \qquad g = \frac{\Delta}{e^{t/\tau} - 1}, \qquad
        \frac{\delta q}{q} \approx \frac{2g}{s + g}

    with ṡ the slope of the straight line fitted to s = √q over a span H ending at the newest sample, taken at
    its upper bound |b̂| + 2 u(b̂) (standard error of a least-squares slope, serial correlation counted), t the
    span's centre after the change. g grows with ṡ, so the upper bound of the slope gives an upper bound of the
    gap; a slew before the lag, or a slope averaged over a span where the flow was still faster, only make the
    bound larger (conservative). When ṡ t ≥ Δ no time constant fits (the flow changes as fast as it did on
    average since the change: a drift with no end in sight) and the gap is unbounded. Spans H = ``hold_s``,
    2 ``hold_s``, 4 ``hold_s`` … within the data since the change are tried; the least bound counts (a longer
    span resolves a smaller slope, a shorter one is nearer now).

    Parameters
    ----------
    t_s : array_like
        Sample times [s] after the fan change, increasing.
    q : array_like
        Dynamic pressure at ``t_s`` [Pa] (NaN where none).
    q_before : float
        q just before the fan change [Pa] (0 with the fan off).
    tolerance_rel : float
        Allowed remaining gap of q, relative [-].
    hold_s : float
        Shortest span to fit [s].

    Returns
    -------
    Approach

    References
    ----------
    First-order lag step response s(t) = s∞ − (s∞ − s₀) e^{−t/τ} (common practice, any control or measurement
    text); standard error of a least-squares slope (common practice).

    Examples
    --------
    >>> t = np.arange(0.0, 30.0, 0.002)
    >>> q = (12.0 * (1 - np.exp(-t / 1.5))) ** 2
    >>> approach_bound(t, q, 0.0, 0.002, 3.0).steady
    True
    >>> approach_bound(t[t < 6], q[t < 6], 0.0, 0.002, 3.0).steady
    False
    """
    t = np.asarray(t_s, dtype=float)
    x = np.asarray(q, dtype=float)
    keep = np.isfinite(x)
    t, s = t[keep], np.sqrt(np.clip(x[keep], 0.0, None))
    s0 = math.sqrt(max(float(q_before), 0.0)) if math.isfinite(q_before) else 0.0
    best = Approach(False, math.inf, tolerance_rel, math.inf, 0.0, hold_s)
    if t.size < 8:
        return best
    span = hold_s
    while span <= t[-1] + 1e-9:
        sel = t >= t[-1] - span
        if np.count_nonzero(sel) >= 8:
            tt, ss = t[sel], s[sel]
            centre = 0.5 * (tt[0] + tt[-1])
            slope, at_centre = np.polyfit(tt - centre, ss, 1)
            resid = ss - (slope * (tt - centre) + at_centre)
            n_eff = float(effective_sample_count(resid))
            se = float(resid.std(ddof=2)) / (float(tt.std()) * math.sqrt(max(n_eff, 3.0)))
            rate = abs(float(slope)) + 2.0 * se
            gap, tau = _remaining(abs(float(at_centre) - s0), rate, centre)
            level = float(at_centre) + math.copysign(gap, float(at_centre) - s0) if math.isfinite(gap) else math.inf
            gap_rel = 2.0 * gap / level if math.isfinite(gap) and level > 0 else math.inf
            if gap_rel < best.gap_rel or not math.isfinite(best.gap_rel):
                best = Approach(gap_rel <= tolerance_rel, gap_rel, tolerance_rel, tau, float(centre), span)
        span *= 2.0
    return best


def _remaining(change: float, rate: float, t: float) -> tuple[float, float]:
    """The gap g = change / (e^{t/τ} − 1) and τ [s] of a first-order approach that changed by ``change`` in ``t``
    [s] and moves at ``rate`` now: τ solves τ (e^{t/τ} − 1) = change / rate (bisection on x = t/τ)."""
    if rate <= 0.0:
        return 0.0, 0.0
    ratio = change / (rate * t) if t > 0 else 0.0  # (e^x − 1)/x, > 1 for any finite τ
    if not ratio > 1.0 + 1e-12:
        return math.inf, math.inf
    lo, hi = 0.0, 1.0
    while math.expm1(hi) / hi < ratio:
        hi *= 2.0
        if hi > 700.0:
            return 0.0, 0.0
    for _ in range(80):
        mid = 0.5 * (lo + hi)
        if mid > 0 and math.expm1(mid) / mid < ratio:
            lo = mid
        else:
            hi = mid
    x = 0.5 * (lo + hi)
    return change / math.expm1(x), t / x


def block_steadiness(reduced, criteria: SteadyCriteria, since_ns: int | None = None,
                     q_before: float = 0.0) -> Steadiness:
    """:func:`steady_state` of a reduced block's q and coefficients under ``criteria`` over its last
    ``criteria.hold_s`` (q's tolerance relative to its mean there; Cl, Cd_p, Cm¼ and Cl(balance) where the rig has
    them); with ``since_ns``, the device time of a fan change [ns], also :func:`approach_bound` of q over the block
    from then on (``q_before`` [Pa]: q before the change), within q's tolerance."""
    t_ns = np.asarray(reduced.t_ns, dtype=np.int64)
    t = (t_ns - int(t_ns[0])) / 1e9
    q = np.asarray(reduced.q_pa, dtype=float)
    last = (t >= t[-1] - criteria.hold_s) & np.isfinite(q)
    q_mean = float(q[last].mean()) if last.any() else 0.0
    signals = {"q": q}
    tolerances = {"q": criteria.q_rel * abs(q_mean)}
    for name in ("cl", "cd_p", "cm_qc", "cl_balance"):
        values = getattr(reduced, name, None)
        if values is not None and np.isfinite(values).any():
            signals[name] = values
            tolerances[name] = criteria.coefficient
    verdict = steady_state(t, signals, tolerances, criteria.hold_s, criteria.windows)
    if since_ns is None:
        return verdict
    after = t_ns >= int(since_ns)
    approach = approach_bound((t_ns[after] - int(since_ns)) / 1e9, q[after], q_before, criteria.q_rel,
                              criteria.hold_s)
    reason = verdict.reason
    if verdict.steady and not approach.steady:
        gap = f"up to {100 * approach.gap_rel:.2g} %" if math.isfinite(approach.gap_rel) else "by an amount it cannot bound"
        reason = (f"q is still approaching its steady value {approach.since_s:.3g} s after the fan change: {gap} "
                  f"away by its rate and time constant (allowed {100 * approach.allowed_rel:.2g} %)")
    return replace(verdict, steady=verdict.steady and approach.steady, reason=reason,
                   approach=approach.as_record())
