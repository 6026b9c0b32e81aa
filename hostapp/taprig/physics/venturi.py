"""Venturi and duct stations: ideal pressures by continuity and Bernoulli, and ISO 5167-4 mass flow.

A teaching venturi has taps along its length; the ideal (inviscid, incompressible) curve of Cp against station
area is what the measured pressures are compared with. The mass-flow functions follow ISO 5167-1/-4, so a venturi
built to the standard can serve as the rig's flow meter.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

from taprig.physics.constants import HEAT_CAPACITY_RATIO_AIR, require_nonnegative, require_positive

#: Discharge coefficient of an ISO 5167-4 venturi tube with a machined convergent section [-] (ISO 5167-4 §5.5.4).
ISO5167_MACHINED_VENTURI_C = 0.995


def ideal_station_cp(area: ArrayLike, reference_area: ArrayLike) -> np.ndarray:
    r"""Ideal pressure coefficient of a duct station referred to the reference station's dynamic pressure.

    .. math:: C_p = \frac{p - p_{ref}}{q_{ref}} = 1 - \left(\frac{A_{ref}}{A}\right)^2

    Parameters
    ----------
    area : array_like
        Cross-section area of the station A [m²].
    reference_area : array_like
        Cross-section area of the reference station A_ref [m²] (usually the inlet).

    Returns
    -------
    ndarray
        Ideal pressure coefficient Cp [-].

    Notes
    -----
    Steady, inviscid, incompressible one-dimensional flow; real stations downstream of the throat fall below this
    by the friction and diffuser loss.

    Examples
    --------
    >>> float(ideal_station_cp(np.pi / 4 * 0.025**2, np.pi / 4 * 0.050**2))
    -15.0

    References
    ----------
    Continuity and Bernoulli's equation (common practice).
    """
    a = require_positive("station area", area, "m^2")
    a_ref = require_positive("reference area", reference_area, "m^2")
    return 1.0 - (a_ref / a) ** 2


def station_speeds(reference_speed: ArrayLike, reference_area: ArrayLike, areas: ArrayLike) -> np.ndarray:
    r"""Mean speed at each station by continuity of an incompressible stream.

    .. math:: V = V_{ref}\, \frac{A_{ref}}{A}

    Parameters
    ----------
    reference_speed : array_like
        Mean speed at the reference station V_ref [m/s].
    reference_area : array_like
        Reference station area A_ref [m²].
    areas : array_like
        Station areas A [m²].

    Returns
    -------
    ndarray
        Station speeds V [m/s], broadcast over the inputs.

    Examples
    --------
    >>> station_speeds(10.0, 4.0, np.array([4.0, 2.0, 1.0])).tolist()
    [10.0, 20.0, 40.0]

    References
    ----------
    Continuity equation (common practice).
    """
    a = require_positive("station area", areas, "m^2")
    a_ref = require_positive("reference area", reference_area, "m^2")
    return np.asarray(reference_speed, dtype=float) * a_ref / a


def station_pressures(
    reference_pressure: ArrayLike,
    reference_speed: ArrayLike,
    density: ArrayLike,
    reference_area: ArrayLike,
    areas: ArrayLike,
) -> np.ndarray:
    r"""Static pressure at each station by Bernoulli's equation along the duct.

    .. math:: p = p_{ref} + \tfrac{1}{2}\rho V_{ref}^2 \left[1 - \left(\frac{A_{ref}}{A}\right)^2\right]

    Parameters
    ----------
    reference_pressure : array_like
        Static pressure at the reference station p_ref [Pa] (absolute or gauge; the result is on the same basis).
    reference_speed : array_like
        Mean speed at the reference station V_ref [m/s].
    density : array_like
        Fluid density ρ [kg/m³].
    reference_area : array_like
        Reference station area A_ref [m²].
    areas : array_like
        Station areas A [m²].

    Returns
    -------
    ndarray
        Ideal static pressures p [Pa].

    Examples
    --------
    >>> station_pressures(0.0, 10.0, 1.2, 4.0, np.array([4.0, 2.0])).tolist()
    [0.0, -180.0]

    References
    ----------
    Bernoulli's equation (common practice).
    """
    rho = require_positive("density", density, "kg/m^3")
    q_ref = 0.5 * rho * np.asarray(reference_speed, dtype=float) ** 2
    return np.asarray(reference_pressure, dtype=float) + q_ref * ideal_station_cp(areas, reference_area)


def beta_ratio(throat_diameter: ArrayLike, pipe_diameter: ArrayLike) -> np.ndarray:
    r"""Diameter ratio of a differential-pressure meter.

    .. math:: \beta = d / D

    Parameters
    ----------
    throat_diameter : array_like
        Throat diameter d [m].
    pipe_diameter : array_like
        Upstream pipe (inlet) diameter D [m].

    Returns
    -------
    ndarray
        Diameter ratio β [-], in (0, 1).

    Examples
    --------
    >>> float(beta_ratio(0.025, 0.050))
    0.5

    References
    ----------
    ISO 5167-1:2003, §3.3.5.
    """
    d = require_positive("throat diameter", throat_diameter, "m")
    big_d = require_positive("pipe diameter", pipe_diameter, "m")
    if np.any(d >= big_d):
        raise ValueError("throat diameter must be smaller than the pipe diameter")
    return d / big_d


def velocity_of_approach_factor(beta: ArrayLike) -> np.ndarray:
    r"""Velocity-of-approach factor of a differential-pressure meter.

    .. math:: E = \frac{1}{\sqrt{1 - \beta^4}}

    Parameters
    ----------
    beta : array_like
        Diameter ratio β [-], in (0, 1).

    Returns
    -------
    ndarray
        Velocity-of-approach factor E [-].

    Examples
    --------
    >>> round(float(velocity_of_approach_factor(0.5)), 6)
    1.032796

    References
    ----------
    ISO 5167-1:2003, §3.3.6.
    """
    b = _check_beta(beta)
    return 1.0 / np.sqrt(1.0 - b**4)


def venturi_expansibility(
    beta: ArrayLike, upstream_pressure: ArrayLike, differential: ArrayLike, kappa: float = HEAT_CAPACITY_RATIO_AIR
) -> np.ndarray:
    r"""Expansibility factor ε of a venturi tube or nozzle, ISO 5167-4 (isentropic, perfect gas).

    .. math::
        \varepsilon = \sqrt{\frac{\kappa \tau^{2/\kappa}}{\kappa - 1}\,
                      \frac{1 - \beta^4}{1 - \beta^4 \tau^{2/\kappa}}\,
                      \frac{1 - \tau^{(\kappa - 1)/\kappa}}{1 - \tau}}, \quad \tau = \frac{p_1 - \Delta p}{p_1}

    Parameters
    ----------
    beta : array_like
        Diameter ratio β [-].
    upstream_pressure : array_like
        Absolute static pressure at the upstream tap p1 [Pa].
    differential : array_like
        Upstream-minus-throat differential Δp [Pa], 0 ≤ Δp < p1.
    kappa : float, optional
        Isentropic exponent κ [-], default 1.4.

    Returns
    -------
    ndarray
        Expansibility ε [-] (1 at Δp = 0).

    Notes
    -----
    ISO 5167-4 applies it for τ ≥ 0.75. At Δp = 0 the limit (κ−1)/κ of the last fraction is used.

    Examples
    --------
    >>> round(float(venturi_expansibility(0.5, 101325.0, 500.0)), 7)
    0.9971189

    References
    ----------
    ISO 5167-4:2003, §5.6, eq. (2); also ASME MFC-3M.
    """
    b4 = _check_beta(beta) ** 4
    p1 = require_positive("upstream pressure", upstream_pressure, "Pa")
    dp = require_nonnegative("venturi differential", differential, "Pa")
    if np.any(dp >= p1):
        raise ValueError("venturi differential must be smaller than the absolute upstream pressure")
    drop = dp / p1  # 1 − τ, formed directly so that a tiny Δp/p1 keeps its precision
    tau = 1.0 - drop
    lead = kappa * tau ** (2.0 / kappa) / (kappa - 1.0)
    area_term = (1.0 - b4) / (1.0 - b4 * tau ** (2.0 / kappa))
    exponent = (kappa - 1.0) / kappa
    # (1 − τ^e)/(1 − τ) by expm1/log1p: the plain form cancels to noise for Δp of a few Pa at 1 atm; below
    # Δp/p1 = 1e-8 its two-term series e + e(1 − e)/2·(1 − τ) is exact to double precision
    safe = np.where(drop > 1e-8, drop, 0.5)  # any harmless value where the series is used
    ratio = np.where(drop > 1e-8, -np.expm1(exponent * np.log1p(-safe)) / safe,
                     exponent * (1.0 + 0.5 * (1.0 - exponent) * drop))
    return np.sqrt(lead * area_term * ratio)


def venturi_mass_flow(
    throat_diameter: ArrayLike,
    pipe_diameter: ArrayLike,
    differential: ArrayLike,
    upstream_density: ArrayLike,
    discharge_coefficient: ArrayLike = ISO5167_MACHINED_VENTURI_C,
    expansibility: ArrayLike = 1.0,
) -> np.ndarray:
    r"""Mass flow through a venturi tube from its upstream-to-throat differential, ISO 5167-1/-4.

    .. math:: q_m = \frac{C}{\sqrt{1 - \beta^4}}\, \varepsilon\, \frac{\pi}{4} d^2 \sqrt{2 \Delta p\, \rho_1}

    Parameters
    ----------
    throat_diameter : array_like
        Throat diameter d [m].
    pipe_diameter : array_like
        Inlet diameter D [m].
    differential : array_like
        Upstream-minus-throat differential Δp [Pa], >= 0.
    upstream_density : array_like
        Fluid density at the upstream tap ρ1 [kg/m³].
    discharge_coefficient : array_like, optional
        Discharge coefficient C [-]; default 0.995 (machined convergent, ISO 5167-4).
    expansibility : array_like, optional
        Expansibility ε [-] (see :func:`venturi_expansibility`); default 1 (liquid or negligible Δp/p1).

    Returns
    -------
    ndarray
        Mass flow q_m [kg/s].

    Notes
    -----
    C = 0.995 holds for 2e5 ≤ Re_D ≤ 1e6 and 0.4 ≤ β ≤ 0.75 (from memory); a small teaching venturi runs below
    that range and needs its own calibration of C.

    Examples
    --------
    >>> f"{float(venturi_mass_flow(0.025, 0.050, 500.0, 1.204575)):.6e}"
    '1.750751e-02'

    References
    ----------
    ISO 5167-1:2003, eq. (1); ISO 5167-4:2003, §5.5.
    """
    e = velocity_of_approach_factor(beta_ratio(throat_diameter, pipe_diameter))
    dp = require_nonnegative("venturi differential", differential, "Pa")
    rho = require_positive("upstream density", upstream_density, "kg/m^3")
    c = require_positive("discharge coefficient", discharge_coefficient, "")
    eps = require_positive("expansibility", expansibility, "")
    d = np.asarray(throat_diameter, dtype=float)
    return c * e * eps * np.pi / 4.0 * d**2 * np.sqrt(2.0 * dp * rho)


#: Relative uncertainty of C = 0.995 for a machined-convergent classical venturi as the standard states it: 1 %
#: within its range of use (ISO 5167-4:2003 §5.5.4, from memory) ...
ISO5167_VENTURI_C_EXPANDED_REL = 0.01
#: ... at about 95 % confidence, i.e. an expanded uncertainty with coverage factor k ≈ 2: ISO 5167-1 states its
#: uncertainties so (ISO 5167-1:2003 §8, from memory; GUM §6.2).
ISO5167_VENTURI_C_COVERAGE_K = 2.0
#: Relative standard uncertainty of C [-]: the stated 1 % over k = 2, i.e. 0.5 %. Every use of the standard's C
#: (the reduction's mass-flow uncertainty, ``taprig check``'s prediction, the venturi analysis and the handout's
#: band) takes it from here.
ISO5167_VENTURI_C_U_REL = ISO5167_VENTURI_C_EXPANDED_REL / ISO5167_VENTURI_C_COVERAGE_K


def venturi_expansibility_u_rel(beta: ArrayLike, differential: ArrayLike, upstream_pressure: ArrayLike) -> np.ndarray:
    r"""Relative standard uncertainty of a venturi's expansibility factor.

    .. math:: \frac{u(\varepsilon)}{\varepsilon} = \tfrac12 (4 + 100 \beta^8) \frac{\Delta p}{p_1}\ \%

    (the standard gives (4 + 100β⁸)Δp/p1 % at about 95 %, halved here to a standard uncertainty).

    Parameters
    ----------
    beta : array_like
        Diameter ratio β = d/D [-].
    differential : array_like
        Upstream-minus-throat differential Δp [Pa].
    upstream_pressure : array_like
        Absolute upstream pressure p1 [Pa].

    Returns
    -------
    ndarray
        u(ε)/ε [-].

    Examples
    --------
    >>> round(float(venturi_expansibility_u_rel(0.5, 500.0, 101325.0)), 8)
    0.00010833

    References
    ----------
    ISO 5167-4:2003 §5.6.3 (from memory).
    """
    b = _check_beta(beta)
    return 0.5 * (4.0 + 100.0 * b**8) * np.asarray(differential, dtype=float) / \
        require_positive("upstream pressure", upstream_pressure, "Pa") / 100.0


def venturi_flow_u_rel(
    beta: ArrayLike,
    u_rel_c: ArrayLike,
    u_rel_eps: ArrayLike,
    u_rel_d: ArrayLike,
    u_rel_big_d: ArrayLike,
    u_rel_dp: ArrayLike,
    u_rel_rho: ArrayLike,
) -> np.ndarray:
    r"""Relative standard uncertainty of a venturi's mass flow, the standard's combination of its inputs.

    .. math::
        \left(\frac{u(q_m)}{q_m}\right)^2 = \left(\frac{u_C}{C}\right)^2 + \left(\frac{u_\varepsilon}{\varepsilon}\right)^2
        + \left(\frac{2\beta^4}{1-\beta^4}\right)^2 \left(\frac{u_D}{D}\right)^2
        + \left(\frac{2}{1-\beta^4}\right)^2 \left(\frac{u_d}{d}\right)^2
        + \tfrac14 \left(\frac{u_{\Delta p}}{\Delta p}\right)^2 + \tfrac14 \left(\frac{u_{\rho_1}}{\rho_1}\right)^2

    Parameters
    ----------
    beta : array_like
        Diameter ratio β [-].
    u_rel_c, u_rel_eps, u_rel_d, u_rel_big_d, u_rel_dp, u_rel_rho : array_like
        Relative standard uncertainties of C, ε, d, D, Δp and ρ1 [-], uncorrelated.

    Returns
    -------
    ndarray
        u(q_m)/q_m [-].

    Examples
    --------
    >>> round(float(venturi_flow_u_rel(0.5, 0.005, 0.0, 0.0, 0.0, 0.01, 0.0)), 6)
    0.007071

    References
    ----------
    ISO 5167-1:2003 §8.2 (uncertainty of the flow rate; the sensitivities of d and D follow from
    q_m ∝ d²/√(1 − β⁴)), from memory.
    """
    b4 = _check_beta(beta) ** 4
    terms = (np.asarray(u_rel_c, dtype=float) ** 2 + np.asarray(u_rel_eps, dtype=float) ** 2
             + (2.0 * b4 / (1.0 - b4)) ** 2 * np.asarray(u_rel_big_d, dtype=float) ** 2
             + (2.0 / (1.0 - b4)) ** 2 * np.asarray(u_rel_d, dtype=float) ** 2
             + 0.25 * np.asarray(u_rel_dp, dtype=float) ** 2 + 0.25 * np.asarray(u_rel_rho, dtype=float) ** 2)
    return np.sqrt(terms)


def pressure_recovery_fraction(
    inlet_pressure: ArrayLike, throat_pressure: ArrayLike, outlet_pressure: ArrayLike
) -> np.ndarray:
    r"""Fraction of the inlet-to-throat pressure drop that the diffuser recovers.

    .. math:: \eta_r = \frac{p_{out} - p_{throat}}{p_{in} - p_{throat}}

    Parameters
    ----------
    inlet_pressure : array_like
        Static pressure at the inlet p_in [Pa].
    throat_pressure : array_like
        Static pressure at the throat p_throat [Pa].
    outlet_pressure : array_like
        Static pressure at the outlet (same area as the inlet) p_out [Pa].

    Returns
    -------
    ndarray
        Recovery fraction [-]: 1 for an ideal venturi; 1 − η_r is the permanent loss as a fraction of Δp.
        NaN where the inlet and throat pressures are equal (no flow).

    Examples
    --------
    >>> float(pressure_recovery_fraction(0.0, -500.0, -60.0))
    0.88

    References
    ----------
    ISO 5167-4:2003, §5.8 (pressure loss), common practice.
    """
    p_in = np.asarray(inlet_pressure, dtype=float)
    p_t = np.asarray(throat_pressure, dtype=float)
    drop = p_in - p_t
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(drop != 0.0, (np.asarray(outlet_pressure, dtype=float) - p_t) / drop, np.nan)


def _check_beta(beta: ArrayLike) -> np.ndarray:
    """β as an array after checking 0 < β < 1."""
    b = require_positive("diameter ratio beta", beta, "")
    if np.any(b >= 1.0):
        raise ValueError("diameter ratio beta must be below 1")
    return b
