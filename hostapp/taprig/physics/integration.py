"""Section lift, pressure drag and pitching moment from tap Cp: closed-contour trapezoid and a shape-aware fit.

Both integrators are linear (affine) in the tap Cp, so each is a :class:`SectionWeights`: per-tap weights for the
body-axis coefficients Cn, Ca, Cm(c/4). The weights are the sensitivities dC/dCp_i that the reducer needs to carry a
tap covariance matrix into u(Cl) (u² = wᵀ Σ w). Conventions, for a contour run counter-clockwise (trailing edge →
upper → leading edge → lower) at unit chord:

    Cn = ∮ Cp dx,   Ca = −∮ Cp dy,   Cm(c/4) = −∮ Cp [(x − 1/4) dx + y dy]   (nose up positive)
    Cl = Cn cos α − Ca sin α,   Cd_p = Cn sin α + Ca cos α,   x_cp = 1/4 − Cm(c/4) / Cn

Source: integral of the surface pressure (common practice; e.g. Anderson, *Fundamentals of Aerodynamics*, §1.5,
from memory). Plain trapezoids over sparse taps are badly wrong when the taps miss the leading-edge suction peak
(docs/REFERENCES.md); :class:`ShapeFitIntegrator` fits the taps to the panel-method pressure family of the same
shape and integrates that on the dense contour instead.
"""

from __future__ import annotations

import enum
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike
from numpy.polynomial import legendre

from taprig.physics.panel import QUARTER_CHORD, PanelModel
from taprig.physics.sections import SectionShape

_AT_TRAILING_EDGE = 1.0 - 1e-9  # a tap at x/c ≥ this is the trailing-edge point itself


class TrailingEdgeClosure(enum.Enum):
    """How the closed-contour trapezoid bridges the trailing edge when no tap sits on it.

    MEAN: add a point at (1, te_y) whose Cp is the mean of the first and last taps (the last tap of each
    surface). EXTRAPOLATE: the same point, with the mean of each surface's linear extrapolation of its last two
    taps to x = 1. POLYGON: close straight from the last tap to the first.
    """

    MEAN = "mean"
    EXTRAPOLATE = "extrapolate"
    POLYGON = "polygon"


@dataclass(frozen=True)
class SectionCoefficients:
    """Integrated section coefficients [-]; arrays over the leading (scans) axes of the Cp given."""

    cn: np.ndarray
    ca: np.ndarray
    cl: np.ndarray
    cd_p: np.ndarray
    cm_qc: np.ndarray
    x_cp: np.ndarray


@dataclass(frozen=True)
class SectionWeights:
    """An affine integrator: C = w · Cp + offset for C in (Cn, Ca, Cm(c/4)).

    ``normal``, ``axial``, ``moment`` are per-tap weights (N,) [-]; the offsets are zero for the trapezoid and
    carry the fit's prior for :class:`ShapeFitIntegrator`.
    """

    normal: np.ndarray
    axial: np.ndarray
    moment: np.ndarray
    offsets: tuple[float, float, float] = (0.0, 0.0, 0.0)

    def cl(self, alpha_rad: ArrayLike) -> np.ndarray:
        """dCl/dCp_i = cos α ∂Cn/∂Cp_i − sin α ∂Ca/∂Cp_i [-]; shape α.shape + (N,)."""
        a = np.asarray(alpha_rad, dtype=float)[..., np.newaxis]
        return np.cos(a) * self.normal - np.sin(a) * self.axial

    def cd_p(self, alpha_rad: ArrayLike) -> np.ndarray:
        """dCd_p/dCp_i = sin α ∂Cn/∂Cp_i + cos α ∂Ca/∂Cp_i [-]; shape α.shape + (N,)."""
        a = np.asarray(alpha_rad, dtype=float)[..., np.newaxis]
        return np.sin(a) * self.normal + np.cos(a) * self.axial

    def apply(self, cp: ArrayLike, alpha_rad: ArrayLike) -> SectionCoefficients:
        """Coefficients for Cp (..., N) [-] at angles α [rad] broadcasting against the leading axes."""
        cp = np.asarray(cp, dtype=float)
        if cp.ndim == 0 or cp.shape[-1] != self.normal.size:
            raise ValueError(f"Cp must have the {self.normal.size} taps on its last axis, got shape {cp.shape}")
        stacked = cp @ np.stack((self.normal, self.axial, self.moment), axis=1) + np.asarray(self.offsets)
        return _from_body_axes(stacked[..., 0], stacked[..., 1], stacked[..., 2], alpha_rad)


def _from_body_axes(cn, ca, cm, alpha_rad) -> SectionCoefficients:
    a = np.asarray(alpha_rad, dtype=float)
    c, s = np.cos(a), np.sin(a)
    with np.errstate(divide="ignore", invalid="ignore"):
        x_cp = np.where(np.abs(cn) > 1e-9, QUARTER_CHORD - cm / cn, np.nan)
    return SectionCoefficients(cn=cn, ca=ca, cl=cn * c - ca * s, cd_p=cn * s + ca * c, cm_qc=cm, x_cp=x_cp)


def _check_taps(x_c: ArrayLike, y_c: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
    x = np.asarray(x_c, dtype=float)
    y = np.asarray(y_c, dtype=float)
    if x.ndim != 1 or x.shape != y.shape:
        raise ValueError(f"tap coordinates: x_c and y_c must be 1-D of equal length, got {x.shape} and {y.shape}")
    if x.size < 3:
        raise ValueError(f"tap coordinates: need at least 3 taps to integrate, got {x.size}")
    if not (np.all(np.isfinite(x)) and np.all(np.isfinite(y))):
        raise ValueError("tap coordinates: x_c and y_c must be finite")
    return x, y


def _closure_rows(x: np.ndarray, closure: TrailingEdgeClosure) -> np.ndarray | None:
    """Row (N,) giving the trailing-edge point's Cp as a combination of tap Cp, or None if none is added."""
    if closure is TrailingEdgeClosure.POLYGON or x[0] >= _AT_TRAILING_EDGE or x[-1] >= _AT_TRAILING_EDGE:
        return None
    row = np.zeros(x.size)
    if closure is TrailingEdgeClosure.MEAN or x.size < 4:
        row[[0, -1]] = 0.5
        return row
    # Each surface's last two taps, (0, 1) on the upper and (−1, −2) on the lower, extrapolated to x = 1.
    for near, far in ((0, 1), (-1, -2)):
        dx = x[near] - x[far]
        t = (1.0 - x[near]) / dx if abs(dx) > 1e-12 else 0.0
        row[near] += 0.5 * (1.0 + t)
        row[far] -= 0.5 * t
    return row


def trapezoid_weights(x_c: ArrayLike, y_c: ArrayLike, closure: TrailingEdgeClosure = TrailingEdgeClosure.MEAN,
                      te_y: float = 0.0) -> SectionWeights:
    r"""Closed-contour trapezoid weights for taps listed in contour order.

    .. math:: C_n = \sum_k \tfrac12 (C_{p,k} + C_{p,k+1})(x_{k+1} - x_k), \quad
              C_a = -\sum_k \tfrac12 (C_{p,k} + C_{p,k+1})(y_{k+1} - y_k)

    round the closed polygon of the taps (and the trailing-edge point of ``closure``); the moment integrand
    Cp[(x − 1/4)dx/ds + y dy/ds] is integrated the same way.

    Parameters
    ----------
    x_c, y_c : array_like
        Tap positions x/c, y/c [-], in contour order (trailing edge → upper → leading edge → lower).
    closure : TrailingEdgeClosure
        How to bridge the trailing edge; ignored when the first or last tap is at x/c = 1.
    te_y : float
        y/c of the trailing-edge point added by the closure [-] (0 for a :class:`SectionShape`).

    Returns
    -------
    SectionWeights
        Linear weights (no offsets).

    Examples
    --------
    >>> w = trapezoid_weights([1.0, 0.5, 0.0, 0.5], [0.0, 0.05, 0.0, -0.05])
    >>> w.normal.round(3).tolist()
    [0.0, -0.5, 0.0, 0.5]

    References
    ----------
    Closed-polygon trapezoid rule, as used for docs/REFERENCES.md's tap-layout table (common practice).
    """
    x, y = _check_taps(x_c, y_c)
    closure = TrailingEdgeClosure(closure)
    extra = _closure_rows(x, closure)
    if extra is None:
        px, py = x, y
    else:
        px, py = np.append(x, 1.0), np.append(y, float(te_y))
    if 0.5 * np.sum(px * np.roll(py, -1) - np.roll(px, -1) * py) <= 0.0:
        raise ValueError("tap coordinates: taps must be listed in contour order, trailing edge → upper surface → "
                         "leading edge → lower surface (counter-clockwise); these run the other way or enclose "
                         "no area")
    half_dx = 0.5 * (np.roll(px, -1) - np.roll(px, 1))
    half_dy = 0.5 * (np.roll(py, -1) - np.roll(py, 1))
    point_weights = np.stack((half_dx, -half_dy, -((px - QUARTER_CHORD) * half_dx + py * half_dy)))
    if extra is not None:  # the added point's Cp is a combination of tap Cp: fold its weight onto those taps
        point_weights = point_weights[:, :-1] + point_weights[:, -1:] * extra
    normal, axial, moment = point_weights
    return SectionWeights(normal, axial, moment)


def section_coefficients(x_c: ArrayLike, y_c: ArrayLike, cp: ArrayLike, alpha_rad: ArrayLike,
                         closure: TrailingEdgeClosure = TrailingEdgeClosure.MEAN,
                         te_y: float = 0.0) -> SectionCoefficients:
    """Section coefficients by the closed-contour trapezoid of :func:`trapezoid_weights`.

    Parameters
    ----------
    x_c, y_c : array_like
        Tap positions x/c, y/c [-] in contour order, shape (N,).
    cp : array_like
        Pressure coefficients [-], shape (..., N) (leading axes: scans or block means).
    alpha_rad : array_like
        Angle of attack α [rad], broadcasting against cp's leading axes.
    closure, te_y
        See :func:`trapezoid_weights`.

    Returns
    -------
    SectionCoefficients
        cn, ca, cl, cd_p, cm_qc [-] and x_cp [-] (NaN where |Cn| < 1e-9), shaped like cp's leading axes.

    Examples
    --------
    >>> import numpy as np
    >>> phi = np.linspace(0.0, 2.0 * np.pi, 73)[:-1]
    >>> res = section_coefficients(0.5 * (1 + np.cos(phi)), 0.5 * np.sin(phi), 1 - 4 * np.sin(phi) ** 2, 0.0)
    >>> abs(float(res.cl)) < 1e-12 and abs(float(res.cd_p)) < 1e-12
    True
    """
    return trapezoid_weights(x_c, y_c, closure, te_y).apply(cp, alpha_rad)


@dataclass(frozen=True)
class ShapeFitResult:
    """Output of :meth:`ShapeFitIntegrator.integrate`; arrays over the leading axes of the Cp given.

    ``u_cl``, ``u_cd_p``, ``u_cm_qc`` estimate the integrator's own error [-] (one standard deviation);
    ``alpha_effective`` [rad] is the angle of the fitted inviscid distribution; ``residual_rms`` [-] the rms misfit
    at the taps.
    """

    coefficients: SectionCoefficients
    u_cl: np.ndarray
    u_cd_p: np.ndarray
    u_cm_qc: np.ndarray
    alpha_effective: np.ndarray
    residual_rms: np.ndarray


class ShapeFitIntegrator:
    r"""Integrate tap Cp by fitting the panel-method pressure family of the very shape the taps sit on.

    Model of the surface pressure (s: contour position; u₀, u₉₀: the panel method's unit-freestream speeds):

    .. math:: C_p(s) = a_0 + a_1 Q_0 + a_2 Q_c + a_3 Q_s + \sum_{k=1}^{K} d_k P_k(\xi)

    with :math:`Q_0 = (u_0^2 + u_{90}^2)/2`, :math:`Q_c = (u_0^2 - u_{90}^2)/2`, :math:`Q_s = u_0 u_{90}`, so
    inviscid flow at an effective angle α_e is exactly :math:`a = (1, -1, -\cos 2\alpha_e, -\sin 2\alpha_e)`, and
    smooth corrections P_k (Legendre polynomials of ξ = x/c on the lower surface, −x/c on the upper) for what the
    inviscid family lacks (pressure-recovery loss, decambering, a reference-pressure offset goes into a₀).
    Least squares with a Gaussian prior a₀ = 1 ± 0.2, a₁ = −1 ± 0.3, d_k = 0 ± 0.3 against tap noise
    ``cp_noise`` (a ridge that keeps few taps well posed). The fitted Cp is integrated round the dense panel
    contour, so the integrator is affine in the tap Cp: :attr:`weights`.

    Error estimate (one standard deviation, root sum of squares of its parts): the fit residual treated as
    noise and propagated through the weights, the change when the fit uses one mode fewer or one more, the
    change when the panel model has half the panels (the panel method's own discretisation error), and, with a
    ``section_tolerance`` δ, the section mismatch: the model is made as the section is drawn, the rig's section
    is not, and the pressure family of a slightly other section integrates the same taps to a slightly other
    drag. Two parts in quadrature, each the larger change of the two signs: the family of the section with its
    thickness grown or shrunk until its surface moves by δ at the thickest point, y' = y_c + (1 ± δ/t_max)(y −
    y_c), and the family with a parabolic camber ± δ·4x(1 − x) added (taps at the same x/c on each).

    Parameters
    ----------
    shape : SectionShape
        The section the taps are on (a dense coordinate table is best).
    tap_x_c : array_like
        Tap chord stations x/c [-], any order; Cp columns must follow the same order.
    tap_upper : array_like of bool
        True for taps on the upper surface.
    n_panels : int or None
        Panels of the model (None: the shape's own points).
    n_modes : int or None
        Correction modes K; None picks min(3, max(1, (N − 4) // 2)) for N taps.
    cp_noise : float
        Standard deviation of tap Cp assumed by the prior weighting [-].
    model : PanelModel or None
        A panel model of ``shape`` already built (several tap layouts on one shape share it); overrides n_panels.

    Examples
    --------
    Seven taps on a NACA 0012 at 4°, fed the panel method's own Cp: the fit gives back the dense contour's Cl.
    0.482 is a regression value (this code's output, kept to notice changes), not a validated figure; the checks
    against the exact Joukowski solution are in ``tests/physics/test_integration.py``.

    >>> from taprig.physics.sections import naca4
    >>> shape = naca4("0012")
    >>> x = np.array([0.6, 0.3, 0.1, 0.02, 0.05, 0.3, 0.6])
    >>> upper = np.array([True] * 4 + [False] * 3)
    >>> fit = ShapeFitIntegrator(shape, x, upper)
    >>> cp = PanelModel(shape).cp_at(np.radians(4.0), x, upper)
    >>> result = fit.integrate(cp, np.radians(4.0))
    >>> round(float(result.coefficients.cl), 3), bool(result.u_cl < 0.005)
    (0.482, True)
    >>> bool(abs(result.coefficients.cl - fit.model.cl(np.radians(4.0))) < 0.005)
    True

    References
    ----------
    Least squares with a Gaussian prior: JCGM 100:2008 (GUM) for the propagation; C. L. Lawson, R. J. Hanson,
    *Solving Least Squares Problems* (1974), ch. 25 (regularisation) (from memory).
    """

    def __init__(self, shape: SectionShape, tap_x_c: ArrayLike, tap_upper: ArrayLike, *, n_panels: int | None = None,
                 n_modes: int | None = None, cp_noise: float = 0.02, model: PanelModel | None = None,
                 section_tolerance: float = 0.0) -> None:
        x = np.asarray(tap_x_c, dtype=float).ravel()
        upper = np.broadcast_to(np.asarray(tap_upper, dtype=bool), x.shape).copy()
        if x.size < 3:
            raise ValueError(f"ShapeFitIntegrator: need at least 3 taps, got {x.size}")
        if not cp_noise > 0.0:
            raise ValueError(f"ShapeFitIntegrator: cp_noise must be > 0, got {cp_noise}")
        k = min(3, max(1, (x.size - 4) // 2)) if n_modes is None else int(n_modes)
        if not 0 <= k <= 8:
            raise ValueError(f"ShapeFitIntegrator: n_modes must be 0–8, got {n_modes}")
        self.shape, self.tap_x_c, self.tap_upper, self.n_modes = shape, x, upper, k
        if model is not None and model.shape is not shape:
            raise ValueError("ShapeFitIntegrator: the panel model given was built for another shape")
        self.model = PanelModel(shape, n_panels) if model is None else model
        self._tap_s = shape.arc_length_at(x, upper)
        self._cp_noise = float(cp_noise)
        self.weights, self._projector, self._prior_fit = self._build(self.model, k)
        coarse = PanelModel(shape, max(16, self.model.n_panels // 2))
        self._alternatives = [self._build(self.model, m)[0] for m in {max(k - 1, 0), k + 1} - {k}]
        self._alternatives.append(self._build(coarse, k)[0])
        self.section_tolerance = float(section_tolerance)
        self._mismatch = []  # pairs of weights (+δ, −δ): thickness, camber
        if self.section_tolerance > 0.0:
            for pair in _mismatched_sections(shape, self.section_tolerance):
                self._mismatch.append([self._build(PanelModel(other, self.model.n_panels if n_panels else None), k,
                                                   other.arc_length_at(x, upper))[0] for other in pair])
        taps = self._basis(self.model, self._tap_s, x, upper, k)
        # Tap residual r = cp − B a = (I − B P) cp − B a_prior; dof from the effective parameter count tr(B P).
        self._residual = np.eye(x.size) - taps @ self._projector
        self._residual_offset = taps @ self._prior_fit
        self._dof = max(x.size - float(np.trace(taps @ self._projector)), 1.0)

    @staticmethod
    def _basis(model: PanelModel, s: np.ndarray, x: np.ndarray, upper: np.ndarray, k: int) -> np.ndarray:
        u0, u90 = model.unit_speeds_at(s)
        xi = np.where(upper, -x, x)
        modes = [legendre.legval(xi, np.eye(k + 1)[j]) for j in range(1, k + 1)]
        return np.stack([np.ones_like(u0), 0.5 * (u0 * u0 + u90 * u90), 0.5 * (u0 * u0 - u90 * u90), u0 * u90, *modes],
                        axis=1)

    def _build(self, model: PanelModel, k: int, tap_s: np.ndarray | None = None):
        """Weights of the integrator with ``model`` and k modes, the tap → coefficient projector, prior offsets
        (``tap_s``: the taps' arc lengths on ``model``'s shape, default the shape's own)."""
        taps = self._basis(model, self._tap_s if tap_s is None else tap_s, self.tap_x_c, self.tap_upper, k)
        node_upper = np.arange(model.node_s.size) <= int(np.argmin(model.node_x))
        dense = self._basis(model, model.node_s, model.node_x, node_upper, k)
        prior_mean = np.zeros(4 + k)
        prior_mean[:2] = 1.0, -1.0
        prior_sigma = np.concatenate(([0.2, 0.3, np.inf, np.inf], np.full(k, 0.3)))
        precision = np.diag((self._cp_noise / prior_sigma) ** 2)
        normal_matrix = taps.T @ taps + precision
        projector = np.linalg.solve(normal_matrix, taps.T)  # (p, N)
        prior_fit = np.linalg.solve(normal_matrix, precision @ prior_mean)  # (p,)
        integrals = model.node_weights() @ dense  # (3, p): Cn, Ca, Cm of each basis function
        normal, axial, moment = integrals @ projector
        offsets = tuple(float(v) for v in integrals @ prior_fit)
        return SectionWeights(normal, axial, moment, offsets), projector, prior_fit

    def integrate(self, cp: ArrayLike, alpha_rad: ArrayLike) -> ShapeFitResult:
        """Fit and integrate tap Cp (..., N) [-] at angles α [rad] (broadcasting against the leading axes)."""
        cp = np.asarray(cp, dtype=float)
        if cp.ndim == 0 or cp.shape[-1] != self.tap_x_c.size:
            raise ValueError(f"ShapeFitIntegrator: Cp must have the {self.tap_x_c.size} taps on its last axis, "
                             f"got shape {cp.shape}")
        result = self.weights.apply(cp, alpha_rad)
        a = cp @ self._projector.T + self._prior_fit
        residual = cp @ self._residual.T - self._residual_offset
        sigma = np.sqrt(np.sum(residual * residual, axis=-1) / self._dof)
        alpha = np.asarray(alpha_rad, dtype=float)
        spread = [self._spread(w.apply(cp, alpha_rad), result) for w in self._alternatives]
        for pair in self._mismatch:
            both = [self._spread(w.apply(cp, alpha_rad), result) for w in pair]
            spread.append(tuple(np.maximum(a, b) for a, b in zip(*both)))
        stat = [sigma * np.linalg.norm(w, axis=-1) for w in
                (self.weights.cl(alpha), self.weights.cd_p(alpha), self.weights.moment)]
        u = [np.sqrt(stat[i] ** 2 + sum(s[i] ** 2 for s in spread)) for i in range(3)]
        return ShapeFitResult(coefficients=result, u_cl=u[0], u_cd_p=u[1], u_cm_qc=u[2],
                              alpha_effective=0.5 * np.arctan2(-a[..., 3], -a[..., 2]),
                              residual_rms=np.sqrt(np.mean(residual * residual, axis=-1)))

    def fitted_cp(self, cp: ArrayLike) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """The fitted Cp distribution round the dense panel contour, for drawing through the taps.

        Returns (x/c, upper, Cp) at the panel model's nodes [-]: the same least-squares fit that :meth:`integrate`
        integrates (model in the class docstring), evaluated where the panel method has its nodes.
        """
        cp = np.asarray(cp, dtype=float)
        if cp.shape != self.tap_x_c.shape:
            raise ValueError(f"ShapeFitIntegrator: Cp must hold the {self.tap_x_c.size} taps, got shape {cp.shape}")
        model = self.model
        upper = np.arange(model.node_s.size) <= int(np.argmin(model.node_x))
        dense = self._basis(model, model.node_s, model.node_x, upper, self.n_modes)
        return np.asarray(model.node_x, dtype=float), upper, dense @ (self._projector @ cp + self._prior_fit)

    @staticmethod
    def _spread(other: SectionCoefficients, ref: SectionCoefficients) -> tuple[np.ndarray, ...]:
        return tuple(np.abs(getattr(other, f) - getattr(ref, f)) for f in ("cl", "cd_p", "cm_qc"))


class ModalCircleIntegrator:
    r"""Integrate Cp round a circular cylinder through its modal form, a Fourier series in the angle φ from the front.

    .. math::
        C_p(\varphi) \approx a_0 + \sum_{k=1}^{K} (a_k \cos k\varphi + b_k \sin k\varphi), \qquad
        C_n = -\tfrac{\pi}{2} b_1, \quad C_a = \tfrac{\pi}{2} a_1, \quad C_{m,c/4} = \tfrac{\pi}{8} b_1

    (unit diameter; the exact integrals of the series with this module's conventions, the contour running rear →
    upper → front → lower, x = (1 − cos φ)/2, y = (sin φ)/2). The coefficients are a least-squares fit over the
    contour points with K = ⌊(n − 1)/2⌋ (for taps equally spaced in φ the fit interpolates them, and the drag is
    then the trapezoid rule in φ, exact for every mode below the Nyquist one). Only a₁ and b₁ enter the forces:
    the potential-flow Cp = 1 − 4 sin²φ = −1 + 2 cos 2φ integrates to exactly zero.

    Its own error: the modes the taps cannot resolve alias into a₁ and b₁. Estimated by Richardson from the fits
    over each of the two interleaved halves of the contour points against the fit over all, max_k |I_h − I_2h,k|
    / (2² − 1), second order because a Cp with a separation kink has Fourier coefficients falling as k⁻² (from
    memory). (The mean of the halves would not do: for equispaced points it equals the full sum exactly.) The two
    coarse grids of a mirrored symmetric layout can agree by symmetry, so the estimate has a floor from the two
    highest resolved modes: with coefficients falling as k⁻², the first aliased modes (N ± 1 ≈ 2K) are about a
    quarter of them, |ΔC| ≈ (π/2)(|a_{K−1}| + |a_K|)/4 for the drag (b for the lift). NaN with fewer than six
    points.

    Parameters
    ----------
    x_c, y_c : array_like
        Contour points on the unit-diameter circle in contour order [-] (a mirrored half counts as points).

    References
    ----------
    Pressure integral of a circular cylinder (common practice; e.g. Anderson, *Fundamentals of Aerodynamics*,
    §3.13, from memory); least-squares trigonometric fit and its equivalence with the trapezoid rule for
    equispaced points (Trefethen & Weideman, SIAM Review 56 (2014), from memory).
    """

    def __init__(self, x_c: ArrayLike, y_c: ArrayLike) -> None:
        x, y = _check_taps(x_c, y_c)
        self.phi = np.arctan2(2.0 * y, 1.0 - 2.0 * x)
        self.weights, self._tail = self._weights(self.phi)
        halves = [self._weights(self.phi[k::2])[0] for k in (0, 1)] if x.size >= 6 else None
        self._halves = halves

    @staticmethod
    def _weights(phi: np.ndarray) -> tuple[SectionWeights, np.ndarray | None]:
        """The series' force weights, and the fit rows of the two highest cosine and sine modes (None below K=3)."""
        n_modes = max((np.unique(np.round(np.mod(phi, 2.0 * np.pi), 12)).size - 1) // 2, 1)
        k = np.arange(1, n_modes + 1)
        design = np.hstack((np.ones((phi.size, 1)), np.cos(np.outer(phi, k)), np.sin(np.outer(phi, k))))
        fit = np.linalg.pinv(design)  # (1 + 2K) × n: tap Cp → (a0, a1..aK, b1..bK)
        a1, b1 = fit[1], fit[1 + n_modes]
        tail = fit[[n_modes - 1, n_modes, 2 * n_modes - 1, 2 * n_modes]] if n_modes >= 3 else None
        return SectionWeights(-0.5 * np.pi * b1, 0.5 * np.pi * a1, 0.125 * np.pi * b1), tail

    def integrate(self, cp: ArrayLike, alpha_rad: ArrayLike) -> ShapeFitResult:
        """Coefficients of Cp (..., n) [-] with the error estimate of the class docstring as ``u_*``."""
        cp = np.asarray(cp, dtype=float)
        result = self.weights.apply(cp, alpha_rad)
        if self._halves is None:
            u = (np.full(result.cl.shape, np.nan),) * 3
        else:
            parts = [h.apply(cp[..., k::2], alpha_rad) for k, h in enumerate(self._halves)]
            u = [np.maximum(*(np.abs(getattr(result, f) - getattr(part, f)) for part in parts)) / 3.0
                 for f in ("cl", "cd_p", "cm_qc")]
            if self._tail is not None:  # floor: the aliased modes just past the resolved ones
                modes = np.abs(cp @ self._tail.T)
                t_a = 0.125 * np.pi * (modes[..., 0] + modes[..., 1])  # (π/2)(|a_K−1| + |a_K|)/4
                t_b = 0.125 * np.pi * (modes[..., 2] + modes[..., 3])
                a = np.asarray(alpha_rad, dtype=float)
                c, s = np.abs(np.cos(a)), np.abs(np.sin(a))
                floor = (c * t_b + s * t_a, s * t_b + c * t_a, 0.25 * t_b)
                u = [np.maximum(ui, fi) for ui, fi in zip(u, floor)]
            u = tuple(u)
        nan = np.full(result.cl.shape, np.nan)
        return ShapeFitResult(coefficients=result, u_cl=u[0], u_cd_p=u[1], u_cm_qc=u[2], alpha_effective=nan,
                              residual_rms=nan)

    def fitted_cp(self, cp: ArrayLike, points: int = 181) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """The fitted series on a dense circle for drawing: (x, upper, Cp) [-], upper surface front to rear first."""
        cp = np.asarray(cp, dtype=float)
        n_modes = max((np.unique(np.round(np.mod(self.phi, 2.0 * np.pi), 12)).size - 1) // 2, 1)
        k = np.arange(1, n_modes + 1)
        design = np.hstack((np.ones((self.phi.size, 1)), np.cos(np.outer(self.phi, k)), np.sin(np.outer(self.phi, k))))
        coef = np.linalg.pinv(design) @ cp
        phi = np.concatenate((np.linspace(0.0, np.pi, points), -np.linspace(0.0, np.pi, points)))
        dense = np.hstack((np.ones((phi.size, 1)), np.cos(np.outer(phi, k)), np.sin(np.outer(phi, k)))) @ coef
        return 0.5 * (1.0 - np.cos(phi)), phi >= 0.0, dense


def _mismatched_sections(shape: SectionShape, tolerance: float) -> list[tuple[SectionShape, SectionShape]]:
    """(thicker, thinner) and (camber added, camber taken off) versions of ``shape`` whose surface moves by
    ``tolerance`` [y/c] at most (see :class:`ShapeFitIntegrator`)."""
    x, y = shape.x, shape.y
    upper_y, lower_y = shape.surface_y(np.clip(x, 0.0, 1.0), True), shape.surface_y(np.clip(x, 0.0, 1.0), False)
    camber = 0.5 * (upper_y + lower_y)
    grid = np.linspace(0.0, 1.0, 201)
    t_max = float(np.max(0.5 * (shape.surface_y(grid, True) - shape.surface_y(grid, False))))
    scale = tolerance / t_max if t_max > 0.0 else 0.0
    bump = tolerance * 4.0 * x * (1.0 - x)
    out = []
    for make in (lambda sign: camber + (1.0 + sign * scale) * (y - camber), lambda sign: y + sign * bump):
        out.append(tuple(SectionShape(f"{shape.name} (mismatch)", x, make(sign)) for sign in (1.0, -1.0)))
    return out
