"""Section coefficients from tap Cp: the plain trapezoid per scan, leaving unusable taps out.

The formulas live in :mod:`taprig.physics.integration`; this module only decides which taps each scan may use.
A scan whose taps are all usable goes through one vectorised call with the rest of the block; scans with the same
set of unusable taps go through one call per distinct set, in a fixed (sorted) order, so the result does not
depend on how a block happened to be split.
"""

from __future__ import annotations

import numpy as np

from taprig.physics.integration import section_coefficients
from taprig.reduce.flags import SCAN_FLAG_DTYPE, ScanFlag
from taprig.reduce.layout import Contour


def _integrate(contour: Contour, cp: np.ndarray, alpha: np.ndarray, keep: np.ndarray, weights=None):
    if weights is None:
        res = section_coefficients(contour.x_c[keep], contour.y_c[keep], cp[:, keep], alpha)
    else:  # the same trapezoid weights, built once per set of taps
        res = weights(tuple(np.flatnonzero(keep).tolist())).apply(cp if keep.all() else cp[:, keep], alpha)
    return np.asarray(res.cl, dtype=float), np.asarray(res.cd_p, dtype=float), np.asarray(res.cm_qc, dtype=float)


def plain_coefficients(contour: Contour, cp: np.ndarray, tap_ok: np.ndarray, alpha: np.ndarray, min_taps: int,
                       weights=None):
    """Plain closed-contour trapezoid Cl, Cd_p, Cm_c/4 per scan over the usable taps.

    Parameters
    ----------
    contour : Contour
        Tap positions on the contour and the Cp column of each contour point.
    cp : ndarray (scans, taps)
        Pressure coefficients [-] (NaN where unusable).
    tap_ok : ndarray of bool (scans, taps)
        Usable samples.
    alpha : ndarray (scans,)
        Angle of attack [rad].
    min_taps : int
        Fewest usable contour points for an integral.
    weights : callable, optional
        ``weights(keep)`` → the trapezoid's :class:`~taprig.physics.integration.SectionWeights` over the contour
        points ``keep`` (a tuple of indices), memoised by the caller (:meth:`Reducer.plain_weights`); built here
        on each call without it.

    Returns
    -------
    (cl, cd_p, cm_qc), flags
        Three (scans,) arrays [-] (NaN where not integrable) and the :class:`ScanFlag` bits DEGRADED (taps left
        out) and NO_INTEGRAL (too few taps).
    """
    identity = contour.columns.size == cp.shape[1] and np.array_equal(contour.columns, np.arange(cp.shape[1]))
    cpc = cp if identity else cp[:, contour.columns]  # every tap once, in order: no gather needed
    ok = tap_ok if identity else tap_ok[:, contour.columns]
    n = cp.shape[0]
    flags = np.zeros(n, dtype=SCAN_FLAG_DTYPE)
    everything = np.ones(ok.shape[1], dtype=bool)
    if n == 0 or ok.all():
        return _integrate(contour, cpc, alpha, everything, weights), flags
    out = tuple(np.full(n, np.nan) for _ in range(3))
    patterns, inverse = np.unique(ok, axis=0, return_inverse=True)
    inverse = inverse.reshape(-1)
    for k, keep in enumerate(patterns):
        rows = inverse == k
        if not keep.all():
            flags[rows] |= SCAN_FLAG_DTYPE(ScanFlag.DEGRADED)
        if np.count_nonzero(keep) < min_taps:
            flags[rows] |= SCAN_FLAG_DTYPE(ScanFlag.NO_INTEGRAL)
            continue
        for target, value in zip(out, _integrate(contour, cpc[rows], alpha[rows], keep, weights)):
            target[rows] = value
    return out, flags
