"""Section shapes: NACA 4-digit sections, circular-arc plates, the circle, and coordinate tables.

Every shape is a :class:`SectionShape`: a closed contour at unit chord, ordered trailing edge → upper surface →
leading edge → lower surface → trailing edge (counter-clockwise, so ``∮ Cp dx`` is the normal force). Coordinates
are dimensionless (x/c, y/c). The panel method (:mod:`taprig.physics.panel`) and the surface integrators
(:mod:`taprig.physics.integration`) take these shapes; tap positions are given as (x/c, upper/lower).
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike

# NACA 4-digit half-thickness coefficients (Report 460); the last one is −0.1015 (open TE) or −0.1036 (closed).
_THICKNESS_COEFFICIENTS = (0.2969, -0.1260, -0.3516, 0.2843)
_X4_OPEN, _X4_CLOSED = -0.1015, -0.1036
_NACA4 = re.compile(r"^\s*(?:NACA[\s-]*)?(\d)(\d)(\d\d)\s*$", re.IGNORECASE)
_MIN_POINTS = 11
# Both ends of a contour must lie this close to the trailing edge (fraction of chord): blunt bases are ≤ 2 %.
_TE_GAP_LIMIT = 0.05


@dataclass(frozen=True, eq=False)
class SectionShape:
    """A closed section contour at unit chord.

    Parameters
    ----------
    name : str
        Label, e.g. ``"NACA 0012"``.
    x, y : ndarray
        Contour points x/c, y/c [-], ordered trailing edge → upper surface → leading edge → lower surface →
        trailing edge. The leading edge (the point of least x) is near x = 0, the trailing edge at x = 1. The
        contour is closed by the straight segment from the last point back to the first (the trailing-edge base;
        zero length for a closed trailing edge).
    """

    name: str
    x: np.ndarray
    y: np.ndarray
    arc_length: np.ndarray = field(init=False, repr=False)
    leading_edge_index: int = field(init=False, repr=False)

    def __post_init__(self) -> None:
        x = np.array(self.x, dtype=float)
        y = np.array(self.y, dtype=float)
        _check_contour(x, y, self.name)
        s = np.concatenate(([0.0], np.cumsum(np.hypot(np.diff(x), np.diff(y)))))
        for arr in (x, y, s):
            arr.setflags(write=False)
        object.__setattr__(self, "x", x)
        object.__setattr__(self, "y", y)
        object.__setattr__(self, "arc_length", s)
        object.__setattr__(self, "leading_edge_index", int(np.argmin(x)))

    @property
    def perimeter(self) -> float:
        """Contour length from the first to the last point, base excluded [-] (fraction of chord)."""
        return float(self.arc_length[-1])

    @property
    def trailing_edge_gap(self) -> float:
        """Distance between the first and last contour points (base height) [-]."""
        return float(np.hypot(self.x[0] - self.x[-1], self.y[0] - self.y[-1]))

    def surface(self, upper: bool) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Return (x, y, s) of one surface ordered from the leading edge to the trailing edge.

        ``s`` is the arc length measured along the whole contour from its first point [-].
        """
        i = self.leading_edge_index
        sl = slice(i, None, -1) if upper else slice(i, None)
        return self.x[sl], self.y[sl], self.arc_length[sl]

    def surface_y(self, x_c: ArrayLike, upper: bool) -> np.ndarray:
        """Return y/c of the upper or lower surface at chord stations x_c [-].

        Interpolates linearly in √(x − x_le) between contour points, which follows a round nose (where y and s
        grow like √x) far better than interpolation in x.
        """
        xs, ys, _ = self.surface(upper)
        return np.interp(self._nose_coordinate(self._check_stations(x_c)), self._nose_coordinate(xs), ys)

    def arc_length_at(self, x_c: ArrayLike, upper: ArrayLike) -> np.ndarray:
        """Return the contour arc length s [-] of surface points given by chord station and side.

        ``upper`` broadcasts against ``x_c`` (True for the upper surface). Used to place taps on the contour;
        interpolated like :meth:`surface_y`.
        """
        xi = self._nose_coordinate(self._check_stations(x_c))
        upper = np.broadcast_to(np.asarray(upper, dtype=bool), xi.shape)
        xu, _, su = self.surface(True)
        xl, _, sl = self.surface(False)
        return np.where(upper, np.interp(xi, self._nose_coordinate(xu), su),
                        np.interp(xi, self._nose_coordinate(xl), sl))

    def _nose_coordinate(self, x: np.ndarray) -> np.ndarray:
        return np.sqrt(np.maximum(x - self.x[self.leading_edge_index], 0.0))

    def point_at_arc(self, s: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
        """Return (x, y) [-] of the contour at arc lengths s [-] measured from the first point."""
        s = np.asarray(s, dtype=float)
        return np.interp(s, self.arc_length, self.x), np.interp(s, self.arc_length, self.y)

    def _check_stations(self, x_c: ArrayLike) -> np.ndarray:
        x_c = np.asarray(x_c, dtype=float)
        lo, hi = float(self.x.min()), float(self.x.max())
        bad = ~np.isfinite(x_c) | (x_c < lo - 1e-9) | (x_c > hi + 1e-9)
        if np.any(bad):
            raise ValueError(f"section {self.name!r}: chord stations x/c must lie in [{lo:.4g}, {hi:.4g}], "
                             f"got {np.atleast_1d(x_c)[np.atleast_1d(bad)][:5].tolist()}")
        return x_c


def _check_contour(x: np.ndarray, y: np.ndarray, name: str) -> None:
    if x.ndim != 1 or x.shape != y.shape:
        raise ValueError(f"section {name!r}: x and y must be 1-D arrays of equal length, got {x.shape} and {y.shape}")
    if x.size < _MIN_POINTS or not (np.all(np.isfinite(x)) and np.all(np.isfinite(y))):
        raise ValueError(f"section {name!r}: need at least {_MIN_POINTS} finite contour points, got {x.size}")
    gap = np.hypot(x[0] - x[-1], y[0] - y[-1])
    if gap > _TE_GAP_LIMIT or min(x[0], x[-1]) < x.max() - _TE_GAP_LIMIT:
        raise ValueError(f"section {name!r}: open contour: it must start and end at the trailing edge "
                         f"(ends {gap:.3g} chords apart, expected ≤ {_TE_GAP_LIMIT})")
    if _signed_area(x, y) <= 0.0:
        raise ValueError(f"section {name!r}: contour must run trailing edge → upper → leading edge → lower "
                         "(counter-clockwise); it runs the other way or encloses no area")


def _signed_area(x: np.ndarray, y: np.ndarray) -> float:
    return 0.5 * float(np.sum(x * np.roll(y, -1) - np.roll(x, -1) * y))


def naca4_thickness(x_c: ArrayLike, thickness: float, closed_te: bool = True) -> np.ndarray:
    r"""Half-thickness of a NACA 4-digit section.

    .. math:: y_t = 5t\,(0.2969\sqrt{x} - 0.1260x - 0.3516x^2 + 0.2843x^3 + a_4 x^4)

    with :math:`a_4 = -0.1015` (the published, open trailing edge) or :math:`-0.1036` (closed trailing edge).

    Parameters
    ----------
    x_c : array_like
        Chord station x/c, 0 ≤ x ≤ 1 [-].
    thickness : float
        Maximum thickness t/c [-] (0.12 for a NACA xx12).
    closed_te : bool
        Use the modified last coefficient that closes the trailing edge.

    Returns
    -------
    ndarray
        Half-thickness y_t/c [-], measured normal to the mean line.

    Examples
    --------
    >>> round(float(naca4_thickness(0.3, 0.12, closed_te=False)), 6)
    0.060017

    References
    ----------
    E. N. Jacobs, K. E. Ward, R. M. Pinkerton, NACA Report 460 (1933); I. H. Abbott, A. E. von Doenhoff,
    *Theory of Wing Sections* (1959), §6.4 (from memory).
    """
    x = np.asarray(x_c, dtype=float)
    a0, a1, a2, a3 = _THICKNESS_COEFFICIENTS
    a4 = _X4_CLOSED if closed_te else _X4_OPEN
    return 5.0 * thickness * (a0 * np.sqrt(x) + x * (a1 + x * (a2 + x * (a3 + x * a4))))


def naca4_camber(x_c: ArrayLike, max_camber: float, camber_position: float) -> tuple[np.ndarray, np.ndarray]:
    r"""Mean line of a NACA 4-digit section and its slope.

    .. math::
        y_c = \frac{m}{p^2}(2px - x^2) \;(x < p), \qquad
        y_c = \frac{m}{(1-p)^2}\left((1 - 2p) + 2px - x^2\right) \;(x \ge p)

    Parameters
    ----------
    x_c : array_like
        Chord station x/c [-].
    max_camber : float
        Maximum camber m [-] (first digit / 100).
    camber_position : float
        Chordwise position of maximum camber p [-] (second digit / 10); ignored when m = 0.

    Returns
    -------
    (ndarray, ndarray)
        Camber y_c/c [-] and slope dy_c/dx [-].

    Examples
    --------
    >>> yc, _ = naca4_camber([0.2, 0.4, 0.7, 1.0], 0.02, 0.4)
    >>> [round(float(v), 6) for v in yc]
    [0.015, 0.02, 0.015, 0.0]

    References
    ----------
    NACA Report 460 (1933); Abbott & von Doenhoff (1959) §6.4 (from memory).
    """
    x = np.asarray(x_c, dtype=float)
    if max_camber == 0.0:
        return np.zeros_like(x), np.zeros_like(x)
    m, p = max_camber, camber_position
    fore = x < p
    scale = np.where(fore, m / p**2, m / (1.0 - p) ** 2)
    yc = scale * np.where(fore, 2 * p * x - x * x, (1 - 2 * p) + 2 * p * x - x * x)
    return yc, scale * (2 * p - 2 * x)


def parse_naca4(designation: str) -> tuple[float, float, float]:
    """Return (m, p, t) from a NACA 4-digit designation such as ``"NACA 2412"``, ``"naca-0012"`` or ``"0012"``.

    >>> parse_naca4("NACA 2412")
    (0.02, 0.4, 0.12)
    """
    match = _NACA4.match(str(designation))
    if match is None:
        raise ValueError(f"NACA designation {designation!r}: expected four digits, e.g. 'NACA 0012' or '2412'")
    m, p, t = int(match[1]) / 100, int(match[2]) / 10, int(match[3]) / 100
    if t <= 0.0 or (m > 0.0) != (p > 0.0):
        raise ValueError(f"NACA designation {designation!r}: thickness must be > 0 and camber and its position "
                         "must both be zero or both non-zero")
    return m, p, t


def cosine_stations(n_stations: int) -> np.ndarray:
    r"""Chord stations clustered at both edges: :math:`x_k = (1 - \cos(\pi k/(n-1)))/2`, k = 0…n−1 [-].

    >>> cosine_stations(3).round(3).tolist()
    [0.0, 0.5, 1.0]
    """
    return 0.5 * (1.0 - np.cos(np.linspace(0.0, np.pi, n_stations)))


def _shape_from_mean_line(name: str, n_points: int, mean_line, half_thickness) -> SectionShape:
    """Apply the thickness normal to the mean line; ``mean_line(x) -> (y_c, slope)``, ``half_thickness(x)``."""
    n_points = int(n_points)
    if n_points < _MIN_POINTS:
        raise ValueError(f"section {name!r}: n_points must be ≥ {_MIN_POINTS}, got {n_points}")
    x = cosine_stations((n_points + 2) // 2)
    yc, slope = mean_line(x)
    yt = half_thickness(x)
    theta = np.arctan(slope)
    xu, yu = x - yt * np.sin(theta), yc + yt * np.cos(theta)
    xl, yl = x + yt * np.sin(theta), yc - yt * np.cos(theta)
    return SectionShape(name, np.concatenate((xu[::-1], xl[1:])), np.concatenate((yu[::-1], yl[1:])))


def naca4(designation: str, n_points: int = 201, closed_te: bool = True) -> SectionShape:
    """NACA 4-digit section with the thickness applied normal to the mean line, cosine spaced.

    Upper surface :math:`x_u = x - y_t\\sin\\theta,\\; y_u = y_c + y_t\\cos\\theta`, lower surface with the signs
    of the y_t terms reversed, :math:`\\theta = \\arctan(dy_c/dx)`.

    Parameters
    ----------
    designation : str
        ``"NACA 0012"``, ``"0012"``, ``"2412"`` …
    n_points : int
        Contour points; rounded up to an odd number so the leading edge is a point [-].
    closed_te : bool
        Close the trailing edge (last coefficient −0.1036) instead of the published 0.25 %-thick base.

    Returns
    -------
    SectionShape
        The contour in NACA chord axes: the mean line runs from (0, 0) to (1, 0). A cambered section's upper
        surface reaches a few 1e-5 chords ahead of x = 0.

    Examples
    --------
    >>> shape = naca4("NACA 0012")
    >>> shape.x.size, round(float(shape.surface_y(0.3, upper=True)), 4)
    (201, 0.06)

    References
    ----------
    NACA Report 460 (1933); Abbott & von Doenhoff (1959) §6.4 (from memory).
    """
    m, p, t = parse_naca4(designation)
    label = "NACA " + _NACA4.match(designation).expand(r"\1\2\3")
    return _shape_from_mean_line(label, n_points, lambda x: naca4_camber(x, m, p),
                                 lambda x: naca4_thickness(x, t, closed_te))


def circular_arc_section(camber: float = 0.05, thickness: float = 0.02, n_points: int = 201) -> SectionShape:
    r"""Thin cambered plate: a circular-arc mean line of height ``camber`` with a NACA 00xx thickness.

    Mean line through (0, 0) and (1, 0) with radius :math:`r = (1/4 + h^2)/(2h)`:
    :math:`y_c = \sqrt{r^2 - (x - 1/2)^2} - (r - h)`; the (closed-TE) NACA thickness form rounds the nose so the
    panel method sees a smooth leading edge, as a bent sheet-metal plate with a filed nose would be.

    Parameters
    ----------
    camber : float
        Arc height h/c, 0 ≤ h < 0.5 [-].
    thickness : float
        Plate thickness t/c, > 0 [-].
    n_points : int
        Contour points [-].

    Examples
    --------
    >>> round(float(circular_arc_section(0.05).surface_y(0.5, upper=True)), 4)
    0.0588

    References
    ----------
    Circle geometry (common practice); thickness form of NACA Report 460 (1933).
    """
    if not (0.0 <= camber < 0.5) or thickness <= 0.0:
        raise ValueError(f"circular-arc section: need 0 ≤ camber < 0.5 and thickness > 0, got {camber}, {thickness}")
    if camber == 0.0:
        def mean_line(x):
            return np.zeros_like(x), np.zeros_like(x)
    else:
        r = (0.25 + camber**2) / (2.0 * camber)

        def mean_line(x):
            root = np.sqrt(r * r - (x - 0.5) ** 2)
            return root - (r - camber), -(x - 0.5) / root
    name = f"circular arc h/c={camber:g} t/c={thickness:g}"
    return _shape_from_mean_line(name, n_points, mean_line, lambda x: naca4_thickness(x, thickness, True))


def circle_section(n_points: int = 129) -> SectionShape:
    """Circular cylinder of unit diameter, centre (0.5, 0), points equally spaced in the polar angle.

    The polar angle φ of a contour point is measured from the rear (x = 1) point, counter-clockwise, so
    ``x = (1 + cos φ)/2``, ``y = sin(φ)/2``; potential-flow Cp on it is ``1 − 4 sin²φ``.

    >>> circle_section(13).x[:4].round(3).tolist()
    [1.0, 0.933, 0.75, 0.5]
    """
    phi = np.linspace(0.0, 2.0 * np.pi, max(int(n_points), 2))
    x, y = 0.5 * (1.0 + np.cos(phi)), 0.5 * np.sin(phi)
    y[-1] = 0.0
    return SectionShape("circle", x, y)


def from_coordinates(x: ArrayLike, y: ArrayLike, name: str = "table") -> SectionShape:
    """Build a shape from a coordinate table, in either common order, normalised to unit chord.

    Accepted orders: one contour from the trailing edge round the leading edge back to the trailing edge, in
    either direction (Selig style, upper surface first or lower first), or two surfaces each listed from the
    leading edge to the trailing edge, one after the other (Lednicer style, either surface first; a repeated
    leading-edge point is dropped). The chord is the x-extent: x is shifted and scaled so the foremost point is
    at x = 0 and the trailing edge at x = 1; y is scaled by the same factor and shifted so the trailing-edge
    midpoint is at y = 0. The table is not rotated: angles of attack stay referred to its x axis.

    Parameters
    ----------
    x, y : array_like
        Coordinates in any length unit (the same for both).
    name : str
        Label for messages and reports.

    Examples
    --------
    >>> s = naca4("0012", 41)
    >>> half = (s.x.size + 1) // 2
    >>> xs = np.concatenate((s.x[half - 1::-1], s.x[half - 1:])) * 0.1
    >>> ys = np.concatenate((s.y[half - 1::-1], s.y[half - 1:])) * 0.1
    >>> t = from_coordinates(xs, ys, "lednicer")
    >>> bool(np.allclose(t.x, s.x) and np.allclose(t.y, s.y))
    True
    """
    x = np.asarray(x, dtype=float).ravel()
    y = np.asarray(y, dtype=float).ravel()
    if x.shape != y.shape or x.size < _MIN_POINTS:
        raise ValueError(f"coordinate table {name!r}: need x and y of equal length ≥ {_MIN_POINTS}, "
                         f"got {x.size} and {y.size}")
    if not (np.all(np.isfinite(x)) and np.all(np.isfinite(y))):
        raise ValueError(f"coordinate table {name!r}: coordinates must be finite numbers")
    chord = x.max() - x.min()
    if not chord > 0.0:
        raise ValueError(f"coordinate table {name!r}: chord (x-extent) must be > 0, got {chord}")
    x, y = _contour_order(x, y, name)
    y_te = 0.5 * (y[0] + y[-1])
    return SectionShape(name, (x - x.min()) / chord, (y - y_te) / chord)


def _contour_order(x: np.ndarray, y: np.ndarray, name: str) -> tuple[np.ndarray, np.ndarray]:
    """Return the table as one counter-clockwise contour starting at the trailing edge."""
    span = x.max() - x.min()
    starts_at_te = x[0] > x.max() - _TE_GAP_LIMIT * span and x[-1] > x.max() - _TE_GAP_LIMIT * span
    if not starts_at_te:
        drops = x[:-1] - x[1:]
        k = int(np.argmax(drops)) + 1  # the second surface starts where x jumps back to the leading edge
        if drops[k - 1] < 0.5 * span or x[0] > x.min() + _TE_GAP_LIMIT * span:
            raise ValueError(f"coordinate table {name!r}: open contour or unknown order: expected trailing edge → "
                             "leading edge → trailing edge, or two surfaces each from leading to trailing edge")
        first, second = (x[:k], y[:k]), (x[k:], y[k:])
        if np.hypot(first[0][0] - second[0][0], first[1][0] - second[1][0]) < 1e-12 * span:
            second = (second[0][1:], second[1][1:])
        x = np.concatenate((first[0][::-1], second[0]))
        y = np.concatenate((first[1][::-1], second[1]))
    if _signed_area(x, y) < 0.0:
        x, y = x[::-1], y[::-1]
    return x, y


def tap_stations_uniform(n_taps: int) -> tuple[np.ndarray, np.ndarray]:
    """Tap layout uniform in x/c with a tap at the trailing edge and one at the leading edge, in contour order.

    The upper surface gets ``n_taps // 2 + 1`` taps from x = 1 to x = 0 inclusive, the lower surface the
    remaining interior stations (for even ``n_taps`` both surfaces share the spacing 2/n_taps). Returns
    (x_c, upper) arrays [-], [bool]; this is the "uniform in x" layout of docs/REFERENCES.md's trapezoid table.

    >>> tap_stations_uniform(6)[0].round(3).tolist()
    [1.0, 0.667, 0.333, 0.0, 0.333, 0.667]
    """
    return _tap_layout(n_taps, lambda n: np.linspace(0.0, 1.0, n))


def tap_stations_cosine(n_taps: int) -> tuple[np.ndarray, np.ndarray]:
    """Tap layout equally spaced in the angle φ of x = (1 − cos φ)/2, trailing- and leading-edge taps included.

    Clusters taps at both edges, where Cp changes fastest. Same counts per surface as
    :func:`tap_stations_uniform`. Returns (x_c, upper) arrays in contour order.

    >>> tap_stations_cosine(6)[0].round(3).tolist()
    [1.0, 0.75, 0.25, 0.0, 0.25, 0.75]
    """
    return _tap_layout(n_taps, cosine_stations)


def _tap_layout(n_taps: int, stations) -> tuple[np.ndarray, np.ndarray]:
    n_taps = int(n_taps)
    if n_taps < 3:
        raise ValueError(f"tap layout: need at least 3 taps, got {n_taps}")
    n_lower = (n_taps - 2) // 2
    n_upper = n_taps - 2 - n_lower
    upper_x = stations(n_upper + 2)[::-1]
    lower_x = stations(n_lower + 2)[1:-1]
    x_c = np.concatenate((upper_x, lower_x))
    return x_c, np.arange(n_taps) < upper_x.size
