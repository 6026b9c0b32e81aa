"""Pressure distribution of a section at any angle of attack: inviscid panel Cp below the stall, a stall model above.

Below the critical angle the taps see the panel method's inviscid Cp (:class:`taprig.physics.panel.PanelModel`),
optionally at a slightly reduced angle: a boundary layer thickens toward the trailing edge and lowers the lift
slope of a real section below its inviscid value ("viscous decambering"; the measured NACA 0012 slope is about
0.88 of the inviscid one of a 12 %-thick section, Abbott & von Doenhoff 1959 App. IV and the exact Joukowski
slope of docs/REFERENCES.md, from memory).

Above the critical angle (measured from the zero-lift angle) a stall model takes over, after the picture of
trailing-edge stall used by the trade:

* the separation point f (x/c) on the suction side moves forward from the trailing edge as the angle grows,
  f = f_min + (1 − f_min) exp(−(|α − α₀| − α_s)/S), the exponential form of Leishman & Beddoes (1989), from
  memory;
* the lift follows Kirchhoff's flow with a separation point f, Cl = Cl_attached · ((1 + √f)/2)² (Thwaites 1960;
  Leishman & Beddoes 1989, from memory), so it falls past the critical angle;
* behind the separation point the suction side's pressure is flat at its value at the separation point; ahead
  of it the suction side keeps an attached inviscid distribution at an effective angle chosen so that the
  integrated Cl equals Kirchhoff's (solved once, on a table of angles); the pressure side stays attached at the
  geometric angle, so it keeps its pressures above the free-stream static;
* pressure fluctuations (rms, as a fraction of q) grow behind the separation point with the extent of the
  separation.

In a closed test section (``walls`` given) the inviscid Cp is that of the section between the floor and the
ceiling (:class:`taprig.physics.images.WalledPanelModel`), referred to the stream far upstream where the rig's
probe reads q: the taps see the walls' blockage and streamline curvature as a real model does. The angles of the
model stay geometric (decambering about the tunnel's own zero-lift angle), but the separation follows the
incidence the section feels, the free-air angle with the same effective incidence (the geometric angle plus the
walls' upwash at mid-chord, thin-aerofoil theory), so a model stalls in the tunnel where the same section stalls
in free air once its angle is corrected for the walls.

Everything here is pure: arrays of angles in, arrays of Cp out. The random part (the fluctuations' draws) is the
caller's.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from taprig.physics.images import WalledPanelModel
from taprig.physics.integration import trapezoid_weights
from taprig.physics.panel import PanelModel
from taprig.physics.sections import SectionShape, cosine_stations


@dataclass(frozen=True)
class StallModel:
    """Parameters of the lift-slope reduction and the stall (angles in rad, fluctuations as rms Cp)."""

    #: Critical angle above the zero-lift angle where the flow starts to separate α_s [rad]. 12° is typical of a
    #: 12 %-thick section at the low Reynolds numbers of a bench tunnel (from memory).
    critical_angle: float = math.radians(12.0)
    #: Angle scale S of the separation point's forward run past the critical angle [rad] (Leishman & Beddoes
    #: give a few degrees for a NACA 0012, from memory).
    decay: float = math.radians(2.5)
    #: Most forward separation point f_min [x/c] (the asymptote of the exponential form, from memory).
    forward_limit: float = 0.04
    #: Lift-slope factor of the viscous decambering (1 = inviscid) [-].
    slope_factor: float = 0.9
    #: Pressure fluctuation of attached flow (free-stream turbulence), rms Cp [-].
    attached_rms: float = 0.005
    #: Additional pressure fluctuation behind a full separation, rms Cp [-].
    separated_rms: float = 0.25

    def separation_point(self, excess: np.ndarray) -> np.ndarray:
        r"""Separation point for an angle ``excess`` = |α − α₀| − α_s [rad].

        .. math:: f = 1 \ (\Delta\alpha \le 0), \qquad f = f_{min} + (1 - f_{min})\,e^{-\Delta\alpha / S}

        Returns f [x/c]; 1 means attached to the trailing edge. Leishman & Beddoes (1989), from memory.
        """
        excess = np.asarray(excess, dtype=float)
        decayed = self.forward_limit + (1.0 - self.forward_limit) * np.exp(-np.maximum(excess, 0.0) / self.decay)
        return np.where(excess > 0.0, decayed, 1.0)


@dataclass(frozen=True)
class SectionPressures:
    """Result of :meth:`AirfoilFlow.pressures` for a block of angles (scans along axis 0).

    ``cp`` and ``cp_rms`` at the taps (scans × taps), ``cl`` and ``cd`` from a dense integration of the same
    distribution (scans,), ``separation`` the suction-side separation point [x/c] (1 = attached).
    """

    cp: np.ndarray
    cp_rms: np.ndarray
    cl: np.ndarray
    cd: np.ndarray
    separation: np.ndarray


class AirfoilFlow:
    """The pressure model of one section with a fixed set of taps (immutable once built).

    Parameters
    ----------
    shape : SectionShape
        The section at unit chord.
    tap_x : array_like
        Chordwise position of each tap [x/c].
    tap_upper : array_like of bool
        True for a tap on the upper surface.
    stall : StallModel
        Stall and decambering parameters.
    n_grid : int
        Stations per surface of the dense grid used for Cl (and for the flat separated pressure).
    walls : WalledPanelModel or None
        The section between the walls of a closed test section (None: free air). Built for the same shape.
    friction_drag : float
        Skin-friction drag coefficient added to the pressure drag for the wake's displacement between walls [-].
    """

    def __init__(self, shape: SectionShape, tap_x, tap_upper, stall: StallModel = StallModel(), n_grid: int = 80,
                 walls: WalledPanelModel | None = None, friction_drag: float = 0.0):
        self.shape = shape
        self.friction_drag = float(friction_drag)
        self.stall = stall
        self.walls = walls
        self.model = walls.free if walls is not None else PanelModel(shape)
        tap_x = np.asarray(tap_x, dtype=float)
        tap_upper = np.asarray(tap_upper, dtype=bool)
        self._n_taps = tap_x.size
        grid = cosine_stations(n_grid)
        self._grid = grid
        # Dense closed contour in integration order (TE → upper → LE → lower), placed after the taps so one panel
        # evaluation per angle serves both.
        contour_x = np.concatenate([grid[::-1], grid[1:-1]])
        contour_upper = np.concatenate([np.ones(n_grid, dtype=bool), np.zeros(n_grid - 2, dtype=bool)])
        contour_y = np.where(contour_upper, shape.surface_y(contour_x, True), shape.surface_y(contour_x, False))
        self._weights = trapezoid_weights(contour_x, contour_y)
        self._x = np.concatenate([tap_x, contour_x])
        self._upper = np.concatenate([tap_upper, contour_upper])
        self._arc = shape.arc_length_at(self._x, self._upper)
        self._grid_arc = (shape.arc_length_at(grid, True), shape.arc_length_at(grid, False))
        small = math.radians(2.0)
        cl0, cl1 = (float(v) for v in np.ravel(self.model.cl(np.array([0.0, small]))))
        #: Zero-lift angle of the section in free air [rad]; the stall is measured from it.
        self.free_zero_lift_angle = -cl0 * small / (cl1 - cl0)
        self._tables = None
        if walls is not None:
            self._tables = tuple(walls.speed_table(arc) for arc in (self._arc, *self._grid_arc))
            cl0, cl1 = (float(v) for v in self._weights.apply(self._cp(np.array([0.0, small]), 0)[:, self._n_taps:],
                                                              np.array([0.0, small])).cl)
        #: Geometric angle of zero lift [rad] (in the tunnel, where the walls' curvature shifts it).
        self.zero_lift_angle = -cl0 * small / (cl1 - cl0)
        self._table_alpha, self._table_effective = self._effective_angle_table()

    def pressures(self, alpha: np.ndarray) -> SectionPressures:
        """Cp at the taps, its rms and the section's Cl and Cd for each angle of attack ``alpha`` [rad]."""
        alpha = np.atleast_1d(np.asarray(alpha, dtype=float))
        # A servo at rest gives one angle for a whole block: evaluate each distinct angle once.
        distinct, back = np.unique(alpha, return_inverse=True)
        suction_angle = np.interp(distinct, self._table_alpha, self._table_effective)
        cp, separation, behind, _ = self._distribution(distinct, suction_angle)
        n = self._n_taps
        coefficients = self._weights.apply(cp[:, n:], distinct)
        extent = 1.0 - separation
        rms = self.stall.attached_rms + self.stall.separated_rms * extent[:, None] * behind[:, :n]
        cl, cd = np.asarray(coefficients.cl), np.asarray(coefficients.cd_p)
        if self.walls is not None:
            speed_up = (1.0 + self.wake_blockage(cd)) ** 2
            cp, cl, cd = 1.0 - speed_up[:, None] * (1.0 - cp), cl * speed_up, cd * speed_up
        return SectionPressures(cp[back, :n], rms[back], cl[back], cd[back], separation[back])

    def wake_blockage(self, cd_pressure: np.ndarray) -> np.ndarray:
        r"""Speed-up at the model from its wake between the walls, relative to the stream far upstream [-].

        .. math:: \varepsilon_w = \frac{Q}{2hV} = \frac{c}{4h}\,(C_{d,p} + C_{d,f}), \qquad Q = \tfrac12 V c\, C_d

        The wake's displacement is a source of the volume deficit Q of its momentum loss (drag D = ρVQ); its
        images in the walls form a row of equal sources h apart, which raises the speed at the model by Q/2h over
        the speed far upstream. Every tap's q then grows by (1 + ε_w)². Thom's source-image argument, as in Allen
        & Vincenti, NACA TR 782 (1944) (from memory; Barlow, Rae & Pope's Maskell-type form is twice this).
        """
        if self.walls is None:
            return np.zeros_like(np.asarray(cd_pressure, dtype=float))
        return 0.25 * self.walls.chord_over_height * (np.asarray(cd_pressure, dtype=float) + self.friction_drag)

    def _distribution(self, alpha: np.ndarray, suction_angle: np.ndarray):
        """Cp at every point (taps, then the dense contour) with the suction side at ``suction_angle``."""
        st = self.stall
        rel = alpha - self.zero_lift_angle
        sign = np.where(rel >= 0.0, 1.0, -1.0)
        pressure_angle = self.zero_lift_angle + st.slope_factor * rel
        separation = st.separation_point(np.abs(self._incidence(alpha, rel)) - st.critical_angle)
        suction = np.where(sign[:, None] > 0.0, self._upper[None, :], ~self._upper[None, :])
        cp = np.where(suction, self._cp(suction_angle, 0), self._cp(pressure_angle, 0))
        behind = suction & (self._x[None, :] > separation[:, None])
        if np.any(behind):
            cp = np.where(behind, self._plateau(suction_angle, sign, separation)[:, None], cp)
        return cp, separation, behind, sign

    def _effective_angle_table(self, step: float = math.radians(0.25), span: float = math.radians(45.0)):
        """Suction-side angle making the integrated Cl equal Kirchhoff's, on a table of angles (bisection).

        Below the critical angle it is the decambered angle itself; above, the bisection runs between an angle
        10° on the other side of zero lift and the decambered angle, over which the Cl rises monotonically.
        """
        st = self.stall
        rel = np.arange(-span, span + step / 2, step)
        alpha = self.zero_lift_angle + rel
        attached = self.zero_lift_angle + st.slope_factor * rel
        f = st.separation_point(np.abs(self._incidence(alpha, rel)) - st.critical_angle)
        n = self._n_taps
        cl_attached = self._weights.apply(self._cp(attached, 0)[:, n:], alpha).cl
        target = cl_attached * ((1.0 + np.sqrt(f)) / 2.0) ** 2
        low = self.zero_lift_angle - np.sign(rel) * math.radians(10.0)
        lo_u, hi_u = np.zeros_like(rel), np.ones_like(rel)
        for _ in range(30):
            u = 0.5 * (lo_u + hi_u)
            trial = low + u * (attached - low)
            cl = self._weights.apply(self._distribution(alpha, trial)[0][:, n:], alpha).cl
            high = np.sign(rel) * (cl - target) > 0.0
            hi_u, lo_u = np.where(high, u, hi_u), np.where(high, lo_u, u)
        effective = np.where(f < 1.0, low + 0.5 * (lo_u + hi_u) * (attached - low), attached)
        return alpha, effective

    def _cp(self, alpha: np.ndarray, which: int) -> np.ndarray:
        """Inviscid Cp, scans × points, at the taps and dense contour (0), the upper (1) or lower (2) grid."""
        if self._tables is not None:
            return np.atleast_2d(1.0 - self._tables[which](np.clip(alpha, *self._table_range)) ** 2)
        arc = (self._arc, *self._grid_arc)[which]
        return np.atleast_2d(self.model.cp_at_arc(alpha, arc))

    @property
    def _table_range(self) -> tuple[float, float]:
        return float(self.walls.table_alpha[0]), float(self.walls.table_alpha[-1])

    def _incidence(self, alpha: np.ndarray, rel: np.ndarray) -> np.ndarray:
        """Angle from free-air zero lift that sets the separation [rad]: ``rel`` (α − α₀) in free air; between
        walls the free-air angle of the same effective incidence less the free-air zero-lift angle."""
        if self.walls is None:
            return rel
        return self.walls.equivalent_free_angle(alpha) - self.free_zero_lift_angle

    def _plateau(self, alpha_suction: np.ndarray, sign: np.ndarray, separation: np.ndarray) -> np.ndarray:
        """Suction-side Cp at each scan's separation point (linear interpolation on the dense grid)."""
        up, lo = (self._cp(alpha_suction, which) for which in (1, 2))
        side = np.where(sign[:, None] > 0.0, up, lo)
        i = np.clip(np.searchsorted(self._grid, separation) - 1, 0, self._grid.size - 2)
        x0, x1 = self._grid[i], self._grid[i + 1]
        rows = np.arange(separation.size)
        w = (separation - x0) / (x1 - x0)
        return side[rows, i] * (1.0 - w) + side[rows, i + 1] * w
