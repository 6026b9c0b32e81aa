"""taprig.analysis — what a sweep's points say: lift curve, stall, unsteadiness, hysteresis, drag polar, balance
against pressures, a venturi's discharge coefficient. Pure functions of values (the reduction layer's rank).

The dashboard and the report call the same functions; each takes arrays (SI: angles in radians) or a
:class:`PointTable` built by :func:`point_table` from point records.
"""

from taprig.analysis.lift import (
    BalanceComparison, DragPolar, Hysteresis, LinearFit, Stall, balance_against_pressures, find_stall, fit_line,
    hysteresis, linear_range_fit, moment_slope, pressure_drag_polar,
)
from taprig.analysis.points import COEFFICIENT_CHOICES, PointTable, point_table
from taprig.analysis.summary import SweepAnalysis, VenturiStations, analyse_points, has_own_flow_reference, \
    surfaces, venturi_stations
from taprig.analysis.unsteady import UNSTEADY_THRESHOLD, Unsteadiness, tap_fluctuation, unsteadiness
from taprig.analysis.venturi import ISO_MACHINED, DischargeCoefficient, IsoVenturiRange, discharge_coefficient, \
    station_comparison

__all__ = [
    "BalanceComparison", "COEFFICIENT_CHOICES", "DischargeCoefficient", "DragPolar", "Hysteresis", "ISO_MACHINED",
    "IsoVenturiRange", "LinearFit", "PointTable", "Stall", "UNSTEADY_THRESHOLD", "Unsteadiness",
    "balance_against_pressures", "discharge_coefficient", "find_stall", "fit_line", "hysteresis",
    "linear_range_fit", "moment_slope", "point_table", "pressure_drag_polar", "station_comparison", "tap_fluctuation",
    "unsteadiness",
    "SweepAnalysis", "VenturiStations", "analyse_points", "has_own_flow_reference", "surfaces", "venturi_stations",
]
