"""Unsteadiness of the flow at each point: separated flow shows as pressure fluctuations on the suction side. Pure.

Attached flow over a section carries little more than the free stream's own turbulence to the taps; behind a
separation the pressures fluctuate strongly (common practice: a separated shear layer sheds large eddies over the
surface beneath it). The indicator of a point is the RMS over the suction-side taps of each tap's Cp fluctuation,
divided by the same quantity in attached flow: the median over the points of the lift curve's linear range. A
point whose indicator exceeds ``threshold`` (1.3 by default, our choice, stated in the report) is marked unsteady.
Each tap's fluctuation is Cp' = σ(p − p∞)/q̄ (recorded with the point), so the noise of q does not count.

The tubing between the taps and the sensors damps fast fluctuations (a low-pass filter), so the ratio, not the
level, is what carries over from rig to rig.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np

#: Indicator above which a point is called unsteady (separated): a choice of ours, 30 % above attached
#: flow (the sensors' own noise sets the attached level on a bench rig, and the tubing damps the separated part).
UNSTEADY_THRESHOLD = 1.3


@dataclass(frozen=True)
class Unsteadiness:
    """Per point: ``indicator`` (suction-side Cp RMS over its attached level, NaN where not recorded) and
    ``unsteady`` (indicator > ``threshold``). ``attached_level`` is the RMS Cp of attached flow it is divided by;
    ``first_unsteady_alpha`` the lowest angle of an unsteady point on the rising side [rad] (NaN when none)."""

    indicator: np.ndarray
    unsteady: np.ndarray
    attached_level: float
    threshold: float
    first_unsteady_alpha: float


def unsteadiness(alpha_rad, cp_rms_suction, attached: Sequence[int] | None = None,
                 threshold: float = UNSTEADY_THRESHOLD) -> Unsteadiness:
    """The unsteadiness indicator of each point (see the module docstring).

    Parameters
    ----------
    alpha_rad : array_like
        Angle of each point [rad].
    cp_rms_suction : array_like
        RMS over the suction-side taps of the Cp fluctuation of each point [-] (NaN where not recorded).
    attached : sequence of int, optional
        Indices of points known to be in attached flow (the lift curve's linear range); default: the half of the
        points with the smallest |α|.
    threshold : float
        Indicator above which a point is unsteady [-].

    Examples
    --------
    >>> u = unsteadiness(np.radians([0, 4, 8, 12, 14]), [0.01, 0.011, 0.009, 0.05, 0.08], attached=[0, 1, 2])
    >>> u.unsteady.tolist(), round(math.degrees(u.first_unsteady_alpha))
    ([False, False, False, True, True], 12)
    """
    alpha = np.asarray(alpha_rad, dtype=float)
    rms = np.asarray(cp_rms_suction, dtype=float)
    if attached is None:
        order = np.argsort(np.abs(np.nan_to_num(alpha, nan=np.inf)))
        attached = order[: max(1, alpha.size // 2)]
    reference = rms[np.asarray(attached, dtype=int)] if len(attached) else np.zeros(0)
    reference = reference[np.isfinite(reference) & (reference > 0)]
    level = float(np.median(reference)) if reference.size else math.nan
    with np.errstate(invalid="ignore", divide="ignore"):
        indicator = rms / level if math.isfinite(level) else np.full_like(rms, math.nan)
    unsteady = np.nan_to_num(indicator, nan=0.0) > threshold
    rising = unsteady & (alpha >= 0)
    first = float(alpha[rising].min()) if rising.any() else math.nan
    return Unsteadiness(indicator, unsteady, level, threshold, first)


def tap_fluctuation(cp, q_pa) -> np.ndarray:
    r"""Each tap's Cp fluctuation over a point's scans, the quantity a point records as ``cp_rms``.

    .. math:: C_p' = \sigma(p - p_\infty) / \bar q = \sigma(C_p\,q) / \bar q

    with σ the sample standard deviation over the scans (Bessel-corrected) and q̄ the mean dynamic pressure, so
    that the noise of q itself does not count as a fluctuation of the surface pressure (module docstring).

    Parameters
    ----------
    cp : array_like
        Pressure coefficient per scan and tap (scans × taps) [-]; NaN where a scan has none.
    q_pa : array_like
        Dynamic pressure of each scan [Pa].

    Returns
    -------
    ndarray
        Cp' per tap [-]; NaN for a tap with fewer than 2 usable scans or without a positive mean q.

    Examples
    --------
    >>> q = np.array([100.0, 100.0, 100.0, 100.0])
    >>> tap_fluctuation(np.array([[-1.0], [-1.2], [-1.0], [-1.2]]), q).round(4).tolist()
    [0.1155]
    """
    cp = np.atleast_2d(np.asarray(cp, dtype=float))
    q = np.asarray(q_pa, dtype=float)
    dp = cp * q[:, None]
    ok = np.isfinite(dp)
    n = ok.sum(axis=0)
    q_mean = float(np.nanmean(q)) if np.isfinite(q).any() else math.nan
    out = np.full(cp.shape[1], math.nan)
    usable = (n >= 2) & (q_mean > 0)
    if usable.any():
        with np.errstate(invalid="ignore"):
            out[usable] = np.nanstd(dp[:, usable], axis=0, ddof=1) / q_mean
    return out
