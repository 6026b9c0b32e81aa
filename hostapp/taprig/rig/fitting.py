"""Calibration fits: wind-off zero, zero drift, liquid-manometer reference pressures and the span fit.

All pure and vectorised over channels: a block is scans × channels of native counts, a span is points × channels
of mean counts against one reference pressure per point (every channel on a common manifold).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import datetime

import numpy as np

from taprig.physics.constants import STANDARD_GRAVITY
from taprig.physics.hydrostatics import column_pressure, well_manometer_height
from taprig.physics.water import water_density
from taprig.rig.calibration import Calibration, ChannelCalibration
from taprig.rig.model import Measures, Rig
from taprig.rig.sensors import SensorBase

DEFAULT_GAIN_TOLERANCE = 0.05  # a gain more than 5 % off the datasheet suggests a wrong sensor or a leak


@dataclass(frozen=True, eq=False)
class ZeroResult:
    """Mean counts of a zero block per channel, with the standard error of each mean [counts]."""

    mean: np.ndarray
    std_error: np.ndarray
    n_scans: int


def wind_off_zero(block: np.ndarray) -> ZeroResult:
    """Wind-off (or no-load) zero from a block of counts (scans × channels).

    ``std_error = s / √n`` with ``s`` the sample standard deviation (ddof = 1). It assumes independent scans;
    sensor noise correlated over many scans makes the true error larger (common practice).
    """
    block = np.asarray(block, dtype=float)
    if block.ndim != 2 or block.shape[0] < 2:
        raise ValueError(f"a zero needs a block of at least 2 scans × channels, got shape {block.shape}")
    n = block.shape[0]
    return ZeroResult(block.mean(axis=0), block.std(axis=0, ddof=1) / math.sqrt(n), n)


@dataclass(frozen=True, eq=False)
class DriftResult:
    """Change of the zero between the start and the end of a run, per channel."""

    drift: np.ndarray  # end − start [counts]
    tolerance: np.ndarray  # [counts]
    exceeded: np.ndarray  # bool

    @property
    def ok(self) -> bool:
        """True when no channel drifted beyond its tolerance."""
        return not bool(self.exceeded.any())


def drift_check(start: ZeroResult, end: ZeroResult, tolerance_counts: float | np.ndarray) -> DriftResult:
    """Compare a start and an end zero: a channel fails when ``|end − start| > tolerance`` [counts]."""
    drift = end.mean - start.mean
    tol = np.broadcast_to(np.asarray(tolerance_counts, dtype=float), drift.shape)
    return DriftResult(drift, tol, np.abs(drift) > tol)


@dataclass(frozen=True)
class ManometerReading:
    """One liquid-manometer reading, SI inside.

    ``reading`` is the meniscus travel along the tube [m] (for a U-tube: the difference between the two menisci);
    ``angle`` the tube's inclination above the horizontal [rad] (π/2 for a vertical U-tube). The liquid density
    [kg/m³] is given directly, or for water from ``liquid_temperature`` [K]. ``gravity`` [m/s²] defaults to
    standard gravity; ``air_density`` [kg/m³] (0: ignored) corrects for the air in the legs; ``well_area_ratio``
    (tube bore / well area, 0: a scale that already allows for the well) corrects a well-type gauge.
    """

    reading: float
    angle: float = math.pi / 2
    liquid_density: float | None = None
    liquid_temperature: float | None = None
    gravity: float = STANDARD_GRAVITY
    air_density: float = 0.0
    well_area_ratio: float = 0.0


def manometer_pressure(reading: ManometerReading) -> float:
    """Pressure difference of a manometer reading [Pa], ``Δp = (ρ_l − ρ_a) g L (sin θ + a/A)``.

    Uses :func:`taprig.physics.hydrostatics.well_manometer_height`, :func:`~taprig.physics.hydrostatics.column_pressure`
    and, for water given by temperature, :func:`taprig.physics.water.water_density` (Tanaka et al. 2001).
    """
    if reading.liquid_density is not None:
        rho = reading.liquid_density
    elif reading.liquid_temperature is not None:
        rho = float(water_density(reading.liquid_temperature))
    else:
        raise ValueError("a manometer reading needs the liquid's density or (for water) its temperature")
    height = well_manometer_height(reading.reading, reading.angle, reading.well_area_ratio)
    return float(column_pressure(height, rho, reading.gravity, reading.air_density))


@dataclass(frozen=True, eq=False)
class SpanFit:
    """Least-squares span fit per channel, ``p_ref ≈ m · (counts − zero)``, and its quality figures."""

    gain: np.ndarray  # m / nominal slope [-]
    zero_counts: np.ndarray  # [counts]
    residuals: np.ndarray  # points × channels, p_ref − fit [SI]
    residual_rms: np.ndarray  # [SI]
    linearity_pct_fs: np.ndarray  # max |residual| / full scale · 100 [% FS]
    flags: tuple[tuple[str, ...], ...]  # per channel, empty when within tolerance
    gain_u_reference: np.ndarray | None = None  # relative standard uncertainty of the gain from the reference [-]
    zero_std_error: np.ndarray | None = None  # a free zero's standard error [counts]; None through a given zero

    @property
    def ok(self) -> np.ndarray:
        """Per channel: True when nothing was flagged."""
        return np.array([not f for f in self.flags])


def _least_squares(reference: np.ndarray, counts: np.ndarray, zero: np.ndarray | None):
    """Slope and zero per channel (vectorised): free intercept, or the line through a fixed zero."""
    if zero is None:
        c_mean = counts.mean(axis=0)
        dc = counts - c_mean
        sxx = (dc**2).sum(axis=0)
        if np.any(sxx == 0):
            raise ValueError("span points must differ in counts on every channel (the readings did not change)")
        m = (dc * (reference[:, None] - reference.mean())).sum(axis=0) / sxx
        return m, c_mean - reference.mean() / m
    d = counts - zero
    sxx = (d**2).sum(axis=0)
    if np.any(sxx == 0):
        raise ValueError("span points must differ from the zero on every channel")
    return (d * reference[:, None]).sum(axis=0) / sxx, np.asarray(zero, dtype=float)


def _gain_reference_u(ref: np.ndarray, c: np.ndarray, zero: np.ndarray, m: np.ndarray, free: bool,
                      u_point: np.ndarray, u_rel: np.ndarray) -> np.ndarray:
    """Relative standard uncertainty of each channel's fitted slope from the reference pressures (GUM §5.1, §5.2).

    The slope is linear in the references, m = Σ w_i p_i with w_i = d_i / Σ d² (d = counts − zero, a line through
    a given zero) or (c_i − c̄)/S_cc (free zero). Point errors independent between points (u_point [Pa]) add as
    Σ (w_i u_i)²; a relative error common to the points (density, gravity, angle: r_i [-]) moves them together,
    (Σ w_i p_i r_i)². Divided by m for the relative figure.
    """
    d = c - (c.mean(axis=0) if free else zero)
    w = d / (d**2).sum(axis=0)  # ∂m/∂p_i (a free zero's Σ(c_i − c̄) = 0 removes the p̄ term)
    independent = ((w * u_point[:, None]) ** 2).sum(axis=0)
    common = ((w * (ref * u_rel)[:, None]).sum(axis=0)) ** 2
    return np.sqrt(independent + common) / np.abs(m)


def _free_zero_std_error(residuals: np.ndarray, c: np.ndarray, zero: np.ndarray, m: np.ndarray) -> np.ndarray | None:
    """Standard error of a fitted zero [counts]: the line's prediction error there, s √(1/n + (c0 − c̄)²/S_cc) / |m|.

    Least-squares prediction interval of a straight line (common practice); s from the residuals with n − 2
    degrees of freedom, so it needs at least three points.
    """
    n = residuals.shape[0]
    if n < 3:
        return None
    s = np.sqrt((residuals**2).sum(axis=0) / (n - 2))
    c_mean = c.mean(axis=0)
    sxx = ((c - c_mean) ** 2).sum(axis=0)
    return s * np.sqrt(1.0 / n + (zero - c_mean) ** 2 / sxx) / np.abs(m)


def fit_span(
    reference: Sequence[float],
    counts: np.ndarray,
    sensors: Sequence[SensorBase],
    zero_counts: np.ndarray | None = None,
    linearity_tolerance_pct_fs: float | Sequence[float] | None = None,
    gain_tolerance: float = DEFAULT_GAIN_TOLERANCE,
    reference_u: float | Sequence[float] = 0.0,
    reference_u_rel: float | Sequence[float] = 0.0,
) -> SpanFit:
    """Fit gain and zero per channel from span points on a common manifold (numpy least squares).

    Parameters
    ----------
    reference : sequence of float
        Reference pressure of each point (manometer or reference sensor) [Pa], ``n`` points.
    counts : ndarray
        Mean counts, points × channels.
    sensors : sequence of sensors
        The sensor of each channel (its nominal slope and full scale).
    zero_counts : ndarray, optional
        A wind-off zero per channel [counts]: fit only the slope through it (zero first, then span; common
        practice). Without it the zero is fitted too (needs ≥ 2 points; ≥ 3 for a meaningful linearity).
    linearity_tolerance_pct_fs : float or sequence, optional
        Largest allowed residual [% FS]; default each sensor's ``accuracy_pct_fs``.
    gain_tolerance : float
        Largest allowed ``|gain − 1|`` [-].
    reference_u : float or sequence
        Standard uncertainty of each reference pressure that is independent between points (a manometer's
        reading) [Pa].
    reference_u_rel : float or sequence
        Relative standard uncertainty of each reference common to all points (liquid density, gravity, tube
        angle) [-]; 0 for a point whose reference shares nothing with the others.

    The gain's relative standard uncertainty from the references is ``gain_u_reference``
    (:func:`_gain_reference_u`); a free zero's standard error is ``zero_std_error``.
    """
    ref = np.asarray(reference, dtype=float)
    c = np.atleast_2d(np.asarray(counts, dtype=float))
    if c.shape != (ref.size, len(sensors)):
        raise ValueError(f"counts must be points × channels = {(ref.size, len(sensors))}, got {c.shape}")
    if ref.size < (1 if zero_counts is not None else 2):
        raise ValueError(f"a span fit needs at least {1 if zero_counts is not None else 2} points, got {ref.size}")
    m, zero = _least_squares(ref, c, None if zero_counts is None else np.asarray(zero_counts, dtype=float))
    slope = np.array([s.slope for s in sensors])
    fs = np.array([s.full_scale for s in sensors])
    residuals = ref[:, None] - m * (c - zero)
    linearity = np.abs(residuals).max(axis=0) / fs * 100.0
    gain = m / slope
    tol = linearity_tolerance_pct_fs
    tol = np.array([s.accuracy_pct_fs for s in sensors]) if tol is None else np.broadcast_to(np.asarray(tol, float), gain.shape)
    flags = []
    for k, sensor in enumerate(sensors):
        out = []
        if linearity[k] > tol[k]:
            out.append(f"linearity {linearity[k]:.3g} % FS exceeds {tol[k]:.3g} % FS")
        if abs(gain[k] - 1.0) > gain_tolerance:
            out.append(f"gain {gain[k]:.4g} is more than {gain_tolerance:.0%} off the sensor's nominal slope")
        if np.any(sensor.saturated(c[:, k]) | sensor.out_of_range(c[:, k])):
            out.append("a span point is saturated or outside the sensor's range")
        flags.append(tuple(out))
    rms = np.sqrt((residuals**2).mean(axis=0))
    u_point = np.broadcast_to(np.asarray(reference_u, dtype=float), ref.shape)
    u_rel = np.broadcast_to(np.asarray(reference_u_rel, dtype=float), ref.shape)
    free = zero_counts is None
    gain_u = _gain_reference_u(ref, c, zero, m, free, u_point, u_rel)
    zero_se = _free_zero_std_error(residuals, c, zero, m) if free else None
    return SpanFit(gain, zero, residuals, rms, linearity, tuple(flags), gain_u, zero_se)


def zeroable(rig: Rig, name: str) -> bool:
    """True if a wind-off zero applies to the channel: gauge, differential or force (not absolute)."""
    return rig.channel(name).measures is not Measures.ABSOLUTE


def build_calibration(
    rig: Rig,
    channels: Sequence[str],
    date: datetime,
    zero: ZeroResult | None = None,
    span: SpanFit | None = None,
    operator_note: str = "",
    drift: DriftResult | None = None,
    n_points: int = 0,
) -> Calibration:
    """Assemble a :class:`Calibration` for the named channels from a zero and/or a span fit.

    A span fit's zero and gain win over the wind-off zero (it was fitted through it, or found the zero itself).
    Absolute channels take no wind-off zero and keep their nominal zero unless spanned. Drift beyond tolerance is
    added to the channel's flags.
    """
    entries = {}
    for k, name in enumerate(channels):
        sensor = rig.sensor_of(name)
        flags = list(span.flags[k]) if span is not None else []
        if drift is not None and drift.exceeded[k]:
            flags.append(f"zero drifted {drift.drift[k]:+.4g} counts (tolerance {drift.tolerance[k]:.4g})")
        use_zero = zero is not None and zeroable(rig, name)
        entry = {
            "zero_counts": float(zero.mean[k]) if use_zero else -sensor.intercept / sensor.slope,
            "zero_std_error": float(zero.std_error[k]) if use_zero else None,
            "flags": tuple(flags),
        }
        if span is not None:
            entry.update(zero_counts=float(span.zero_counts[k]), gain=float(span.gain[k]), n_points=n_points,
                         residual_rms=float(span.residual_rms[k]), linearity_pct_fs=float(span.linearity_pct_fs[k]))
            if span.gain_u_reference is not None:
                entry["reference_u_rel"] = float(span.gain_u_reference[k])
            if span.zero_std_error is not None and not use_zero:
                entry["zero_std_error"] = float(span.zero_std_error[k])
        entries[name] = ChannelCalibration(**entry)
    return Calibration(rig_id=rig.id, date=date, operator_note=operator_note, channels=entries)
