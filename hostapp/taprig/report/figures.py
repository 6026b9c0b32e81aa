"""The handout's drawings, each onto a given matplotlib Axes, so a page and a figure alone (``--png``) are the same
drawing. Every value drawn comes from :class:`~taprig.report.content.SessionContent` (the session's points, the
analysis, the reduction's curves); points in a state (no flow, saturated …) are not drawn as numbers but listed.
"""

from __future__ import annotations

import math

import numpy as np

from taprig.analysis import ISO_MACHINED
from taprig.analysis.wording import LABELS, as_number, pm, reynolds
from taprig.reduce.curves import THIN_AIRFOIL_SLOPE
from taprig.report.content import PointView, SessionContent
from taprig.report.style import BALANCE, DOWN, GREY, INK, LOWER, ONE_WAY, THEORY, UP, UPPER, VERMILION, cycle, marker_only
from taprig.rig import RigKind

DEG = 180.0 / math.pi


def _errorbar(ax, x, y, u, style: dict, label: str | None = None, **kw):
    x, y, u = (np.asarray(v, dtype=float) for v in (x, y, u))
    y = np.where(np.isfinite(u), y, np.nan)  # a value without its uncertainty is not drawn
    ok = np.isfinite(x)  # a missing value (NaN) stays in place and breaks the line there
    if not (ok & np.isfinite(y)).any():
        return None
    order = np.argsort(x[ok], kind="stable")
    s = marker_only(style)
    return ax.errorbar(x[ok][order], y[ok][order], yerr=np.where(np.isfinite(u[ok]), u[ok], 0.0)[order], capsize=2.5,
                       ms=5, lw=1.1, elinewidth=0.8, label=label if label is not None else style.get("label"),
                       **{**s, **kw})


def best_coefficients(record: dict) -> dict:
    """The record's coefficients in the order the analysis prefers them (corrected with its angle, shape, plain)."""
    for name in ("corrected", "shape", "plain"):
        c = record.get(name)
        if name == "corrected" and record.get("wall_alpha_rad") is None:
            continue
        if isinstance(c, dict) and c.get("cl") is not None:
            return c
    for name in ("corrected", "shape", "plain"):
        if isinstance(record.get(name), dict):
            return record[name]
    return {}


def point_title(p: PointView) -> str:
    """``α +4.0° up`` from the record (the commanded angle), else the point's label."""
    alpha = as_number(p.record.get("alpha_rad"))
    fan = p.record.get("fan")
    parts = []
    if math.isfinite(alpha):
        parts.append(f"α {alpha * DEG:+.1f}°")
    if isinstance(fan, (int, float)):
        parts.append(f"fan {fan:.3g}")
    if p.leg:
        parts.append(p.leg)
    return "  ".join(parts) or p.label


# -- Cp of one point -------------------------------------------------------------------------------------------

def draw_cp_point(ax, content: SessionContent, p: PointView, legend: bool = True) -> None:
    """Cp at the taps of one point with error bars, negative up, the fit curve or the theory beside it."""
    kind = content.rig.kind
    ax.set_title(f"{p.label}" if not math.isfinite(as_number(p.record.get("alpha_rad"))) or kind is not RigKind.AIRFOIL
                 else point_title(p), fontsize=9)
    if not p.shown:
        ax.text(0.5, 0.5, f"{p.state.upper()}\nno numbers shown for this point", ha="center", va="center",
                fontsize=10, color=VERMILION, transform=ax.transAxes, fontweight="bold")
        ax.set_xticks([]), ax.set_yticks([])
        return
    layout = content.rig.tap_layout()
    cp_map, u_map = p.record.get("cp") or {}, p.record.get("u_cp") or {}
    names = list(layout.names)
    cp = np.array([as_number(cp_map.get(n)) for n in names])
    u = np.array([as_number(u_map.get(n)) for n in names])
    missing = [n for n, c in zip(names, cp) if not math.isfinite(c)]
    if kind in (RigKind.AIRFOIL, RigKind.BUMP) and layout.x_c is not None:
        x = np.asarray(layout.x_c, dtype=float)
        upper = np.asarray(layout.upper, dtype=bool) if layout.upper is not None else np.ones(x.size, dtype=bool)
        for mask, style in ((upper, UPPER), (~upper, LOWER)):
            if mask.any():
                _errorbar(ax, x[mask], cp[mask], u[mask], {**style, "ls": "none"}, label=f"{style['label']} taps")
        if p.fit is not None:
            fu = np.asarray(p.fit.upper, dtype=bool)
            ax.plot(p.fit.x[fu], p.fit.y[fu], color=UPPER["color"], ls=UPPER["ls"], lw=1.0, label="fit, upper")
            ax.plot(p.fit.x[~fu], p.fit.y[~fu], color=LOWER["color"], ls=LOWER["ls"], lw=1.0, label="fit, lower")
        ax.set_xlabel("x/c")
    elif kind is RigKind.CYLINDER and layout.theta is not None:
        theta = np.degrees(np.asarray(layout.theta, dtype=float))
        _errorbar(ax, theta, cp, u, {**UPPER, "ls": "-"}, label="measured")
        for curve in content.reference:
            ax.plot(curve.x, curve.y, label=curve.label, **THEORY)
        ax.set_xlabel("θ from the front stagnation point [°]")
    elif kind is RigKind.VENTURI and layout.x is not None:
        x = np.asarray(layout.x, dtype=float) * 1e3
        _errorbar(ax, x, cp, u, {**UPPER, "ls": "-"}, label="measured")
        for curve in content.reference:
            ax.plot(np.asarray(curve.x) * 1e3, curve.y, marker="x", label=curve.label, **THEORY)
        ax.set_xlabel("station x [mm]")
    else:
        _errorbar(ax, np.arange(cp.size), cp, u, {**UPPER, "ls": "-"}, label="measured")
        ax.set_xticks(np.arange(cp.size), names, fontsize=6, rotation=90)
    ax.invert_yaxis()  # negative Cp (suction) up
    ax.set_ylabel("Cp  (negative up)")
    ax.axhline(0.0, color=GREY, lw=0.5)
    ax.grid(True, lw=0.3, alpha=0.5)
    note = []
    c = best_coefficients(p.record)
    cl = pm(c.get("cl"), c.get("u_cl"))
    if cl is not None and kind is RigKind.AIRFOIL:
        note.append(f"Cl {cl}")
    if missing:
        note.append("no reading: " + ", ".join(missing[:6]) + (" …" if len(missing) > 6 else ""))
    if p.saturated_taps:
        note.append("saturated taps left out")
    if note:
        ax.text(0.02, 0.02, "\n".join(note), transform=ax.transAxes, fontsize=7, va="bottom", color=INK,
                bbox=dict(fc="white", ec="none", alpha=0.8))
    if legend:
        ax.legend(fontsize=6, loc="upper right", framealpha=0.85)


# -- lift curve ---------------------------------------------------------------------------------------------------

def _angle_label(content: SessionContent) -> str:
    a = content.analysis
    corrected = a is not None and any("walls" in m for m in a.table.method)
    return "α [°]" + ("  (corrected for the walls)" if corrected else "")


def draw_lift(ax, content: SessionContent) -> None:
    """Cl against α: the points (up and down legs apart), the linear fit, thin-airfoil slope, stall, balance."""
    a = content.analysis
    ax.set_title("Lift curve", fontsize=10)
    if a is None or not len(a.table):
        ax.text(0.5, 0.5, "no point with flow: no lift curve", transform=ax.transAxes, ha="center")
        return
    t = a.table
    alpha = t.alpha_rad * DEG
    if reynolds_sweep(content):
        draw_reynolds(ax, content)  # a fan sweep at one angle: the lift against the Reynolds number
        return
    legs = np.array(t.leg)
    groups = [np.ones(len(t), dtype=bool)] if len(a.fan_groups) < 2 else \
        [np.isclose(t.fan, f) for f in a.fan_groups]
    for g, group in enumerate(groups):
        name = f"fan {a.fan_groups[g]:.3g}: " if len(groups) > 1 else ""
        if (legs[group] == "down").any():
            for mask, base, word in ((legs != "down", UP, "up"), (legs == "down", DOWN, "down")):
                style = base if len(groups) == 1 else {**cycle(g), "ls": base["ls"], "marker": base["marker"]}
                if word == "down":
                    style = {**style, "mfc": "white"}
                _errorbar(ax, alpha[mask & group], t.cl[mask & group], t.u_cl[mask & group], style,
                          label=f"{name}sweep {word}")
        else:
            _errorbar(ax, alpha[group], t.cl[group], t.u_cl[group], ONE_WAY if len(groups) == 1 else cycle(g),
                      label=name + "pressure-integrated Cl")
    if content.rig.balance is not None:
        if np.isfinite(t.u_cl_balance).any():
            ok = np.isfinite(t.u_cl_balance)
            _errorbar(ax, alpha[ok], t.cl_balance[ok], t.u_cl_balance[ok], BALANCE)
        else:
            ax.text(0.98, 0.02, "balance: no uncertainty recorded, not drawn", transform=ax.transAxes, ha="right",
                    fontsize=7, color=GREY)
    fit = a.fit
    if fit is not None:
        span = np.array([fit.alpha_range[0], fit.alpha_range[1]])
        ax.plot(span * DEG, fit.at(span), color=INK, lw=1.6, ls="-",
                label=f"linear fit {fit.alpha_range[0] * DEG:.1f}…{fit.alpha_range[1] * DEG:.1f}°")
        wide = np.array([min(alpha.min(), span[0]), max(alpha.max(), span[1])]) / DEG
        ax.plot(wide * DEG, THIN_AIRFOIL_SLOPE * (wide - fit.alpha_zero), label="thin airfoil 2π through α₀",
                **THEORY)
    stall = a.stall
    if stall is not None:
        ax.plot([stall.alpha_cl_max * DEG], [stall.cl_max], marker="*", ms=13, mfc="white", mec=INK, ls="none",
                label="Cl max")
        if stall.stalled:
            ax.axvline(stall.alpha_stall * DEG, color=GREY, ls=":", lw=1.0, label="stall")
    ax.axhline(0, color=GREY, lw=0.5)
    ax.set_xlabel(_angle_label(content))
    ax.set_ylabel("Cl")
    ax.grid(True, lw=0.3, alpha=0.5)
    ax.legend(fontsize=7, loc="upper left", framealpha=0.85)


def reynolds_sweep(content: SessionContent) -> bool:
    """True for a sweep of the fan at one commanded angle (several Reynolds numbers, one α)."""
    a = content.analysis
    if a is None or len(a.table) < 2:
        return False
    set_deg = a.table.alpha_set_rad * DEG
    return bool(np.isfinite(set_deg).all() and np.ptp(set_deg) < 1e-6 and np.ptp(np.nan_to_num(a.table.re)) > 0)


def draw_reynolds(ax, content: SessionContent, name: str = "cl", label: str = "Cl") -> None:
    """A coefficient against Re for a sweep of the fan at one angle (a Reynolds-number sweep)."""
    t = content.analysis.table
    legs = np.array(t.leg)
    down = (legs == "down").any()
    for mask, style in ((legs != "down", UP if down else ONE_WAY), (legs == "down", DOWN)):
        if mask.any():
            _errorbar(ax, t.re[mask], getattr(t, name)[mask], getattr(t, f"u_{name}")[mask],
                      {**style, "label": f"{label}, {style['label']}" if down else label})
    if name == "cl" and content.rig.balance is not None and np.isfinite(t.u_cl_balance).any():
        _errorbar(ax, t.re, t.cl_balance, t.u_cl_balance, BALANCE)
    ax.set_xscale("log")
    ax.set_xlabel("Re (chord)")
    ax.set_ylabel(label)
    ax.set_title(f"{label} against Re at α = {np.nanmean(t.alpha_set_rad) * DEG:.1f}°", fontsize=9)
    ax.grid(True, lw=0.3, alpha=0.5, which="both")
    ax.legend(fontsize=7)


def draw_polar(ax, content: SessionContent) -> None:
    """Pressure drag against lift (Cd_p: taps only, no skin friction)."""
    a = content.analysis
    ax.set_title("Pressure-drag polar (no skin friction)", fontsize=9)
    if a is None or a.polar is None:
        ax.text(0.5, 0.5, (a.reasons.get("polar") if a else None) or "no polar", transform=ax.transAxes,
                ha="center", fontsize=7, wrap=True)
        return
    pol = a.polar
    ok = np.isfinite(pol.u_cd_p) & np.isfinite(pol.u_cl)  # a value without its uncertainty is not drawn
    ax.errorbar(pol.cd_p[ok], pol.cl[ok], xerr=pol.u_cd_p[ok], yerr=pol.u_cl[ok], capsize=2,
                **marker_only(ONE_WAY), ms=4, lw=1.0, elinewidth=0.7)
    ax.set_xlabel("Cd_p")
    ax.set_ylabel("Cl")
    ax.grid(True, lw=0.3, alpha=0.5)


def draw_moment(ax, content: SessionContent) -> None:
    """Cm about the quarter chord against α."""
    a = content.analysis
    ax.set_title("Pitching moment about c/4", fontsize=9)
    if a is None:
        return
    t = a.table
    _errorbar(ax, t.alpha_rad * DEG, t.cm_qc, t.u_cm_qc, ONE_WAY, label="Cm¼")
    ax.set_xlabel(_angle_label(content))
    ax.set_ylabel("Cm¼")
    ax.grid(True, lw=0.3, alpha=0.5)


def draw_unsteadiness(ax, content: SessionContent) -> None:
    """The unsteadiness indicator per point against its threshold."""
    a = content.analysis
    ax.set_title("Unsteadiness indicator", fontsize=9)
    if a is None or a.unsteadiness is None:
        ax.text(0.5, 0.5, (a.reasons.get("unsteadiness") if a else "") or "not recorded", transform=ax.transAxes,
                ha="center", va="center", fontsize=7, wrap=True)
        ax.set_xticks([]), ax.set_yticks([])
        return
    u = a.unsteadiness
    ax.plot(a.table.alpha_rad * DEG, u.indicator, **{**marker_only(ONE_WAY), "ls": "none"}, ms=4)
    ax.axhline(u.threshold, color=VERMILION, ls="--", lw=1.0, label=f"threshold {u.threshold:g}")
    ax.set_xlabel(_angle_label(content))
    ax.set_ylabel("Cp RMS / attached level")
    ax.legend(fontsize=7)
    ax.grid(True, lw=0.3, alpha=0.5)


# -- venturi -------------------------------------------------------------------------------------------------------

def draw_venturi_cp(ax, content: SessionContent) -> None:
    """Measured Cp of every point along the stations beside the ideal (continuity + Bernoulli)."""
    layout = content.rig.tap_layout()
    x = np.asarray(layout.x, dtype=float) * 1e3
    ax.set_title("Pressure along the venturi: measured and ideal", fontsize=10)
    for i, p in enumerate(content.shown):
        cp_map, u_map = p.record.get("cp") or {}, p.record.get("u_cp") or {}
        cp = [as_number(cp_map.get(n)) for n in layout.names]
        u = [as_number(u_map.get(n)) for n in layout.names]
        _errorbar(ax, x, cp, u, cycle(i), label=p.label)
    for curve in content.reference:
        ax.plot(np.asarray(curve.x) * 1e3, curve.y, label=curve.label, **{**THEORY, "color": INK, "lw": 1.6})
    ax.invert_yaxis()
    ax.set_xlabel("station x [mm]")
    ax.set_ylabel("Cp referred to the inlet  (negative up)")
    ax.grid(True, lw=0.3, alpha=0.5)
    ax.legend(fontsize=7)


def draw_venturi_flow(ax, content: SessionContent) -> None:
    """Mass flow of each point against its q, with its uncertainty."""
    ax.set_title("Flow rate with its uncertainty", fontsize=10)
    q, m, u = [], [], []
    for p in content.shown:
        q.append(as_number(p.record.get("q_pa")))
        m.append(as_number(p.record.get("mass_flow_kg_s")) * 1e3)
        u.append(as_number(p.record.get("u_mass_flow_kg_s")) * 1e3)
    q, m, u = (np.array(v) for v in (q, m, u))
    ok = np.isfinite(u)
    if not ok.any():
        ax.text(0.5, 0.5, "no flow rate with an uncertainty recorded", transform=ax.transAxes, ha="center")
        return
    _errorbar(ax, q[ok], m[ok], u[ok], ONE_WAY, label="mass flow (ISO 5167-4)")
    ax.set_xlabel("inlet dynamic pressure q [Pa]")
    ax.set_ylabel("mass flow [g/s]")
    ax.grid(True, lw=0.3, alpha=0.5)
    ax.legend(fontsize=7)


def draw_discharge(ax, content: SessionContent) -> None:
    """C against Re_D beside ISO 5167-4's value for a machined convergent and the range where it holds."""
    a = content.analysis
    ax.set_title("Discharge coefficient against Re_D", fontsize=10)
    iso = ISO_MACHINED
    band = iso.band()  # the standard's stated 1 % is already at about 95 % (k = 2): not doubled again
    ax.fill_between(iso.re_d, [band[0]] * 2, [band[1]] * 2, fc="#e6e6e6", ec=GREY, hatch="///", lw=0.6,
                    label=f"ISO 5167-4: {iso.stated()}\nfor Re_D {iso.re_d[0]:.0e}…{iso.re_d[1]:.0e}")
    ax.plot(iso.re_d, [iso.c] * 2, color=INK, lw=0.8)
    dc = a.discharge if a is not None else None
    if dc is not None:
        _errorbar(ax, dc.re_d, dc.c, dc.u_c, ONE_WAY, label="measured C")
        ax.set_xlim(min(np.nanmin(dc.re_d) * 0.7, iso.re_d[0] * 0.5), iso.re_d[1] * 1.5)
    else:
        reason = (a.reasons.get("discharge") if a is not None else None) or "no point with flow"
        ax.text(0.5, 0.5, "C not measured:\n" + "\n".join(_lines(reason, 55)), transform=ax.transAxes,
                ha="center", va="center", fontsize=7, bbox=dict(fc="white", ec=GREY))
        ax.set_xlim(1e4, iso.re_d[1] * 1.5)
    ax.set_xscale("log")
    ax.set_xlabel("Re_D (inlet)")
    ax.set_ylabel("C")
    ax.grid(True, lw=0.3, alpha=0.5, which="both")
    ax.legend(fontsize=7, loc="lower right")


def _lines(text: str, width: int) -> list[str]:
    from taprig.report.style import wrap

    return wrap(text, width)


# -- rig sketch, calibration, comparison ---------------------------------------------------------------------------

def draw_rig(ax, content: SessionContent) -> None:
    """The rig as :func:`taprig.rig.picture.rig_picture` places it: walls, model, taps, flow direction."""
    from matplotlib.patches import Polygon

    from taprig.rig.picture import rig_picture

    pic = rig_picture(content.rig, 0.0)
    for wall in pic.walls:
        ax.plot([p[0] for p in wall], [p[1] for p in wall], color="#444444", lw=2.0)
    if pic.outline:
        ax.add_patch(Polygon(pic.outline, closed=True, fc="#d9dde3", ec=INK, lw=0.8))
    for tap in pic.taps:
        if tap.x is not None and tap.y is not None:
            style = LOWER if tap.surface == "lower" else UPPER
            ax.plot([tap.x], [tap.y], marker=style["marker"], ms=3, mfc=style["mfc"], mec=style["color"], ls="none")
    (x0, y0), (x1, y1) = pic.flow
    ax.annotate("", xy=(x1, y1), xytext=(x0, y0), arrowprops=dict(arrowstyle="-|>", color=GREY, lw=1.0))
    ax.text(x0, y0, "flow ", ha="right", va="center", fontsize=7, color=GREY)
    xmin, xmax, ymin, ymax = pic.extent
    ax.set_xlim(xmin, xmax)
    ax.set_ylim(ymin, ymax)
    ax.set_aspect("equal", adjustable="box")
    ax.set_axis_off()
    ax.set_title("The rig, to scale", fontsize=8)


def draw_calibration(ax, content: SessionContent) -> None:
    """Per channel: the zero's standard error [counts] and, for spanned channels, the span fit's largest residual
    [% FS] — the calibration's own statistics, as stored with the session."""
    cal = content.calibration
    ax.set_title("Calibration residuals per channel", fontsize=8)
    if cal is None or not cal.channels:
        ax.text(0.5, 0.5, "no calibration stored: nominal transfer functions,\ndatasheet uncertainties",
                ha="center", va="center", fontsize=7, transform=ax.transAxes)
        ax.set_xticks([]), ax.set_yticks([])
        return
    names = list(cal.channels)
    zero = np.array([as_number(cal.channels[n].zero_std_error) for n in names])
    lin = np.array([as_number(cal.channels[n].linearity_pct_fs) for n in names])
    pos = np.arange(len(names))
    ax.bar(pos - 0.2, np.nan_to_num(zero), width=0.4, color="white", edgecolor=INK, hatch="///",
           label="zero std. error [counts]")
    ax.set_xticks(pos, names, rotation=90, fontsize=6)
    if np.nanmax(np.nan_to_num(zero)) > 0:
        ax.set_yscale("log")  # channels of different converters differ by decades in counts
    ax.set_ylabel("counts", fontsize=7)
    ax.tick_params(labelsize=6)
    handles, labels = ax.get_legend_handles_labels()
    if np.isfinite(lin).any():
        ax2 = ax.twinx()
        ax2.bar(pos + 0.2, np.nan_to_num(lin), width=0.4, color=GREY, label="span fit, largest residual [% FS]")
        ax2.set_ylabel("% FS", fontsize=7)
        ax2.tick_params(labelsize=6)
        h2, l2 = ax2.get_legend_handles_labels()
        handles, labels = handles + h2, labels + l2
    ax.legend(handles, labels, fontsize=6, loc="upper right")


def comparison_value(content: SessionContent) -> tuple[str, np.ndarray, np.ndarray] | None:
    """What one session contributes to a comparison: (name, values, uncertainties) over its shown points of the
    quantity a rig of its kind is read by: its headline coefficient (RigKind.coefficients: an airfoil's Cl, a
    cylinder's Cd_p), a venturi's mass flow; None for a kind that claims neither (a bump: its Cp overlay only)."""
    shown = content.shown
    if content.rig.kind is RigKind.VENTURI:
        return ("mass flow [g/s]", np.array([as_number(p.record.get("mass_flow_kg_s")) * 1e3 for p in shown]),
                np.array([as_number(p.record.get("u_mass_flow_kg_s")) * 1e3 for p in shown]))
    if not content.rig.kind.coefficients:
        return None
    name = content.rig.kind.coefficients[0]
    vals = [best_coefficients(p.record) for p in shown]
    return (LABELS[name], np.array([as_number(c.get(name)) for c in vals]),
            np.array([as_number(c.get(f"u_{name}")) for c in vals]))


def comparison_x(content: SessionContent, align: str) -> np.ndarray:
    """Each shown point's place on the comparison's axis: the commanded α [°] or q [Pa]."""
    if align == "alpha":
        return np.array([as_number(p.record.get("alpha_rad")) * DEG for p in content.shown])
    return np.array([as_number(p.record.get("q_pa")) for p in content.shown])


def draw_comparison(ax, contents: list[SessionContent], align: str) -> str:
    """Several sessions on one axes, aligned by α or by q; returns why nothing was drawn ("" when something was):
    sessions of a kind with no headline quantity (:func:`comparison_value`) are left off."""
    names = set()
    for i, c in enumerate(contents):
        value = comparison_value(c)
        if value is None:
            continue
        name, y, u = value
        names.add(name)
        x = comparison_x(c, align)
        re = np.array([as_number(p.record.get("re")) for p in c.shown])
        re_text = ""
        if np.isfinite(re).any():  # the Re of the session's median point, with its uncertainty
            k = int(np.nanargmin(np.abs(re - np.nanmedian(re))))
            re_text = f", Re {reynolds(re[k], c.shown[k].record.get('u_re'))}"
        _errorbar(ax, x, y, np.where(np.isfinite(u), u, np.nan), cycle(i), label=f"{c.path.name}{re_text}")
    ax.set_xlabel("α commanded [°]" if align == "alpha" else "q [Pa]")
    if not names:
        return (f"a {contents[0].rig.kind.value} rig claims no coefficient (taprig check says what each kind "
                "computes), so the sessions are compared by their Cp alone")
    ax.set_ylabel(" / ".join(sorted(names)))
    ax.set_title("Sessions compared, aligned by " + ("angle of attack" if align == "alpha" else "dynamic pressure"),
                 fontsize=10)
    ax.axhline(0, color=GREY, lw=0.5)
    ax.grid(True, lw=0.3, alpha=0.5)
    ax.legend(fontsize=7)
    return ""


# -- Cp of several sessions at a shared angle (or q) --------------------------------------------------------------

def _align_value(p: PointView, align: str) -> float:
    """A point's place on the comparison's axis: its commanded α [°] or its q [Pa]."""
    if align == "alpha":
        return as_number(p.record.get("alpha_rad")) * DEG
    return as_number(p.record.get("q_pa"))


def _step(values: np.ndarray, noise: float) -> float:
    """The sweep's step: the smallest gap between its distinct values (values closer than ``noise`` are one
    setting); inf for a session at one setting."""
    v = np.sort(values[np.isfinite(values)])
    gaps = np.diff(v)
    gaps = gaps[gaps > noise]
    return float(gaps.min()) if gaps.size else math.inf


def overlay_points(contents: list[SessionContent], align: str) -> tuple[float | None, list[PointView], str]:
    """The point of each session at an angle (or q) they all share, for :func:`draw_cp_overlay`:
    ``(shared value, one point per session, "")``, or ``(None, [], why)`` in words.

    Points are shared when they lie within half the finest sweep step of the first session's point (for q, and
    never closer than three times the largest stated u(q), so that one fan setting's noise is not a step). Of the
    shared values, the one nearest the middle of the first session's linear lift range is taken (attached flow),
    else the one nearest its median; among several matching points of a session (q of an angle sweep), the one
    nearest the first session's angle.
    """
    kinds = {c.rig.kind for c in contents}
    if len(kinds) > 1:
        return None, [], ("the sessions are of different kinds of model (" + ", ".join(sorted(k.value for k in kinds))
                          + "): their Cp cannot be overlaid")
    pts = [[p for p in c.shown if math.isfinite(_align_value(p, align))] for c in contents]
    if any(not p for p in pts):
        return None, [], "a session has no point with numbers to overlay"
    x = [np.array([_align_value(p, align) for p in ps]) for ps in pts]
    if align == "alpha":
        noise = 1e-3
    else:
        u_q = [as_number(p.record.get("u_q_pa")) for ps in pts for p in ps]
        noise = 3 * max([u for u in u_q if math.isfinite(u)] or [0.0])
    steps = [_step(v, noise) for v in x]
    finest = min(steps)
    tol = max(0.5 * finest if math.isfinite(finest) else 0.0, noise, 1e-6 if align == "alpha" else 0.0)
    a0 = [as_number(p.record.get("alpha_rad")) for p in pts[0]]
    first = contents[0].analysis
    if align == "alpha" and first is not None and first.fit is not None:
        centre = 0.5 * (first.fit.alpha_range[0] + first.fit.alpha_range[1]) * DEG
    else:
        centre = float(np.median(x[0]))
    for k in np.argsort(np.abs(x[0] - centre), kind="stable"):
        chosen = [pts[0][k]]
        for ps, v in zip(pts[1:], x[1:]):
            near = np.flatnonzero(np.abs(v - x[0][k]) <= tol)
            if not near.size:
                break
            da = np.array([abs(as_number(ps[j].record.get("alpha_rad")) - a0[k]) for j in near])
            order = np.lexsort((np.abs(v[near] - x[0][k]), np.nan_to_num(da, nan=np.inf)))
            chosen.append(ps[near[order[0]]])
        else:
            return float(x[0][k]), chosen, ""
    what = "angle of attack" if align == "alpha" else "dynamic pressure"
    within = (f"{tol:.2g}°" if align == "alpha" else f"{tol:.3g} Pa")
    return None, [], (f"the sessions share no {what}: no point of every session lies within {within} of another's "
                      "(half the finest sweep step), so no Cp is overlaid")


def draw_cp_overlay(ax, contents: list[SessionContent], align: str) -> str:
    """Cp of each session's point at a shared angle (or q), each with its error bars: sessions told apart by
    colour and marker shape, surfaces by fill and line style (upper filled and solid, lower open and dashed, as on
    the Cp pages). Returns "" when drawn, else the sentence why not (nothing drawn)."""
    value, points, why = overlay_points(contents, align)
    if value is None:
        return why
    for i, (c, p) in enumerate(zip(contents, points)):
        style = cycle(i)
        layout = c.rig.tap_layout()
        cp_map, u_map = p.record.get("cp") or {}, p.record.get("u_cp") or {}
        cp = np.array([as_number(cp_map.get(n)) for n in layout.names])
        u = np.array([as_number(u_map.get(n)) for n in layout.names])
        alpha = as_number(p.record.get("alpha_rad"))
        q = pm(p.record.get("q_pa"), p.record.get("u_q_pa"))
        name = (f"{c.path.name}, {p.label}: "
                + (f"α {alpha * DEG:.1f}°, " if math.isfinite(alpha) and "α" not in p.label else "")
                + (f"q {q} Pa" if q is not None else "q without its uncertainty"))
        if layout.x_c is not None:
            x = np.asarray(layout.x_c, dtype=float)
            upper = np.asarray(layout.upper, dtype=bool) if layout.upper is not None else np.ones(x.size, dtype=bool)
            for mask, surface, fill, ls in ((upper, "upper", style["color"], "-"), (~upper, "lower", "white", "--")):
                if mask.any():
                    _errorbar(ax, x[mask], cp[mask], u[mask], {**style, "mfc": fill, "ls": ls},
                              label=f"{name}, {surface}" if layout.upper is not None else name)
            ax.set_xlabel("x/c")
        elif layout.theta is not None:
            _errorbar(ax, np.degrees(np.asarray(layout.theta, dtype=float)), cp, u, style, label=name)
            ax.set_xlabel("θ from the front stagnation point [°]")
        elif layout.x is not None:
            _errorbar(ax, np.asarray(layout.x, dtype=float) * 1e3, cp, u, style, label=name)
            ax.set_xlabel("station x [mm]")
        else:
            _errorbar(ax, np.arange(cp.size), cp, u, style, label=name)
    shared = f"a shared angle, α = {value:.1f}°" if align == "alpha" else "a shared dynamic pressure (q ± u below)"
    ax.set_title(f"Cp of each session at {shared}", fontsize=9)
    ax.invert_yaxis()
    ax.set_ylabel("Cp  (negative up)")
    ax.axhline(0.0, color=GREY, lw=0.5)
    ax.grid(True, lw=0.3, alpha=0.5)
    ax.legend(fontsize=6, loc="best", framealpha=0.85)
    return ""
