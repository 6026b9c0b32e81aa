"""Measurement uncertainty after the GUM (JCGM 100:2008): type A from samples, type B from sensor specs, and
linear propagation with covariances.

The reducer needs three things from here: the standard uncertainty of a block mean (with a correction for the
correlation between successive samples of a slow, noisy flow), sensor accuracy turned into a standard uncertainty,
and propagation from tap pressures through Cp into integrated coefficients. Cp values of different taps share
the reference channels (static and total, or q), so their errors are correlated; that is why the Cp functions
return full covariance matrices and :func:`propagate_covariance` takes one.
"""

from __future__ import annotations

from enum import Enum

import numpy as np
from numpy.typing import ArrayLike

from taprig.physics.constants import require_nonnegative, require_positive


class Distribution(Enum):
    """Assumed distribution of a type-B specification and the divisor that turns its half-width into a standard
    uncertainty (JCGM 100:2008, §4.3.3–4.3.9)."""

    RECTANGULAR = float(np.sqrt(3.0))  # "± a, no other information" (§4.3.7): the default for datasheet accuracy
    TRIANGULAR = float(np.sqrt(6.0))  # values near the centre more likely (§4.3.9)
    NORMAL_K2 = 2.0  # the half-width is an expanded uncertainty with coverage factor k = 2 (§4.3.3)


def type_b_from_full_scale(
    accuracy_percent_fs: ArrayLike,
    full_scale: ArrayLike,
    distribution: Distribution = Distribution.RECTANGULAR,
) -> np.ndarray:
    r"""Standard uncertainty of a sensor from its datasheet accuracy in per cent of full scale.

    .. math:: u = \frac{(a_{\%FS}/100)\, FS}{d}, \quad d = \sqrt{3}\ \text{(rectangular)},\ \sqrt{6}\
              \text{(triangular)},\ 2\ \text{(normal, } k = 2)

    Parameters
    ----------
    accuracy_percent_fs : array_like
        Datasheet accuracy as a half-width in % of full scale [%FS], for example 0.25 for "±0.25 %FS".
    full_scale : array_like
        Full-scale span the percentage refers to [Pa] (or any unit; the result is in the same unit).
    distribution : Distribution, optional
        How to read the half-width. Default rectangular: a datasheet "±a" bound with no stated distribution is
        treated as a uniform distribution over ±a, so u = a/√3 (GUM §4.3.7).

    Returns
    -------
    ndarray
        Standard uncertainty u [same unit as full_scale].

    Examples
    --------
    >>> round(float(type_b_from_full_scale(0.25, 1000.0)), 4)
    1.4434

    References
    ----------
    JCGM 100:2008 (GUM), §4.3.7 and §4.3.9.
    """
    a = require_nonnegative("sensor accuracy", accuracy_percent_fs, "%FS")
    fs = require_positive("full scale", full_scale, "")
    return a / 100.0 * fs / distribution.value


def combine_in_quadrature(*components: ArrayLike) -> np.ndarray:
    r"""Combined standard uncertainty of independent components with unit sensitivity.

    .. math:: u_c = \sqrt{\sum_i u_i^2}

    Parameters
    ----------
    *components : array_like
        Standard uncertainties u_i [any one unit], broadcast together.

    Returns
    -------
    ndarray
        Combined standard uncertainty u_c [same unit].

    Examples
    --------
    >>> float(combine_in_quadrature(3.0, 4.0))
    5.0

    References
    ----------
    JCGM 100:2008 (GUM), §5.1.2, eq. (10) with uncorrelated inputs.
    """
    if not components:
        raise ValueError("combine_in_quadrature needs at least one uncertainty component")
    arrays = np.broadcast_arrays(*(np.asarray(c, dtype=float) for c in components))
    return np.sqrt(np.sum(np.square(arrays), axis=0))


def effective_sample_count(samples: ArrayLike, axis: int = 0) -> np.ndarray:
    r"""Number of independent samples equivalent to a serially correlated record, for the variance of its mean.

    .. math::
        n_{eff} = \frac{n}{1 + 2\sum_{k=1}^{K}\left(1 - \frac{k}{n}\right)\rho_k}

    with ρ_k the sample autocorrelation at lag k and the sum truncated before the first lag whose ρ_k ≤ 0
    (an estimated tail of noise only adds variance).

    Parameters
    ----------
    samples : array_like
        Record(s) of one quantity [any unit]; the time axis is ``axis``, every other axis is an independent record.
    axis : int, optional
        Time axis, default 0 (scans × channels blocks).

    Returns
    -------
    ndarray
        n_eff [-], clipped to [1, n], with ``axis`` removed.

    Notes
    -----
    Needs a record much longer than the correlation time (n ≳ 50 τ) for a stable estimate. White noise gives
    n_eff ≈ n; an AR(1) process with coefficient φ gives n (1 − φ)/(1 + φ).

    Examples
    --------
    >>> rng = np.random.default_rng(1)
    >>> 0.8 < float(effective_sample_count(rng.normal(size=4000))) / 4000 <= 1.0
    True

    References
    ----------
    G. V. Bayley, J. M. Hammersley, "The 'effective' number of independent observations in an autocorrelated time
    series", J. R. Stat. Soc. Suppl. 8 (1946) 184–197; W. Zhang, "Sample-mean uncertainty of serially correlated
    data", Metrologia 43 (2006) S276.
    """
    x = np.moveaxis(np.asarray(samples, dtype=float), axis, -1)
    n = x.shape[-1]
    if n < 2:
        raise ValueError(f"need at least 2 samples along axis {axis} to estimate autocorrelation; got {n}")
    rho = _autocorrelation(x)[..., 1:]
    keep = np.cumprod(rho > 0.0, axis=-1)  # 1 up to the first non-positive lag, 0 after
    lags = np.arange(1, n)
    inflation = 1.0 + 2.0 * np.sum(keep * (1.0 - lags / n) * np.nan_to_num(rho), axis=-1)
    return np.clip(n / inflation, 1.0, n)


def standard_error_of_mean(samples: ArrayLike, axis: int = 0, autocorrelated: bool = False) -> np.ndarray:
    r"""Type-A standard uncertainty of the mean of a record.

    .. math:: u(\bar x) = \frac{s}{\sqrt{n}} \quad\text{or}\quad \frac{s}{\sqrt{n_{eff}}}

    with s the sample standard deviation (n − 1 divisor) and n_eff from :func:`effective_sample_count`.

    Parameters
    ----------
    samples : array_like
        Record(s) [any unit], time along ``axis``.
    axis : int, optional
        Time axis, default 0.
    autocorrelated : bool, optional
        If True, use n_eff (the record's samples are serially correlated, as with a fast sample rate on a slowly
        fluctuating flow); if False, treat samples as independent (GUM §4.2.3).

    Returns
    -------
    ndarray
        u(x̄) [same unit], with ``axis`` removed.

    Examples
    --------
    >>> float(standard_error_of_mean([1.0, 2.0, 3.0, 4.0]))
    0.6454972243679028

    References
    ----------
    JCGM 100:2008 (GUM), §4.2.3; Zhang, Metrologia 43 (2006) S276 for n_eff.
    """
    x = np.asarray(samples, dtype=float)
    n = x.shape[axis]
    if n < 2:
        raise ValueError(f"need at least 2 samples along axis {axis} for a standard deviation; got {n}")
    s = np.std(x, axis=axis, ddof=1)
    count = effective_sample_count(x, axis=axis) if autocorrelated else n
    return s / np.sqrt(count)


def cp_uncertainty_absolute(
    cp: ArrayLike, q: ArrayLike, u_tap: ArrayLike, u_static: ArrayLike, u_total: ArrayLike
) -> np.ndarray:
    r"""Standard uncertainty of Cp measured with three absolute (or common-reference) channels.

    .. math::
        C_p = \frac{p - p_\infty}{p_0 - p_\infty}, \quad
        u(C_p) = \frac{1}{q}\sqrt{u_p^2 + (1 - C_p)^2 u_\infty^2 + C_p^2 u_0^2}

    Parameters
    ----------
    cp : array_like
        Pressure coefficient of each tap [-].
    q : array_like
        Dynamic pressure q = p0 − p∞ [Pa].
    u_tap, u_static, u_total : array_like
        Standard uncertainties of the tap, static-reference and total-pressure channels [Pa], uncorrelated.

    Returns
    -------
    ndarray
        u(Cp) [-].

    Examples
    --------
    >>> round(float(cp_uncertainty_absolute(-1.0, 250.0, 2.0, 2.0, 2.0)), 6)
    0.019596

    References
    ----------
    JCGM 100:2008 (GUM), §5.1.2 (sensitivity coefficients of the Cp definition).
    """
    c = np.asarray(cp, dtype=float)
    u_p = require_nonnegative("tap-channel uncertainty", u_tap, "Pa")
    u_s = require_nonnegative("static-channel uncertainty", u_static, "Pa")
    u_0 = require_nonnegative("total-channel uncertainty", u_total, "Pa")
    q_pa = require_positive("dynamic pressure q", q, "Pa")
    return np.sqrt(u_p**2 + (1.0 - c) ** 2 * u_s**2 + c**2 * u_0**2) / q_pa


def cp_uncertainty_differential(cp: ArrayLike, q: ArrayLike, u_tap: ArrayLike, u_q: ArrayLike) -> np.ndarray:
    r"""Standard uncertainty of Cp measured with a tap-minus-static differential and a differential q channel.

    .. math:: C_p = \frac{\Delta p}{q}, \quad u(C_p) = \frac{1}{q}\sqrt{u_{\Delta p}^2 + C_p^2 u_q^2}

    Parameters
    ----------
    cp : array_like
        Pressure coefficient [-].
    q : array_like
        Dynamic pressure [Pa].
    u_tap, u_q : array_like
        Standard uncertainties of the tap differential and the q channel [Pa], uncorrelated.

    Returns
    -------
    ndarray
        u(Cp) [-].

    Examples
    --------
    >>> round(float(cp_uncertainty_differential(-3.0, 250.0, 2.0, 2.0)), 6)
    0.025298

    References
    ----------
    JCGM 100:2008 (GUM), §5.1.2.
    """
    c = np.asarray(cp, dtype=float)
    u_p = require_nonnegative("tap-channel uncertainty", u_tap, "Pa")
    u_ref = require_nonnegative("q-channel uncertainty", u_q, "Pa")
    return np.sqrt(u_p**2 + c**2 * u_ref**2) / require_positive("dynamic pressure q", q, "Pa")


def cp_covariance_absolute(
    cp: ArrayLike, q: ArrayLike, u_tap: ArrayLike, u_static: ArrayLike, u_total: ArrayLike
) -> np.ndarray:
    r"""Covariance matrix of the Cp of several taps that share one static and one total-pressure channel.

    .. math::
        \operatorname{cov}(C_{p,i}, C_{p,j}) = \frac{1}{q^2}\left[\delta_{ij} u_{p,i}^2
        + (1 - C_{p,i})(1 - C_{p,j})\, u_\infty^2 + C_{p,i} C_{p,j}\, u_0^2\right]

    Parameters
    ----------
    cp : array_like
        Cp of the taps, shape (..., n_taps) [-].
    q : array_like
        Dynamic pressure, broadcastable to shape (...) [Pa].
    u_tap : array_like
        Tap-channel standard uncertainties, broadcastable to (..., n_taps) [Pa].
    u_static, u_total : array_like
        Standard uncertainties of the shared static and total channels, broadcastable to (...) [Pa].

    Returns
    -------
    ndarray
        Covariance, shape (..., n_taps, n_taps) [-].

    Examples
    --------
    >>> cov = cp_covariance_absolute([1.0, -1.0], 250.0, 2.0, 2.0, 2.0)
    >>> round(float(cov[0, 1] / np.sqrt(cov[0, 0] * cov[1, 1])), 4)
    -0.2887

    References
    ----------
    JCGM 100:2008 (GUM), §5.2.2 (correlated output quantities through shared inputs).
    """
    c = np.asarray(cp, dtype=float)
    jac_static = (c - 1.0) / _per_tap(q)  # ∂Cp/∂p∞
    jac_total = -c / _per_tap(q)  # ∂Cp/∂p0
    shared = _outer(jac_static) * _per_pair(u_static) ** 2 + _outer(jac_total) * _per_pair(u_total) ** 2
    return shared + _diagonal((_tap_uncertainty(u_tap) / _per_tap(q)) ** 2, c.shape)


def cp_covariance_differential(cp: ArrayLike, q: ArrayLike, u_tap: ArrayLike, u_q: ArrayLike) -> np.ndarray:
    r"""Covariance matrix of the Cp of several differential taps divided by one shared q channel.

    .. math::
        \operatorname{cov}(C_{p,i}, C_{p,j}) = \frac{1}{q^2}\left[\delta_{ij} u_{\Delta p,i}^2
        + C_{p,i} C_{p,j}\, u_q^2\right]

    Parameters
    ----------
    cp : array_like
        Cp of the taps, shape (..., n_taps) [-].
    q : array_like
        Dynamic pressure, broadcastable to (...) [Pa].
    u_tap : array_like
        Tap-differential standard uncertainties, broadcastable to (..., n_taps) [Pa].
    u_q : array_like
        Standard uncertainty of the q channel, broadcastable to (...) [Pa].

    Returns
    -------
    ndarray
        Covariance, shape (..., n_taps, n_taps) [-].

    Examples
    --------
    >>> cp_covariance_differential([0.0, -3.0], 250.0, 2.0, 2.0).round(6).tolist()
    [[6.4e-05, 0.0], [0.0, 0.00064]]

    References
    ----------
    JCGM 100:2008 (GUM), §5.2.2.
    """
    c = np.asarray(cp, dtype=float)
    jac_q = -c / _per_tap(q)  # ∂Cp/∂q
    shared = _outer(jac_q) * _per_pair(u_q) ** 2
    return shared + _diagonal((_tap_uncertainty(u_tap) / _per_tap(q)) ** 2, c.shape)


def propagate_covariance(jacobian: ArrayLike, covariance: ArrayLike) -> np.ndarray:
    r"""Covariance of outputs that depend (to first order) linearly on correlated inputs.

    .. math:: U_y = J\, U_x\, J^{\mathsf T}

    Parameters
    ----------
    jacobian : array_like
        Sensitivities J = ∂y/∂x, shape (..., m, n) [unit of y / unit of x].
    covariance : array_like
        Input covariance U_x, shape (..., n, n) [unit of x²]; leading axes broadcast against ``jacobian``'s.

    Returns
    -------
    ndarray
        Output covariance U_y, shape (..., m, m) [unit of y²].

    Examples
    --------
    >>> propagate_covariance([[1.0, 1.0]], [[1.0, 0.5], [0.5, 1.0]]).tolist()
    [[3.0]]

    References
    ----------
    JCGM 100:2008 (GUM), §5.2.2, eq. (13); JCGM 102:2011, §6.2.1.3 (matrix form).
    """
    jac, cov = _checked_pair(jacobian, covariance)
    return jac @ cov @ np.swapaxes(jac, -1, -2)


def propagate_uncertainty(jacobian: ArrayLike, covariance: ArrayLike) -> np.ndarray:
    r"""Standard uncertainties of linearly propagated outputs: the root of the diagonal of J U_x Jᵀ.

    .. math:: u(y_i) = \sqrt{\left(J U_x J^{\mathsf T}\right)_{ii}}

    Parameters
    ----------
    jacobian : array_like
        Sensitivities, shape (..., m, n).
    covariance : array_like
        Input covariance, shape (..., n, n).

    Returns
    -------
    ndarray
        u(y), shape (..., m) [unit of y].

    Examples
    --------
    >>> propagate_uncertainty([[1.0, -1.0]], [[4.0, 0.0], [0.0, 9.0]]).round(4).tolist()
    [3.6056]

    References
    ----------
    JCGM 100:2008 (GUM), §5.2.2.
    """
    jac, cov = _checked_pair(jacobian, covariance)
    # only the diagonal is formed, skipping the m²·n of the full J U Jᵀ when there are many outputs
    variance = np.sum((jac @ cov) * jac, axis=-1)
    return np.sqrt(np.maximum(variance, 0.0))  # clip the tiny negative round-off of a singular covariance


def _checked_pair(jacobian: ArrayLike, covariance: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
    """Jacobian and covariance as arrays after checking that their shapes are (..., m, n) and (..., n, n)."""
    jac = np.asarray(jacobian, dtype=float)
    cov = np.asarray(covariance, dtype=float)
    if jac.ndim < 2 or cov.ndim < 2 or cov.shape[-1] != cov.shape[-2] or jac.shape[-1] != cov.shape[-1]:
        raise ValueError(
            f"need a Jacobian (..., m, n) and a covariance (..., n, n); got shapes {jac.shape} and {cov.shape}"
        )
    return jac, cov


def _tap_uncertainty(u_tap: ArrayLike) -> np.ndarray:
    """Tap-channel standard uncertainties as an array after checking they are >= 0."""
    return require_nonnegative("tap-channel uncertainty", u_tap, "Pa")


def _autocorrelation(x: np.ndarray) -> np.ndarray:
    """Biased sample autocorrelation along the last axis by FFT (lags 0 … n−1); NaN for a constant record."""
    n = x.shape[-1]
    centred = x - x.mean(axis=-1, keepdims=True)
    spectrum = np.fft.rfft(centred, n=2 * n, axis=-1)
    acov = np.fft.irfft(spectrum * np.conj(spectrum), n=2 * n, axis=-1)[..., :n]
    with np.errstate(invalid="ignore", divide="ignore"):
        return acov / acov[..., :1]


def _per_tap(q: ArrayLike) -> np.ndarray:
    """q as an array with a trailing (length-1, broadcasting) tap axis, after checking q > 0."""
    return require_positive("dynamic pressure q", q, "Pa")[..., None]


def _per_pair(u: ArrayLike) -> np.ndarray:
    """A per-block standard uncertainty with two trailing axes for an (n × n) matrix."""
    return require_nonnegative("reference-channel uncertainty", u, "Pa")[..., None, None]


def _outer(v: np.ndarray) -> np.ndarray:
    """Outer product over the last axis: (..., n) → (..., n, n)."""
    return v[..., :, None] * v[..., None, :]


def _diagonal(d: np.ndarray, shape: tuple[int, ...]) -> np.ndarray:
    """Diagonal matrices (..., n, n) from the broadcast of d to ``shape``."""
    return np.broadcast_to(d, np.broadcast_shapes(d.shape, shape))[..., :, None] * np.eye(shape[-1])
