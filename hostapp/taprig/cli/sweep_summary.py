"""The closing lines of a sweep: what :func:`taprig.analysis.analyse_points` says of its points, in words.

Only words and formatting here: every number comes from the analysis (the dashboard and the report show the same
results), each with its uncertainty, or the sentence that says why it is not there.
"""

from __future__ import annotations

import math

import numpy as np

PER_DEG = math.pi / 180


def summary_lines(records, rig, plan) -> tuple[bool, list[str], list[str]]:
    """(ok, lines for stdout, problems for stderr) for the point ``records`` of a sweep by ``plan`` on ``rig``.

    ``ok`` is False when an angle sweep of a section gives no lift curve (too few usable points).
    """
    from taprig.rig import RigKind

    lines: list[str] = []
    problems: list[str] = []
    ok = True
    if rig.kind is RigKind.AIRFOIL and plan.inner == "angle":
        groups = sorted({r.get("fan") for r in records if isinstance(r.get("fan"), (int, float))})
        for fan in groups or [None]:
            chosen = [r for r in records if fan is None or r.get("fan") == fan]
            prefix = f"fan {fan:.3g}: " if len(groups) > 1 else ""
            ok = _lift_lines(chosen, rig, prefix, lines, problems) and ok
    elif rig.kind is RigKind.VENTURI:
        _venturi_lines(records, rig, lines)
    return ok, lines, problems


def _lift_lines(records, rig, prefix: str, lines: list, problems: list) -> bool:
    from taprig.analysis import analyse_points
    from taprig.reduce.curves import THIN_AIRFOIL_SLOPE

    a = analyse_points(records, rig)
    fit = a.fit
    if fit is None:
        problems.append(f"{prefix}no lift curve: {a.reasons.get('fit', 'too few points')}")
        return False
    lines.append("")
    lines.append(f"{prefix}lift slope {fit.slope * PER_DEG:.4f} ± {fit.u_slope * PER_DEG:.4f} per degree "
                 f"(scatter {_u(fit.u_slope_scatter * PER_DEG)}, shared systematic "
                 f"{_u(fit.u_slope_systematic * PER_DEG)}) over {math.degrees(fit.alpha_range[0]):.1f}…"
                 f"{math.degrees(fit.alpha_range[1]):.1f}° (thin-airfoil theory: {THIN_AIRFOIL_SLOPE * PER_DEG:.4f}), zero lift at "
                 f"{math.degrees(fit.alpha_zero):.2f}° ± "
                 f"{math.degrees(math.hypot(_z(fit.u_alpha_zero_scatter), _z(fit.u_alpha_zero_systematic))):.2f}°"
                 + (" (angles corrected for the walls)" if a.coefficients == "best" and _corrected(a) else ""))
    stall = a.stall
    if stall is not None and stall.stalled:
        lines.append(f"{prefix}stall at {math.degrees(stall.alpha_stall):.1f}° ± "
                     f"{math.degrees(stall.resolution):.1f}° (half the spacing of the points there), Cl max "
                     f"{stall.cl_max:.3f} ± {stall.u_cl_max:.3f}" + (", abrupt" if stall.abrupt else ", gradual"))
    elif stall is not None:
        lines.append(f"{prefix}no stall within the sweep (Cl max {stall.cl_max:.3f} ± {stall.u_cl_max:.3f} at "
                     f"{math.degrees(stall.alpha_cl_max):.1f}°)")
    h = a.hysteresis
    if h is not None:
        if h.present:
            lo, hi = (math.degrees(x) for x in h.alpha_range)
            k = int(np.nanargmax(np.abs(h.delta)))
            lines.append(f"{prefix}hysteresis: up and down legs differ beyond twice their uncertainty over "
                         f"{lo:.1f}…{hi:.1f}°, by up to {h.delta[k]:.3f} ± {h.u_delta[k]:.3f} in Cl at "
                         f"{math.degrees(h.alpha[k]):.1f}°")
        else:
            lines.append(f"{prefix}no hysteresis: the up and down legs agree within twice their uncertainty")
    u = a.unsteadiness
    if u is not None and math.isfinite(u.attached_level):
        if np.any(u.unsteady):
            lines.append(f"{prefix}unsteady (separated) flow from {math.degrees(u.first_unsteady_alpha):.1f}°: the "
                         f"suction side's Cp fluctuation above {u.threshold:g}× its attached level "
                         f"({u.attached_level:.4f} rms)")
        else:
            lines.append(f"{prefix}steady flow at every point (suction-side Cp fluctuation within {u.threshold:g}× "
                         f"its attached level, {u.attached_level:.4f} rms)")
    return True


def _venturi_lines(records, rig, lines: list) -> None:
    from taprig.analysis import ISO_MACHINED, analyse_points

    a = analyse_points(records, rig)
    dc = a.discharge
    lines.append("")
    if dc is None:
        lines.append(f"discharge coefficient: {a.reasons.get('discharge', 'not measured')}")
        return
    ok = np.isfinite(dc.c)
    re = dc.re_d[ok]
    lines.append(f"discharge coefficient C = {dc.mean_c:.4f} ± {dc.u_mean_c:.4f} over Re_D {re.min():.3g}…"
                 f"{re.max():.3g} (β {dc.beta:.3f}; from the throat Cp against the inlet's own q)")
    for r, c, u in zip(dc.re_d[ok], dc.c[ok], dc.u_c[ok]):
        lines.append(f"  Re_D {r:9.3g}   C {c:.4f} ± {u:.4f}")
    iso = ISO_MACHINED
    lines.append(f"ISO 5167-4 (machined convergent): C = {iso.c:g} ± {iso.relative_uncertainty * 100:g} % for Re_D "
                 f"{iso.re_d[0]:.0e}…{iso.re_d[1]:.0e}, β {iso.beta[0]:g}…{iso.beta[1]:g}, D "
                 f"{iso.diameter_m[0] * 1e3:g}…{iso.diameter_m[1] * 1e3:g} mm"
                 + (f"; this run lies outside it: {', '.join(a.iso_outside)}" if a.iso_outside else ""))


def _z(x: float) -> float:
    return 0.0 if not math.isfinite(x) else x


def _u(x: float) -> str:
    return f"{x:.4f}" if math.isfinite(x) else "–"


def _corrected(a) -> bool:
    t = a.table
    both = np.isfinite(t.alpha_rad) & np.isfinite(t.alpha_set_rad)
    return bool(np.any(np.abs(t.alpha_rad[both] - t.alpha_set_rad[both]) > 1e-12))
