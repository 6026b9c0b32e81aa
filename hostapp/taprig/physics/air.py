"""Properties of the air in the test section: density, viscosity, speed of sound.

Moist-air density follows the CIPM-2007 equation (the one mass metrology uses for air buoyancy), which is the
most accurate simple formula for room air and costs a handful of array operations. Viscosity follows Sutherland's
law with the constants of the 1976 standard atmosphere. All functions take SI values (K, Pa, relative humidity
as a fraction 0–1) and broadcast over numpy arrays.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from taprig.physics.constants import (
    HEAT_CAPACITY_RATIO_AIR,
    MOLAR_GAS_CONSTANT,
    SPECIFIC_GAS_CONSTANT_DRY_AIR,
    STANDARD_PRESSURE,
    STANDARD_TEMPERATURE,
    ZERO_CELSIUS,
    require_in_range,
    require_positive,
)

# CIPM-2007 constants (Picard et al. 2008, Table 1 and eqs. A1.1–A1.4).
_PSV = (1.2378847e-5, -1.9121316e-2, 33.93711047, -6.3431645e3)  # A [K⁻²], B [K⁻¹], C [-], D [K]
_ENHANCE = (1.00062, 3.14e-8, 5.6e-7)  # α [-], β [Pa⁻¹], γ [K⁻²]
_Z_A = (1.58123e-6, -2.9331e-8, 1.1043e-10)  # a0 [K/Pa], a1 [1/Pa], a2 [1/(K·Pa)]
_Z_B = (5.707e-6, -2.051e-8)  # b0 [K/Pa], b1 [1/Pa]
_Z_C = (1.9898e-4, -2.376e-6)  # c0 [K/Pa], c1 [1/Pa]
_Z_D, _Z_E = 1.83e-11, -0.765e-8  # d [K²/Pa²], e [K²/Pa²]
_M_VAPOUR = 18.01528e-3  # molar mass of water [kg/mol]
_DEFAULT_CO2 = 0.0004  # CO2 mole fraction of CIPM-2007's reference composition [mol/mol]

# Sutherland's law constants of the 1976 US standard atmosphere (White, Viscous Fluid Flow).
SUTHERLAND_MU0 = 1.716e-5  # [Pa·s]
SUTHERLAND_T0 = 273.15  # [K]
SUTHERLAND_S = 110.4  # [K]


def saturation_vapour_pressure(temperature: ArrayLike) -> np.ndarray:
    r"""Saturation vapour pressure of water over a plane liquid surface, CIPM-2007 form.

    .. math:: p_{sv} = 1\,\mathrm{Pa}\;\exp\!\left(A T^2 + B T + C + D/T\right)

    Parameters
    ----------
    temperature : array_like
        Thermodynamic temperature T [K].

    Returns
    -------
    ndarray
        Saturation vapour pressure p_sv [Pa].

    Notes
    -----
    Fitted for 288.15–300.15 K (the CIPM-2007 range); within 0.1 % of IAPWS-95 from 0 to 40 °C.

    Examples
    --------
    >>> round(float(saturation_vapour_pressure(293.15)), 1)
    2339.2

    References
    ----------
    A. Picard, R. S. Davis, M. Gläser, K. Fujii, "Revised formula for the density of moist air (CIPM-2007)",
    Metrologia 45 (2008) 149–155, eq. (A1.1).
    """
    t = require_positive("temperature", temperature, "K")
    a, b, c, d = _PSV
    return np.exp(a * t * t + b * t + c + d / t)


def enhancement_factor(temperature: ArrayLike, pressure: ArrayLike) -> np.ndarray:
    r"""Enhancement factor of water vapour in air, CIPM-2007.

    .. math:: f = \alpha + \beta p + \gamma t^2, \quad t = T - 273.15\,\mathrm{K}

    Parameters
    ----------
    temperature : array_like
        Temperature T [K].
    pressure : array_like
        Total pressure p [Pa].

    Returns
    -------
    ndarray
        Enhancement factor f [-].

    Notes
    -----
    Valid for 60–110 kPa and 0–30 °C.

    Examples
    --------
    >>> round(float(enhancement_factor(293.15, 101325.0)), 6)
    1.004026

    References
    ----------
    Picard et al., Metrologia 45 (2008) 149, eq. (A1.2).
    """
    t = require_positive("temperature", temperature, "K") - ZERO_CELSIUS
    p = require_positive("pressure", pressure, "Pa")
    alpha, beta, gamma = _ENHANCE
    return alpha + beta * p + gamma * t * t


def vapour_mole_fraction(temperature: ArrayLike, pressure: ArrayLike, relative_humidity: ArrayLike) -> np.ndarray:
    r"""Mole fraction of water vapour in moist air from relative humidity, CIPM-2007.

    .. math:: x_v = h\, f(p, t)\, \frac{p_{sv}(T)}{p}

    Parameters
    ----------
    temperature : array_like
        Temperature T [K].
    pressure : array_like
        Total pressure p [Pa].
    relative_humidity : array_like
        Relative humidity h as a fraction [-], 0–1.

    Returns
    -------
    ndarray
        Vapour mole fraction x_v [mol/mol].

    Examples
    --------
    >>> round(float(vapour_mole_fraction(293.15, 101325.0, 0.5)), 6)
    0.011589

    References
    ----------
    Picard et al., Metrologia 45 (2008) 149, §2.
    """
    h = require_in_range("relative humidity", relative_humidity, 0.0, 1.0, "(fraction)")
    p = require_positive("pressure", pressure, "Pa")
    return h * enhancement_factor(temperature, p) * saturation_vapour_pressure(temperature) / p


def compressibility_factor(temperature: ArrayLike, pressure: ArrayLike, vapour_fraction: ArrayLike) -> np.ndarray:
    r"""Compressibility factor Z of moist air, CIPM-2007.

    .. math::
        Z = 1 - \frac{p}{T}\left[a_0 + a_1 t + a_2 t^2 + (b_0 + b_1 t) x_v + (c_0 + c_1 t) x_v^2\right]
            + \frac{p^2}{T^2}\left(d + e x_v^2\right)

    Parameters
    ----------
    temperature : array_like
        Temperature T [K] (t = T − 273.15 K in °C).
    pressure : array_like
        Total pressure p [Pa].
    vapour_fraction : array_like
        Vapour mole fraction x_v [mol/mol].

    Returns
    -------
    ndarray
        Compressibility factor Z [-].

    Examples
    --------
    >>> round(float(compressibility_factor(293.15, 101325.0, 0.0)), 6)
    0.999643

    References
    ----------
    Picard et al., Metrologia 45 (2008) 149, eq. (A1.4).
    """
    big_t = require_positive("temperature", temperature, "K")
    p = require_positive("pressure", pressure, "Pa")
    xv = require_in_range("vapour mole fraction", vapour_fraction, 0.0, 1.0, "mol/mol")
    t = big_t - ZERO_CELSIUS
    bracket = (
        _Z_A[0] + _Z_A[1] * t + _Z_A[2] * t * t + (_Z_B[0] + _Z_B[1] * t) * xv + (_Z_C[0] + _Z_C[1] * t) * xv * xv
    )
    return 1.0 - p / big_t * bracket + (p / big_t) ** 2 * (_Z_D + _Z_E * xv * xv)


def moist_air_density(
    temperature: ArrayLike,
    pressure: ArrayLike,
    relative_humidity: ArrayLike = 0.0,
    co2_fraction: ArrayLike = _DEFAULT_CO2,
) -> np.ndarray:
    r"""Density of moist air by the CIPM-2007 equation.

    .. math::
        \rho_a = \frac{p M_a}{Z R T}\left[1 - x_v\left(1 - \frac{M_v}{M_a}\right)\right], \quad
        M_a = \left[28.96546 + 12.011\,(x_{CO_2} - 0.0004)\right]\times 10^{-3}\,\mathrm{kg/mol}

    Parameters
    ----------
    temperature : array_like
        Temperature T [K].
    pressure : array_like
        Total (barometric) pressure p [Pa].
    relative_humidity : array_like, optional
        Relative humidity h [-], 0–1. Default 0 (dry air).
    co2_fraction : array_like, optional
        CO2 mole fraction x_CO2 [mol/mol]. Default 0.0004.

    Returns
    -------
    ndarray
        Density ρ_a [kg/m³].

    Notes
    -----
    CIPM-2007 states a relative standard uncertainty of 22 ppm for 600–1100 hPa and 15–27 °C, h 0–1; outside that
    range (a warm lab at 35 °C) it degrades gracefully and stays within ~1e-4 of CoolProp's HAPropsSI.

    Examples
    --------
    >>> round(float(moist_air_density(293.15, 101325.0, 0.5)), 6)
    1.199314

    References
    ----------
    Picard et al., Metrologia 45 (2008) 149, eq. (1).
    """
    t = require_positive("temperature", temperature, "K")
    p = require_positive("pressure", pressure, "Pa")
    x_co2 = require_in_range("CO2 mole fraction", co2_fraction, 0.0, 0.01, "mol/mol")
    xv = vapour_mole_fraction(t, p, relative_humidity)
    m_air = (28.96546 + 12.011 * (x_co2 - _DEFAULT_CO2)) * 1e-3
    z = compressibility_factor(t, p, xv)
    return p * m_air / (z * MOLAR_GAS_CONSTANT * t) * (1.0 - xv * (1.0 - _M_VAPOUR / m_air))


def dry_air_density_ideal(
    temperature: ArrayLike, pressure: ArrayLike, gas_constant: float = SPECIFIC_GAS_CONSTANT_DRY_AIR
) -> np.ndarray:
    r"""Density of dry air as an ideal gas.

    .. math:: \rho = \frac{p}{R_s T}

    Parameters
    ----------
    temperature : array_like
        Temperature T [K].
    pressure : array_like
        Pressure p [Pa].
    gas_constant : float, optional
        Specific gas constant R_s [J/(kg·K)], default 287.05.

    Returns
    -------
    ndarray
        Density ρ [kg/m³].

    Notes
    -----
    Ignores humidity: room air at 50 % RH is about 0.4 % lighter than this at 20 °C.

    Examples
    --------
    >>> round(float(dry_air_density_ideal(293.15, 101325.0)), 6)
    1.204118

    References
    ----------
    Ideal gas law; R_s of the U.S. Standard Atmosphere, 1976.
    """
    t = require_positive("temperature", temperature, "K")
    p = require_positive("pressure", pressure, "Pa")
    return p / (require_positive("gas constant", gas_constant, "J/(kg K)") * t)


def sutherland_viscosity(
    temperature: ArrayLike,
    mu0: float = SUTHERLAND_MU0,
    t0: float = SUTHERLAND_T0,
    s: float = SUTHERLAND_S,
) -> np.ndarray:
    r"""Dynamic viscosity of air by Sutherland's law.

    .. math:: \mu = \mu_0 \left(\frac{T}{T_0}\right)^{3/2} \frac{T_0 + S}{T + S}

    Parameters
    ----------
    temperature : array_like
        Temperature T [K].
    mu0 : float, optional
        Reference viscosity μ0 [Pa·s], default 1.716e-5.
    t0 : float, optional
        Reference temperature T0 [K], default 273.15.
    s : float, optional
        Sutherland constant S [K], default 110.4.

    Returns
    -------
    ndarray
        Dynamic viscosity μ [Pa·s].

    Notes
    -----
    About 2 % accurate from 170 to 1900 K (White); near room temperature it reads ~0.4 % below IAPWS-style
    reference correlations (CoolProp). Humidity changes μ by < 0.5 % at room conditions and is ignored.

    Examples
    --------
    >>> f"{float(sutherland_viscosity(288.15)):.5e}"
    '1.78930e-05'

    References
    ----------
    F. M. White, *Viscous Fluid Flow*, 3rd ed., McGraw-Hill (2006), eq. (1-36) (constants from memory);
    U.S. Standard Atmosphere, 1976.
    """
    t = require_positive("temperature", temperature, "K")
    return mu0 * (t / t0) ** 1.5 * (t0 + s) / (t + s)


def kinematic_viscosity(dynamic_viscosity: ArrayLike, density: ArrayLike) -> np.ndarray:
    r"""Kinematic viscosity from dynamic viscosity and density.

    .. math:: \nu = \mu / \rho

    Parameters
    ----------
    dynamic_viscosity : array_like
        Dynamic viscosity μ [Pa·s].
    density : array_like
        Density ρ [kg/m³].

    Returns
    -------
    ndarray
        Kinematic viscosity ν [m²/s].

    Examples
    --------
    >>> f"{float(kinematic_viscosity(1.8e-5, 1.2)):.3e}"
    '1.500e-05'

    References
    ----------
    Definition (common practice).
    """
    mu = require_positive("dynamic viscosity", dynamic_viscosity, "Pa s")
    return mu / require_positive("density", density, "kg/m^3")


def speed_of_sound(
    temperature: ArrayLike,
    gamma: float = HEAT_CAPACITY_RATIO_AIR,
    gas_constant: float = SPECIFIC_GAS_CONSTANT_DRY_AIR,
) -> np.ndarray:
    r"""Speed of sound in air as a perfect gas.

    .. math:: a = \sqrt{\gamma R_s T}

    Parameters
    ----------
    temperature : array_like
        Static temperature T [K].
    gamma : float, optional
        Ratio of specific heats γ [-], default 1.4.
    gas_constant : float, optional
        Specific gas constant R_s [J/(kg·K)], default 287.05.

    Returns
    -------
    ndarray
        Speed of sound a [m/s].

    Notes
    -----
    Dry perfect gas; humidity raises a by ~0.3 % at 20 °C, 50 % RH, which matters only for the Mach number's
    third significant figure. The 1976 atmosphere's own R_s = 8.31432/0.0289644 = 287.053 gives 6 ppm more.

    Examples
    --------
    >>> round(float(speed_of_sound(288.15)), 3)
    340.292

    References
    ----------
    U.S. Standard Atmosphere, 1976, eq. (50).
    """
    t = require_positive("temperature", temperature, "K")
    return np.sqrt(gamma * gas_constant * t)


@dataclass(frozen=True, slots=True)
class AirState:
    """Ambient air of a run: temperature [K], barometric pressure [Pa], relative humidity [-], CO2 fraction.

    The properties evaluate the functions of this module, so a reducer holding one ``AirState`` per session gets
    consistent density, viscosity and speed of sound.

    Examples
    --------
    >>> air = AirState(temperature=293.15, pressure=101325.0, relative_humidity=0.5)
    >>> round(air.density, 6)
    1.199314
    """

    temperature: float = STANDARD_TEMPERATURE
    pressure: float = STANDARD_PRESSURE
    relative_humidity: float = 0.0
    co2_fraction: float = _DEFAULT_CO2

    def __post_init__(self) -> None:
        require_positive("temperature", self.temperature, "K")
        require_positive("pressure", self.pressure, "Pa")
        require_in_range("relative humidity", self.relative_humidity, 0.0, 1.0, "(fraction)")

    @property
    def density(self) -> float:
        """Moist-air density by CIPM-2007 [kg/m³]."""
        return float(moist_air_density(self.temperature, self.pressure, self.relative_humidity, self.co2_fraction))

    @property
    def viscosity(self) -> float:
        """Dynamic viscosity by Sutherland's law [Pa·s]."""
        return float(sutherland_viscosity(self.temperature))

    @property
    def kinematic_viscosity(self) -> float:
        """Kinematic viscosity μ/ρ [m²/s]."""
        return self.viscosity / self.density

    @property
    def speed_of_sound(self) -> float:
        """Speed of sound of the dry perfect gas [m/s]."""
        return float(speed_of_sound(self.temperature))
