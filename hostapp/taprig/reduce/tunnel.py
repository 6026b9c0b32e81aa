"""The tunnel's static factor f = (p_room − p∞)/q, measured once with the empty tunnel (docs/calibration.md)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from taprig.reduce.references import ReduceError


@dataclass(frozen=True)
class StaticFactor:
    """``factor`` f [-] and its standard uncertainty ``u_factor`` [-] from ``n_points`` pairs; ``residual_rms``
    [Pa] of the fit."""

    factor: float
    u_factor: float
    n_points: int
    residual_rms: float

    def rig_lines(self) -> str:
        """The lines for the rig file's ``[reference]`` table."""
        return (f'static_source = "factor"\nstatic_factor = {self.factor:.4f}\n'
                f"static_factor_u = {max(self.u_factor, 5e-5):.4f}")


def fit_static_factor(q: ArrayLike, room_minus_static: ArrayLike, u_reading: float = 0.0) -> StaticFactor:
    r"""Least-squares slope through the origin of p_room − p∞ against q.

    .. math::
        f = \frac{\sum q_i d_i}{\sum q_i^2}, \qquad
        u^2(f) = \frac{s^2 + u_r^2}{\sum q_i^2}, \qquad s^2 = \frac{\sum (d_i - f q_i)^2}{n - 1}

    Parameters
    ----------
    q : array_like
        The rig's dynamic pressure at each fan speed [Pa].
    room_minus_static : array_like
        p_room − p∞ at the model's position, same points [Pa].
    u_reading : float, optional
        Standard uncertainty of one room − static reading not seen in the scatter (the spare sensor's datasheet
        rest) [Pa].

    Returns
    -------
    StaticFactor

    Raises
    ------
    ReduceError
        Fewer than three points, a non-finite value, or no point with flow.

    References
    ----------
    Linear regression through the origin, standard error of the slope (common practice; JCGM 100:2008 §H.3 for
    a straight-line calibration).

    Examples
    --------
    >>> fit_static_factor([100.0, 200.0, 300.0], [110.0, 220.0, 330.0]).factor
    1.1
    """
    q = np.asarray(q, dtype=float).ravel()
    d = np.asarray(room_minus_static, dtype=float).ravel()
    if q.size != d.size or q.size < 3:
        raise ReduceError(f"a static factor needs three or more (q, room − static) pairs; got {q.size} and {d.size}")
    if not (np.all(np.isfinite(q)) and np.all(np.isfinite(d))):
        raise ReduceError("the static-factor pairs must be finite numbers")
    sq = float(np.dot(q, q))
    if not sq > 0.0:
        raise ReduceError("the static-factor pairs have no flow (every q is zero)")
    f = float(np.dot(q, d)) / sq
    resid = d - f * q
    s2 = float(np.dot(resid, resid)) / (q.size - 1)
    return StaticFactor(f, float(np.sqrt((s2 + u_reading**2) / sq)), int(q.size), float(np.sqrt(np.mean(resid**2))))
