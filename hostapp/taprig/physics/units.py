"""Conversion between the units people read off instruments and the SI units used everywhere inside taprig.

Only the CLI and the web edge call this module. Pressure columns are the *conventional* ones: a conventional
millimetre of water is the pressure of 1 mm of water of density 1000 kg/m³ under standard gravity,
exactly 9.80665 Pa (NIST SP 811, 2008, B.8 "millimeter of water, conventional"), and the inch of water is
25.4 of those, 249.08891 Pa. That is the definition gauge and transducer datasheets use. A column of real water
at 4 °C (999.975 kg/m³) is 25 ppm smaller and at 20 °C 0.18 % smaller; to convert a real manometer reading use
:func:`taprig.physics.hydrostatics.column_pressure` with the measured water density instead.
"""

from __future__ import annotations

from enum import Enum

import numpy as np
from numpy.typing import ArrayLike

from taprig.physics.constants import (
    CONVENTIONAL_MERCURY_DENSITY,
    CONVENTIONAL_WATER_DENSITY,
    STANDARD_GRAVITY,
    ZERO_CELSIUS,
)

_INCH = 0.0254  # [m], exact (international yard and pound agreement, 1959)
_POUND_FORCE = 0.45359237 * STANDARD_GRAVITY  # [N], exact


class Quantity(Enum):
    """Physical quantity a unit measures; conversion only happens within one quantity."""

    PRESSURE = "pressure"
    TEMPERATURE = "temperature"
    ANGLE = "angle"
    SPEED = "speed"
    LENGTH = "length"


class Unit(Enum):
    """A display/input unit: (symbol, quantity, scale to SI, offset to SI).

    SI value = value × scale + offset. Members are looked up by symbol with :meth:`Unit.parse`.
    """

    PA = ("Pa", Quantity.PRESSURE, 1.0, 0.0)
    HPA = ("hPa", Quantity.PRESSURE, 100.0, 0.0)
    KPA = ("kPa", Quantity.PRESSURE, 1000.0, 0.0)
    MBAR = ("mbar", Quantity.PRESSURE, 100.0, 0.0)
    BAR = ("bar", Quantity.PRESSURE, 1e5, 0.0)
    PSI = ("psi", Quantity.PRESSURE, _POUND_FORCE / _INCH**2, 0.0)
    MMH2O = ("mmH2O", Quantity.PRESSURE, CONVENTIONAL_WATER_DENSITY * STANDARD_GRAVITY * 1e-3, 0.0)
    INH2O = ("inH2O", Quantity.PRESSURE, CONVENTIONAL_WATER_DENSITY * STANDARD_GRAVITY * _INCH, 0.0)
    MMHG = ("mmHg", Quantity.PRESSURE, CONVENTIONAL_MERCURY_DENSITY * STANDARD_GRAVITY * 1e-3, 0.0)
    KELVIN = ("K", Quantity.TEMPERATURE, 1.0, 0.0)
    CELSIUS = ("degC", Quantity.TEMPERATURE, 1.0, ZERO_CELSIUS)
    FAHRENHEIT = ("degF", Quantity.TEMPERATURE, 5.0 / 9.0, ZERO_CELSIUS - 32.0 * 5.0 / 9.0)
    RADIAN = ("rad", Quantity.ANGLE, 1.0, 0.0)
    DEGREE = ("deg", Quantity.ANGLE, np.pi / 180.0, 0.0)
    METRE_PER_SECOND = ("m/s", Quantity.SPEED, 1.0, 0.0)
    KILOMETRE_PER_HOUR = ("km/h", Quantity.SPEED, 1.0 / 3.6, 0.0)
    METRE = ("m", Quantity.LENGTH, 1.0, 0.0)
    MILLIMETRE = ("mm", Quantity.LENGTH, 1e-3, 0.0)

    @property
    def symbol(self) -> str:
        """Symbol shown to the user, e.g. ``"mmH2O"``."""
        return self.value[0]

    @property
    def quantity(self) -> Quantity:
        """The quantity this unit measures."""
        return self.value[1]

    @property
    def scale(self) -> float:
        """Multiplier to SI [SI unit per this unit]."""
        return self.value[2]

    @property
    def offset(self) -> float:
        """Offset added after scaling, for affine temperature scales [SI unit]."""
        return self.value[3]

    @classmethod
    def parse(cls, text: str) -> Unit:
        """Unit from its symbol or a common spelling, case-insensitively (``"mmH2O"``, ``"°C"``, ``"deg"``).

        Examples
        --------
        >>> Unit.parse("inH2O") is Unit.INH2O, Unit.parse("°C") is Unit.CELSIUS
        (True, True)
        """
        key = text.strip().replace("°", "deg").replace("₂", "2").lower()
        key = _ALIASES.get(key, key)
        for unit in cls:
            if unit.symbol.lower() == key:
                return unit
        known = ", ".join(unit.symbol for unit in cls)
        raise ValueError(f"unknown unit {text!r}; expected one of: {known}")


_ALIASES = {
    "c": "degc",
    "celsius": "degc",
    "f": "degf",
    "kelvin": "k",
    "degree": "deg",
    "degrees": "deg",
    "radian": "rad",
    "radians": "rad",
    "pascal": "pa",
    "mmwc": "mmh2o",
    "mm h2o": "mmh2o",
    "in h2o": "inh2o",
    "inwc": "inh2o",
    "torr": "mmhg",  # differs from the conventional mmHg by 1.4e-7, far below any reading
}


def to_si(value: ArrayLike, unit: Unit) -> np.ndarray:
    r"""Convert a value in a display unit to SI.

    .. math:: x_{SI} = x \cdot s + o

    Parameters
    ----------
    value : array_like
        Value(s) in ``unit``.
    unit : Unit
        The unit of ``value``.

    Returns
    -------
    ndarray
        Value(s) in the SI unit of the quantity (Pa, K, rad, m/s, m).

    Examples
    --------
    >>> round(float(to_si(10.0, Unit.MMH2O)), 9)
    98.0665
    >>> float(to_si(20.0, Unit.CELSIUS))
    293.15

    References
    ----------
    NIST Special Publication 811 (2008), appendix B.8 and B.9.
    """
    return np.asarray(value, dtype=float) * unit.scale + unit.offset


def from_si(value: ArrayLike, unit: Unit) -> np.ndarray:
    r"""Convert an SI value to a display unit.

    .. math:: x = (x_{SI} - o) / s

    Parameters
    ----------
    value : array_like
        Value(s) in the SI unit of ``unit``'s quantity.
    unit : Unit
        Target unit.

    Returns
    -------
    ndarray
        Value(s) in ``unit``.

    Examples
    --------
    >>> round(float(from_si(249.08891, Unit.INH2O)), 6)
    1.0

    References
    ----------
    NIST Special Publication 811 (2008), appendix B.8 and B.9.
    """
    return (np.asarray(value, dtype=float) - unit.offset) / unit.scale


def convert(value: ArrayLike, source: Unit, target: Unit) -> np.ndarray:
    """Convert between two units of the same quantity, for example mmH2O → Pa or °F → °C.

    Parameters
    ----------
    value : array_like
        Value(s) in ``source``.
    source, target : Unit
        Units of the input and of the result; they must measure the same quantity.

    Returns
    -------
    ndarray
        Value(s) in ``target``.

    Examples
    --------
    >>> round(float(convert(1.0, Unit.PSI, Unit.KPA)), 6)
    6.894757

    References
    ----------
    NIST Special Publication 811 (2008), appendix B.8.
    """
    if source.quantity is not target.quantity:
        raise ValueError(
            f"cannot convert {source.symbol} ({source.quantity.value}) to {target.symbol} ({target.quantity.value})"
        )
    return from_si(to_si(value, source), target)
