"""Physical constants and input-domain checks shared by the physics modules.

Every constant is in SI units and names its source. The checks turn a physically impossible input (a negative
absolute temperature, a relative humidity of 1.5, a negative area) into a :class:`ValueError` whose message names
the quantity, the expected range and the offending value, instead of letting a NaN travel silently downstream.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

#: Standard acceleration of gravity [m/s²] (3rd CGPM, 1901; exact by definition).
STANDARD_GRAVITY = 9.80665
#: Standard atmosphere, the pressure of the 1976 US / ISO 2533 sea-level atmosphere [Pa] (exact by definition).
STANDARD_PRESSURE = 101325.0
#: Sea-level temperature of the standard atmosphere [K] (ISO 2533 / US 1976).
STANDARD_TEMPERATURE = 288.15
#: Kelvin temperature of 0 °C [K] (exact, ITS-90).
ZERO_CELSIUS = 273.15
#: Molar gas constant used by CIPM-2007 [J/(mol·K)] (Picard et al., Metrologia 45 (2008) 149).
MOLAR_GAS_CONSTANT = 8.314472
#: Specific gas constant of dry air used by engineering practice and the 1976 atmosphere [J/(kg·K)].
SPECIFIC_GAS_CONSTANT_DRY_AIR = 287.05
#: Ratio of specific heats of dry air near room temperature [-] (common practice).
HEAT_CAPACITY_RATIO_AIR = 1.4
#: Conventional density of the water in a "conventional" water column [kg/m³] (ISO 80000-4 / NIST SP 811 note:
#: the conventional mmH2O and inH2O take 1000 kg/m³ with standard gravity).
CONVENTIONAL_WATER_DENSITY = 1000.0
#: Conventional density of mercury for the conventional mmHg [kg/m³] (NIST SP 811: 1 mmHg = 133.322 387 415 Pa).
CONVENTIONAL_MERCURY_DENSITY = 13595.1


def require_positive(name: str, value: ArrayLike, unit: str) -> np.ndarray:
    """Return ``value`` as a float array, raising ValueError unless every element is finite and > 0.

    Parameters
    ----------
    name : str
        Quantity name used in the message, for example ``"temperature"``.
    value : array_like
        Value(s) to check [unit].
    unit : str
        Unit shown in the message, for example ``"K"``.

    Examples
    --------
    >>> float(require_positive("pressure", 101325.0, "Pa"))
    101325.0
    """
    arr = np.asarray(value, dtype=float)
    bad = ~(np.isfinite(arr) & (arr > 0.0))
    if np.any(bad):
        raise ValueError(f"{name} must be a finite value > 0 {unit}; got {_first(arr, bad)} {unit}")
    return arr


def require_nonnegative(name: str, value: ArrayLike, unit: str) -> np.ndarray:
    """Return ``value`` as a float array, raising ValueError unless every element is finite and >= 0.

    Parameters
    ----------
    name : str
        Quantity name used in the message.
    value : array_like
        Value(s) to check [unit].
    unit : str
        Unit shown in the message.

    Examples
    --------
    >>> float(require_nonnegative("differential pressure", 0.0, "Pa"))
    0.0
    """
    arr = np.asarray(value, dtype=float)
    bad = ~(np.isfinite(arr) & (arr >= 0.0))
    if np.any(bad):
        raise ValueError(f"{name} must be a finite value >= 0 {unit}; got {_first(arr, bad)} {unit}")
    return arr


def require_in_range(name: str, value: ArrayLike, low: float, high: float, unit: str) -> np.ndarray:
    """Return ``value`` as a float array, raising ValueError unless every element lies in ``[low, high]``.

    Parameters
    ----------
    name : str
        Quantity name used in the message.
    value : array_like
        Value(s) to check [unit].
    low, high : float
        Inclusive bounds [unit].
    unit : str
        Unit shown in the message (may be empty for a ratio).

    Examples
    --------
    >>> float(require_in_range("relative humidity", 0.5, 0.0, 1.0, ""))
    0.5
    """
    arr = np.asarray(value, dtype=float)
    bad = ~((arr >= low) & (arr <= high))  # NaN fails both comparisons, so it is rejected too
    if np.any(bad):
        suffix = f" {unit}" if unit else ""
        raise ValueError(f"{name} must lie in [{low:g}, {high:g}]{suffix}; got {_first(arr, bad)}{suffix}")
    return arr


def _first(arr: np.ndarray, bad: np.ndarray) -> str:
    """The first offending element, formatted for an error message."""
    return f"{np.broadcast_to(arr, bad.shape)[bad].flat[0]:g}"
