"""The reducer: one vectorised pass from a RawBlock of counts to a ReducedBlock.

Per scan: counts → calibrated values (``(counts − zero) · scale`` per column), channel flags (rails, rated range,
finiteness), the reference pressures → q and p∞ (linear forms, :mod:`taprig.reduce.references`), Cp per tap, speed,
Reynolds and Mach numbers, the plain-trapezoid section coefficients, balance lift and venturi flow. Nothing in
this pass loops over samples in Python; the only loops are over a handful of reference terms and over the
distinct saturation patterns of a block (one, when nothing saturates).
"""

from __future__ import annotations

import copy

import numpy as np

from taprig.physics.flow import (
    compressibility_flag,
    dynamic_pressure,
    incompressible_speed,
    isentropic_mach,
    reynolds_number,
    stagnation_speed,
)
from taprig.physics.integration import SectionWeights, ShapeFitIntegrator, trapezoid_weights
from taprig.physics.venturi import beta_ratio, venturi_expansibility, venturi_mass_flow
from taprig.protocol import RawBlock
from taprig.rig import Calibration, Medium, Rig, RigKind
from taprig.reduce.ambient import Ambient, ReduceOptions
from taprig.reduce.block import ReducedBlock
from taprig.reduce.flags import CHANNEL_FLAG_DTYPE, SCAN_FLAG_DTYPE, ChannelFlag, ScanFlag
from taprig.reduce.integrals import plain_coefficients
from taprig.reduce.layout import ColumnPlan, column_plan, rig_layout
from taprig.reduce.mean import ReducedMean, mean_of_reduced, reduce_mean, shape_integrator_for
from taprig.reduce.references import ReduceError


def ambient_for(rig: Rig, **overrides) -> Ambient:
    """An :class:`Ambient` from the rig file's fluid table (water temperature, fixed room pressure), with overrides
    (``pressure`` [Pa], ``temperature`` [K], ``relative_humidity`` [-]) from the run's own readings."""
    values = {}
    if rig.fluid.temperature is not None:
        values["temperature"] = rig.fluid.temperature
    if rig.fluid.ambient_pressure is not None:
        values["pressure"] = rig.fluid.ambient_pressure
    values.update(overrides)
    return Ambient(**values)


class Reducer:
    """Reduce blocks of one rig with one calibration and one set of ambient conditions.

    Build it once per run; :meth:`reduce` and :meth:`reduce_mean` are then pure functions of their block (the
    only state is a memo of per-channel-set arrays, which changes no result).

    Parameters
    ----------
    rig : Rig
        The validated rig model.
    calibration : Calibration, optional
        Per-channel zero and gain; the sensors' nominal transfer functions without one.
    ambient : Ambient, optional
        Room pressure [Pa], temperature [K] (the water temperature for a water rig) and humidity; default from the
        rig file's fluid table (:func:`ambient_for`).
    options : ReduceOptions, optional
        Thresholds and choices not in the rig file.

    Raises
    ------
    ReduceError
        If the calibration belongs to another rig or the rig's taps cannot be referred to the freestream.
    """

    def __init__(self, rig: Rig, calibration: Calibration | None = None, ambient: Ambient | None = None,
                 options: ReduceOptions | None = None) -> None:
        if calibration is not None and calibration.problems_with(rig):
            raise ReduceError("; ".join(calibration.problems_with(rig)))
        self.rig = rig
        self.calibration = calibration
        self.ambient = ambient if ambient is not None else ambient_for(rig)
        self.options = options if options is not None else ReduceOptions()
        self.fluid = self.ambient.properties(rig.fluid.medium)
        self.layout = rig_layout(rig, self.ambient.pressure)
        self._plans: dict[tuple[int, ...], ColumnPlan] = {}
        self._fits: dict[tuple[int, ...], ShapeFitIntegrator | None] = {}
        self._trapezoids: dict[tuple[int, ...], SectionWeights] = {}
        if self.layout.contour is not None:  # the all-taps fit's design matrices, built now rather than mid-run
            self.shape_integrator(tuple(range(self.layout.contour.columns.size)))

    def with_calibration(self, calibration: Calibration | None) -> Reducer:
        """This reducer with another calibration (a new zero, a span), same rig, ambient and options.

        The calibration-free parts (the rig layout and the shape-aware fits' design matrices) are shared, so a
        zero taken mid-run costs no panel-method solve; the per-channel-set arrays are rebuilt on first use.
        """
        if calibration is not None and calibration.problems_with(self.rig):
            raise ReduceError("; ".join(calibration.problems_with(self.rig)))
        other = copy.copy(self)
        other.calibration = calibration
        other._plans = {}
        other._fits = dict(self._fits)
        other._trapezoids = dict(self._trapezoids)
        return other

    @property
    def tap_names(self) -> tuple[str, ...]:
        """Taps in the order of Cp columns (contour order for sections, station order for a venturi)."""
        return self.layout.tap_names

    @property
    def assumptions(self) -> tuple[str, ...]:
        """Sentences stating what the reduction assumes for this rig and calibration (for every output that shows
        Cp or a coefficient: ``taprig check``, info, exports, the dashboard and the report)."""
        return _assumptions(self.layout.assumptions, self.calibration)

    @property
    def reference_note(self) -> str:
        """A few words on the freestream static in force, for a live line."""
        return self.rig.reference.static_short() if self.rig.kind is not RigKind.VENTURI else \
            "p∞ = inlet station"

    @property
    def calibration_warning(self) -> str:
        """Why the calibration in force fails its own checks ("" when it passes or none is used)."""
        return calibration_warning(self.calibration)

    def assumption_data(self) -> dict:
        """The assumptions as data for a dashboard or a report: ``{"sentences": [...], "static": {...},
        "calibration": {...}}`` (plain types only)."""
        ref = self.rig.reference
        offset = ref.static_offset()
        static = {"source": "channel" if ref.static is not None else
                  (ref.static_source.value if ref.static_source is not None else
                   ("inlet station" if self.rig.kind is RigKind.VENTURI else None)),
                  "channel": ref.static, "factor": offset[0] if offset else None,
                  "factor_u": offset[1] if offset else None, "short": self.reference_note}
        cal = self.calibration
        return {
            "sentences": list(self.assumptions),
            "static": static,
            "calibration": {
                "used": cal is not None, "date": cal.date.isoformat() if cal is not None else None,
                "flagged_channels": dict(cal.flagged) if cal is not None else {},
                "forced": bool(self.calibration_warning), "warning": self.calibration_warning,
            },
            "speed": "isentropic" if np.isfinite(self.fluid.speed_of_sound) else "bernoulli",
        }

    def plan(self, channels: tuple[int, ...]) -> ColumnPlan:
        """The precomputed arrays for a channel set (built on first use); ReduceError if the rig cannot use it."""
        plan = self._plans.get(channels) if type(channels) is tuple else None  # a block's own tuple of ints
        if plan is not None:
            return plan
        key = tuple(int(c) for c in channels)
        if key not in self._plans:
            self._plans[key] = column_plan(self.layout, key, self.calibration, self.options.no_flow_factor)
        return self._plans[key]

    def shape_integrator(self, keep: tuple[int, ...]) -> ShapeFitIntegrator | None:
        """The shape-aware integrator over the contour points ``keep`` (built on first use; None if no shape)."""
        if keep not in self._fits:
            self._fits[keep] = shape_integrator_for(self, keep)
        return self._fits[keep]

    def plain_weights(self, keep: tuple[int, ...]) -> SectionWeights:
        """The closed-contour trapezoid's weights over the contour points ``keep`` (built on first use)."""
        if keep not in self._trapezoids:
            contour = self.layout.contour
            index = np.asarray(keep, dtype=int)
            self._trapezoids[keep] = trapezoid_weights(contour.x_c[index], contour.y_c[index])
        return self._trapezoids[keep]

    def reduce_mean(self, block: RawBlock, alpha_rad: float | None = None, uncertainties: bool = True) -> ReducedMean:
        """The block's mean with uncertainties, both integrators and wall corrections (:func:`reduce_mean`);
        ``uncertainties=False``: the same values without their uncertainties, at a fraction of the cost."""
        return reduce_mean(self, block, alpha_rad, uncertainties)

    def mean_of_reduced(self, blocks: list[ReducedBlock], alpha_rad: float | None = None,
                        uncertainties: bool = True) -> ReducedMean:
        """:meth:`reduce_mean` of scans this reducer has already reduced at ``alpha_rad`` (:func:`mean_of_reduced`)."""
        return mean_of_reduced(self, blocks, alpha_rad, uncertainties)

    def alpha_array(self, alpha_rad, n_scans: int) -> np.ndarray:
        """Angle of attack per scan [rad]: ``alpha_rad`` (scalar or one per scan) or the options' fixed angle."""
        alpha = np.asarray(self.options.alpha_rad if alpha_rad is None else alpha_rad, dtype=float)
        if alpha.ndim > 1 or (alpha.ndim == 1 and alpha.size != n_scans):
            raise ReduceError(f"alpha_rad must be a number or one value per scan ({n_scans}); got shape {alpha.shape}")
        if not np.all(np.isfinite(alpha)):
            raise ReduceError("alpha_rad must be finite")
        return np.broadcast_to(alpha, (n_scans,)).astype(float)

    def reduce(self, block: RawBlock, alpha_rad=None) -> ReducedBlock:
        """Reduce every scan of ``block`` (see the module docstring); ``alpha_rad`` [rad] scalar or per scan."""
        plan = self.plan(block.channels)
        counts = np.asarray(block.counts, dtype=float)
        if counts.ndim != 2 or counts.shape[1] != len(plan.channels):
            raise ReduceError(f"block counts have shape {counts.shape}; expected (scans, {len(plan.channels)})")
        p, channel_flags, unusable = self.pressures(plan, counts)
        scan_flags = _scan_flags_from_channels(channel_flags)
        cp, q, tap_ok, extra = self.pressure_coefficients(plan, p, unusable)
        scan_flags |= extra
        alpha = self.alpha_array(alpha_rad, counts.shape[0])
        v, re, mach = self.flow(q, plan.static_absolute.evaluate(p)[:, 0])
        scan_flags |= np.where(compressibility_flag(mach), ScanFlag.COMPRESSIBLE, 0).astype(SCAN_FLAG_DTYPE)
        scan_flags |= self.plausibility_flags(plan, q, v, mach)
        cl = cd = cm = np.full(counts.shape[0], np.nan)
        if self.layout.contour is not None:
            coeffs, integral_flags = plain_coefficients(self.layout.contour, cp, tap_ok, alpha, self.options.min_taps,
                                                         self.plain_weights)
            cl, cd, cm = coeffs
            scan_flags |= integral_flags
        lift, cl_balance = self.balance(plan, p, q)
        mass_flow = self.venturi_flow(cp, q, p, plan) if self.layout.venturi is not None else None
        return ReducedBlock(
            t_ns=block.t_ns, scan_index=block.scan_index, channels=plan.channels, column_names=plan.column_names,
            tap_names=self.layout.tap_names, p_pa=p, cp=cp, q_pa=q, v_ms=v, re=re, mach=mach, alpha_rad=alpha,
            cl=cl, cd_p=cd, cm_qc=cm, scan_flags=scan_flags, channel_flags=channel_flags, lift_n=lift,
            cl_balance=cl_balance, mass_flow_kg_s=mass_flow,
            cp_ideal=self.layout.venturi.cp_ideal if self.layout.venturi is not None else None,
            force_channels=plan.force_channels, assumptions=self.assumptions, reference_note=self.reference_note,
            calibration_warning=self.calibration_warning,
        )

    # -- steps (public so reduce_mean and the benchmark reuse exactly these) ------------------------------------
    def pressures(self, plan: ColumnPlan, counts: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Counts → calibrated values, per-sample :class:`ChannelFlag` bits and the unusable-sample mask."""
        p = np.subtract(counts, plan.zero)  # the rig's Conversion, value = (counts − zero) · scale
        p *= plan.scale
        saturated = counts <= plan.rail_lo  # the sensors' own rail test, per column
        saturated |= counts >= plan.rail_hi
        with np.errstate(invalid="ignore"):
            out_of_range = p < plan.range_lo
            out_of_range |= p > plan.range_hi
        finite = np.isfinite(p)
        flags = out_of_range.view(np.uint8)
        flags <<= 1
        flags |= saturated.view(np.uint8)
        if finite.all():  # the common case: no NOT_FINITE bit to set, and unusable is just saturated
            return p, flags.astype(CHANNEL_FLAG_DTYPE, copy=False), saturated
        not_finite = ~finite
        flags |= not_finite.view(np.uint8) << 2
        return p, flags.astype(CHANNEL_FLAG_DTYPE, copy=False), saturated | not_finite

    def pressure_coefficients(self, plan: ColumnPlan, p: np.ndarray, unusable: np.ndarray):
        """Cp per tap, q, the usable-tap mask and the scan flags of the reference (NO_FLOW, REFERENCE_INVALID)."""
        delta = plan.taps.evaluate(p)  # p_tap − p∞ per tap [Pa]
        q, signal = self._dynamic_pressure(plan, p, delta)
        reference_bad = np.any(unusable[:, plan.reference_columns], axis=1) if plan.reference_columns.size else \
            np.zeros(p.shape[0], dtype=bool)
        with np.errstate(invalid="ignore"):
            no_flow = ~(signal >= plan.q_threshold) & ~reference_bad
        dead = no_flow | reference_bad
        q_safe = np.where(dead, np.nan, q)  # NaN, never a division by ~0: Cp is NaN, never inf
        cp = delta / q_safe[:, None]
        tap_ok = ~unusable[:, plan.tap_columns]
        if plan.missing_taps.any():
            tap_ok &= ~plan.missing_taps
        if not tap_ok.all():
            np.copyto(cp, np.nan, where=~tap_ok)
        flags = np.where(no_flow, ScanFlag.NO_FLOW, 0) | np.where(reference_bad, ScanFlag.REFERENCE_INVALID, 0)
        if plan.missing_taps.any():
            flags = flags | int(ScanFlag.MISSING_TAPS)
        return cp, q, tap_ok, np.asarray(flags, dtype=SCAN_FLAG_DTYPE)

    def _dynamic_pressure(self, plan: ColumnPlan, p: np.ndarray, delta: np.ndarray):
        """q per scan, and the signal the no-flow threshold applies to (q, or a venturi's differential)."""
        if plan.q is not None:
            q = plan.q.evaluate(p)[:, 0]
            return q, q
        if self.layout.venturi is not None:
            differential = -delta[:, self.layout.venturi.throat]
            return self._venturi_q(differential, plan, p), differential
        raise ReduceError(f"rig {self.rig.id!r} has no dynamic-pressure source (pitot, or static and total)")

    def _venturi_q(self, differential: np.ndarray, plan: ColumnPlan, p: np.ndarray) -> np.ndarray:
        """Inlet q from the ISO 5167-4 flow of the inlet − throat differential (continuity: V1 = q_m / (ρ1 A1))."""
        ven = self.layout.venturi
        mass = self._mass_flow(differential, plan, p)
        rho1 = self.upstream_density(plan, p)
        q = dynamic_pressure(rho1, mass / (rho1 * ven.inlet_area))
        return np.where(differential > 0.0, q, differential)  # keep the sign of a reversed differential (no flow)

    def upstream_pressure(self, plan: ColumnPlan, p: np.ndarray) -> np.ndarray:
        """Absolute pressure at the venturi's upstream tap p1 per scan [Pa] (the room's when not finite)."""
        p1 = plan.static_absolute.evaluate(p)[:, 0]
        return np.where(np.isfinite(p1) & (p1 > 0.0), p1, self.ambient.pressure)

    def upstream_density(self, plan: ColumnPlan, p: np.ndarray) -> np.ndarray | float:
        """Density at the upstream tap ρ1 [kg/m³]: the room air's scaled to p1 at the run's temperature (ideal gas,
        ISO 5167-1 §5.4.2 asks ρ1 at the upstream tap); a liquid's as it is."""
        if self.rig.fluid.medium is not Medium.AIR:
            return self.fluid.density
        return self.fluid.density * self.upstream_pressure(plan, p) / self.ambient.pressure

    def _mass_flow(self, differential: np.ndarray, plan: ColumnPlan, p: np.ndarray) -> np.ndarray:
        ven = self.layout.venturi
        d, big_d = np.sqrt(4.0 * ven.throat_area / np.pi), np.sqrt(4.0 * ven.inlet_area / np.pi)
        dp = np.where(np.isfinite(differential), np.clip(differential, 0.0, None), 0.0)
        eps = 1.0
        if self.rig.fluid.medium is Medium.AIR:
            p1 = self.upstream_pressure(plan, p)
            p1 = np.where(p1 > dp, p1, self.ambient.pressure)
            eps = venturi_expansibility(beta_ratio(d, big_d), p1, np.minimum(dp, 0.25 * p1))
        mass = venturi_mass_flow(d, big_d, dp, self.upstream_density(plan, p), self.options.discharge_coefficient,
                                 eps)
        return np.where(np.isfinite(differential), mass, np.nan)

    def venturi_flow(self, cp: np.ndarray, q: np.ndarray, p: np.ndarray, plan: ColumnPlan) -> np.ndarray:
        """Mass flow per scan per ISO 5167-4 [kg/s] from the inlet − throat differential (NaN without flow)."""
        differential = -cp[:, self.layout.venturi.throat] * q
        return self._mass_flow(differential, plan, p)

    def flow(self, q: np.ndarray, p_static: np.ndarray | None = None,
             ambient: Ambient | None = None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Speed [m/s], Reynolds number on the reference length [-] and Mach number [-] from q = p0 − p∞ [Pa].

        Air: the isentropic relation from the stagnation state (the run's temperature and the room's pressure
        over its density, :func:`~taprig.physics.flow.stagnation_speed`) at the absolute freestream static
        ``p_static`` [Pa] (the room's pressure when not given or not finite); Mach from q/p∞. Water: Bernoulli.
        ``ambient``: other room conditions than the reducer's (the fluid's properties taken at them).
        """
        ambient = self.ambient if ambient is None else ambient
        fluid = self.fluid if ambient is self.ambient else ambient.properties(self.rig.fluid.medium)
        q = np.asarray(q, dtype=float)
        length = self.layout.reference_length
        if np.isfinite(fluid.speed_of_sound):
            p_inf = np.full(q.shape, ambient.pressure) if p_static is None else np.asarray(p_static, dtype=float)
            p_inf = np.where(np.isfinite(p_inf) & (p_inf > 0.0), p_inf, ambient.pressure)
            v = stagnation_speed(q, p_inf, ambient.pressure / fluid.density)
            with np.errstate(invalid="ignore"):
                mach = np.sign(q) * isentropic_mach(np.abs(np.nan_to_num(q)), p_inf)
            mach = np.where(np.isfinite(q), mach, np.nan)
        else:
            v = incompressible_speed(q, fluid.density)
            mach = np.full_like(v, np.nan)
        re = reynolds_number(fluid.density, v, length, fluid.viscosity) if np.isfinite(length) else np.full_like(v, np.nan)
        return v, re, mach

    def plausibility_flags(self, plan: ColumnPlan, q: np.ndarray, v: np.ndarray, mach: np.ndarray) -> np.ndarray:
        """REVERSED where q < −(no-flow threshold); BEYOND_RIG where V > 1.1 × the rig's max speed or M > its
        max Mach (``[operating]``)."""
        op = self.rig.operating
        with np.errstate(invalid="ignore"):
            reversed_ = q < -plan.q_threshold
            beyond = np.abs(mach) > op.max_mach
            if op.max_speed is not None:
                beyond |= np.abs(v) > 1.1 * op.max_speed
        return (np.where(reversed_, ScanFlag.REVERSED, 0) | np.where(beyond, ScanFlag.BEYOND_RIG, 0)).astype(
            SCAN_FLAG_DTYPE)

    def balance(self, plan: ColumnPlan, p: np.ndarray, q: np.ndarray):
        """Balance lift [N] and Cl_balance = L / (q c b) [-] per scan, or (None, None) without a lift balance."""
        if plan.lift_column is None:
            return None, None
        lift = p[:, plan.lift_column]
        chord, span = self.rig.geometry.chord, self.layout.span
        if chord is None or span is None:
            return lift, np.full_like(lift, np.nan)
        with np.errstate(invalid="ignore", divide="ignore"):
            return lift, lift / (np.where(q >= plan.q_threshold, q, np.nan) * chord * span)


def _assumptions(layout_assumptions: tuple[str, ...], calibration: Calibration | None) -> tuple[str, ...]:
    warning = calibration_warning(calibration)
    return layout_assumptions + (calibration_statement(calibration),) + ((warning,) if warning else ())


def stated_assumptions(rig: Rig, calibration: Calibration | None = None) -> tuple[str, ...]:
    """:attr:`Reducer.assumptions` of ``rig`` and ``calibration`` without building a reducer (no fits); ReduceError
    when the rig cannot be reduced (its freestream static unstated)."""
    return _assumptions(rig_layout(rig, 101325.0).assumptions, calibration)


def calibration_statement(calibration: Calibration | None) -> str:
    """One sentence on the calibration in force."""
    if calibration is None:
        return "no calibration: the sensors' nominal transfer functions and datasheet uncertainties"
    levels = sorted({c.level.name.lower() for c in calibration.channels.values()})
    return f"calibration of {calibration.date:%Y-%m-%d %H:%M} ({', '.join(levels) or 'no channels'})"


def calibration_warning(calibration: Calibration | None) -> str:
    """"" for a calibration that passes its own checks; else a warning naming the failed channels."""
    if calibration is None or not calibration.flagged:
        return ""
    names = ", ".join(calibration.flagged)
    return f"CALIBRATION FAILED ITS OWN CHECKS (used because forced): {names}"


def _scan_flags_from_channels(channel_flags: np.ndarray) -> np.ndarray:
    """OR of a scan's channel flags, mapped onto the scan bits (SATURATED, OUT_OF_RANGE, NOT_FINITE)."""
    any_bits = np.bitwise_or.reduce(channel_flags, axis=1) if channel_flags.shape[1] else \
        np.zeros(channel_flags.shape[0], dtype=CHANNEL_FLAG_DTYPE)
    out = np.zeros(channel_flags.shape[0], dtype=SCAN_FLAG_DTYPE)
    for channel_bit, scan_bit in ((ChannelFlag.SATURATED, ScanFlag.SATURATED),
                                  (ChannelFlag.OUT_OF_RANGE, ScanFlag.OUT_OF_RANGE),
                                  (ChannelFlag.NOT_FINITE, ScanFlag.NOT_FINITE)):
        out |= np.where(any_bits & int(channel_bit), int(scan_bit), 0).astype(SCAN_FLAG_DTYPE)
    return out
