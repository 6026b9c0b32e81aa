"""Linear-strength vortex panel method for any closed 2-D section, with the Kutta condition.

The method is the one of Kuethe & Chow, *Foundations of Aerodynamics* (5th ed., 1998), §5.10 (influence
coefficients CN1, CN2, CT1, CT2 as recalled from memory; checked here against the exact Joukowski and cylinder
solutions in tests/physics/test_panel.py). It is solved once per shape for two unit freestreams, α = 0 and α = 90°;
every other angle is their superposition, so the surface speed is u(α) = u₀ cos α + u₉₀ sin α and Cp, Cl and Cm at
any array of angles cost a few array operations.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike
from scipy.interpolate import CubicSpline
from scipy.linalg import lstsq

from taprig.physics.sections import SectionShape

_MIN_PANELS, _MAX_PANELS = 16, 2000
_TE_SMOOTHING = 1e-3  # weight of the trailing-edge smoothness rows against O(1) influence coefficients
QUARTER_CHORD = 0.25  # moment reference x/c; y/c = 0 (the chord line)


def _influence_coefficients(x: np.ndarray, y: np.ndarray):
    """Kuethe & Chow's normal-velocity influence matrix (with the Kutta row) for clockwise nodes (m+1 points)."""
    length = np.hypot(np.diff(x), np.diff(y))
    angle = np.arctan2(np.diff(y), np.diff(x))
    xm, ym = 0.5 * (x[:-1] + x[1:]), 0.5 * (y[:-1] + y[1:])
    rx, ry = xm[:, None] - x[None, :-1], ym[:, None] - y[None, :-1]
    ti, tj = angle[:, None], angle[None, :]
    cj, sj = np.cos(tj), np.sin(tj)
    a = -rx * cj - ry * sj
    b = rx * rx + ry * ry
    c, d = np.sin(ti - tj), np.cos(ti - tj)
    e = rx * sj - ry * cj
    s = length[None, :]
    with np.errstate(divide="ignore", invalid="ignore"):
        f = np.log1p(s * (s + 2.0 * a) / b)
    g = np.arctan2(e * s, b + a * s)
    q = rx * np.cos(ti - 2 * tj) - ry * np.sin(ti - 2 * tj)
    cn2 = d + 0.5 * q * f / s - (a * c + d * e) * g / s
    cn1 = 0.5 * d * f + c * g - cn2
    m = length.size
    diagonal = np.arange(m)
    cn1[diagonal, diagonal], cn2[diagonal, diagonal] = -1.0, 1.0
    an = np.zeros((m + 1, m + 1))
    an[:m, :m] += cn1
    an[:m, 1:] += cn2
    an[m, 0] = an[m, m] = 1.0  # Kutta condition: equal and opposite strengths at the two trailing-edge nodes
    return an, angle, length


def _resample(shape: SectionShape, n_panels: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Nodes on a cubic spline of the contour in arc length, cosine-clustered at both edges of each surface."""
    s, s_le = shape.arc_length, shape.arc_length[shape.leading_edge_index]
    n_upper = n_panels // 2
    n_lower = n_panels - n_upper
    s_upper = s_le * 0.5 * (1.0 - np.cos(np.linspace(0.0, np.pi, n_upper + 1)))
    s_lower = s_le + (s[-1] - s_le) * 0.5 * (1.0 - np.cos(np.linspace(0.0, np.pi, n_lower + 1)))
    nodes = np.concatenate((s_upper, s_lower[1:]))
    keep = np.concatenate(([True], np.diff(s) > 0.0))  # repeated table points would break the spline
    return CubicSpline(s[keep], shape.x[keep])(nodes), CubicSpline(s[keep], shape.y[keep])(nodes), nodes


class PanelModel:
    """Inviscid flow round one section shape at every angle of attack (linear-strength vortex panels).

    Parameters
    ----------
    shape : SectionShape
        Closed contour at unit chord (trailing edge → upper → leading edge → lower → trailing edge).
    n_panels : int or None
        None uses the shape's own points as panel nodes; an integer re-panels the contour on a cubic spline in
        arc length with cosine clustering at both edges of each surface (for smooth shapes given by a coarse or
        unevenly spaced table). 100–300 panels suit most sections.

    Notes
    -----
    The normal-flow condition is met at the panel midpoints; the surface speed is taken as the vortex-sheet
    strength at the nodes (the jump across a sheet with still fluid inside), which lie on the true contour. On a
    polygon the speed at a midpoint carries an error of first order in the panel size, the node strength one of
    second order. Speeds are ratios to the freestream speed V, positive along the contour direction (from the
    upper trailing edge round the nose to the lower trailing edge); Cp = 1 − (u/V)². Surface positions are the
    shape's contour arc length s [-] from its first point. Forces are trapezoid integrals of the node Cp round
    the closed polygon (an open trailing-edge base takes the mean of the two trailing-edge nodes).

    Examples
    --------
    >>> from taprig.physics.sections import naca4
    >>> model = PanelModel(naca4("0012", 161))
    >>> round(float(model.cl(np.radians(4.0))), 2)
    0.48

    References
    ----------
    A. M. Kuethe, C.-Y. Chow, *Foundations of Aerodynamics*, 5th ed. (1998), §5.10 (from memory).
    """

    def __init__(self, shape: SectionShape, n_panels: int | None = None) -> None:
        if not isinstance(shape, SectionShape):
            raise ValueError(f"PanelModel needs a SectionShape, got {type(shape).__name__}")
        if n_panels is None:
            x, y, s_nodes = shape.x, shape.y, shape.arc_length
        elif _MIN_PANELS <= int(n_panels) <= _MAX_PANELS:
            x, y, s_nodes = _resample(shape, int(n_panels))
        else:
            raise ValueError(f"PanelModel: n_panels must be between {_MIN_PANELS} and {_MAX_PANELS}, got {n_panels}")
        if not _MIN_PANELS <= x.size - 1 <= _MAX_PANELS or np.any(np.diff(s_nodes) <= 0.0):
            raise ValueError(f"PanelModel: shape {shape.name!r} needs {_MIN_PANELS + 1}–{_MAX_PANELS + 1} distinct "
                             f"contour points as panel nodes (it has {x.size}); pass n_panels to re-panel it")
        self.shape = shape
        self.node_x, self.node_y = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
        self.node_s = np.asarray(s_nodes, dtype=float)
        self.unit_speeds, self._cl_circulation_unit = self._solve()
        self._speed_spline = CubicSpline(self.node_s, self.unit_speeds, axis=1)
        self._integrals = self._quadratic_integrals()

    @property
    def n_panels(self) -> int:
        """Number of panels [-]."""
        return self.node_s.size - 1

    def _solve(self) -> tuple[np.ndarray, np.ndarray]:
        # Kuethe & Chow order the nodes clockwise; the shape runs counter-clockwise, so solve on the reversed list.
        an, angle, length = _influence_coefficients(self.node_x[::-1], self.node_y[::-1])
        m1 = an.shape[0]
        # At a cusp the two trailing-edge panels coincide and an equal-and-opposite pair of node strengths (which
        # the Kutta row allows) induces nothing: the square system is singular there. Two weak rows asking the
        # strength to continue smoothly into each trailing-edge node fix that pair and barely touch other shapes.
        smooth = np.zeros((2, m1))
        smooth[0, :3] = smooth[1, -3:] = (1.0, -2.0, 1.0)
        matrix = np.vstack((an, _TE_SMOOTHING * smooth))
        rhs = np.zeros((m1 + 2, 2))
        rhs[: m1 - 1, 0], rhs[: m1 - 1, 1] = np.sin(angle), -np.cos(angle)
        gamma = 2.0 * np.pi * lstsq(matrix, rhs, lapack_driver="gelsy")[0]  # γ/V at clockwise nodes, α = 0, 90°
        circulation = np.sum(0.5 * (gamma[:-1] + gamma[1:]) * length[:, None], axis=0)
        # Clockwise-positive γ is the speed in the clockwise direction; the contour runs the other way.
        return -gamma[::-1].T.copy(), 2.0 * circulation  # Kutta–Joukowski: Cl = 2Γ/(V c)

    def node_weights(self) -> np.ndarray:
        """(3, m+1) weights turning node Cp into Cn, Ca, Cm(c/4) [-]: closed-polygon trapezoid rule round the nodes."""
        x, y = self.node_x, self.node_y
        half_dx = 0.5 * (np.roll(x, -1) - np.roll(x, 1))
        half_dy = 0.5 * (np.roll(y, -1) - np.roll(y, 1))
        return np.stack((half_dx, -half_dy, -((x - QUARTER_CHORD) * half_dx + y * half_dy)))

    def _quadratic_integrals(self) -> np.ndarray:
        """(3, 4): for Cn, Ca, Cm the integrals of 1, u₀², u₀u₉₀, u₉₀² — Cp(α) is quadratic in (cos α, sin α)."""
        u0, u90 = self.unit_speeds
        return self.node_weights() @ np.stack((np.ones_like(u0), u0 * u0, u0 * u90, u90 * u90), axis=1)

    def unit_speeds_at(self, s: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
        """The two unit solutions (u₀, u₉₀) [-] at contour arc lengths s [-], cubic spline between nodes.

        The speed is smooth along the contour except at its two ends, which are the spline's ends; a cubic
        resolves the leading-edge suction peak between nodes far better than straight lines.
        """
        s = np.clip(np.asarray(s, dtype=float), self.node_s[0], self.node_s[-1])
        u0, u90 = self._speed_spline(s)
        return u0, u90

    def speed_at_arc(self, alpha_rad: ArrayLike, s: ArrayLike) -> np.ndarray:
        """Surface speed u/V [-] at contour arc lengths s [-]; angles α [rad] (leading axes) × points (last axis)."""
        u0, u90 = self.unit_speeds_at(s)
        alpha = np.asarray(alpha_rad, dtype=float)[..., np.newaxis]
        return np.cos(alpha) * u0 + np.sin(alpha) * u90

    def cp_at_arc(self, alpha_rad: ArrayLike, s: ArrayLike) -> np.ndarray:
        """Cp = 1 − (u/V)² [-] at contour arc lengths s [-]; angles α [rad] × points."""
        return 1.0 - self.speed_at_arc(alpha_rad, s) ** 2

    def cp_at(self, alpha_rad: ArrayLike, x_c: ArrayLike, upper: ArrayLike) -> np.ndarray:
        """Cp [-] at surface points given by chord station x/c [-] and side (True = upper); angles α [rad] × points.

        A scalar α gives a 1-D result over the points; an array of angles adds its shape in front.
        """
        return self.cp_at_arc(alpha_rad, self.shape.arc_length_at(x_c, upper))

    def cp_panels(self, alpha_rad: ArrayLike) -> np.ndarray:
        """Cp [-] at the panel nodes (``node_x``, ``node_y``, contour order); angles α [rad] × nodes."""
        alpha = np.asarray(alpha_rad, dtype=float)[..., np.newaxis]
        u0, u90 = self.unit_speeds
        return 1.0 - (np.cos(alpha) * u0 + np.sin(alpha) * u90) ** 2

    def _integrated(self, alpha_rad: ArrayLike) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        a = np.asarray(alpha_rad, dtype=float)
        c, s = np.cos(a), np.sin(a)
        basis = np.stack((np.ones_like(a), -c * c, -2.0 * c * s, -s * s), axis=-1)
        cn, ca, cm = np.moveaxis(basis @ self._integrals.T, -1, 0)
        return cn, ca, cm, a

    def cl(self, alpha_rad: ArrayLike) -> np.ndarray:
        r"""Lift coefficient from the pressure integral, :math:`C_l = C_n\cos\alpha - C_a\sin\alpha` [-]."""
        cn, ca, _, a = self._integrated(alpha_rad)
        return cn * np.cos(a) - ca * np.sin(a)

    def cd_pressure(self, alpha_rad: ArrayLike) -> np.ndarray:
        r"""Pressure drag :math:`C_{d,p} = C_n\sin\alpha + C_a\cos\alpha` [-]; zero in exact potential flow."""
        cn, ca, _, a = self._integrated(alpha_rad)
        return cn * np.sin(a) + ca * np.cos(a)

    def cm_quarter_chord(self, alpha_rad: ArrayLike) -> np.ndarray:
        r"""Pitching moment about (0.25, 0), nose up positive, :math:`-\oint C_p[(x - 1/4)dx + y\,dy]` [-]."""
        return self._integrated(alpha_rad)[2]

    def cl_circulation(self, alpha_rad: ArrayLike) -> np.ndarray:
        """Lift coefficient from the Kutta–Joukowski theorem, Cl = 2Γ/(V c) [-] (a check on the pressure Cl)."""
        a = np.asarray(alpha_rad, dtype=float)
        return self._cl_circulation_unit[0] * np.cos(a) + self._cl_circulation_unit[1] * np.sin(a)

    def stagnation_point(self, alpha_rad: ArrayLike) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Front stagnation point: (s, x/c, y/c) [-] where u changes sign nearest the leading edge, per angle [rad].

        Upstream of it the flow runs over the upper surface (u < 0 in contour direction), downstream along the
        lower surface (u > 0); the sign change is interpolated linearly between nodes.
        """
        alpha = np.asarray(alpha_rad, dtype=float)[..., np.newaxis]
        u = np.cos(alpha) * self.unit_speeds[0] + np.sin(alpha) * self.unit_speeds[1]
        crossing = (u[..., :-1] < 0.0) & (u[..., 1:] >= 0.0)
        with np.errstate(divide="ignore", invalid="ignore"):
            frac = np.nan_to_num(u[..., :-1] / (u[..., :-1] - u[..., 1:]))
        s_cross = self.node_s[:-1] + frac * np.diff(self.node_s)
        s_le = self.shape.arc_length[self.shape.leading_edge_index]
        distance = np.where(crossing, np.abs(s_cross - s_le), np.inf)
        s_stag = np.take_along_axis(s_cross, np.argmin(distance, axis=-1)[..., None], axis=-1)[..., 0]
        x, y = self.shape.point_at_arc(s_stag)
        return s_stag, x, y
