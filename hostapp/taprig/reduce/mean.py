"""Block means: mean pressures and Cp with their GUM uncertainty budget, both integrators, wall corrections.

Uncertainty budget (JCGM 100:2008; the table is in docs/reduction.md). The input covariance of the mean pressures is

    U_p = S / n_eff  +  diag(u_B² + (u_gain p̄)²)  +  (u_ref ∘ p̄)(u_ref ∘ p̄)ᵀ

with S the sample covariance of the block (so noise that moves every tap together, like a fluctuating fan, stays
correlated) and n_eff the effective number of independent scans (serial correlation, Bayley & Hammersley). u_B
is each channel's constant systematic part (the datasheet band less what its calibration replaced, the span
fit's residual, the zero's standard error, one count), u_gain the datasheet span part of a channel not spanned
(a gain error: it scales with the reading), u_ref the span reference's relative uncertainty, one error shared by
every channel spanned against the same manometer (so it cancels in Cp and stays in q). Cp is
a ratio of linear forms of the channel readings, Cp_i = n_i·p / b·p, so its sensitivities are
∂Cp_i/∂p = (n_i − Cp_i b)/q (GUM §5.1.3) and U_Cp = J U_p Jᵀ carries the correlation through the shared reference
channels (GUM §5.2.2). Each integrator is affine in Cp with weights w, so u²(C) = wᵀ U_Cp w, plus (shape-aware
fit) the integrator's own error estimate in quadrature.

Where the linearisation does not hold. Cp and the coefficients divide by q; the first-order budget drops the
terms of order (u(q)/q)² (for 1/q alone the variance grows by about 8 (u(q)/q)², and the mean shifts by
(u(q)/q)²). Past ``LINEAR_LIMIT_Q_REL`` = 0.05 (where those terms reach about 2 % of u, the precision a
two-digit u claims) the mean's Cp and coefficient uncertainties come from a propagation of distributions instead
(JCGM 101:2008, GUM Supplement 1): ``MC_DRAWS`` draws of the column means from N(p̄, U_p) (and of the static
factor, when it is the reference), each reduced by the same functions as the estimate; ``u`` is the larger
distance from the estimate to either end of the 95 % probabilistically symmetric coverage interval, divided by
1.96 (so ŷ ± 1.96 u covers that interval, its asymmetry and the shift of the distribution from ŷ). A draw with no
flow (q below the threshold) counts as an outcome off every scale; when more than 2.5 % of draws have none the
interval is unbounded and u is NaN: the number is not shown with an uncertainty. The draws are seeded from the
inputs, so the same block gives the same numbers (live and replay). ``uncertainty_method`` says which was used.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np

from taprig.physics.integration import ModalCircleIntegrator, ShapeFitIntegrator, SectionWeights, trapezoid_weights
from taprig.physics.uncertainty import effective_sample_count, propagate_covariance
from taprig.physics.walls import WallCorrection, correct_2d
from taprig.protocol import RawBlock
from taprig.physics.venturi import venturi_expansibility_u_rel, venturi_flow_u_rel
from taprig.rig import Medium, RigKind
from taprig.reduce.block import ReducedBlock, frozen_array
from taprig.reduce.flags import ChannelFlag, ScanFlag, count_flags, flag_names
from taprig.reduce.layout import ColumnPlan
from taprig.reduce.references import ONE, ReduceError


@dataclass(frozen=True, eq=False)
class Coefficients:
    """Section coefficients of one integrator with standard uncertainties [-].

    ``u_*`` combine the measurement (through the integrator's weights) and, for the shape-aware fit, the
    integrator's own error estimate ``integration_u_*``.
    """

    method: str
    cl: float
    cd_p: float
    cm_qc: float
    u_cl: float
    u_cd_p: float
    u_cm_qc: float
    integration_u_cl: float = 0.0
    integration_u_cd_p: float = 0.0
    integration_u_cm_qc: float = 0.0


@dataclass(frozen=True, eq=False)
class ReducedMean:
    """The mean of a short block with uncertainties (see the module docstring for the budget).

    Per channel (block column order): ``p_pa``, ``u_p_pa``. Per tap (integration order): ``cp``, ``u_cp``,
    ``cov_cp`` (taps × taps), ``cp_ideal`` (venturi). Scalars: ``q_pa``, ``u_q_pa``, ``v_ms``, ``re``, ``mach``,
    ``alpha_rad``; ``u_v_ms``, ``u_re`` (:func:`flow_u`: NaN where V and Re have no stated uncertainty). ``plain`` (trapezoid, always), ``shape`` (shape-aware fit, the default when the rig has a
    section shape), ``default`` (the one to show), ``corrected`` (the default after 2-D wall corrections, with
    ``wall``), balance ``lift_n``/``cl_balance``, venturi ``mass_flow_kg_s``. ``flags``: OR of the used scans' and
    the mean's own :class:`ScanFlag` bits; ``used_scans`` of ``n_scans``; ``excluded_taps`` left out of the
    integrals.
    """

    n_scans: int
    used_scans: int
    t_ns: tuple[int, int]
    tap_names: tuple[str, ...]
    column_names: tuple[str, ...]
    p_pa: np.ndarray
    u_p_pa: np.ndarray
    cp: np.ndarray
    u_cp: np.ndarray
    cov_cp: np.ndarray
    q_pa: float
    u_q_pa: float
    v_ms: float
    re: float
    mach: float
    alpha_rad: float
    plain: Coefficients | None
    shape: Coefficients | None
    corrected: Coefficients | None
    wall: WallCorrection | None
    flags: int
    excluded_taps: tuple[str, ...] = ()
    lift_n: float | None = None
    cl_balance: float | None = None
    mass_flow_kg_s: float | None = None
    cp_ideal: np.ndarray | None = None
    scan_flag_counts: dict = field(default_factory=dict)
    u_mass_flow_kg_s: float | None = None
    u_cl_balance: float | None = None
    assumptions: tuple[str, ...] = ()
    reference_note: str = ""
    calibration_warning: str = ""
    #: How u_cp and the coefficients' uncertainties were propagated ("first order (GUM)", or a Monte Carlo).
    uncertainty_method: str = "first order (GUM, JCGM 100:2008 §5)"
    #: Standard uncertainties of the speed [m/s] and the Reynolds number [-] (:func:`flow_u`; NaN: none stated).
    u_v_ms: float = math.nan
    u_re: float = math.nan

    def __post_init__(self) -> None:
        for name in ("p_pa", "u_p_pa", "cp", "u_cp", "cov_cp", "cp_ideal"):
            object.__setattr__(self, name, frozen_array(getattr(self, name)))

    @property
    def default(self) -> Coefficients | None:
        """The coefficients to show: the shape-aware fit where available, else the plain trapezoid."""
        return self.shape if self.shape is not None else self.plain

    @property
    def flag_names(self) -> tuple[str, ...]:
        """Names of the bits in :attr:`flags`."""
        return flag_names(self.flags, ScanFlag)


#: Channel flags that make a sample unusable (the reducer's own test: saturated or not finite).
_UNUSABLE = int(ChannelFlag.SATURATED | ChannelFlag.NOT_FINITE)


def _noise_covariance(p: np.ndarray, autocorrelated: bool) -> np.ndarray:
    """Type-A covariance of the column means, S / n_eff (GUM §4.2.3; n_eff per pair √(n_eff,i n_eff,j))."""
    n = p.shape[0]
    if n < 2:
        return np.zeros((p.shape[1], p.shape[1]))
    centred = p - p.mean(axis=0)
    s = centred.T @ centred / (n - 1)
    n_eff = effective_sample_count(p, axis=0) if autocorrelated else np.full(p.shape[1], float(n))
    return s / np.sqrt(np.outer(n_eff, n_eff))


def _systematic_covariance(plan: ColumnPlan, p_mean: np.ndarray) -> np.ndarray:
    """Covariance of the systematic errors of the column means [SI²] (GUM §5.2.2; budget in the module docstring).

    Constant and own-gain parts are independent between channels; the span reference's relative error is one
    error for all spanned channels, a rank-one term.
    """
    p = np.nan_to_num(p_mean)
    shared = plan.u_gain_common * p
    return np.diag(plan.u_type_b**2 + (plan.u_gain * p) ** 2) + np.outer(shared, shared)


def cp_jacobian(plan: ColumnPlan, cp: np.ndarray, q: float, dq_dp: np.ndarray) -> np.ndarray:
    """Sensitivities ∂Cp_i/∂p_j = (n_ij − Cp_i ∂q/∂p_j)/q of tap Cp to the column means (GUM §5.1.3) [1/Pa]."""
    n = plan.taps.matrix(plan.scale.size)
    return (n - np.outer(np.nan_to_num(cp), dq_dp)) / q


def _combined(weights: np.ndarray, cov: np.ndarray) -> float:
    """u = √(wᵀ U w) for one affine output [-]."""
    return float(np.sqrt(max(propagate_covariance(weights[None, :], cov)[0, 0], 0.0)))


def coefficients_of(method: str, weights: SectionWeights, cp: np.ndarray, alpha: float, cov: np.ndarray,
                    own: tuple[float, float, float] = (0.0, 0.0, 0.0), uncertainties: bool = True,
                    draws: np.ndarray | None = None) -> Coefficients:
    """Apply an affine integrator and carry the Cp covariance through its weights (own error in quadrature);
    ``uncertainties=False``: the values only, every uncertainty NaN. With Monte Carlo ``draws`` of Cp (draws ×
    taps) the measurement part is the draws' coverage interval (module docstring)."""
    res = weights.apply(cp, alpha)
    if draws is not None and uncertainties:
        d = weights.apply(draws, alpha)
        u_meas = tuple(float(_interval_u(getattr(d, name), float(getattr(res, name))))
                       for name in ("cl", "cd_p", "cm_qc"))
    elif uncertainties:
        u_meas = (_combined(weights.cl(alpha), cov), _combined(weights.cd_p(alpha), cov),
                  _combined(weights.moment, cov))
    else:
        u_meas = (float("nan"),) * 3
    u = [float(np.hypot(m, o)) for m, o in zip(u_meas, own)]
    return Coefficients(method, float(res.cl), float(res.cd_p), float(res.cm_qc), u[0], u[1], u[2], *own)


def wall_corrected(reducer, coeffs: Coefficients, alpha: float) -> tuple[Coefficients | None, WallCorrection | None]:
    """2-D wall corrections (Barlow, Rae & Pope ch. 9) of a section's coefficients, when the rig allows them.

    Uncertainties scale with the first-order correction factors (the corrections' own uncertainty is not added).
    """
    rig, g = reducer.rig, reducer.rig.geometry
    if not reducer.options.wall_corrections or rig.kind is not RigKind.AIRFOIL or rig.section is None \
            or None in (g.chord, g.tunnel_height, g.tunnel_width) or not np.isfinite(coeffs.cl):
        return None, None
    shape = rig.section.shape
    # model cross-section: the contour's (shoelace) area at unit chord, scaled by c²
    area = 0.5 * abs(float(np.dot(shape.x, np.roll(shape.y, -1)) - np.dot(shape.y, np.roll(shape.x, -1)))) * g.chord**2
    args = (g.chord, g.tunnel_height, g.tunnel_width, area, reducer.options.span_orientation)
    wc = correct_2d(coeffs.cl, alpha, coeffs.cm_qc, coeffs.cd_p, *args)
    cd_factor = float(wc.cd) / coeffs.cd_p if coeffs.cd_p else 1.0
    if np.isnan([coeffs.u_cl, coeffs.u_cd_p, coeffs.u_cm_qc]).all():  # a values-only mean: nothing to scale
        u = (float("nan"),) * 3
    else:
        unit = correct_2d(1.0, alpha, 1.0, coeffs.cd_p, *args)  # the factors multiplying Cl_u and Cm_u
        u = (abs(float(unit.cl)) * coeffs.u_cl, abs(cd_factor) * coeffs.u_cd_p,
             abs(1.0 - 2.0 * float(unit.total_blockage)) * coeffs.u_cm_qc)
    corrected = Coefficients(
        f"{coeffs.method}+walls", float(wc.cl), float(wc.cd), float(wc.cm_quarter_chord), *u,
        coeffs.integration_u_cl, coeffs.integration_u_cd_p, coeffs.integration_u_cm_qc,
    )
    return corrected, wc


def _static_factor_covariance(layout) -> np.ndarray | float:
    """Cp covariance from the stated static factor f (p∞ = room − f q): u²(f) s sᵀ with s_i = ∂Cp_i/∂f, one error
    shared by every room-referred tap (GUM §5.2.2); 0 when a channel measures the static."""
    s = layout.static_sensitivity
    if s is None or layout.static_factor_u == 0.0:
        return 0.0
    return layout.static_factor_u**2 * np.outer(s, s)


def _venturi_inputs(reducer, plan: ColumnPlan, p_mean: np.ndarray):
    """β, Δp [Pa], p1 [Pa] of a venturi's mean, and the relative standard uncertainties of C, ε, d (= D's)."""
    ven, opts = reducer.layout.venturi, reducer.options
    beta = float(np.sqrt(ven.throat_area / ven.inlet_area))
    delta = plan.taps.evaluate(p_mean[None, :])[0]
    dp = max(float(-delta[ven.throat]), 0.0)
    p1 = float(reducer.upstream_pressure(plan, p_mean[None, :])[0])
    u_eps = float(venturi_expansibility_u_rel(beta, dp, p1)) if reducer.rig.fluid.medium is Medium.AIR else 0.0
    return beta, dp, p1, opts.discharge_coefficient_u_rel, u_eps, opts.venturi_diameter_u_rel


def venturi_q_u_rel(reducer, plan: ColumnPlan, p_mean: np.ndarray, q: float) -> float:
    """Relative standard uncertainty of the venturi's inlet q from C, ε, d and D (not the pressures, which the
    Cp budget carries): q1 ∝ (C ε)² Δp β⁴/(1 − β⁴), so u²/q² = 4u²_C + 4u²_ε + (4/(1 − β⁴))² (u²_d + u²_D)
    (ISO 5167-1 §8.2's sensitivities, applied to q1 = q_m²/(2 ρ1 A1²))."""
    beta, _, _, u_c, u_eps, u_d = _venturi_inputs(reducer, plan, p_mean)
    k = 4.0 / (1.0 - beta**4)
    return float(np.sqrt(4 * u_c**2 + 4 * u_eps**2 + k**2 * 2 * u_d**2))


def venturi_mass_flow_u(reducer, plan: ColumnPlan, p_mean: np.ndarray, cov_p: np.ndarray, mass: float) -> float:
    """Standard uncertainty of the venturi's mass flow [kg/s] by ISO 5167-1 §8.2: C, ε, d, D, Δp (from the
    channels' covariance) and ρ1 (from p1's, the room pressure's and the temperature's uncertainties)."""
    ven, opts = reducer.layout.venturi, reducer.options
    beta, dp, p1, u_c, u_eps, u_d = _venturi_inputs(reducer, plan, p_mean)
    n = plan.taps.matrix(plan.scale.size)
    u_dp = float(np.sqrt(max(propagate_covariance(n[ven.throat][None, :], cov_p)[0, 0], 0.0)))
    s = plan.static_absolute.matrix(plan.scale.size)
    u_p1 = float(np.sqrt(max(propagate_covariance(s, cov_p)[0, 0], 0.0)))
    u_rho = 0.0
    if reducer.rig.fluid.medium is Medium.AIR:
        u_room = opts.ambient_pressure_u if ONE in reducer.layout.static_absolute else 0.0  # typed, not measured
        u_rho = float(np.sqrt((np.hypot(u_p1, u_room) / p1) ** 2 + (opts.temperature_u / reducer.ambient.temperature) ** 2))
    rel = venturi_flow_u_rel(beta, u_c, u_eps, u_d, u_d, u_dp / dp if dp > 0 else np.inf, u_rho)
    return float(rel * mass)


def _dq_dp(reducer, plan: ColumnPlan, delta: np.ndarray, q: float) -> np.ndarray:
    """∂q/∂p per column: the q form's coefficients, or for a venturi q ∝ Δp (inlet − throat) at fixed ε."""
    if plan.q is not None:
        return plan.q.matrix(plan.scale.size)[0]
    ven = reducer.layout.venturi
    n = plan.taps.matrix(plan.scale.size)
    differential = -delta[ven.throat]
    return -n[ven.throat] * (q / differential) if differential > 0 else np.zeros(plan.scale.size)


#: u(q)/q past which the first-order budget is replaced by a Monte Carlo (module docstring) [-].
LINEAR_LIMIT_Q_REL = 0.05
#: Draws of the Monte Carlo: the 2.5 % and 97.5 % points of 4000 draws are good to about 6 % of u, enough for
#: the one significant digit u is shown with (JCGM 101:2008 §7.2 asks 10⁶ for a 95 % interval to two digits);
#: a display makes several full means a second, so the draws are kept few.
MC_DRAWS = 4_000
FIRST_ORDER = "first order (GUM, JCGM 100:2008 §5)"


def monte_carlo_method(q_rel: float) -> str:
    """The sentence naming the Monte Carlo propagation and why it was used."""
    return (f"Monte Carlo (JCGM 101:2008, {MC_DRAWS} draws): u(q)/q = {q_rel:.2f} > {LINEAR_LIMIT_Q_REL:g}, "
            "where the first-order budget is too small")


@dataclass(frozen=True)
class _Draws:
    """Monte Carlo draws of a mean: Cp (draws × taps, NaN where a draw has no flow), q and the absolute
    freestream static p∞ [Pa] (draws,)."""

    cp: np.ndarray
    q: np.ndarray
    p_inf: np.ndarray


def _interval_u(draws: np.ndarray, estimate) -> np.ndarray:
    """u from draws along axis 0: the larger distance from ``estimate`` to either end of the 95 % symmetric
    coverage interval / 1.96 (JCGM 101:2008 §7.7); NaN draws count as off the scale on both sides."""
    d = np.asarray(draws, dtype=float)
    bad = ~np.isfinite(d)
    with np.errstate(invalid="ignore"):
        lo = np.percentile(np.where(bad, -np.inf, d), 2.5, axis=0)
        hi = np.percentile(np.where(bad, np.inf, d), 97.5, axis=0)
        u = np.maximum(hi - estimate, estimate - lo) / 1.96
    return np.where(np.isfinite(u), u, np.nan)


def _monte_carlo(reducer, plan: ColumnPlan, p_mean: np.ndarray, cov_p: np.ndarray, column_bad: np.ndarray) -> _Draws:
    """Draws of Cp and q from N(p̄, U_p) through the reducer's own Cp (module docstring), seeded by the inputs."""
    good = ~column_bad
    seed = np.frombuffer(np.nan_to_num(np.concatenate((p_mean, np.diag(cov_p)))).tobytes(), dtype=np.uint32)
    rng = np.random.default_rng(np.random.SeedSequence(seed.tolist()))
    values, vectors = np.linalg.eigh(cov_p[np.ix_(good, good)])
    root = vectors * np.sqrt(np.clip(values, 0.0, None))
    p = np.tile(np.where(good, p_mean, 0.0), (MC_DRAWS, 1))
    p[:, good] += rng.standard_normal((MC_DRAWS, int(good.sum()))) @ root.T
    cp, q, _, _ = reducer.pressure_coefficients(plan, p, np.tile(column_bad, (MC_DRAWS, 1)))
    layout = reducer.layout
    if layout.static_sensitivity is not None and layout.static_factor_u > 0.0:
        cp = cp + layout.static_factor_u * rng.standard_normal((MC_DRAWS, 1)) * np.asarray(layout.static_sensitivity)
    return _Draws(cp, np.asarray(q, dtype=float), plan.static_absolute.evaluate(p)[:, 0])


#: What a mean computed with ``uncertainties=False`` states as its uncertainty method.
VALUES_ONLY = "not computed (values only)"


def reduce_mean(reducer, block: RawBlock, alpha_rad: float | None = None, uncertainties: bool = True) -> ReducedMean:
    """Mean of ``block`` with uncertainties, both integrators and wall corrections (see the module docstring).

    Scans whose reference channels are unusable are left out of the mean; a tap with any unusable sample in the
    remaining scans is left out of the integrals (``excluded_taps``, flag DEGRADED).

    ``uncertainties=False`` computes the values only (the same numbers, by the same code, as with them) and leaves
    every uncertainty NaN (``u_mass_flow_kg_s`` None, ``uncertainty_method`` :data:`VALUES_ONLY`): the type-A
    covariance with its serial correlation, its propagation and the integrators' own error estimates are most of
    a mean's cost, and a display refreshing many times a second can take them from a recent full mean.
    """
    plan = reducer.plan(block.channels)
    counts = np.asarray(block.counts, dtype=float)
    if counts.ndim != 2 or counts.shape[1] != len(plan.channels) or counts.shape[0] == 0:
        raise ReduceError(f"block counts have shape {counts.shape}; expected (scans ≥ 1, {len(plan.channels)})")
    alpha = float(reducer.alpha_array(alpha_rad, 1)[0])
    return _mean_of(reducer, plan, reducer.reduce(block, alpha), alpha, uncertainties)


def mean_of_reduced(reducer, blocks: list[ReducedBlock], alpha_rad: float | None = None,
                    uncertainties: bool = True) -> ReducedMean:
    """:func:`reduce_mean` of the scans of ``blocks``, already reduced by ``reducer`` at ``alpha_rad`` (a live
    run's reduction thread has reduced every chunk): the same numbers as :func:`reduce_mean` of their raw scans,
    since reduction is row by row, without reducing them again. ReduceError unless every scan was reduced at
    that angle and the blocks share one channel set."""
    if not blocks:
        raise ReduceError("a mean needs at least one block of scans")
    plan = reducer.plan(blocks[0].channels)
    alpha = float(reducer.alpha_array(alpha_rad, 1)[0])
    joined = blocks[0] if len(blocks) == 1 else _Reduced(
        np.concatenate([b.t_ns for b in blocks]), np.concatenate([b.p_pa for b in blocks]),
        np.concatenate([b.channel_flags for b in blocks]), np.concatenate([b.scan_flags for b in blocks]),
        np.concatenate([b.alpha_rad for b in blocks]))
    if any(b.channels != plan.channels for b in blocks) or np.any(joined.alpha_rad != alpha):
        raise ReduceError("these blocks were not all reduced with one channel set at this angle")
    return _mean_of(reducer, plan, joined, alpha, uncertainties)


@dataclass(frozen=True, eq=False)
class _Reduced:
    """What a mean uses of reduced scans (a :class:`ReducedBlock`'s fields of those names)."""

    t_ns: np.ndarray
    p_pa: np.ndarray
    channel_flags: np.ndarray
    scan_flags: np.ndarray
    alpha_rad: np.ndarray


def _mean_of(reducer, plan: ColumnPlan, reduced, alpha: float, uncertainties: bool) -> ReducedMean:
    """The mean of reduced scans (``t_ns``, ``p_pa``, ``channel_flags``, ``scan_flags``): see :func:`reduce_mean`."""
    p, scan_flags = reduced.p_pa, reduced.scan_flags
    n_scans = p.shape[0]
    unusable = (reduced.channel_flags & _UNUSABLE) != 0  # the reducer's own mask: saturated or not finite
    ref_ok = ~np.any(unusable[:, plan.reference_columns], axis=1) if plan.reference_columns.size else \
        np.ones(n_scans, dtype=bool)
    flags = int(np.bitwise_or.reduce(scan_flags[ref_ok])) if ref_ok.any() else int(ScanFlag.REFERENCE_INVALID)
    used = p[ref_ok]
    column_bad = np.any(unusable[ref_ok], axis=0) if used.shape[0] else np.ones(p.shape[1], dtype=bool)
    clean = np.where(column_bad, 0.0, used)
    p_mean = np.where(column_bad, np.nan, clean.mean(axis=0)) if used.shape[0] else np.full(p.shape[1], np.nan)
    cp, q, tap_ok, mean_flags = reducer.pressure_coefficients(plan, p_mean[None, :], column_bad[None, :])
    cp, q, tap_ok = cp[0], float(q[0]), tap_ok[0]
    flags |= int(mean_flags[0])
    p_inf = plan.static_absolute.evaluate(p_mean[None, :])[:, 0]
    v, re, mach = (float(x[0]) for x in reducer.flow(np.array([q]), p_inf))
    flags |= int(reducer.plausibility_flags(plan, np.array([q]), np.array([v]), np.array([mach]))[0])
    usable_q = np.isfinite(cp).any()
    cov_p = None
    if uncertainties:
        cov_p = _noise_covariance(clean, reducer.options.autocorrelated_noise) + _systematic_covariance(plan, p_mean)
        cov_p[column_bad, :] = cov_p[:, column_bad] = 0.0
    if uncertainties and usable_q:
        dq = _dq_dp(reducer, plan, plan.taps.evaluate(p_mean[None, :])[0], q)
        cov_cp = propagate_covariance(cp_jacobian(plan, cp, q, dq), cov_p)
        cov_cp += _static_factor_covariance(reducer.layout)
        u_q = float(np.sqrt(propagate_covariance(dq[None, :], cov_p)[0, 0]))
        if reducer.layout.venturi is not None:  # q1 also carries C, ε, d and D (ISO 5167-1 §8.2)
            rel = venturi_q_u_rel(reducer, plan, p_mean, q)
            cov_cp += rel**2 * np.outer(np.nan_to_num(cp), np.nan_to_num(cp))
            u_q = float(np.hypot(u_q, rel * q))
        cov_cp[~tap_ok, :] = cov_cp[:, ~tap_ok] = np.nan
    else:
        cov_cp = np.full((cp.size, cp.size), np.nan)
        u_q = float("nan")
    draws, method = None, FIRST_ORDER if uncertainties else VALUES_ONLY
    if uncertainties and usable_q and reducer.layout.venturi is None and u_q > LINEAR_LIMIT_Q_REL * abs(q):
        draws = _monte_carlo(reducer, plan, p_mean, cov_p, column_bad)
        method = monte_carlo_method(u_q / abs(q))
        u_cp_lin = np.sqrt(np.diag(cov_cp))
        with np.errstate(invalid="ignore", divide="ignore"):
            scale = np.where(u_cp_lin > 0.0, _interval_u(draws.cp, cp) / u_cp_lin, np.nan)
        cov_cp = cov_cp * np.outer(scale, scale)  # first-order correlations, Monte Carlo standard uncertainties
        cov_cp[~tap_ok, :] = cov_cp[:, ~tap_ok] = np.nan
    plain, shape, excluded, integral_flags = _integrals(reducer, cp, tap_ok, alpha, cov_cp, uncertainties, draws)
    flags |= integral_flags
    default = shape if shape is not None else plain
    corrected, wall = wall_corrected(reducer, default, alpha) if default is not None else (None, None)
    lift, cl_balance = reducer.balance(plan, p_mean[None, :], np.array([q]))
    u_cl_balance = balance_cl_u(float(lift[0]), float(np.sqrt(cov_p[plan.lift_column, plan.lift_column])),
                                float(cl_balance[0]), q, u_q) if cl_balance is not None and uncertainties else None
    mass = reducer.venturi_flow(cp[None, :], np.array([q]), p_mean[None, :], plan)[0] \
        if reducer.layout.venturi is not None else None
    u_mass = venturi_mass_flow_u(reducer, plan, p_mean, cov_p, float(mass)) \
        if mass is not None and np.isfinite(mass) and usable_q and uncertainties else None
    u_p = np.sqrt(np.diag(cov_p)) if cov_p is not None else np.full(p_mean.size, np.nan)
    u_v, u_re = flow_u(reducer, q, u_q, float(p_inf[0]), draws) if uncertainties and usable_q else (math.nan,) * 2
    return ReducedMean(
        n_scans=n_scans, used_scans=int(ref_ok.sum()),
        t_ns=(int(reduced.t_ns[0]), int(reduced.t_ns[-1])), tap_names=reducer.tap_names,
        column_names=plan.column_names, p_pa=p_mean, u_p_pa=u_p, cp=cp,
        u_cp=np.sqrt(np.diag(cov_cp)), cov_cp=cov_cp, q_pa=q, u_q_pa=u_q, v_ms=v, re=re, mach=mach,
        alpha_rad=alpha, plain=plain, shape=shape, corrected=corrected, wall=wall, flags=flags,
        excluded_taps=excluded,
        lift_n=float(lift[0]) if lift is not None else None,
        cl_balance=float(cl_balance[0]) if cl_balance is not None else None, u_cl_balance=u_cl_balance,
        mass_flow_kg_s=float(mass) if mass is not None else None, u_mass_flow_kg_s=u_mass,
        cp_ideal=reducer.layout.venturi.cp_ideal if reducer.layout.venturi is not None else None,
        scan_flag_counts=count_flags(scan_flags, ScanFlag),
        assumptions=reducer.assumptions, reference_note=reducer.reference_note,
        calibration_warning=reducer.calibration_warning, uncertainty_method=method, u_v_ms=u_v, u_re=u_re,
    )


def flow_u(reducer, q: float, u_q: float, p_inf: float, draws: _Draws | None = None) -> tuple[float, float]:
    """Standard uncertainties of a mean's speed V [m/s] and Reynolds number Re [-]: ``(u_V, u_Re)``.

    Law of propagation of uncertainty (JCGM 100:2008 §5.1.2), inputs taken as uncorrelated (separate sensors):

        u²(y) = (∂y/∂q)² u²(q) + (∂y/∂T)² u²(T) + (∂y/∂p_a)² u²(p_a),   y = V or Re = ρ V L / μ

    with q [Pa] and u(q) the mean's, T [K] the run's temperature (air, or the water of a water rig) with
    ``options.temperature_u``, p_a [Pa] the room's pressure with ``options.ambient_pressure_u`` where it is typed,
    not measured (a typed room pressure is also the freestream static's datum, so p∞ moves with it). For water
    V = √(2q/ρ), so ∂V/∂q = V/(2q) and u(V)/V = u(q)/(2q); for air the reducer's isentropic speed, of which
    that is the low-Mach limit. ρ(T, p_a) and μ(T) are the reducer's fluid properties, so their dependence on
    T and p_a is carried; the sensitivities are central differences of :meth:`Reducer.flow` itself. Held fixed
    (exact): the reference length L, humidity and CO₂ fraction, γ.

    Where the mean's uncertainties come from a Monte Carlo (u(q)/q > ``LINEAR_LIMIT_Q_REL``), the q part is taken
    from the same draws instead (V and Re of every draw of q and p∞, its 95 % interval as for Cp, JCGM 101:2008
    §7.7), and the ambient part, first order and independent of the draws, is added in quadrature.

    V = √(2q/ρ) is undefined for q ≤ 0: NaN (no uncertainty stated) when q is not a positive finite number, u(q)
    is not finite, or more than 2.5 % of the draws have no flow.
    """
    nan = (math.nan, math.nan)
    if not (math.isfinite(q) and q > 0.0 and math.isfinite(u_q)):
        return nan
    base = reducer.ambient

    def vr(dq=0.0, ambient=None, dp=0.0):
        v, re, _ = reducer.flow(np.array([q + dq]), np.array([p_inf + dp]), ambient)
        return np.array([float(v[0]), float(re[0])])

    h = 1e-4 * q
    ds = (vr(h) - vr(-h)) / (2 * h)  # [∂V/∂q, ∂Re/∂q]
    opts = reducer.options
    dt = 0.01  # K
    dT = (vr(0.0, replace(base, temperature=base.temperature + dt))
          - vr(0.0, replace(base, temperature=base.temperature - dt))) / (2 * dt)
    typed = ONE in reducer.layout.static_absolute
    u_pa = opts.ambient_pressure_u if typed else 0.0
    dpa = 1.0  # Pa
    dP = (vr(0.0, replace(base, pressure=base.pressure + dpa), dpa)
          - vr(0.0, replace(base, pressure=base.pressure - dpa), -dpa)) / (2 * dpa)
    ambient_part = np.hypot(dT * opts.temperature_u, dP * u_pa)
    if draws is None:
        q_part = np.abs(ds) * u_q
    else:
        v_d, re_d, _ = reducer.flow(draws.q, draws.p_inf)
        flowing = draws.q > 0.0
        if draws.cp.shape[1]:
            flowing &= np.isfinite(draws.cp).any(axis=1)
        estimate = vr()
        q_part = np.array([float(_interval_u(np.where(flowing, d, np.nan), e)) for d, e in zip((v_d, re_d), estimate)])
    u = np.hypot(q_part, ambient_part)
    return tuple(float(x) if np.isfinite(x) else math.nan for x in u)


def _integrals(reducer, cp: np.ndarray, tap_ok: np.ndarray, alpha: float, cov_cp: np.ndarray,
               uncertainties: bool = True, draws: _Draws | None = None):
    """Plain and shape-aware coefficients of the mean Cp over the usable taps (values only: own errors NaN)."""
    contour = reducer.layout.contour
    if contour is None:
        return None, None, (), 0
    keep = tap_ok[contour.columns]
    names = tuple(sorted({reducer.tap_names[c] for c in contour.columns[~keep]}))
    flags = int(ScanFlag.DEGRADED) if names else 0
    if np.count_nonzero(keep) < reducer.options.min_taps or not np.all(np.isfinite(cp[contour.columns][keep])):
        return None, None, names, flags | int(ScanFlag.NO_INTEGRAL)
    cols = contour.columns[keep]
    cpk, covk = cp[cols], cov_cp[np.ix_(cols, cols)]
    xk, yk = contour.x_c[keep], contour.y_c[keep]
    kept = tuple(np.flatnonzero(keep).tolist())
    unknown = (float("nan"),) * 3
    drawn = None if draws is None else draws.cp[:, cols]
    plain = coefficients_of("plain", reducer.plain_weights(kept), cpk, alpha, covk,
                            trapezoid_error_estimate(xk, yk, cpk, alpha) if uncertainties else unknown,
                            uncertainties, drawn)
    fit = reducer.shape_integrator(kept)
    if fit is None:
        return plain, None, names, flags
    if uncertainties:
        result = fit.integrate(cpk, alpha)
        own = (float(result.u_cl), float(result.u_cd_p), float(result.u_cm_qc))
    else:
        own = unknown
    label = "modal" if isinstance(fit, ModalCircleIntegrator) else "shape"
    return plain, coefficients_of(label, fit.weights, cpk, alpha, covk, own, uncertainties, drawn), names, flags


def balance_cl_u(lift_n: float, u_lift_n: float, cl_balance: float, q_pa: float, u_q_pa: float) -> float | None:
    """Standard uncertainty of the balance's Cl = L / (q c b) [-] from those of the lift L [N] and of q [Pa].

    u(Cl)/|Cl| = √((u_L/L)² + (u_q/q)²) (GUM, JCGM 100:2008 §5.1.6: a product of powers, the relative
    uncertainties in quadrature; the load cell and the q sensor are separate sensors, taken as uncorrelated; chord
    and span taken as exact). None where Cl, L or q is not a finite non-zero number.

    >>> round(balance_cl_u(10.0, 0.1, 0.5, 200.0, 2.0), 6)
    0.007071
    """
    values = (lift_n, u_lift_n, cl_balance, q_pa, u_q_pa)
    if not all(math.isfinite(v) for v in values) or lift_n == 0 or q_pa == 0:
        return None
    return abs(cl_balance) * math.hypot(u_lift_n / lift_n, u_q_pa / q_pa)


def trapezoid_error_estimate(x: np.ndarray, y: np.ndarray, cp: np.ndarray, alpha: float) -> tuple[float, float, float]:
    """Discretisation error of the closed-contour trapezoid (Cl, Cd_p, Cm¼) as a standard uncertainty [-].

    Richardson's estimate for a first-order rule: the difference between the integral over every tap and the mean
    of the integrals over the two interleaved halves of the taps, |I_h − I_2h| / (2¹ − 1). First order because a
    sparse layout under-resolves the leading-edge peak (uniform-x taps converge at about first order,
    docs/REFERENCES.md); on the reference cases (Joukowski sections, 7–40 taps) the true error stays within 2.3
    of these. NaN with fewer than six taps (no halves to compare): the integral is then shown without one.
    """
    if x.size < 6:
        return (float("nan"),) * 3
    fine = trapezoid_weights(x, y).apply(cp, alpha)
    halves = [trapezoid_weights(x[k::2], y[k::2]).apply(cp[k::2], alpha) for k in (0, 1)]
    return tuple(abs(float(getattr(fine, name)) - 0.5 * sum(float(getattr(h, name)) for h in halves))
                 for name in ("cl", "cd_p", "cm_qc"))


def shape_integrator_for(reducer, keep: tuple[int, ...]) -> ShapeFitIntegrator | ModalCircleIntegrator | None:
    """A :class:`ShapeFitIntegrator` for the contour points ``keep`` of an airfoil rig, a
    :class:`ModalCircleIntegrator` (the Fourier series of a cylinder's Cp) for a cylinder with three or more
    points, else None (a wall bump: the fit's inviscid family is that of a section in a free stream)."""
    rig = reducer.rig
    if rig.kind is RigKind.CYLINDER and len(keep) >= 3:
        index = np.asarray(keep, dtype=int)
        return ModalCircleIntegrator(reducer.layout.contour.x_c[index], reducer.layout.contour.y_c[index])
    if rig.kind is not RigKind.AIRFOIL or rig.section is None or len(keep) < 3:
        return None
    tap_layout = rig.tap_layout()
    index = np.asarray(keep, dtype=int)
    # the section as built differs from the drawing by up to the rig's stated surface tolerance: the fit's
    # stated error carries what that does to the integrals (ShapeFitIntegrator, section mismatch)
    return ShapeFitIntegrator(rig.section.shape, np.asarray(tap_layout.x_c)[index], np.asarray(tap_layout.upper)[index],
                              section_tolerance=rig.section.surface_tolerance_c)
