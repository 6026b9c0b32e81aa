"""The run's ambient conditions, the fluid properties derived from them, and the reducer's options.

The reducer is built once per run from these values; it never reads a clock or a sensor of its own. Air properties
come from :mod:`taprig.physics.air` (CIPM-2007 density, Sutherland viscosity), water from
:mod:`taprig.physics.water` (Tanaka density, Kestin viscosity).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from taprig.physics.air import AirState
from taprig.physics.constants import STANDARD_PRESSURE, require_in_range, require_positive
from taprig.physics.venturi import ISO5167_MACHINED_VENTURI_C, ISO5167_VENTURI_C_U_REL
from taprig.physics.walls import SpanOrientation
from taprig.physics.water import water_density, water_viscosity


@dataclass(frozen=True, slots=True)
class Ambient:
    """Ambient conditions of a run, SI.

    ``pressure`` [Pa] is the room's barometric pressure; ``temperature`` [K] the air temperature for an air rig or
    the water temperature for a water rig; ``relative_humidity`` [-] 0–1 (air only); ``co2_fraction`` [mol/mol].

    Examples
    --------
    >>> round(Ambient(101325.0, 293.15, 0.5).properties("air").density, 6)
    1.199314
    """

    pressure: float = STANDARD_PRESSURE
    temperature: float = 293.15
    relative_humidity: float = 0.0
    co2_fraction: float = 0.0004

    def __post_init__(self) -> None:
        require_positive("ambient pressure", self.pressure, "Pa")
        require_positive("ambient temperature", self.temperature, "K")
        require_in_range("relative humidity", self.relative_humidity, 0.0, 1.0, "(fraction)")

    def properties(self, medium: str) -> FluidProperties:
        """Density, viscosity and speed of sound of ``medium`` ("air" or "water", or a rig's ``Medium``)."""
        name = getattr(medium, "value", medium)
        if name == "air":
            air = AirState(self.temperature, self.pressure, self.relative_humidity, self.co2_fraction)
            return FluidProperties("air", air.density, air.viscosity, air.speed_of_sound)
        if name == "water":
            # Mach number is meaningless for a water channel: no speed of sound is carried (NaN).
            return FluidProperties(
                "water", float(water_density(self.temperature)), float(water_viscosity(self.temperature)), math.nan
            )
        raise ValueError(f"unknown fluid medium {name!r}; expected 'air' or 'water'")


@dataclass(frozen=True, slots=True)
class FluidProperties:
    """Properties of the working fluid at the run's conditions: ``density`` [kg/m³], ``viscosity`` [Pa·s],
    ``speed_of_sound`` [m/s] (NaN for water, where no Mach number is reported)."""

    medium: str
    density: float
    viscosity: float
    speed_of_sound: float


@dataclass(frozen=True, slots=True)
class ReduceOptions:
    """Choices of a reduction that are not in the rig file.

    Attributes
    ----------
    alpha_rad : float
        Angle of attack used when the caller passes none [rad] (a fixed model, or a rig without an angle
        actuator).
    no_flow_factor : float
        q below ``no_flow_factor`` × u(q) (the q channels' standard uncertainty, at least two counts) counts as no
        flow [-]. Default 3: below three standard uncertainties of q, Cp would carry more than a third of error.
    min_taps : int
        Fewest usable taps for a per-scan integral [-].
    autocorrelated_noise : bool
        Use the effective number of independent samples (serial correlation) for the standard error of the mean.
    span_orientation : SpanOrientation
        Which tunnel dimension the model spans (sets K1 of the solid blockage).
    wall_corrections : bool
        Apply the 2-D wall corrections to block means when the rig gives the tunnel height and width.
    discharge_coefficient : float
        Venturi discharge coefficient C [-] for the ISO 5167-4 flow rate (default 0.995, machined convergent).
    discharge_coefficient_u_rel : float
        Its relative standard uncertainty [-] (default 0.5 %: the standard's 1 % at about 95 %).
    venturi_diameter_u_rel : float
        Relative standard uncertainty of the throat and inlet diameters [-] (default 0.05 %: a machined part
        measured with a bore gauge, from memory).
    ambient_pressure_u : float
        Standard uncertainty of the room pressure when no channel measures it [Pa] (default 50 Pa: a typed
        barometer reading, common practice).
    temperature_u : float
        Standard uncertainty of the run's temperature [K] (default 0.5 K: a room thermometer, common practice).
    """

    alpha_rad: float = 0.0
    no_flow_factor: float = 3.0
    min_taps: int = 3
    autocorrelated_noise: bool = True
    span_orientation: SpanOrientation = SpanOrientation.SPANS_WIDTH
    wall_corrections: bool = True
    discharge_coefficient: float = ISO5167_MACHINED_VENTURI_C
    discharge_coefficient_u_rel: float = ISO5167_VENTURI_C_U_REL
    venturi_diameter_u_rel: float = 0.0005
    ambient_pressure_u: float = 50.0
    temperature_u: float = 0.5

    def __post_init__(self) -> None:
        require_positive("no_flow_factor", self.no_flow_factor, "")
        require_positive("discharge_coefficient", self.discharge_coefficient, "")
        if self.min_taps < 3:
            raise ValueError(f"min_taps must be at least 3 (a closed contour needs three points); got {self.min_taps}")
        if not math.isfinite(self.alpha_rad):
            raise ValueError(f"alpha_rad must be finite; got {self.alpha_rad}")
