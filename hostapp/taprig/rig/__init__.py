"""taprig.rig — the one validated model of a rig, its sensors' transfer functions and its calibration.

Pure except :func:`load_rig` (which reads the rig file and a coordinate CSV beside it). Everything inside is SI
(Pa, N, m, m², rad, K); the rig file's keys carry their unit in their name (``chord_mm``, ``range_pa``,
``theta_deg``, ``temperature_c``) and are converted once at parse. See ``docs/rig-file.md``.

Public API (re-exported here)
-----------------------------
Loading and errors
    ``load_rig(path) -> Rig``; ``parse_rig(text, source="<string>", attachments=None) -> Rig``
    (``attachments`` maps a CSV file name named by the rig to its text, so parsing stays pure);
    ``parse_rig_unchecked(text, source, attachments) -> (Rig, RigError | None)`` and ``load_rig_unchecked(path)``
    keep a rig whose tables are each valid but disagree (to draw it with its mistakes marked). All read the long
    form (one table per channel and tap) and the compact forms of :mod:`taprig.rig.compact` (channel groups, a
    tap table or tap CSV);
    ``RigError`` (``.source``, ``.issues``: list of ``RigIssue(key, message, value)``; ``str()`` names the file,
    every key path such as ``taps[3].x_c``, the bad value and what was expected).
The model (pydantic v2, frozen, ``extra="forbid"``)
    ``Rig``: ``id, name, description, kind: RigKind, fluid: Fluid, sensors: dict[str, Sensor],
    channels: tuple[Channel, ...], taps: tuple[Tap, ...], reference: Reference, geometry: Geometry,
    section: Section | None, balance: Balance | None, actuators: tuple[Actuator, ...], link: Link,
    source_text, attachments``; helpers ``rig.channel(name_or_index) -> Channel``,
    ``rig.sensor_of(name_or_index) -> Sensor``, ``rig.index_of(name) -> int``, ``rig.tap_layout() -> TapLayout``
    (arrays in contour / station / angle order), ``rig.capabilities() -> tuple[str, ...]``,
    ``rig.differences(description) -> list[str]``.
    ``RigKind`` (AIRFOIL, VENTURI, CYLINDER, BUMP, OTHER), ``Medium`` (AIR, WATER), ``Measures`` (ABSOLUTE, GAUGE,
    DIFFERENTIAL), ``Quantity`` (PRESSURE, FORCE), ``Channel(index, name, encoding: taprig.protocol.Encoding,
    sensor: str, measures, relative_to)``, ``Tap(name, channel, x_c, y_c, surface, x, area, theta)``,
    ``Actuator(id, kind, name, unit, min, max, safe)`` with ``to_device(value)`` / ``from_device(value)``.
Sensors (every one is affine in counts: value = slope · counts + intercept)
    ``RatiometricSensor``, ``DigitalBridgeSensor``, ``LinearSensor``, ``DifferentialSensor``, union ``Sensor``.
    Each has ``counts_to_si(counts)``, ``si_to_counts(value)`` (vectorised), aliases ``counts_to_pa`` /
    ``pa_to_counts`` (pressure sensors), ``quantity``, ``unit``, ``range`` / ``range_pa``, ``full_scale`` /
    ``full_scale_pa``, ``accuracy`` / ``accuracy_pa`` (standard uncertainty of the whole band), ``slope``,
    ``intercept``, ``saturated(counts)`` and ``out_of_range(counts)`` (bool arrays). The band's parts
    ``offset_pct_fs``, ``span_pct_fs``, ``linearity_pct_fs`` (default 0), ``unattributed_pct_fs`` and
    ``datasheet_uncertainty(level: CalibrationLevel) -> (u_const [SI], u_gain [-])``; ``CalibrationLevel``
    (NOMINAL, ZEROED, SPANNED).
Device check
    ``compare_with_description(rig, description) -> list[str]`` (same as ``rig.differences``); the runtime refuses
    a board with any difference. ``cross_check(rig) -> list[RigIssue]``, ``tap_layout(rig)``, ``capabilities(rig)``.
Calibration (value = gain · slope · (counts − zero_counts); see docs/calibration.md)
    ``Calibration(format_version, rig_id, date, operator_note, channels: dict[str, ChannelCalibration])`` with
    ``.problems_with(rig) -> list[str]`` and ``.flagged``; ``ChannelCalibration(zero_counts, gain, zero_std_error,
    residual_rms, linearity_pct_fs, n_points, reference_u_rel, flags)`` with ``.level -> CalibrationLevel``; ``load_calibration(path)``,
    ``calibration_from_text(text, source, fmt=None)``, ``calibration_to_text(cal, fmt="toml"|"json")``;
    ``conversion_for(rig, channels, calibration=None) -> Conversion`` (per-column ``scale``, ``zero``; ``.apply``);
    ``apply_calibration(counts, rig, channels, calibration=None) -> ndarray`` (pure, vectorised counts → SI);
    ``wind_off_zero(block) -> ZeroResult(mean, std_error, n_scans)``;
    ``drift_check(start, end, tolerance_counts) -> DriftResult(drift, tolerance, exceeded, ok)``;
    ``ManometerReading(reading, angle, liquid_density, liquid_temperature, gravity, air_density, well_area_ratio)``
    and ``manometer_pressure(reading) -> float [Pa]``;
    ``fit_span(reference, counts, sensors, zero_counts=None, linearity_tolerance_pct_fs=None, gain_tolerance=0.05)
    -> SpanFit(gain, zero_counts, residuals, residual_rms, linearity_pct_fs, flags, gain_u_reference,
    zero_std_error, ok)`` (also ``reference_u=`` [Pa] per point and ``reference_u_rel=`` [-] common);
    ``build_calibration(rig, channels, date, zero=None, span=None, operator_note="", drift=None, n_points=0)``;
    the procedure ``calibrate(rig, plan: CalibrationInput, counts_source: CountsSource, date) -> Calibration``
    where ``CountsSource = Callable[[str], ndarray | None]`` maps a step label ("zero", "point 1", …,
    "end_zero") to a block of scans (the runtime plugs live averaging in here); ``parse_input_toml`` /
    ``parse_input_csv`` read an input file's text; ``Manometer`` is the fixed manometer set-up with its
    input uncertainties, ``Manometer.reference_uncertainty() -> (u_point [Pa], u_rel [-])``.
"""

from taprig.rig.calibration import (
    FORMAT_VERSION,
    Calibration,
    ChannelCalibration,
    Conversion,
    apply_calibration,
    calibration_from_text,
    calibration_to_text,
    conversion_for,
    load_calibration,
)
from taprig.rig.calinput import CalibrationInput, CountsSource, Manometer, calibrate, parse_input_csv, parse_input_toml
from taprig.rig.checks import TapLayout, capabilities, cross_check, tap_layout
from taprig.rig.checks import compare_with_description
from taprig.rig.errors import RigError, RigIssue
from taprig.rig.fitting import (
    DriftResult,
    ManometerReading,
    SpanFit,
    ZeroResult,
    build_calibration,
    drift_check,
    fit_span,
    manometer_pressure,
    wind_off_zero,
)
from taprig.rig.loader import load_rig, load_rig_unchecked, parse_coordinates_csv, parse_rig, parse_rig_unchecked
from taprig.rig.model import (
    Actuator,
    AreaTable,
    Balance,
    Channel,
    Coordinates,
    Fluid,
    Geometry,
    Link,
    Measures,
    Medium,
    Operating,
    Reference,
    Rig,
    RigKind,
    Section,
    StaticSource,
    Surface,
    Tap,
)
from taprig.rig.sensors import (
    CalibrationLevel,
    DifferentialSensor,
    DigitalBridgeSensor,
    LinearSensor,
    Quantity,
    RatiometricSensor,
    Sensor,
    SensorBase,
)

__all__ = [
    "FORMAT_VERSION", "Actuator", "AreaTable", "Balance", "Calibration", "CalibrationInput", "CalibrationLevel", "Channel",
    "ChannelCalibration", "Conversion", "Coordinates", "CountsSource", "DifferentialSensor", "DigitalBridgeSensor",
    "DriftResult", "Fluid", "Geometry", "LinearSensor", "Link", "Manometer", "ManometerReading", "Measures", "Medium", "Operating",
    "Quantity", "RatiometricSensor", "Reference", "Rig", "RigError", "RigIssue", "RigKind", "Section", "Sensor",
    "SensorBase", "SpanFit", "StaticSource", "Surface", "Tap", "TapLayout", "ZeroResult", "apply_calibration", "build_calibration",
    "calibrate", "calibration_from_text", "calibration_to_text", "capabilities", "compare_with_description",
    "conversion_for", "cross_check", "drift_check", "fit_span", "load_calibration", "load_rig", "load_rig_unchecked", "manometer_pressure",
    "parse_coordinates_csv", "parse_input_csv", "parse_input_toml", "parse_rig", "parse_rig_unchecked", "tap_layout", "wind_off_zero",
]
