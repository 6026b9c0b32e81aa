"""A section between the floor and the ceiling of a closed test section: the panel method with wall images.

The walls at Y = ±h/2 (tunnel axes: X downstream, Y up, the pivot on the centre line) are replaced by the
method of images: the section's vortex sheet is reflected in each wall with the opposite sign, and the
reflections reflected again, without end. Image k (k = ±1, ±2, …) lies at

    Y_k = k h + (−1)^k Y,   strength (−1)^k γ,

so the even images are the section shifted by 2h n and the odd ones its mirror image shifted by (2n + 1) h.
Every image lies at least about h − c away, so its panels are lumped into point vortices at the nodes
(trapezoid weights; the lumping error is of order (panel length / distance)² ≈ 10⁻⁵), and the two infinite rows
are summed in closed form,

    Σ_n 1/(z − a − 2ihn) = (π/2h) coth(π (z − a)/2h),

with the section's own term taken out of the even row. The section itself keeps the linear-strength vortex panels
of :mod:`taprig.physics.panel` (Kuethe & Chow §5.10). The walls are fixed in tunnel axes, so every angle of
attack is a separate solve; :class:`WalledPanelModel` solves a table of angles once and interpolates the surface
speed between them (a cubic in α on a 2° table: error of order 10⁻⁶ of the speed).

The free stream is the speed V far upstream in the tunnel (where a reference probe reads q_u); surface speeds
and Cp are referred to it, as the taps of a model in a closed test section are when reduced against the
upstream probe. What the images add is the wall interference the classical corrections (:mod:`taprig.physics.
walls`) estimate: solid blockage and streamline curvature. A potential flow has no wake, so wake blockage is not
part of this solution.

References
----------
Method of images for a 2-D body between parallel walls: Allen & Vincenti, NACA TR 782 (1944) §2 (from memory);
Barlow, Rae & Pope, *Low-Speed Wind Tunnel Testing*, 3rd ed. (1999), §9.1 (from memory). The coth sum is the
partial-fraction expansion of the cotangent, Σ_n 1/(w − nT) = (π/T) cot(π w/T) (Abramowitz & Stegun 4.3.91,
from memory), with T = 2ih.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike
from scipy.interpolate import CubicSpline

from taprig.physics.panel import _TE_SMOOTHING, PanelModel, _influence_coefficients
from taprig.physics.sections import SectionShape

#: Spacing of the table of angles the walled solution is solved at [rad] (2°).
TABLE_STEP = np.radians(2.0)
#: Largest |α| of the table [rad]; past it the solution of the nearest tabled angle is used.
TABLE_LIMIT = np.radians(56.0)
#: Closest a contour point may come to a wall, as a fraction of the tunnel height, for an angle to be tabled.
WALL_CLEARANCE = 0.05


def image_velocity(z: np.ndarray, z0: np.ndarray, height: float) -> np.ndarray:
    r"""Complex velocity u − iv [1/m per unit clockwise circulation] at points z of every wall image of unit
    clockwise point vortices at z0, the vortices themselves excluded; points × vortices.

    .. math::
        w = \frac{i}{2\pi}\Big[\frac{\pi}{2h}\coth\frac{\pi(z - z_0)}{2h} - \frac{1}{z - z_0}
        - \frac{\pi}{2h}\coth\frac{\pi(z - \bar z_0 - ih)}{2h}\Big]

    Parameters
    ----------
    z : ndarray
        Field points X + iY in tunnel axes, walls at Y = ±h/2 [m].
    z0 : ndarray
        Vortex positions X + iY [m].
    height : float
        Wall-to-wall distance h [m].

    Returns
    -------
    ndarray
        Complex velocity u − iv per unit clockwise circulation (points × vortices).

    References
    ----------
    Clockwise vortex w = iΓ/(2π(z − z₀)) (Kuethe & Chow §3.10, from memory); image rows summed as in the module
    docstring (Abramowitz & Stegun 4.3.91, from memory).

    Examples
    --------
    A vortex on the centre line induces no velocity at itself through its images (the rows cancel there):

    >>> abs(complex(image_velocity(np.array([1e-9 + 0j]), np.array([0j]), 1.0)[0, 0])) < 1e-8
    True
    """
    k = np.pi / (2.0 * height)
    d = z[:, None] - z0[None, :]
    reflected = z[:, None] - np.conj(z0)[None, :] - 1j * height
    with np.errstate(divide="ignore", invalid="ignore"):
        even = k / np.tanh(k * d) - 1.0 / d
    even = np.where(np.abs(d) * k < 1e-6, d * k * k / 3.0, even)  # coth x − 1/x → x/3
    return 1j / (2.0 * np.pi) * (even - k / np.tanh(k * reflected))


def _trapezoid_node_weights(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Length each node's vortex strength covers: half of each neighbouring panel [-]."""
    length = np.hypot(np.diff(x), np.diff(y))
    w = np.zeros(x.size)
    w[:-1] += 0.5 * length
    w[1:] += 0.5 * length
    return w


class WalledPanelModel:
    """Inviscid flow round a section between two parallel walls, at every angle of attack (tabled and splined).

    Parameters
    ----------
    shape : SectionShape
        Closed contour at unit chord.
    chord_over_height : float
        c/h, chord over the wall-to-wall distance [-], 0 < c/h ≤ 1.
    pivot_x_c : float
        Chordwise position of the pivot the section turns about, on the tunnel's centre line [x/c].
    n_panels : int or None
        As for :class:`taprig.physics.panel.PanelModel`.

    Notes
    -----
    Angles of attack are geometric: positive nose up against the tunnel axis. Speeds are ratios to the speed far
    upstream V, positive along the contour direction; Cp = 1 − (u/V)². ``image_velocity_at_mid_chord`` gives,
    per tabled angle, the velocity the walls (the images) induce at the chord's mid-point (u/V, v/V in tunnel
    axes): the flow a thin section "sees" from the walls (thin-aerofoil theory puts the effective angle of a
    linearly varying upwash at the mid-chord value).
    """

    def __init__(self, shape: SectionShape, chord_over_height: float, pivot_x_c: float = 0.25,
                 n_panels: int | None = None) -> None:
        ratio = float(chord_over_height)
        if not 0.0 < ratio <= 1.0:
            raise ValueError(f"WalledPanelModel: chord/height must lie in (0, 1], got {chord_over_height}")
        self.free = PanelModel(shape, n_panels)
        self.shape = shape
        self.chord_over_height = ratio
        self.height = 1.0 / ratio  # in chords
        self.pivot_x_c = float(pivot_x_c)
        x, y = self.free.node_x, self.free.node_y
        self.node_s = self.free.node_s
        # Kuethe & Chow order the nodes clockwise: the reversed contour, as in PanelModel.
        self._xr, self._yr = x[::-1].copy(), y[::-1].copy()
        self._self_matrix, self._angle, self._length = _influence_coefficients(self._xr, self._yr)
        self._node_w = _trapezoid_node_weights(self._xr, self._yr)
        alphas = np.arange(-TABLE_LIMIT, TABLE_LIMIT + 0.5 * TABLE_STEP, TABLE_STEP)
        fits = np.array([self._fits(a) for a in alphas])
        if not fits.any():
            raise ValueError(f"WalledPanelModel: a section of chord/height {ratio:g} does not fit between the walls")
        self.table_alpha = alphas[fits]
        self.table_speeds, self.image_velocity_at_mid_chord = self._solve(self.table_alpha)
        self._speed_in_alpha = CubicSpline(self.table_alpha, self.table_speeds, axis=0)
        self._induced_in_alpha = CubicSpline(self.table_alpha, self.image_velocity_at_mid_chord, axis=0)

    def _tunnel_points(self, x: np.ndarray, y: np.ndarray, alpha: float) -> np.ndarray:
        """Section points in tunnel axes X + iY [chords] at angle α [rad] (nose up), pivot at the origin."""
        c, s = np.cos(alpha), np.sin(alpha)
        dx = x - self.pivot_x_c
        return (dx * c + y * s) + 1j * (-dx * s + y * c)

    def _fits(self, alpha: float) -> bool:
        z = self._tunnel_points(self.free.node_x, self.free.node_y, alpha)
        return bool(np.max(np.abs(z.imag)) < (0.5 - WALL_CLEARANCE) * self.height)

    def _solve(self, alphas: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Surface speeds at the nodes (angles × nodes, contour order) and the images' velocity at mid-chord
        (angles × (u/V, v/V)) at the angles α [rad].

        Each system is the section's own (rotation-invariant) Kuethe & Chow matrix S with the Kutta row and the
        two weak trailing-edge rows of :class:`PanelModel`, plus the images' normal velocities B(α), which are
        small beside S (the walls are a chord or more away). :meth:`_iterate` solves them all at once.
        """
        alphas = np.atleast_1d(np.asarray(alphas, dtype=float))
        m1 = self._self_matrix.shape[0]
        smooth = np.zeros((2, m1))
        smooth[0, :3] = smooth[1, -3:] = (1.0, -2.0, 1.0)
        matrices = np.empty((alphas.size, m1 + 2, m1))
        rhs = np.zeros((alphas.size, m1 + 2))
        for k, alpha in enumerate(alphas):
            nodes = self._tunnel_points(self._xr, self._yr, alpha)
            mid = 0.5 * (nodes[:-1] + nodes[1:])
            angle = self._angle - alpha  # panel angles in tunnel axes
            w = image_velocity(mid, nodes, self.height) * self._node_w[None, :]
            # K&C normal velocity per unit γ/2π with n = (−sin θ_i, cos θ_i) (their coefficients carry the 2π)
            normal = 2.0 * np.pi * (-np.sin(angle)[:, None] * w.real - np.cos(angle)[:, None] * w.imag)
            matrices[k, :m1] = self._self_matrix
            matrices[k, : m1 - 1] += normal
            matrices[k, m1:] = _TE_SMOOTHING * smooth
            rhs[k, : m1 - 1] = np.sin(angle)  # free stream (1, 0) in tunnel axes
        x = self._iterate(matrices, rhs)
        gamma = 2.0 * np.pi * x  # γ/V at the clockwise nodes
        induced = np.empty((alphas.size, 2))
        for k, alpha in enumerate(alphas):
            nodes = self._tunnel_points(self._xr, self._yr, alpha)
            centre = self._tunnel_points(np.array([0.5]), np.array([0.0]), alpha)
            w = (image_velocity(centre, nodes, self.height)[0] * self._node_w) @ gamma[k]
            induced[k] = (w.real, -w.imag)
        return -gamma[:, ::-1], induced

    def _iterate(self, matrices: np.ndarray, rhs: np.ndarray, tol: float = 1e-12, max_iter: int = 200) -> np.ndarray:
        """Solve (S + B_k) x_k ≈ b_k for every angle k by the fixed point x ← S⁺(b − B x).

        S⁺ (the least-squares pseudo-inverse of the section's own system) is computed once; each sweep is a
        batched matrix-vector product. It converges while the images' part is weaker than the section's own
        (spectral radius of S⁺B below 1: about (c/h)² here), geometrically; an angle that has not converged
        to ``tol`` after ``max_iter`` sweeps is solved directly by least squares. Splitting iteration (Jacobi /
        Richardson type; Golub & Van Loan, *Matrix Computations*, §10.1, from memory).
        """
        m1 = self._self_matrix.shape[0]
        own = matrices[0].copy()
        own[: m1 - 1] = self._self_matrix[: m1 - 1]
        own[m1 - 1] = self._self_matrix[m1 - 1]
        pinv = np.linalg.pinv(own)
        images = matrices - own[None, :, :]
        x = rhs @ pinv.T
        for _ in range(max_iter):
            step = (rhs - np.einsum("kij,kj->ki", images, x)) @ pinv.T
            change = np.max(np.abs(step - x), axis=1)
            x = step
            if np.all(change <= tol * np.maximum(np.max(np.abs(x), axis=1), 1.0)):
                return x
        for k in np.flatnonzero(change > tol * np.maximum(np.max(np.abs(x), axis=1), 1.0)):
            x[k] = np.linalg.lstsq(matrices[k], rhs[k], rcond=None)[0]
        return x

    def speeds(self, alpha_rad: ArrayLike, s: ArrayLike) -> np.ndarray:
        """Surface speed u/V [-] at contour arc lengths s [-]; angles α [rad] (leading axes) × points.

        α outside the table takes the nearest tabled angle's solution.
        """
        a = np.clip(np.asarray(alpha_rad, dtype=float), self.table_alpha[0], self.table_alpha[-1])
        nodes = self._speed_in_alpha(a)
        s = np.clip(np.asarray(s, dtype=float), self.node_s[0], self.node_s[-1])
        return CubicSpline(self.node_s, nodes, axis=-1)(s)

    def speed_table(self, s: ArrayLike) -> CubicSpline:
        """A spline in α [rad] of the surface speed u/V at the fixed arc lengths s [-] (angles × points): the
        fast path for a simulator that asks for the same points at many angles."""
        s = np.clip(np.asarray(s, dtype=float), self.node_s[0], self.node_s[-1])
        at_points = CubicSpline(self.node_s, self.table_speeds, axis=1)(s)
        return CubicSpline(self.table_alpha, at_points, axis=0)

    def cp_at_arc(self, alpha_rad: ArrayLike, s: ArrayLike) -> np.ndarray:
        """Cp = 1 − (u/V)² [-] referred to the upstream stream, at arc lengths s; angles α [rad] × points."""
        return 1.0 - self.speeds(alpha_rad, s) ** 2

    def induced_at_mid_chord(self, alpha_rad: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
        """Axial and normal velocity (u/V, v/V) [-] the walls induce at mid-chord, tunnel axes, per angle [rad]."""
        a = np.clip(np.asarray(alpha_rad, dtype=float), self.table_alpha[0], self.table_alpha[-1])
        uv = self._induced_in_alpha(a)
        return uv[..., 0], uv[..., 1]

    def equivalent_free_angle(self, alpha_rad: ArrayLike) -> np.ndarray:
        r"""Free-air angle with the same effective incidence [rad]: the geometric angle plus the walls' upwash at
        mid-chord over the local speed, :math:`\alpha_{eq} = \alpha + \arctan\big(v_w / (1 + u_w)\big)`.

        Thin-aerofoil theory: the leading-edge loading of a section in an upwash varying linearly along the chord
        is that of a uniform upwash equal to its mid-chord value (Glauert; from memory).
        """
        u, v = self.induced_at_mid_chord(alpha_rad)
        return np.asarray(alpha_rad, dtype=float) + np.arctan2(v, 1.0 + u)

    def cl(self, alpha_rad: ArrayLike) -> np.ndarray:
        """Lift coefficient [-] referred to the upstream q, from the node Cp (closed-polygon trapezoid, as
        :meth:`PanelModel.cl`)."""
        a = np.asarray(alpha_rad, dtype=float)
        cp = 1.0 - self._speed_in_alpha(np.clip(a, self.table_alpha[0], self.table_alpha[-1])) ** 2
        cn, ca, _ = np.moveaxis(cp @ self.free.node_weights().T, -1, 0)
        return cn * np.cos(a) - ca * np.sin(a)

    def cm_quarter_chord(self, alpha_rad: ArrayLike) -> np.ndarray:
        """Pitching moment about the quarter chord [-] referred to the upstream q (node Cp, trapezoid)."""
        a = np.asarray(alpha_rad, dtype=float)
        cp = 1.0 - self._speed_in_alpha(np.clip(a, self.table_alpha[0], self.table_alpha[-1])) ** 2
        return (cp @ self.free.node_weights().T)[..., 2]
