"""A venturi's pressures against Bernoulli, and its discharge coefficient against the Reynolds number. Pure.

Discharge coefficient
    ISO 5167-1 defines C as the actual mass flow over the flow of an ideal venturi of the same areas at the same
    differential: q_m = C E ε (π/4) d² √(2 Δp ρ₁), E = 1/√(1 − β⁴) (ISO 5167-1:2003, eq. (1)). When the inlet's
    dynamic pressure q₁ is measured on its own (a pitot-static probe at the inlet: q_m = ρ V₁ A₁), and the throat's
    pressure coefficient Cp_t = (p_t − p₁)/q₁ is referred to it, continuity and that definition give, for an
    incompressible stream,

        C = √(Cp_t,ideal / Cp_t) / ε,    Cp_t,ideal = 1 − (A₁/A_t)²

    (our rearrangement; ε = 1 for a liquid or a small Δp/p₁). Its standard uncertainty follows from the throat
    Cp's: u(C)/C = ½ u(Cp_t)/|Cp_t| (GUM §5.1.6, a power law). When q₁ is itself worked out from the venturi's
    differential with an assumed C (a rig with no other flow reference), C cannot be measured: the analysis says so
    rather than returning the assumption.

ISO 5167-4 values beside it (ISO 5167-4:2003 §5.5, from memory): a classical venturi tube with a machined
convergent has C = 0.995 with a relative uncertainty of 1 %, for 50 mm ≤ D ≤ 250 mm, 0.4 ≤ β ≤ 0.75 and
2×10⁵ ≤ Re_D ≤ 1×10⁶. A teaching venturi usually runs below that Reynolds range, where C falls.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from taprig.physics.venturi import ISO5167_MACHINED_VENTURI_C, ISO5167_VENTURI_C_COVERAGE_K, \
    ISO5167_VENTURI_C_U_REL, ideal_station_cp


@dataclass(frozen=True)
class IsoVenturiRange:
    """The stated discharge coefficient of a machined-convergent classical venturi and where it holds.

    ``u_rel`` is the relative *standard* uncertainty of C (0.5 %); the standard states 1 % at about 95 %, which is
    ``expanded_rel`` = k × ``u_rel`` with ``k`` = 2 (ISO 5167-4 §5.5.4 and ISO 5167-1 §8, from memory).
    """

    c: float = ISO5167_MACHINED_VENTURI_C
    u_rel: float = ISO5167_VENTURI_C_U_REL
    k: float = ISO5167_VENTURI_C_COVERAGE_K
    re_d: tuple[float, float] = (2e5, 1e6)
    beta: tuple[float, float] = (0.4, 0.75)
    diameter_m: tuple[float, float] = (0.050, 0.250)

    @property
    def expanded_rel(self) -> float:
        """The relative uncertainty as the standard states it (about 95 %, k = 2): 1 %."""
        return self.k * self.u_rel

    def band(self) -> tuple[float, float]:
        """C × (1 ∓ k·u_rel): the interval the standard states, at about 95 % (k = 2)."""
        return self.c * (1.0 - self.expanded_rel), self.c * (1.0 + self.expanded_rel)

    def stated(self) -> str:
        """``C = 0.995 ± 1 % (k = 2, about 95 %)``."""
        return f"C = {self.c:g} ± {self.expanded_rel * 100:g} % (k = {self.k:g}, about 95 %)"

    def outside(self, re_d: float, beta: float, diameter_m: float) -> list[str]:
        """The conditions of a measurement that lie outside the standard's range, in words (empty when inside)."""
        out = []
        for name, value, (lo, hi), fmt in (("Re_D", re_d, self.re_d, "{:.3g}"), ("β", beta, self.beta, "{:.3f}"),
                                           ("D", diameter_m * 1e3, tuple(x * 1e3 for x in self.diameter_m),
                                            "{:.0f} mm")):
            if not (lo <= value <= hi):
                out.append(f"{name} {fmt.format(value)} outside {fmt.format(lo)}…{fmt.format(hi)}")
        return out


ISO_MACHINED = IsoVenturiRange()


#: Point flags that make a reading a state, not a number: a sensor at its rails, or beyond its rated range (where
#: its accuracy is not specified, so no uncertainty can be stated). Most serious first.
SENSOR_STATES = (("SATURATED", "saturated"), ("OUT_OF_RANGE", "beyond a sensor's rated range"))


def sensor_state(flags) -> str:
    """"" when no sensor of a point was saturated or beyond its rated range, else that state in words.

    >>> sensor_state(["DEGRADED", "OUT_OF_RANGE"])
    "beyond a sensor's rated range"
    """
    names = set(flags or ())
    return next((word for flag, word in SENSOR_STATES if flag in names), "")


@dataclass(frozen=True)
class DischargeCoefficient:
    """C per point against Re_D: ``re_d``, ``c``, ``u_c`` (NaN where there was no flow or a sensor state);
    ``mean_c`` (weighted by 1/u²) with ``u_mean_c`` (the standard error of the mean from the points' scatter, or
    the best point's own uncertainty when that is larger: the points share their sensors, so that part does not
    average away); ``beta`` the diameter ratio; ``states`` per point, "" or the sensor state (:func:`sensor_state`)
    that stands instead of its C."""

    re_d: np.ndarray
    c: np.ndarray
    u_c: np.ndarray
    mean_c: float
    u_mean_c: float
    beta: float
    states: tuple[str, ...] = ()


def station_comparison(areas_m2, inlet: int = 0) -> np.ndarray:
    """Ideal Cp of each station, referred to the inlet (continuity and Bernoulli, common practice)."""
    areas = np.asarray(areas_m2, dtype=float)
    return ideal_station_cp(areas, areas[inlet])


def discharge_coefficient(cp_throat, u_cp_throat, cp_throat_ideal: float, re_d, beta: float,
                          expansibility=1.0, states=None) -> DischargeCoefficient:
    """Discharge coefficient of each point from its throat Cp referred to an independent inlet q (module docstring).

    Parameters
    ----------
    cp_throat, u_cp_throat : array_like
        Throat pressure coefficient of each point and its standard uncertainty [-].
    cp_throat_ideal : float
        Ideal throat Cp, 1 − (A₁/A_t)² [-].
    re_d : array_like
        Inlet Reynolds number of each point [-].
    beta : float
        Diameter ratio d/D [-].
    expansibility : array_like
        ε of each point [-] (1 for a liquid or a small differential).
    states : sequence of str, optional
        Per point, "" or a sensor state (:func:`sensor_state`): such a point gets no C (NaN) and enters no mean.

    Examples
    --------
    >>> r = discharge_coefficient([-15.0 / 0.98**2], [0.0], -15.0, [1e5], 0.5)
    >>> round(float(r.c[0]), 6)
    0.98
    """
    cp = np.asarray(cp_throat, dtype=float)
    u = np.asarray(u_cp_throat, dtype=float)
    re = np.asarray(re_d, dtype=float)
    eps = np.broadcast_to(np.asarray(expansibility, dtype=float), cp.shape)
    states = tuple(states) if states is not None else ("",) * cp.size
    if len(states) != cp.size:
        raise ValueError(f"{len(states)} point states for {cp.size} points")
    in_state = np.array([bool(s) for s in states], dtype=bool).reshape(cp.shape)
    with np.errstate(invalid="ignore", divide="ignore"):
        c = np.where((cp < 0) & ~in_state, np.sqrt(cp_throat_ideal / cp) / eps, np.nan)
        u_c = c * 0.5 * np.abs(u / cp)
    ok = np.isfinite(c)
    if not ok.any():
        if in_state.any():
            raise ValueError("every point with flow had a sensor saturated or beyond its rated range: no C can be "
                             "stated")
        raise ValueError("no point has a throat pressure below the inlet's (no flow through the venturi)")
    weights = np.where(u_c[ok] > 0, 1.0 / np.where(u_c[ok] > 0, u_c[ok], 1.0) ** 2, 1.0)
    mean = float(np.sum(weights * c[ok]) / np.sum(weights))
    # the points share their sensors, so their own uncertainty does not average away: the best point's is a floor
    scatter = float(c[ok].std(ddof=1) / math.sqrt(ok.sum())) if ok.sum() > 1 else 0.0
    best = float(np.nanmin(u_c[ok])) if np.isfinite(u_c[ok]).any() else 0.0
    return DischargeCoefficient(re, c, u_c, mean, max(scatter, best), float(beta), states)
