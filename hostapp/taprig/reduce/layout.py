"""Everything the reducer precomputes: the rig's tap geometry and reference forms, and per channel set the
column arrays (conversion, rails, ranges, gathers) that make a block's reduction a handful of array operations.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from taprig.physics.venturi import ideal_station_cp
from taprig.rig import Calibration, CalibrationLevel, Rig, RigKind, conversion_for
from taprig.rig.sensors import Quantity
from taprig.reduce.references import ONE, Form, ReduceError, reference_forms

SECTION_KINDS = (RigKind.AIRFOIL, RigKind.BUMP)


@dataclass(frozen=True, eq=False)
class Contour:
    """Tap positions on the closed contour used by the integrators (unit chord or unit diameter).

    ``columns`` maps each contour point to a tap (a mirrored cylinder reuses the taps of its measured half).
    """

    x_c: np.ndarray
    y_c: np.ndarray
    columns: np.ndarray


@dataclass(frozen=True, eq=False)
class Venturi:
    """Venturi stations: reference (inlet) and throat tap positions, areas and the ideal station Cp."""

    inlet: int
    throat: int
    inlet_area: float
    throat_area: float
    cp_ideal: np.ndarray


def _cylinder_contour(theta: np.ndarray) -> Contour:
    """Taps at angle θ from the front on a unit-diameter circle, in contour order (rear → upper → front → lower).

    Taps on one side only are mirrored onto the other (symmetric flow assumed, common practice for half-tapped
    cylinders), so the closed-contour integral sees the whole circle.
    """
    phi = np.mod(theta, 2.0 * np.pi)
    columns = np.arange(phi.size)
    if not np.any(phi > np.pi):
        inside = (phi > 0.0) & (phi < np.pi)
        phi = np.concatenate((phi, 2.0 * np.pi - phi[inside]))
        columns = np.concatenate((columns, columns[inside]))
    order = np.argsort(np.mod(np.pi - phi, 2.0 * np.pi), kind="stable")
    phi, columns = phi[order], columns[order]
    return Contour(0.5 * (1.0 - np.cos(phi)), 0.5 * np.sin(phi), columns)


def _venturi(layout) -> Venturi | None:
    area = np.asarray(layout.area, dtype=float)
    if np.unique(area).size < 2:
        return None
    inlet = 0
    throat = int(np.argmin(area))
    return Venturi(inlet, throat, float(area[inlet]), float(area[throat]), ideal_station_cp(area, area[inlet]))


@dataclass(frozen=True, eq=False)
class RigLayout:
    """The parts of a rig the reducer needs, in the order it keeps them (built once per reducer)."""

    rig: Rig
    tap_names: tuple[str, ...]
    tap_channels: np.ndarray
    tap_forms: tuple[Form, ...]
    q_form: Form | None
    static_absolute: Form
    contour: Contour | None
    venturi: Venturi | None
    reference_length: float
    balance_lift: int | None
    span: float | None
    assumptions: tuple[str, ...]
    static_sensitivity: np.ndarray | None = None  # ∂Cp_i/∂f per tap when p∞ = room − f q (else None)
    static_factor_u: float = 0.0  # u(f) [-]


def _inlet_first(rig: Rig, layout) -> tuple[tuple[str, ...], np.ndarray, np.ndarray]:
    """Venturi taps in station order, with the named inlet (if any) as the reference station."""
    names, channels, area = layout.names, np.asarray(layout.channels), np.asarray(layout.area)
    inlet = rig.reference.inlet
    if inlet is not None and names[0] != inlet:
        raise ReduceError(f"rig {rig.id!r}: reference.inlet {inlet!r} is not the first (upstream) station")
    return names, channels, area


def _reference_length(rig: Rig, venturi: Venturi | None) -> float:
    g = rig.geometry
    if rig.kind is RigKind.VENTURI:
        if g.diameter is not None:
            return float(g.diameter)
        return math.sqrt(4.0 * venturi.inlet_area / math.pi) if venturi else math.nan
    length = g.diameter if rig.kind is RigKind.CYLINDER else g.chord
    return float(length) if length is not None else math.nan


def rig_layout(rig: Rig, ambient_pressure: float) -> RigLayout:
    """Precompute the rig's tap geometry, reference forms and balance (see :class:`RigLayout`)."""
    layout = rig.tap_layout()
    names, channels = tuple(layout.names), np.asarray(layout.channels, dtype=int)
    contour = venturi = None
    if rig.kind in SECTION_KINDS and len(names) >= 2:
        contour = Contour(np.asarray(layout.x_c), np.asarray(layout.y_c), np.arange(len(names)))
    elif rig.kind is RigKind.CYLINDER and len(names) >= 2:
        contour = _cylinder_contour(np.asarray(layout.theta))
    elif rig.kind is RigKind.VENTURI:
        names, channels, _ = _inlet_first(rig, layout)
        venturi = _venturi(layout)
    forms = reference_forms(rig, names, ambient_pressure)
    lift = rig.balance.lift if rig.balance is not None else None
    span = rig.geometry.span if rig.geometry.span is not None else rig.geometry.tunnel_width
    return RigLayout(
        rig, names, channels, forms.taps, forms.q, forms.static_absolute, contour, venturi,
        _reference_length(rig, venturi), rig.index_of(lift) if lift else None,
        float(span) if span is not None else None, forms.assumptions + _flow_assumptions(rig),
        np.asarray(forms.static_sensitivity, dtype=float) if forms.static_sensitivity else None,
        forms.static_factor_u,
    )


def _flow_assumptions(rig: Rig) -> tuple[str, ...]:
    """How the speed follows from q (the isentropic relation for a gas, Bernoulli for a liquid)."""
    from taprig.rig import Medium

    out = ("speed from q by Bernoulli (incompressible liquid)",) if rig.fluid.medium is Medium.WATER else \
        ("speed from q by the isentropic relation; the run's temperature is the stagnation temperature "
         "(air at rest in the room or settling chamber)",)
    if rig.kind is RigKind.VENTURI:
        out += ("venturi flow by ISO 5167-4: C = 0.995 ± 0.5 % (machined convergent; below Re_D 2e5 it needs its "
                "own calibration), density at the upstream tap from its pressure and the run's temperature",)
    return out


@dataclass(frozen=True, eq=False)
class Gather:
    """A set of linear forms evaluated on a (scans × columns) block as ``Σ_k p[:, cols[k]] · coefs[k]``.

    Every form is padded to the same number of terms with zero coefficients, so the evaluation is a fixed number
    of gathers and multiply-adds in a fixed order (bit-identical on every run).
    """

    cols: np.ndarray  # (terms, forms) int
    coefs: np.ndarray  # (terms, forms) float
    constant: np.ndarray  # (forms,) [Pa]

    def evaluate(self, p: np.ndarray) -> np.ndarray:
        """Values of the forms for each scan of ``p`` → (scans, forms)."""
        out = p[:, self.cols[0]]  # a fancy-index gather: a new array, safe to add into
        if np.any(self.coefs[0] != 1.0):
            out *= self.coefs[0]
        for cols, coefs in zip(self.cols[1:], self.coefs[1:]):
            out += p[:, cols] * coefs
        if np.any(self.constant):
            out += self.constant
        return out

    def matrix(self, n_columns: int) -> np.ndarray:
        """The forms as a dense (forms × columns) coefficient matrix: the Jacobian ∂form/∂p."""
        m = np.zeros((self.cols.shape[1], n_columns))
        for cols, coefs in zip(self.cols, self.coefs):
            np.add.at(m, (np.arange(cols.size), cols), coefs)
        return m


def gather_for(forms: list[Form], col_of: dict[int, int]) -> Gather:
    """Build a :class:`Gather` for ``forms`` on a block whose device index → column map is ``col_of``."""
    terms = max(1, max((sum(1 for k in f if k != ONE) for f in forms), default=1))
    cols = np.zeros((terms, len(forms)), dtype=np.intp)
    coefs = np.zeros((terms, len(forms)))
    constant = np.zeros(len(forms))
    for j, form in enumerate(forms):
        keys = sorted(k for k in form if k != ONE)
        for t, key in enumerate(keys):
            cols[t, j], coefs[t, j] = col_of[key], form[key]
        constant[j] = form.get(ONE, 0.0)
    return Gather(cols, coefs, constant)


@dataclass(frozen=True, eq=False)
class ColumnPlan:
    """Arrays for one channel set (a RawBlock's ``channels``), built once and reused for every block of that set."""

    channels: tuple[int, ...]
    column_names: tuple[str, ...]
    zero: np.ndarray
    scale: np.ndarray
    rail_lo: np.ndarray
    rail_hi: np.ndarray
    range_lo: np.ndarray
    range_hi: np.ndarray
    taps: Gather  # p_tap − p∞ per tap (missing taps: zero coefficients, NaN afterwards)
    tap_columns: np.ndarray  # own column of each tap (0 for a missing tap)
    missing_taps: np.ndarray  # bool per tap
    q: Gather | None
    reference_columns: np.ndarray  # columns q and p∞ depend on
    static_absolute: Gather
    u_type_b: np.ndarray  # per column, constant: datasheet rest ⊕ span residual ⊕ zero ⊕ resolution [SI]
    u_gain: np.ndarray  # per column: the datasheet span part, a relative gain error of the channel's own [-]
    u_gain_common: np.ndarray  # per column: the span reference's relative error, shared by spanned channels [-]
    q_threshold: float  # no-flow threshold [Pa]
    lift_column: int | None
    force_channels: tuple[int, ...]


def _check_channels(rig: Rig, channels: tuple[int, ...]) -> None:
    known = {c.index for c in rig.channels}
    unknown = [c for c in channels if c not in known]
    if unknown:
        raise ReduceError(
            f"block streams channel(s) {', '.join(map(str, unknown))} that rig {rig.id!r} does not define; "
            f"the rig has channels {', '.join(str(c.index) for c in rig.channels)}"
        )
    if len(set(channels)) != len(channels):
        raise ReduceError(f"block lists a channel twice: {channels}")


@dataclass(frozen=True, eq=False)
class TypeB:
    """Per-column standard uncertainties that averaging does not reduce (docs/reduction.md, the budget table)."""

    constant: np.ndarray  # [SI], independent between channels
    gain: np.ndarray  # relative [-], independent between channels: multiplies the reading
    gain_common: np.ndarray  # relative [-], fully correlated between the spanned channels of a calibration
    zero: np.ndarray  # [SI], the uncertainty of a reading at no flow (zero standard error ⊕ resolution, and the
    # datasheet's offset part while the channel has no zero)


def type_b(rig: Rig, channels: tuple[int, ...], scale: np.ndarray, calibration: Calibration | None) -> TypeB:
    """Per-column systematic standard uncertainties after the channels' calibration (JCGM 100:2008 §4.3, §5.2).

    The sensor's datasheet parts the calibration has not replaced (:meth:`SensorBase.datasheet_uncertainty` at
    the channel's :attr:`ChannelCalibration.level`), and the calibration's own: the zero's standard error, the
    span fit's rms residual and the reference standard's relative uncertainty; one count's quantisation, LSB/√12
    (GUM F.2.2.1).
    """
    n = len(channels)
    out = TypeB(np.empty(n), np.empty(n), np.zeros(n), np.empty(n))
    for col, index in enumerate(channels):
        channel = rig.channel(index)
        entry = calibration.channels.get(channel.name) if calibration is not None else None
        level = entry.level if entry else CalibrationLevel.NOMINAL
        datasheet, out.gain[col] = rig.sensors[channel.sensor].datasheet_uncertainty(level)
        residual = (entry.residual_rms or 0.0) if entry else 0.0
        zero_error = (entry.zero_std_error or 0.0) * abs(scale[col]) if entry else 0.0
        resolution = abs(scale[col]) / math.sqrt(12.0)
        if level is CalibrationLevel.SPANNED:
            out.gain_common[col] = entry.reference_u_rel or 0.0
        out.constant[col] = math.sqrt(datasheet**2 + residual**2 + zero_error**2 + resolution**2)
        # a channel never zeroed reads "no pressure" only to within its datasheet's offset part
        offset = 0.0
        if level is CalibrationLevel.NOMINAL:
            sensor = rig.sensors[channel.sensor]
            offset = sensor.full_scale * sensor.offset_pct_fs / 100.0 / math.sqrt(3.0)
        out.zero[col] = math.sqrt(zero_error**2 + resolution**2 + offset**2)
    return out


def _needed(layout: RigLayout, col_of: dict[int, int]) -> set[int]:
    """Device indices the flow reference depends on; every one must be streamed."""
    shared = set(layout.q_form or {})
    for own, form in zip(layout.tap_channels, layout.tap_forms):
        shared |= {k for k in form if k != int(own)}
    if layout.venturi is not None and layout.q_form is None:
        shared |= {int(layout.tap_channels[layout.venturi.inlet]), int(layout.tap_channels[layout.venturi.throat])}
    return {k for k in shared if k != ONE}


def column_plan(layout: RigLayout, channels: tuple[int, ...], calibration: Calibration | None, no_flow_factor: float) -> ColumnPlan:
    """Build the :class:`ColumnPlan` of a channel set; ReduceError names what the rig or block lacks."""
    rig = layout.rig
    _check_channels(rig, channels)
    col_of = {index: col for col, index in enumerate(channels)}
    absent = sorted(_needed(layout, col_of) - set(col_of))
    if absent:
        names = ", ".join(rig.channel(i).name for i in absent)
        raise ReduceError(f"block lacks the reference channel(s) {names} of rig {rig.id!r}; cannot compute q or p∞")
    try:
        conv = conversion_for(rig, channels, calibration)
    except ValueError as exc:
        raise ReduceError(str(exc)) from None
    sensors = [rig.sensors[rig.channel(i).sensor] for i in channels]
    missing = np.array([int(c) not in col_of for c in layout.tap_channels], dtype=bool)
    present_forms = [f if not m else {} for f, m in zip(layout.tap_forms, missing)]
    tap_gather = gather_for(present_forms, col_of)
    q_gather = gather_for([layout.q_form], col_of) if layout.q_form is not None else None
    u_b = type_b(rig, channels, conv.scale, calibration)
    ref_cols = np.array(sorted(col_of[k] for k in _needed(layout, col_of)), dtype=np.intp)
    tap_names = dict(zip((int(c) for c in layout.tap_channels), layout.tap_names))
    return ColumnPlan(
        channels=tuple(channels),
        column_names=tuple(tap_names.get(i, rig.channel(i).name) for i in channels),
        zero=conv.zero, scale=conv.scale,
        rail_lo=np.array([s.rails[0] for s in sensors], dtype=float),
        rail_hi=np.array([s.rails[1] for s in sensors], dtype=float),
        range_lo=np.array([s.range[0] for s in sensors]), range_hi=np.array([s.range[1] for s in sensors]),
        taps=tap_gather,
        tap_columns=np.array([col_of.get(int(c), 0) for c in layout.tap_channels], dtype=np.intp),
        missing_taps=missing, q=q_gather, reference_columns=ref_cols,
        static_absolute=gather_for([layout.static_absolute], col_of),
        u_type_b=u_b.constant, u_gain=u_b.gain, u_gain_common=u_b.gain_common,
        q_threshold=_q_threshold(layout, q_gather, col_of, u_b.zero, conv.scale, no_flow_factor),
        lift_column=col_of.get(layout.balance_lift) if layout.balance_lift is not None else None,
        force_channels=tuple(i for i, s in zip(channels, sensors) if s.quantity is Quantity.FORCE),
    )


def _q_threshold(layout, q_gather, col_of, u_b, scale, factor) -> float:
    """No-flow threshold: ``factor`` × u(q at no flow) from the q channels' zero uncertainty, at least two counts.

    The zero uncertainty (resolution and the wind-off zero's standard error; before a zero, the datasheet's offset
    part, rectangular, GUM §4.3.7), not the full accuracy, decides whether a q is distinguishable from no flow: a
    span error scales with the reading and vanishes at zero.
    """
    if q_gather is not None:
        jac = q_gather.matrix(u_b.size)[0]
    elif layout.venturi is not None:  # the venturi differential inlet − throat stands in for q
        jac = np.zeros(u_b.size)
        jac[col_of[int(layout.tap_channels[layout.venturi.inlet])]] += 1.0
        jac[col_of[int(layout.tap_channels[layout.venturi.throat])]] -= 1.0
    else:
        return math.inf
    u_q = math.sqrt(float(np.sum((jac * u_b) ** 2)))
    counts = 2.0 * float(np.sum(np.abs(jac * scale)))
    return max(factor * u_q, counts)
