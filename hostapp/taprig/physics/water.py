"""Density and viscosity of liquid water at atmospheric pressure, for manometers and water-column readings.

Both correlations cover the temperatures a bench manometer sees (0–40 °C) and cost a few array operations, so
they can convert every sample of a logged manometer temperature without a property library at run time.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

from taprig.physics.constants import ZERO_CELSIUS, require_in_range

# Tanaka et al. (2001), eq. (1) and Table 3: a1–a4 [°C, °C, °C², °C], a5 [kg/m³].
_TANAKA = (-3.983035, 301.797, 522528.9, 69.34881, 999.974950)
# Kestin, Sokolov & Wakeham (1978) as adopted by ISO/TR 3666:1998 (coefficients from memory).
_KESTIN = (1.2378, -1.303e-3, 3.06e-6, 2.55e-8)
_MU_20C = 1.0016e-3  # viscosity of water at 20 °C, 101325 Pa [Pa·s] (ISO/TR 3666:1998)

WATER_MIN_TEMPERATURE = ZERO_CELSIUS  # [K]
WATER_MAX_TEMPERATURE = ZERO_CELSIUS + 40.0  # [K]


def _celsius_in_range(temperature: ArrayLike) -> np.ndarray:
    """Temperature in °C after checking that it lies in the correlations' 0–40 °C range."""
    t = require_in_range("water temperature", temperature, WATER_MIN_TEMPERATURE, WATER_MAX_TEMPERATURE, "K")
    return t - ZERO_CELSIUS


def water_density(temperature: ArrayLike) -> np.ndarray:
    r"""Density of air-free water at 101325 Pa, Tanaka et al. (2001).

    .. math::
        \rho = a_5\left[1 - \frac{(t + a_1)^2 (t + a_2)}{a_3 (t + a_4)}\right], \quad t = T - 273.15\,\mathrm{K}

    Parameters
    ----------
    temperature : array_like
        Water temperature T [K], 273.15–313.15.

    Returns
    -------
    ndarray
        Density ρ [kg/m³].

    Notes
    -----
    Valid 0–40 °C for air-free water of standard (VSMOW) isotopic composition at 101325 Pa. Tanaka et al. give an
    expanded uncertainty of about 1 ppm for the formula; it agrees with IAPWS-95 within 1.2 ppm over the range.
    Air saturation lowers the density by up to 4.6 ppm and tap water's dissolved salts raise it by tens of ppm —
    both negligible beside reading a manometer meniscus.

    Raises
    ------
    ValueError
        If a temperature lies outside 273.15–313.15 K.

    Examples
    --------
    >>> round(float(water_density(293.15)), 3)
    998.207

    References
    ----------
    M. Tanaka, G. Girard, R. Davis, A. Peuto, N. Bignell, "Recommended table for the density of water between
    0 °C and 40 °C based on recent experimental reports", Metrologia 38 (2001) 301–309.
    """
    t = _celsius_in_range(temperature)
    a1, a2, a3, a4, a5 = _TANAKA
    return a5 * (1.0 - (t + a1) ** 2 * (t + a2) / (a3 * (t + a4)))


def water_viscosity(temperature: ArrayLike) -> np.ndarray:
    r"""Dynamic viscosity of water at 101325 Pa, Kestin et al. (1978) / ISO/TR 3666.

    .. math::
        \log_{10}\frac{\mu(t)}{\mu_{20}} =
        \frac{1.2378\,(20 - t) - 1.303\times10^{-3}(20 - t)^2 + 3.06\times10^{-6}(20 - t)^3
              + 2.55\times10^{-8}(20 - t)^4}{96 + t}

    with μ20 = 1.0016 mPa·s and t in °C.

    Parameters
    ----------
    temperature : array_like
        Water temperature T [K], 273.15–313.15.

    Returns
    -------
    ndarray
        Dynamic viscosity μ [Pa·s].

    Notes
    -----
    Valid 0–40 °C at atmospheric pressure; agrees with the IAPWS 2008 formulation (as computed by CoolProp) within
    0.1 % over that range. Coefficients recalled from memory and checked against CoolProp in the tests.

    Raises
    ------
    ValueError
        If a temperature lies outside 273.15–313.15 K.

    Examples
    --------
    >>> f"{float(water_viscosity(293.15)):.4e}"
    '1.0016e-03'

    References
    ----------
    J. Kestin, M. Sokolov, W. A. Wakeham, "Viscosity of liquid water in the range −8 °C to 150 °C",
    J. Phys. Chem. Ref. Data 7 (1978) 941–948; ISO/TR 3666:1998, *Viscosity of water*.
    """
    d = 20.0 - _celsius_in_range(temperature)
    c1, c2, c3, c4 = _KESTIN
    exponent = (c1 * d + c2 * d**2 + c3 * d**3 + c4 * d**4) / (116.0 - d)  # 96 + t == 116 - (20 - t)
    return _MU_20C * 10.0**exponent
