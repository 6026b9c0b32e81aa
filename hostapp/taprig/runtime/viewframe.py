"""What a viewer is sent: a run's state as plain JSON-able data, built once per display update for every viewer.

Values are SI, as the reducer gives them; the page converts units at its edge. A value that does not hold
(no flow, an invalid reference, a tap left out) is ``None`` with the reason beside it, never a plausible number:
JSON has no NaN, and a viewer must not have to guess what one would mean.
"""

from __future__ import annotations

import math

import numpy as np

from taprig.protocol import ActuatorKind
from taprig.reduce import ChannelFlag, ReducedMean, ScanFlag
from taprig.reduce.curves import reference_curves, shape_fit_curve, THIN_AIRFOIL_SLOPE


def num(x) -> float | None:
    """A finite float, else None (JSON has no NaN or infinity)."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def nums(values) -> list:
    """A list of :func:`num` of each value."""
    arr = np.asarray(values, dtype=float).ravel()
    out = arr.tolist()
    if not np.isfinite(arr).all():
        out = [v if math.isfinite(v) else None for v in out]
    return out


def pair(value, u) -> list | None:
    """``[value, uncertainty]``, or None when the value is not finite."""
    v = num(value)
    return None if v is None else [v, num(u)]


# The flow state of a mean, in words, most serious first: what the coefficients' place says instead of a number.
_FLOW_STATES = (
    (ScanFlag.REFERENCE_INVALID, "reference invalid",
     "a channel that q or the freestream static depends on is saturated or not finite"),
    (ScanFlag.BEYOND_RIG, "implausible", "a speed or Mach number beyond what this rig can make: check the "
     "calibration and the sensors"),
    (ScanFlag.REVERSED, "reversed", "q is negative beyond its noise: pitot lines swapped, or flow the wrong way"),
    (ScanFlag.NO_FLOW, "no flow", "q is below what the q sensor can tell from zero"),
)


def flow_state(mean: ReducedMean) -> tuple[str, str]:
    """``(state, why)``: "flow", or the reason no coefficient can be shown."""
    counts = mean.scan_flag_counts
    for flag, state, why in _FLOW_STATES:
        if mean.flags & flag and counts.get(flag.name, 0) * 2 >= max(mean.n_scans, 1):
            return state, why
    if mean.used_scans == 0 or not math.isfinite(mean.q_pa):
        return "no data", "no usable scans in the window"
    return "flow", ""


_SATURATED, _OUT_OF_RANGE = ChannelFlag.SATURATED.name, ChannelFlag.OUT_OF_RANGE.name


def tap_states(mean: ReducedMean, channel_flag_counts: dict[str, dict[str, int]]) -> list:
    """Per tap (Cp order): "ok", "saturated", "out of range", "left out" or "no value".

    ``channel_flag_counts`` is :meth:`ReducedBlock.channel_flag_counts` (a tap's channel column bears its name).
    """
    out = []
    col = {name: i for i, name in enumerate(mean.column_names)}
    for name in mean.tap_names:
        flags = channel_flag_counts.get(name, ())
        if _SATURATED in flags:
            out.append("saturated")
        elif _OUT_OF_RANGE in flags:
            out.append("out of range")
        elif name in mean.excluded_taps:
            out.append("left out")
        elif name not in col or not math.isfinite(mean.p_pa[col[name]]):
            out.append("no value")
        else:
            out.append("ok")
    return out


def coefficients(mean: ReducedMean, u: ReducedMean | None = None) -> dict | None:
    """The coefficients to show (wall-corrected shape fit where available) with uncertainties and method.

    ``u``: the mean whose uncertainties are shown (default ``mean`` itself; see :func:`reading`).
    """
    u = mean if u is None else u
    best, u_best = mean.corrected or mean.default, u.corrected or u.default
    if best is None:
        return None
    if u_best is None or u_best.method != best.method:
        u_best = None
    nan = math.nan
    return {"method": best.method, "cl": pair(best.cl, u_best.u_cl if u_best else nan),
            "cd_p": pair(best.cd_p, u_best.u_cd_p if u_best else nan),
            "cm_qc": pair(best.cm_qc, u_best.u_cm_qc if u_best else nan),
            "integration_u_cl": num(u_best.integration_u_cl) if u_best else None, "walls": mean.corrected is not None,
            "alpha_corrected_deg": num(math.degrees(mean.wall.alpha)) if mean.wall is not None else None,
            "plain_cl": num(mean.plain.cl) if mean.plain is not None else None}


def flow_numbers(mean: ReducedMean, density: float, u: ReducedMean | None = None) -> dict:
    """q, V, Re, Mach and ρ with the reducer's uncertainties (``u``: the mean whose uncertainties are shown,
    default ``mean``; u(V) and u(Re) are :func:`taprig.reduce.mean.flow_u`'s, None where it states none)."""
    u = mean if u is None else u
    return {"q_pa": pair(mean.q_pa, u.u_q_pa), "v_ms": pair(mean.v_ms, u.u_v_ms),
            "re": pair(mean.re, u.u_re), "mach": num(mean.mach), "rho": num(density)}


def reading(reducer, mean: ReducedMean, channel_flag_counts: dict, scan_index: tuple[int, int],
            angle_known: bool = True, uncertainty: ReducedMean | None = None,
            uncertainty_scan_index: tuple[int, int] | None = None) -> dict:
    """The numbers of one display update from the mean of the newest window of scans (see the module docstring).

    ``angle_known``: the run knows the angle of attack (an angle actuator's setpoint); else α is not shown.
    ``uncertainty``: the full mean whose uncertainties are shown beside ``mean``'s values (default ``mean``
    itself, which must then carry them): a display takes them from a recent full mean of the same run, and names
    its window (``uncertainty_window``, scans ``uncertainty_scan_index``) so that every uncertainty shown can be
    traced to the scans it describes.
    """
    u = mean if uncertainty is None else uncertainty
    if uncertainty is None or uncertainty_scan_index is None:
        uncertainty_scan_index = scan_index
    state, why = flow_state(mean)
    flowing = state == "flow"
    flow = flow_numbers(mean, reducer.fluid.density, u) if flowing else \
        {"q_pa": pair(mean.q_pa, u.u_q_pa), "rho": num(reducer.fluid.density)}
    flow["alpha_deg"] = num(math.degrees(mean.alpha_rad)) if angle_known else None
    out = {
        "window": {"t_ns": list(mean.t_ns), "scan_index": list(scan_index), "scans": mean.n_scans,
                   "used": mean.used_scans},
        "uncertainty_window": {"t_ns": list(u.t_ns), "scan_index": list(uncertainty_scan_index),
                               "scans": u.n_scans, "used": u.used_scans,
                               "method": u.uncertainty_method},
        "state": state, "why": why, "flags": list(mean.flag_names),
        "flow": flow,
        "taps": {"p_pa": _tap_pressures(reducer, mean, u), "cp": nums(mean.cp) if flowing else None,
                 "u_cp": nums(u.u_cp) if flowing else None,
                 "state": tap_states(mean, channel_flag_counts)},
        "coefficients": coefficients(mean, u) if flowing else None,
        "fit": None, "balance": None, "venturi": None,
    }
    if flowing:
        curve = shape_fit_curve(reducer, mean)
        if curve is not None:
            out["fit"] = {"x": nums(curve.x), "cp": nums(curve.y), "upper": [bool(v) for v in curve.upper]}
        if mean.cl_balance is not None:
            out["balance"] = {"lift_n": num(mean.lift_n), "cl": num(mean.cl_balance)}
        if mean.mass_flow_kg_s is not None:
            out["venturi"] = {"mass_flow_kg_s": num(mean.mass_flow_kg_s),
                              "u_mass_flow_kg_s": num(u.u_mass_flow_kg_s),
                              "volume_flow_m3_s": num(mean.mass_flow_kg_s / reducer.fluid.density)}
    return out


def _tap_pressures(reducer, mean: ReducedMean, u: ReducedMean | None = None) -> dict:
    """Each tap's mean pressure and its uncertainty [Pa] (``u``'s), in Cp order (None where the channel is not
    streamed)."""
    u = mean if u is None else u
    col = {name: i for i, name in enumerate(mean.column_names)}
    u_col = {name: i for i, name in enumerate(u.column_names)}
    p_all, u_all = nums(mean.p_pa), nums(u.u_p_pa)
    p = [p_all[col[t]] if t in col else None for t in mean.tap_names]
    uu = [u_all[u_col[t]] if t in u_col else None for t in mean.tap_names]
    return {"value": p, "u": uu}


def rig_description(reducer) -> dict:
    """The parts of the rig a viewer needs once: taps and their places, actuators, theory curves, assumptions."""
    rig = reducer.rig
    layout = rig.tap_layout()
    by_name = {t.name: t for t in rig.taps}
    taps = []
    for name in reducer.tap_names:
        tap = by_name.get(name)
        taps.append({"name": name, "channel": tap.channel if tap else None,
                     "x_c": num(tap.x_c) if tap else None,
                     "surface": tap.surface.value if tap is not None and tap.surface is not None else None,
                     "x_m": num(tap.x) if tap else None,
                     "theta_deg": num(math.degrees(tap.theta)) if tap is not None and tap.theta is not None else None})
    if layout.x_c is not None:  # the section layout gives every tap's x/c (taps given by y only included)
        for entry, x in zip(taps, layout.x_c):
            entry["x_c"] = num(x)
    actuators = [{"name": a.name, "kind": a.kind.name.lower(), "unit": "deg" if a.kind is ActuatorKind.ANGLE else a.unit,
                  "min": _shown(a, a.min), "max": _shown(a, a.max), "safe": _shown(a, a.safe)} for a in rig.actuators]
    return {
        "id": rig.id, "name": rig.name, "kind": rig.kind.value, "medium": rig.fluid.medium.value,
        "taps": taps, "actuators": actuators,
        "theory": [{"label": c.label, "x": nums(c.x), "y": nums(c.y)} for c in reference_curves(reducer)],
        "thin_airfoil_slope_per_rad": THIN_AIRFOIL_SLOPE if rig.kind.value == "airfoil" else None,
        "assumptions": list(reducer.assumptions), "calibration_warning": reducer.calibration_warning,
        "ambient": {"pressure_pa": num(reducer.ambient.pressure), "temperature_k": num(reducer.ambient.temperature),
                    "relative_humidity": num(reducer.ambient.relative_humidity), "density": num(reducer.fluid.density)},
        "has_balance": rig.balance is not None and rig.balance.lift is not None,
        "wall_corrections": bool(reducer.options.wall_corrections and rig.geometry.tunnel_height is not None
                                 and rig.kind.value == "airfoil"),
    }


def _shown(actuator, value: float) -> float:
    """An actuator value as the operator sets it: degrees for an angle, the rig file's unit otherwise."""
    return math.degrees(value) if actuator.kind is ActuatorKind.ANGLE else value


def actuator_value_from_operator(actuator, value: float) -> float:
    """The inverse of :func:`_shown`: an operator's value (degrees for an angle) → taprig's SI value."""
    return math.radians(value) if actuator.kind is ActuatorKind.ANGLE else value


def point_summary(index: int, label: str, mean: ReducedMean, commanded_alpha: float | None) -> dict:
    """One captured point for the points table and the lift curve."""
    best = mean.corrected or mean.default
    state, why = flow_state(mean)
    corrected = mean.wall.alpha if mean.corrected is not None and mean.wall is not None else None
    return {"index": index, "label": label, "state": state, "why": why,
            "alpha_deg": num(math.degrees(mean.alpha_rad)),
            "alpha_corrected_deg": num(math.degrees(corrected)) if corrected is not None else None,
            "alpha_set_deg": num(math.degrees(commanded_alpha)) if commanded_alpha is not None else None,
            "q_pa": pair(mean.q_pa, mean.u_q_pa), "v_ms": num(mean.v_ms), "re": num(mean.re),
            "cl": pair(best.cl, best.u_cl) if best is not None and state == "flow" else None,
            "cd_p": pair(best.cd_p, best.u_cd_p) if best is not None and state == "flow" else None,
            "cm_qc": pair(best.cm_qc, best.u_cm_qc) if best is not None and state == "flow" else None,
            "cl_balance": num(mean.cl_balance) if state == "flow" else None,
            "mass_flow_kg_s": num(mean.mass_flow_kg_s) if state == "flow" else None,
            "flags": list(mean.flag_names)}


def point_record_summary(index: int, label: str, record: dict) -> dict:
    """A point as stored in a session (:func:`taprig.runtime.acquisition.point_record`) for the points table."""
    best = record.get("corrected") or record.get("shape") or record.get("plain") or {}
    flags = list(record.get("flags") or [])
    # the point's flags are the OR over its scans: a single wind-off scan sets NO_FLOW, so the reducer's having made
    # coefficients (or, with no integral, a q) is what says the mean had flow
    made = best.get("cl") is not None if best else record.get("v_ms") is not None
    state = "flow" if made else "reference invalid" if "REFERENCE_INVALID" in flags else "no flow"
    flowing = state == "flow"
    alpha = record.get("alpha_rad")

    def coeff(name: str):
        return pair(best.get(name), best.get(f"u_{name}")) if flowing and best else None

    return {"index": index, "label": label, "state": state, "why": "",
            "alpha_deg": num(math.degrees(alpha)) if alpha is not None else None, "alpha_corrected_deg": None,
            "alpha_set_deg": None,
            "q_pa": pair(record.get("q_pa"), record.get("u_q_pa")), "v_ms": num(record.get("v_ms")),
            "re": num(record.get("re")), "cl": coeff("cl"), "cd_p": coeff("cd_p"), "cm_qc": coeff("cm_qc"),
            "cl_balance": num(record.get("cl_balance")) if flowing else None,
            "mass_flow_kg_s": num(record.get("mass_flow_kg_s")) if flowing else None, "flags": flags}


def sweep_results(records, rig, plan=None) -> dict:
    """What :func:`taprig.analysis.analyse_points` says of a sweep's point ``records`` on ``rig``, as the page
    shows it: the points (Re, angle, fan, leg, Cl, Cd_p, C where measured, each with its uncertainty), a venturi's
    discharge coefficient against Re_D with its mean and ISO 5167-4's range, and the lift curve of each fan setting
    of an angle sweep (one per setting of a nested sweep). Where an analysis cannot be made, ``reasons`` says why
    (name → sentence). Nothing is computed here beyond choosing the records of each fan setting."""
    from taprig.analysis import ISO_MACHINED, analyse_points, wording

    records = [r for r in records if isinstance(r, dict)]
    out: dict = {"n": len(records), "kind": rig.kind.value, "inner": getattr(plan, "inner", None),
                 "points": [], "discharge": None, "lift": [], "reasons": {}, "lines": []}
    if not records:
        return out
    a = analyse_points(records, rig)
    t = a.table
    c_of: dict[int, tuple] = {}
    dc = a.discharge
    if dc is not None:
        c_of = {i: (dc.c[i], dc.u_c[i], dc.re_d[i], dc.states[i] if i < len(dc.states) else "")
                for i in range(len(dc.c))}
        ok = np.isfinite(dc.c)
        out["discharge"] = {
            "mean_c": pair(dc.mean_c, dc.u_mean_c), "beta": num(dc.beta),
            "re_d_range": [num(dc.re_d[ok].min()), num(dc.re_d[ok].max())] if ok.any() else None,
            "iso": {"c": ISO_MACHINED.c, "u_rel": ISO_MACHINED.u_rel, "k": ISO_MACHINED.k,
                    "re_d": list(ISO_MACHINED.re_d), "beta": list(ISO_MACHINED.beta)},
            "iso_outside": list(a.iso_outside)}
    if rig.kind.value == "venturi":
        out["lines"] = list(wording.venturi_lines(a, ISO_MACHINED))
    for i in range(len(t)):
        c = c_of.get(i)
        out["points"].append({
            "number": i + 1, "label": t.labels[i], "leg": t.leg[i] or None, "fan": num(t.fan[i]),
            "alpha_deg": None if records[i].get("alpha_rad") is None else num(math.degrees(t.alpha_set_rad[i])),
            "q_pa": pair(t.q_pa[i], t.u_q_pa[i]),
            "re": pair(t.re[i], t.u_re[i]), "cl": pair(t.cl[i], t.u_cl[i]), "cd_p": pair(t.cd_p[i], t.u_cd_p[i]),
            "c": None if c is None else pair(c[0], c[1]),
            "c_state": (c[3] or None) if c is not None else None,  # a sensor state stands instead of C
            "carried": records[i].get("carried_from") is not None})
    reasons = dict(a.reasons)
    if rig.kind.value == "airfoil" and (plan is None or plan.inner == "angle"):
        groups = a.fan_groups or (None,)
        for fan in groups:
            chosen = [r for r in records if fan is None or (isinstance(r.get("fan"), (int, float))
                                                            and math.isclose(float(r["fan"]), fan))]
            g = a if len(groups) == 1 else analyse_points(chosen, rig)
            fit, stall = g.fit, g.stall
            prefix = f"fan {fan:.3g}: " if len(groups) > 1 else ""
            out["lines"] += [prefix + line for line in wording.lift_lines(g)] if fit is not None else \
                [f"{prefix}no lift curve: {g.reasons.get('fit', 'too few points')}"]
            re = g.table.re[np.isfinite(g.table.re)]
            out["lift"].append({
                "fan": fan, "points": len(chosen), "re": [num(re.min()), num(re.max())] if re.size else None,
                "slope_per_deg": pair(fit.slope * math.pi / 180, fit.u_slope * math.pi / 180) if fit else None,
                "alpha_zero_deg": pair(math.degrees(fit.alpha_zero), math.degrees(fit.u_alpha_zero)) if fit else None,
                "linear_range_deg": [num(math.degrees(x)) for x in fit.alpha_range] if fit else None,
                "cl_max": pair(stall.cl_max, stall.u_cl_max) if stall else None,
                "alpha_stall_deg": num(math.degrees(stall.alpha_stall)) if stall and stall.stalled else None,
                "stall_resolution_deg": num(math.degrees(stall.resolution)) if stall and stall.stalled else None,
                "why": g.reasons.get("fit") if fit is None else g.reasons.get("stall")})
    elif rig.kind.value == "airfoil":
        reasons["fit"] = "a fan sweep at one angle: Cl against Re (no lift slope from one angle)"
        out["lines"] = list(wording.reynolds_lines(a))
    out["reasons"] = {k: str(v) for k, v in reasons.items()}
    out["thin_airfoil_slope_per_deg"] = THIN_AIRFOIL_SLOPE * math.pi / 180
    return out
