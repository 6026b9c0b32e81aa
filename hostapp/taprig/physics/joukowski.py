"""Joukowski airfoils: the exact potential-flow solution, used as an oracle for the panel method and integrators.

The mapping z = ζ + c²/ζ takes a circle of centre μ and radius R = |c − μ| through ζ = c to an airfoil with a cusped
trailing edge at z = 2c. With the Kutta circulation Γ = 4πVR sin(α + β), β = arcsin(Im μ / R), the surface speed and
Cp are known in closed form. Here the airfoil is normalised like every :class:`SectionShape`: chord ℓ = x-extent,
leading edge (foremost point) at x = 0, trailing edge at (1, 0), angles referred to the x axis. Circle angle θ is
measured at the circle centre, counter-clockwise from the real axis.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike
from scipy.optimize import minimize_scalar

from taprig.physics.sections import SectionShape

_BISECTION_STEPS = 60  # halves a bracket of width < 2π to below 1e-16 rad


@dataclass(frozen=True)
class JoukowskiSection:
    """A Joukowski airfoil from the mapping z = ζ + c²/ζ of the circle through ζ = c with centre μ.

    Parameters
    ----------
    centre : complex
        Circle centre μ [-] (in units of the mapping constant); Re μ < 0 gives thickness, Im μ > 0 camber.
    mapping_constant : float
        c in z = ζ + c²/ζ [-].

    Examples
    --------
    >>> foil = JoukowskiSection(-0.1 + 0j)
    >>> round(foil.chord, 7), round(float(foil.cl(np.radians(5.0))), 10)
    (4.0333333, 0.5973989261)

    References
    ----------
    Exact solution as stated in docs/REFERENCES.md (from memory, there checked numerically); L. M. Milne-Thomson,
    *Theoretical Aerodynamics*, ch. VII (from memory).
    """

    centre: complex
    mapping_constant: float = 1.0
    radius: float = field(init=False)
    beta: float = field(init=False)
    theta_te: float = field(init=False)
    theta_le: float = field(init=False)
    x_min: float = field(init=False)

    def __post_init__(self) -> None:
        c, mu = float(self.mapping_constant), complex(self.centre)
        if c <= 0.0 or mu.real >= 0.0 or not np.isfinite(abs(mu)):
            raise ValueError(f"Joukowski section: need mapping constant > 0 and a centre with Re μ < 0 "
                             f"(a closed airfoil), got c={c}, μ={mu}")
        radius = abs(c - mu)
        theta_te = float(np.angle(c - mu))
        object.__setattr__(self, "radius", radius)
        object.__setattr__(self, "beta", float(np.arcsin(mu.imag / radius)))
        object.__setattr__(self, "theta_te", theta_te)
        nose = minimize_scalar(lambda t: float(self._z(t).real), bounds=(theta_te + 0.5 * np.pi, theta_te + 1.5 * np.pi),
                               method="bounded", options={"xatol": 1e-13})
        object.__setattr__(self, "theta_le", float(nose.x))
        object.__setattr__(self, "x_min", float(nose.fun))

    @property
    def chord(self) -> float:
        """Chord ℓ = x-extent of the mapped airfoil, 2c − min Re z [-] (units of the mapping constant)."""
        return 2.0 * self.mapping_constant - self.x_min

    def _z(self, theta):
        zeta = self.centre + self.radius * np.exp(1j * np.asarray(theta, dtype=float))
        return zeta + self.mapping_constant**2 / zeta

    def xy(self, theta: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
        """Return the unit-chord coordinates (x/ℓ, y/ℓ) [-] of the surface point of circle angle θ [rad]."""
        z = self._z(theta)
        return (z.real - self.x_min) / self.chord, z.imag / self.chord

    def cl(self, alpha_rad: ArrayLike) -> np.ndarray:
        r"""Exact lift coefficient :math:`C_l = 8\pi (R/\ell)\sin(\alpha + \beta)` [-] at angle α [rad]."""
        return 8.0 * np.pi * self.radius / self.chord * np.sin(np.asarray(alpha_rad, dtype=float) + self.beta)

    def lift_slope(self, alpha_rad: ArrayLike = 0.0) -> np.ndarray:
        r"""Exact lift-curve slope :math:`dC_l/d\alpha = 8\pi (R/\ell)\cos(\alpha + \beta)` [1/rad] at α [rad].

        At zero lift it is 8πR/ℓ: 6.854/rad for the 11.8 %-thick symmetric case of docs/REFERENCES.md.
        """
        alpha = np.asarray(alpha_rad, dtype=float)
        return 8.0 * np.pi * self.radius / self.chord * np.cos(alpha + self.beta)

    def speed(self, alpha_rad: ArrayLike, theta: ArrayLike) -> np.ndarray:
        r"""Exact surface speed ratio q/V [-]: angles α [rad] (leading axes) × circle angles θ [rad] (last axis).

        .. math:: \frac{q}{V} = \frac{2\,|\sin(\theta - \alpha) + \sin(\alpha + \beta)|}{|1 - c^2/\zeta^2|},
            \qquad \zeta = \mu + R e^{i\theta}

        with the trailing-edge limit :math:`c\cos(\alpha+\beta)/R` within 1e-7 rad of θ_te.
        """
        alpha = np.asarray(alpha_rad, dtype=float)[..., np.newaxis]
        theta = np.asarray(theta, dtype=float)
        zeta = self.centre + self.radius * np.exp(1j * theta)
        near_te = np.abs(np.angle(np.exp(1j * (theta - self.theta_te)))) < 1e-7
        denominator = np.where(near_te, 1.0, np.abs(1.0 - self.mapping_constant**2 / zeta**2))
        q = 2.0 * np.abs(np.sin(theta - alpha) + np.sin(alpha + self.beta)) / denominator
        limit = self.mapping_constant * np.abs(np.cos(alpha + self.beta)) / self.radius
        return np.where(near_te, limit, q)

    def cp_theta(self, alpha_rad: ArrayLike, theta: ArrayLike) -> np.ndarray:
        """Exact pressure coefficient Cp = 1 − (q/V)² [-] at circle angles θ [rad]; angles × points."""
        return 1.0 - self.speed(alpha_rad, theta) ** 2

    def theta_at(self, x_c: ArrayLike, upper: ArrayLike) -> np.ndarray:
        """Circle angle θ [rad] of the surface point at chord station x/ℓ [-] on the given side (bisection)."""
        x_c = np.asarray(x_c, dtype=float)
        if np.any(x_c < -1e-12) or np.any(x_c > 1.0 + 1e-12):
            raise ValueError(f"Joukowski section: chord stations must lie in [0, 1], got {x_c}")
        upper = np.broadcast_to(np.asarray(upper, dtype=bool), x_c.shape)
        # x(θ) falls from 1 to 0 on the upper arc [θ_te, θ_le] and rises back on the lower arc [θ_le, θ_te + 2π].
        lo = np.where(upper, self.theta_te, self.theta_le)
        hi = np.where(upper, self.theta_le, self.theta_te + 2.0 * np.pi)
        rising = ~upper
        for _ in range(_BISECTION_STEPS):
            mid = 0.5 * (lo + hi)
            below = self.xy(mid)[0] < x_c
            go_up = below == rising
            lo, hi = np.where(go_up, mid, lo), np.where(go_up, hi, mid)
        return 0.5 * (lo + hi)

    def cp_at(self, alpha_rad: ArrayLike, x_c: ArrayLike, upper: ArrayLike) -> np.ndarray:
        """Exact Cp [-] at surface points (x/ℓ [-], side); returns angles × points like ``PanelModel.cp_at``."""
        return self.cp_theta(alpha_rad, self.theta_at(x_c, upper))

    def equal_angle_taps(self, n_taps: int) -> np.ndarray:
        """Circle angles [rad] of ``n_taps`` taps equally spaced in θ from the trailing edge, in contour order.

        This is the "equal spacing in θ" layout of docs/REFERENCES.md's trapezoid table (tap 0 at the trailing
        edge): it clusters taps at both edges of the airfoil.
        """
        if int(n_taps) < 3:
            raise ValueError(f"Joukowski taps: need at least 3 taps, got {n_taps}")
        return self.theta_te + 2.0 * np.pi * np.arange(int(n_taps)) / int(n_taps)

    def side_of(self, theta: ArrayLike) -> np.ndarray:
        """True where circle angle θ [rad] lies on the upper surface (between θ_te and θ_le)."""
        wrapped = np.mod(np.asarray(theta, dtype=float) - self.theta_te, 2.0 * np.pi)
        return wrapped <= self.theta_le - self.theta_te

    def shape(self, n_points: int = 401) -> SectionShape:
        """Dense coordinate table of the airfoil as a unit-chord :class:`SectionShape`.

        Points are equally spaced in θ (so they cluster at both edges), with the foremost point added so the
        leading edge lies exactly at x = 0.
        """
        if int(n_points) < 11:
            raise ValueError(f"Joukowski shape: n_points must be ≥ 11, got {n_points}")
        theta = self.theta_te + np.linspace(0.0, 2.0 * np.pi, int(n_points) - 1)
        theta = np.sort(np.append(theta, self.theta_le))
        x, y = self.xy(theta)
        x[[0, -1]], y[[0, -1]] = 1.0, 0.0  # the cusp, without rounding noise
        label = f"Joukowski mu={self.centre.real:g}{self.centre.imag:+g}i"
        return SectionShape(label, x, y)
