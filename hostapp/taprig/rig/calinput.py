"""Calibration input: the manometer set-up, the zero block(s) and the span points, from TOML or CSV text.

This is the edge where the operator's units (mm of liquid, degrees, °C, latitude in degrees) become SI. The
counts come either from the file (``points[k].counts``, CSV rows) or, through :data:`CountsSource`, from live
averaging in the runtime: :func:`calibrate` takes the source as an argument and is otherwise pure.

TOML layout::

    channels = ["u1", "u2"]          # optional: the channels on the manifold (default: every zeroable pressure channel)
    operator_note = "..."
    drift_tolerance_pa = 2.0         # optional
    [manometer]
    angle_deg = 90.0                 # 90 = vertical U-tube; e.g. 10 for an inclined gauge
    liquid = "water"                 # or liquid_density_kg_m3 = 830.0 for another liquid
    liquid_temperature_c = 20.0
    latitude_deg = 52.0              # optional; standard gravity 9.80665 m/s² without it
    well_area_ratio = 0.0
    reading_resolution_mm = 1.0      # uncertainty inputs, each optional (defaults: Manometer's docstring)
    liquid_temperature_u_c = 1.0
    angle_u_deg = 0.1
    [zero]        counts = [[...], ...]         # scans × channels, in the order of `channels`
    [[points]]    reading_mm = 50.0  counts = [[...], ...]   (or reference_pa = 489.4 for a reference sensor)
    [end_zero]    counts = [[...], ...]         # optional: drift check

CSV layout: a header ``step,reading_mm,<channel>,<channel>,...``; one row per scan; ``step`` is ``zero``,
``end_zero`` or a point label (rows with the same label form one block; ``reading_mm`` is read from its first row).
"""

from __future__ import annotations

import csv
import io
import math
import tomllib
from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import datetime

import numpy as np

from taprig.physics.constants import STANDARD_GRAVITY, ZERO_CELSIUS
from taprig.physics.hydrostatics import normal_gravity
from taprig.physics.water import water_density
from taprig.rig.calibration import Calibration
from taprig.rig.errors import RigError, RigIssue
from taprig.rig.fitting import ManometerReading, build_calibration, drift_check, fit_span, manometer_pressure, wind_off_zero, zeroable
from taprig.rig.model import Rig

#: A source of counts for one calibration step: given the step's label ("zero", "point 1", "end_zero"), return a
#: block (scans × channels, in the calibration's channel order). The CLI reads the blocks from a file; the
#: runtime will pass a function that averages live scans.
CountsSource = Callable[[str], np.ndarray]

MANOMETER_KEYS = {"angle_deg", "liquid", "liquid_density_kg_m3", "liquid_temperature_c", "latitude_deg",
                  "height_m", "well_area_ratio", "air_density_kg_m3", "reading_resolution_mm",
                  "liquid_temperature_u_c", "liquid_density_u_kg_m3", "gravity_u_m_s2", "angle_u_deg"}

#: A given liquid density read as ±0.5 kg/m³ (a specific gravity quoted to three decimals), rectangular.
DEFAULT_DENSITY_BOUND = 0.5
#: Local gravity's departure from normal gravity (anomalies), a ±5e-4 m/s² bound (physics.hydrostatics notes).
GRAVITY_ANOMALY_BOUND = 5e-4


def _standard_gravity_bound() -> float:
    """Largest gap between standard gravity and sea-level normal gravity anywhere (equator or pole) [m/s²]."""
    extremes = normal_gravity(np.array([0.0, math.pi / 2]))
    return float(np.max(np.abs(extremes - STANDARD_GRAVITY)))


@dataclass(frozen=True)
class Manometer:
    """The manometer's fixed set-up, SI (readings vary per point), and the uncertainties of its inputs.

    Uncertainty inputs (standard uncertainties unless said; defaults are stated choices, not sourced values):
    ``reading_resolution`` [m] the scale division (default 1 mm); ``temperature_u`` [K] of the water temperature
    (default 1 K); ``density_u`` [kg/m³] of a given liquid density (default ±0.5 kg/m³ rectangular, 0.29);
    ``gravity_u`` [m/s²] (default: with standard gravity, its largest gap to sea-level normal gravity, 0.026,
    as a rectangular bound; with gravity from the latitude, ±5e-4 for local anomalies); ``angle_u`` [rad] of the
    tube's inclination (default 0.1°, a tube set with a spirit level; no effect on a vertical tube).
    """

    angle: float = math.pi / 2  # [rad]
    liquid_density: float | None = None  # [kg/m³], or None for water at liquid_temperature
    liquid_temperature: float | None = ZERO_CELSIUS + 20.0  # [K]
    gravity: float = STANDARD_GRAVITY  # [m/s²]
    air_density: float = 0.0  # [kg/m³]
    well_area_ratio: float = 0.0
    reading_resolution: float = 1e-3  # [m]
    temperature_u: float = 1.0  # [K]
    density_u: float | None = None  # [kg/m³]; None: DEFAULT_DENSITY_BOUND / √3 for a given density
    gravity_u: float | None = None  # [m/s²]; None: from the choice of gravity (see above)
    angle_u: float = math.radians(0.1)  # [rad]

    def reading(self, reading_m: float) -> ManometerReading:
        """A reading of ``reading_m`` [m] along the tube on this manometer."""
        return ManometerReading(reading_m, self.angle, self.liquid_density, self.liquid_temperature,
                                self.gravity, self.air_density, self.well_area_ratio)

    def reference_uncertainty(self) -> tuple[float, float]:
        r"""Standard uncertainty of a reference Δp = (ρ_l − ρ_a) g L (sin θ + a/A) (JCGM 100:2008 §5.1.2).

        .. math::
            u_{point} = \frac{\partial \Delta p}{\partial L}\frac{\delta}{\sqrt6}, \qquad
            u_{rel}^2 = \left(\frac{u_\rho}{\rho_l - \rho_a}\right)^2 + \left(\frac{u_g}{g}\right)^2
                      + \left(\frac{\cos\theta\, u_\theta}{\sin\theta + a/A}\right)^2

        Every reading is the difference of two scale readings (the two menisci of a U-tube, or the meniscus and
        its zero on a well gauge), each with u = δ/√12 for a scale division δ (GUM F.2.2.1), so u(L) = δ/√6,
        independent between points. Water's u(ρ) is |dρ/dT| u(T) (Tanaka et al. 2001, by central difference).
        The relative part is common to every point and every channel on the manifold.

        Returns
        -------
        tuple of float
            ``(u_point, u_rel)``: the per-point reading term [Pa] and the common relative term [-].
        """
        rho = self.liquid_density
        if rho is None:
            t, dt = self.liquid_temperature, 0.01
            rho = float(water_density(t))
            u_rho = abs(float(water_density(t + dt) - water_density(t - dt)) / (2 * dt)) * self.temperature_u
        else:
            u_rho = self.density_u if self.density_u is not None else DEFAULT_DENSITY_BOUND / math.sqrt(3.0)
        if self.gravity_u is not None:
            u_g = self.gravity_u
        else:
            standard = math.isclose(self.gravity, STANDARD_GRAVITY, rel_tol=0.0, abs_tol=1e-12)
            u_g = (_standard_gravity_bound() if standard else GRAVITY_ANOMALY_BOUND) / math.sqrt(3.0)
        lever = math.sin(self.angle) + self.well_area_ratio
        u_rel = math.sqrt((u_rho / (rho - self.air_density)) ** 2 + (u_g / self.gravity) ** 2
                          + (math.cos(self.angle) * self.angle_u / lever) ** 2)
        u_point = manometer_pressure(self.reading(self.reading_resolution / math.sqrt(6.0)))
        return u_point, u_rel


@dataclass(frozen=True, eq=False)
class CalibrationInput:
    """Everything a calibration needs except (optionally) the counts."""

    channels: tuple[str, ...]
    manometer: Manometer = Manometer()
    references: tuple[float | None, ...] = ()  # [Pa] per point; None: to be typed in (guided mode)
    labels: tuple[str, ...] = ()  # per point
    blocks: dict[str, np.ndarray] = field(default_factory=dict)  # label → scans × channels (file-given counts)
    operator_note: str = ""
    drift_tolerance: float | None = None  # [Pa or N]
    # per point: None (or an empty tuple: every point) for a manometer reading, whose uncertainty comes from
    # the manometer; a number for a reference sensor's stated standard uncertainty [Pa]
    reference_u: tuple[float | None, ...] = ()


def manometer_from_table(table: dict, source: str) -> Manometer:
    """Build a :class:`Manometer` from a ``[manometer]`` table in the operator's units (mm, deg, °C)."""
    unknown = sorted(set(table) - MANOMETER_KEYS)
    if unknown:
        raise RigError(source, [RigIssue(f"manometer.{k}", f"unknown key; expected one of {', '.join(sorted(MANOMETER_KEYS))}") for k in unknown])
    try:
        liquid = table.get("liquid", "water")
        density = table.get("liquid_density_kg_m3")
        if liquid != "water" and density is None:
            raise ValueError(f"manometer.liquid {liquid!r}: only water has a built-in density; give liquid_density_kg_m3")
        lat = table.get("latitude_deg")
        gravity = STANDARD_GRAVITY if lat is None else float(normal_gravity(math.radians(lat), table.get("height_m", 0.0)))
        return Manometer(
            angle=math.radians(float(table.get("angle_deg", 90.0))),
            liquid_density=None if density is None else float(density),
            liquid_temperature=ZERO_CELSIUS + float(table.get("liquid_temperature_c", 20.0)),
            gravity=gravity,
            air_density=float(table.get("air_density_kg_m3", 0.0)),
            well_area_ratio=float(table.get("well_area_ratio", 0.0)),
            **_uncertainty_inputs(table),
        )
    except (TypeError, ValueError) as exc:
        raise RigError(source, [RigIssue("manometer", str(exc))]) from None


def _uncertainty_inputs(table: dict) -> dict:
    """The ``[manometer]`` table's uncertainty keys → :class:`Manometer` fields (SI); absent keys keep the defaults."""
    keys = {"reading_resolution_mm": ("reading_resolution", 1e-3), "liquid_temperature_u_c": ("temperature_u", 1.0),
            "liquid_density_u_kg_m3": ("density_u", 1.0), "gravity_u_m_s2": ("gravity_u", 1.0),
            "angle_u_deg": ("angle_u", math.pi / 180.0)}
    out = {}
    for key, (name, factor) in keys.items():
        if key in table:
            value = float(table[key])
            if not value >= 0.0:
                raise ValueError(f"manometer.{key} must be a standard uncertainty ≥ 0, got {table[key]!r}")
            out[name] = value * factor
    return out


def _default_channels(rig: Rig) -> tuple[str, ...]:
    return tuple(c.name for c in rig.channels if rig.is_pressure(c.name) and zeroable(rig, c.name))


def _block(value, key: str, n_channels: int, source: str) -> np.ndarray:
    try:
        block = np.atleast_2d(np.asarray(value, dtype=float))
    except (TypeError, ValueError):
        raise RigError(source, [RigIssue(key, "expected a list of scans, each a list of counts")]) from None
    if block.ndim != 2 or block.shape[1] != n_channels:
        raise RigError(source, [RigIssue(key, f"expected scans × {n_channels} channels, got shape {block.shape}")])
    return block


def _reference(point: dict, manometer: Manometer, key: str, source: str) -> float | None:
    """Reference pressure of a point [Pa]; None when the file leaves it to be typed in (guided mode)."""
    if "reading_mm" in point and "reference_pa" in point:
        raise RigError(source, [RigIssue(key, "give one of reading_mm (manometer) or reference_pa (reference sensor), not both")])
    if "reading_mm" not in point and "reference_pa" not in point:
        return None
    if "reference_u_pa" in point and "reference_pa" not in point:
        raise RigError(source, [RigIssue(f"{key}.reference_u_pa", "belongs to a reference_pa point (a manometer "
                                         "reading's uncertainty comes from the [manometer] table)")])
    try:
        if "reference_pa" in point:
            return float(point["reference_pa"])
        return manometer_pressure(manometer.reading(float(point["reading_mm"]) * 1e-3))
    except (TypeError, ValueError) as exc:
        raise RigError(source, [RigIssue(key, str(exc))]) from None


def _reference_u(point: dict, key: str, source: str) -> float | None:
    """A reference sensor's stated standard uncertainty [Pa] (default 0: taprig cannot know it); None for a
    manometer point, whose uncertainty comes from the manometer."""
    if "reference_pa" not in point:
        return None
    try:
        value = float(point.get("reference_u_pa", 0.0))
    except (TypeError, ValueError):
        value = -1.0
    if not value >= 0.0:
        raise RigError(source, [RigIssue(f"{key}.reference_u_pa", "expected a standard uncertainty ≥ 0 [Pa]",
                                         point.get("reference_u_pa"))])
    return value


def parse_input_toml(text: str, source: str, rig: Rig) -> CalibrationInput:
    """Parse a TOML calibration input (layout in the module docstring)."""
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise RigError(source, [RigIssue("", f"not valid TOML: {exc}")]) from None
    unknown = sorted(set(data) - {"channels", "operator_note", "drift_tolerance_pa", "manometer", "zero", "points", "end_zero", "rig"})
    if unknown:
        raise RigError(source, [RigIssue(k, "unknown key") for k in unknown])
    if "rig" in data and data["rig"] != rig.id:
        raise RigError(source, [RigIssue("rig", f"input is for another rig than {rig.id!r}", data["rig"])])
    channels = _check_channels(tuple(data.get("channels", _default_channels(rig))), rig, source)
    manometer = manometer_from_table(data.get("manometer", {}), source)
    blocks, refs, labels, ref_u = {}, [], [], []
    if "zero" not in data and not data.get("points"):
        raise _nothing_to_calibrate(source, "a [zero] table or [[points]]")
    for step in ("zero", "end_zero"):
        if step in data:
            blocks[step] = _block(data[step].get("counts"), f"{step}.counts", len(channels), source)
    for k, point in enumerate(data.get("points", [])):
        label = f"point {k + 1}"
        refs.append(_reference(point, manometer, f"points[{k}]", source))
        ref_u.append(_reference_u(point, f"points[{k}]", source))
        labels.append(label)
        if "counts" in point:
            blocks[label] = _block(point["counts"], f"points[{k}].counts", len(channels), source)
    return CalibrationInput(channels, manometer, tuple(refs), tuple(labels), blocks,
                            str(data.get("operator_note", "")), data.get("drift_tolerance_pa"), tuple(ref_u))


def _nothing_to_calibrate(source: str, expected: str) -> RigError:
    """The error for an input without a zero and without span points: a calibration from no data."""
    return RigError(source, [RigIssue("", f"no zero and no span points: nothing to calibrate (expected {expected})")])


def _check_channels(channels: tuple[str, ...], rig: Rig, source: str) -> tuple[str, ...]:
    known = {c.name for c in rig.channels}
    bad = [RigIssue(f"channels[{i}]", f"not a channel of rig {rig.id!r}", n) for i, n in enumerate(channels) if n not in known]
    if bad or not channels:
        raise RigError(source, bad or [RigIssue("channels", "no channels to calibrate")])
    return channels


def parse_input_csv(text: str, source: str, rig: Rig, manometer: Manometer) -> CalibrationInput:
    """Parse a CSV calibration input (``step,reading_mm,<channels...>``, one row per scan)."""
    rows = [r for r in csv.reader(io.StringIO(text)) if r and any(c.strip() for c in r)]
    if not rows or [c.strip() for c in rows[0][:2]] != ["step", "reading_mm"] or len(rows[0]) < 3:
        raise RigError(source, [RigIssue("line 1", "expected a header 'step,reading_mm,<channel>,...'")])
    channels = _check_channels(tuple(c.strip() for c in rows[0][2:]), rig, source)
    grouped: dict[str, list[list[float]]] = {}
    readings: dict[str, str] = {}
    for lineno, row in enumerate(rows[1:], start=2):
        step = row[0].strip()
        try:
            grouped.setdefault(step, []).append([float(c) for c in row[2:]])
        except ValueError:
            raise RigError(source, [RigIssue(f"line {lineno}", "expected numbers in the channel columns", ",".join(row))]) from None
        readings.setdefault(step, row[1].strip())
    blocks = {s: _block(v, f"step {s!r}", len(channels), source) for s, v in grouped.items()}
    labels = tuple(s for s in grouped if s not in ("zero", "end_zero"))
    if "zero" not in grouped and not labels:
        raise _nothing_to_calibrate(source, "rows of step 'zero' or of a point")
    refs = tuple(_reference({"reading_mm": _number(readings[s], s, source)} if readings[s] else {}, manometer,
                            f"step {s!r}", source) for s in labels)
    return CalibrationInput(channels, manometer, refs, labels, blocks)


def _number(text: str, step: str, source: str) -> float:
    try:
        return float(text)
    except ValueError:
        raise RigError(source, [RigIssue(f"step {step!r}.reading_mm", "expected a number", text)]) from None


def _required(counts_source: CountsSource, label: str) -> np.ndarray:
    block = counts_source(label)
    if block is None:
        raise ValueError(f"no counts for calibration step {label!r}")
    return np.atleast_2d(np.asarray(block, dtype=float))


def calibrate(rig: Rig, plan: CalibrationInput, counts_source: CountsSource, date: datetime) -> Calibration:
    """Run a calibration: zero (if the source has one), span points, optional end-zero drift check.

    ``counts_source(label)`` gives each step's block of counts (``"zero"``, each of ``plan.labels``,
    ``"end_zero"``), or None for a step not taken (no zero: the span fit finds the zero itself). Gains are fitted through the wind-off zero when there is one.
    """
    if any(r is None for r in plan.references):
        raise ValueError("every span point needs a reference pressure (a manometer reading or reference_pa)")
    sensors = [rig.sensor_of(n) for n in plan.channels]
    zero_block = counts_source("zero")
    if zero_block is None and not plan.labels:  # guided mode on a counts file without a zero, no point typed
        raise ValueError("no zero and no span points: nothing to calibrate")
    zero = wind_off_zero(zero_block) if zero_block is not None else None
    span = None
    if plan.labels:
        means = np.vstack([_required(counts_source, label).mean(axis=0) for label in plan.labels])
        u_point, u_rel = plan.manometer.reference_uncertainty()
        # guided mode types every point in as a manometer reading and replaces the labels: all manometer points
        given = plan.reference_u if len(plan.reference_u) == len(plan.labels) else (None,) * len(plan.labels)
        span = fit_span(plan.references, means, sensors, None if zero is None else zero.mean,
                        reference_u=[u_point if g is None else g for g in given],
                        reference_u_rel=[u_rel if g is None else 0.0 for g in given])
    drift = None
    end_block = counts_source("end_zero")
    if zero is not None and end_block is not None:
        tol = plan.drift_tolerance
        tol_counts = np.array([(s.accuracy if tol is None else tol) / abs(s.slope) for s in sensors])
        drift = drift_check(zero, wind_off_zero(end_block), tol_counts)
    return build_calibration(rig, plan.channels, date, zero, span, plan.operator_note, drift, len(plan.labels))
