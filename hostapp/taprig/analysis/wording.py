"""The analysis's results in words: one wording for the terminal, the handout and the dashboard. Pure.

``taprig sweep``'s closing lines, the handout's result sentences and the dashboard's lift-curve legend are all
made here, from :class:`~taprig.analysis.SweepAnalysis` (or its parts), so the three cannot say the same result
two ways. The rules, from the project's design:

- every number is written with its standard uncertainty (k = 1), the uncertainty to two significant digits and
  the value to the same decimal place (GUM, JCGM 100:2008 §7.2.6): :func:`pm`;
- a number whose uncertainty is missing or not finite is not written: the sentence says why instead, so no text
  here ever reads "nan", "inf" or "None";
- what a number rests on goes with it (the thin-airfoil comparison, the linear range and its points, whether the
  angles are corrected for the walls, the pressure-drag-only caveat, the threshold we chose);
- an analysis that could not be made is a sentence saying why (the analysis's ``reasons``), not a gap.

Settings (a commanded angle, a fan setting), geometry stated by the rig (β, D) and the constants of a theory or a
standard are written as plain numbers: they are not measured here.
"""

from __future__ import annotations

import math
from typing import Mapping

import numpy as np

from taprig.reduce.curves import THIN_AIRFOIL_SLOPE

DEG = 180.0 / math.pi
PER_DEG = math.pi / 180.0


# -- numbers ---------------------------------------------------------------------------------------------------------

def as_number(value) -> float:
    """``value`` as a float; NaN for a missing or non-numeric record value."""
    try:
        return float(value)
    except (TypeError, ValueError):
        return math.nan


def finite(*values) -> bool:
    """True when every value is a finite number."""
    return all(math.isfinite(as_number(v)) for v in values)


def decimals(u: float) -> int:
    """Decimal places that show ``u`` to two significant digits (GUM §7.2.6: two at most), 0…7."""
    if not math.isfinite(u) or u <= 0:
        return 4
    return max(0, min(7, 1 - int(math.floor(math.log10(float(f"{u:.2g}"))))))


def pm(value, u, scale: float = 1.0) -> str | None:
    """``value ± u`` (each times ``scale``) rounded to the uncertainty's two significant digits, or None when either
    is not a finite number (then the caller shows a state or a reason, never a bare number)."""
    v, e = as_number(value) * scale, abs(as_number(u) * scale)
    if not (math.isfinite(v) and math.isfinite(e)):
        return None
    d = decimals(e)
    if round(v, d) == 0.0:
        v = 0.0  # no "-0.0": a value that rounds to zero has no sign to show
    return f"{v:.{d}f} ± {e:.{d}f}"


def u_only(u, scale: float = 1.0) -> str | None:
    """An uncertainty alone to two significant digits (a part of a combined one), None when not finite."""
    e = abs(as_number(u) * scale)
    if not math.isfinite(e):
        return None
    return f"{e:.{decimals(e)}f}"


def pm_exponent(value, u) -> str | None:
    """``(m ± u_m)e k``: :func:`pm` of ``value`` and ``u`` over 10^k, k the exponent of ``value`` (a Reynolds
    number's six digits would hide the two of its uncertainty), or None as :func:`pm`."""
    v = as_number(value)
    if not math.isfinite(v) or v == 0.0:
        return None
    k = int(math.floor(math.log10(abs(v))))
    text = pm(v, u, 10.0**-k)
    return None if text is None else f"({text})e{k}"


def reynolds(value, u) -> str:
    """A Reynolds number: :func:`pm_exponent` with its uncertainty, ``≈ value (u not stated)`` for a record that
    states none (a description of the conditions, to two figures), or ``–`` when there is no value."""
    text = pm_exponent(value, u)
    if text is not None:
        return text
    v = as_number(value)
    return f"≈ {v:.1e} (u not stated)" if math.isfinite(v) else "–"


def _deg(x, places: int = 1) -> str:
    """A setting or a range end in degrees (radians in), ``?`` never: callers pass finite angles only."""
    return f"{as_number(x) * DEG:.{places}f}"


def _sentence(text: str) -> str:
    text = text.strip()
    return text + ("" if text.endswith((".", "?", "!")) else ".")


def _largest(delta, u) -> int | None:
    """Index of the largest |delta| with a finite uncertainty, None when there is none."""
    d, e = np.asarray(delta, dtype=float), np.asarray(u, dtype=float)
    ok = np.isfinite(d) & np.isfinite(e)
    if not ok.any():
        return None
    return int(np.flatnonzero(ok)[np.argmax(np.abs(d[ok]))])


# -- the lift curve ----------------------------------------------------------------------------------------------------

def walls_corrected(a) -> bool:
    """True when the analysis's coefficients (and angles) are corrected for the tunnel walls."""
    return any("walls" in m for m in a.table.method)


def slope_sentence(fit, walls: bool = False) -> str:
    """The lift slope with its uncertainty, its two parts, the linear range and thin-airfoil theory beside it."""
    u = _combined(fit.u_slope_scatter, fit.u_slope_systematic)
    value = pm(fit.slope, u, PER_DEG)
    where = (f"over {_deg(fit.alpha_range[0])}…{_deg(fit.alpha_range[1])}° ({fit.n_points} points"
             + (", angles corrected for the walls)" if walls else ")"))
    theory = f"thin-airfoil theory: 2π per radian = {THIN_AIRFOIL_SLOPE * PER_DEG:.4f} per degree"
    if value is None:
        return _sentence(f"Lift slope: no uncertainty could be stated for the line {where}, so no value is given; "
                         + theory)
    return _sentence(f"Lift slope {value} per degree ({pm(fit.slope, u)} per radian; {_parts(fit.u_slope_scatter, fit.u_slope_systematic, PER_DEG)}) "
                     f"{where}; {theory}")


def zero_lift_sentence(fit) -> str:
    """The zero-lift angle with its uncertainty and its two parts, or why there is none."""
    u = _combined(fit.u_alpha_zero_scatter, fit.u_alpha_zero_systematic)
    value = pm(fit.alpha_zero, u, DEG)
    if value is None:
        why = "the line has no slope" if not finite(fit.alpha_zero) else "no uncertainty could be stated for it"
        return _sentence(f"Zero-lift angle: not given ({why})")
    return _sentence(f"Zero-lift angle {value}° ({_parts(fit.u_alpha_zero_scatter, fit.u_alpha_zero_systematic, DEG, '°')})")


def _combined(scatter, systematic) -> float:
    """Both parts in quadrature; NaN when neither is stated (a zero here would claim a perfect number)."""
    parts = [as_number(x) for x in (scatter, systematic) if finite(x)]
    return math.hypot(*parts) if parts else math.nan


def _parts(scatter, systematic, scale: float, unit: str = "") -> str:
    s, y = u_only(scatter, scale), u_only(systematic, scale)
    return (f"scatter {s + unit if s else 'not stated (too few points)'}, "
            f"shared systematic {y + unit if y else 'not stated'}")


def stall_sentence(stall, reason: str | None = None) -> str:
    """Cl max with its uncertainty and the stall (± half the spacing of the points there), abrupt or gradual."""
    cl_max = pm(stall.cl_max, stall.u_cl_max)
    head = (f"Cl max {cl_max} at α = {_deg(stall.alpha_cl_max)}°" if cl_max is not None else
            f"Cl max: no uncertainty recorded for the highest lift (at α = {_deg(stall.alpha_cl_max)}°), "
            "so no value is given")
    if not stall.stalled:
        return _sentence(f"{head}; {reason or 'no stall within the sweep: the lift still rises at its highest angle'}")
    at = f"stall at {_deg(stall.alpha_stall)}°"
    if finite(stall.resolution):
        at += f" ± {_deg(stall.resolution)}° (half the spacing of the points there)"
    kind = ("abrupt (Cl falls by more than a fifth of Cl max within 2°, a threshold of ours)" if stall.abrupt
            else "gradual")
    return _sentence(f"{head}; {at}, {kind}")


def hysteresis_sentence(h, reason: str | None = None) -> str:
    """Whether the up and down legs differ, where, and their largest difference Cl(up) − Cl(down) with its u."""
    if h is None:
        return _sentence("Hysteresis: " + (reason or "not measured"))
    if not h.present:
        return _sentence("Hysteresis: up and down legs agree within twice their uncertainty")
    text = (f"Hysteresis: up and down legs differ beyond twice their uncertainty over "
            f"{_deg(h.alpha_range[0])}…{_deg(h.alpha_range[1])}°")
    k = _largest(h.delta, h.u_delta)
    if k is not None:
        text += f"; the largest difference Cl(up) − Cl(down) is {pm(h.delta[k], h.u_delta[k])} at α = {_deg(h.alpha[k])}°"
    return _sentence(text)


def moment_sentence(moment) -> str | None:
    """dCm¼/dα with its uncertainty (None when it has none)."""
    value = pm(moment.slope, _combined(moment.u_slope_scatter, moment.u_slope_systematic), PER_DEG)
    if value is None:
        return None
    return _sentence(f"dCm¼/dα {value} per degree (0 when the aerodynamic centre is at the quarter chord)")


def balance_sentence(b, u_cl_balance, reason: str | None = None) -> str:
    """The balance's lift against the pressures' at the points both state with an uncertainty."""
    k = None if b is None or not np.isfinite(np.asarray(u_cl_balance, dtype=float)).any() else \
        _largest(b.difference, b.u_difference)
    if k is None:
        return _sentence("Balance: " + (reason or "its uncertainty was not recorded (older session)"))
    return _sentence(f"Balance against pressures: Cl(pressures) − Cl(balance) agree within twice their uncertainty "
                     f"at {int(np.sum(b.agree))} of {np.size(b.agree)} points; the largest difference is "
                     f"{pm(b.difference[k], b.u_difference[k])} at α = {_deg(b.alpha[k])}°")


def unsteadiness_sentence(u, reason: str | None = None) -> str:
    """Where the flow turns unsteady (separated), by the indicator and the threshold we chose."""
    if u is None:
        return _sentence("Unsteadiness: " + (reason or "not recorded"))
    if not finite(u.attached_level):
        return _sentence("Unsteadiness: no attached point with a recorded pressure fluctuation to compare with")
    level = (f"{u.threshold:g}× its level in attached flow (a threshold of ours; the tubing damps fast "
             "fluctuations, so it is compared as a ratio)")
    if finite(u.first_unsteady_alpha):
        return _sentence(f"Unsteady (separated) flow from α = {_deg(u.first_unsteady_alpha)}°: the suction side's "
                         f"Cp fluctuation rose above {level}")
    if np.any(u.unsteady):
        return _sentence(f"Unsteady (separated) flow at points below α = 0°: the suction side's Cp fluctuation rose "
                         f"above {level}")
    return _sentence(f"Steady flow at every point: the suction side's Cp fluctuation stayed within {level}")


def lift_lines(a) -> list[str]:
    """A lift sweep's results in sentences: slope, zero lift, Cl max and stall, hysteresis, dCm¼/dα, balance,
    unsteadiness; each number with its uncertainty, each analysis that could not be made with its reason."""
    out = []
    if a.fit is not None:
        out += [slope_sentence(a.fit, walls_corrected(a)), zero_lift_sentence(a.fit)]
    else:
        out.append(_sentence("No lift curve: " + a.reasons.get("fit", "too few points")))
    if a.stall is not None:
        out.append(stall_sentence(a.stall, a.reasons.get("stall")))
    elif "stall" in a.reasons:
        out.append(_sentence("Stall: " + a.reasons["stall"]))
    out.append(hysteresis_sentence(a.hysteresis, a.reasons.get("hysteresis")))
    if a.moment is not None and (line := moment_sentence(a.moment)) is not None:
        out.append(line)
    if a.rig.balance is not None:
        out.append(balance_sentence(a.balance, a.table.u_cl_balance, a.reasons.get("balance")))
    out.append(unsteadiness_sentence(a.unsteadiness, a.reasons.get("unsteadiness")))
    return out


def reynolds_lines(a) -> list[str]:
    """A fan sweep at one angle (a Reynolds-number sweep): each point's coefficients with their uncertainties."""
    t = a.table
    set_deg = t.alpha_set_rad[np.isfinite(t.alpha_set_rad)]
    at = f" at α = {float(np.mean(set_deg)) * DEG:.1f}°" if set_deg.size else ""
    out = [f"A sweep of the fan{at}: the coefficients against the Reynolds number; no lift curve (one angle)."]
    for i in np.argsort(t.re, kind="stable"):
        if not finite(t.re[i]):
            continue
        out.append(_sentence(point_phrase(f"Re {reynolds(t.re[i], t.u_re[i])}",
                                          {n: (getattr(t, n)[i], getattr(t, f"u_{n}")[i])
                                           for n in ("cl", "cd_p", "cm_qc")})
                             + (f" ({t.leg[i]})" if t.leg[i] else "")))
    return out


LABELS = {"cl": "Cl", "cd_p": "Cd_p", "cm_qc": "Cm¼"}


def point_phrase(head: str, values: Mapping[str, tuple]) -> str:
    """``head, Cl v ± u, Cd_p v ± u …`` for the values that have an uncertainty (names of :data:`LABELS`)."""
    parts = [head]
    for name, (v, u) in values.items():
        text = pm(v, u)
        if text is not None:
            parts.append(f"{LABELS.get(name, name)} {text}")
    return ", ".join(parts)


def drag_point_line(label: str, coefficients: Mapping, record: Mapping, state: str = "") -> str | None:
    """One point of a cylinder: Cd_p (pressure drag only) and Re, each with its uncertainty; a point in a
    state is the state in words; None when the point has no Cd_p with an uncertainty."""
    if state:
        return _sentence(f"{label}: {state.upper()}, no numbers shown")
    cd = pm(coefficients.get("cd_p"), coefficients.get("u_cd_p"))
    if cd is None:
        return None
    return _sentence(f"{label}: Cd_p {cd} (pressure drag only), Re {reynolds(record.get('re'), record.get('u_re'))}")


# -- the venturi ---------------------------------------------------------------------------------------------------

def re_range(re, u_re) -> str:
    """``from (a ± u)ek to (b ± u)ek``: the lowest and highest Reynolds numbers of a run with their uncertainties."""
    re, u_re = np.asarray(re, dtype=float), np.asarray(u_re, dtype=float)
    ok = np.flatnonzero(np.isfinite(re))
    if not ok.size:
        return "–"
    lo, hi = ok[np.argmin(re[ok])], ok[np.argmax(re[ok])]
    if lo == hi:
        return reynolds(re[lo], u_re[lo])
    return f"from {reynolds(re[lo], u_re[lo])} to {reynolds(re[hi], u_re[hi])}"


def venturi_lines(a, iso, per_point: bool = True) -> list[str]:
    """A venturi run's results: the geometry, C with its uncertainty (or why it is not measured), each point's C
    against Re_D (``per_point``), ISO 5167-4's value and range (``iso``, :class:`~taprig.analysis.IsoVenturiRange`)
    and what of the run lies outside it."""
    s = a.stations
    if s is None:
        return ["The rig's stations have no two distinct areas: no venturi to analyse."]
    out = [f"Diameter ratio β = {s.beta:.3f}, inlet D = {s.inlet_diameter_m * 1e3:.1f} mm (the rig's geometry); "
           f"ideal throat Cp {s.cp_ideal[s.throat]:.3f} (continuity and Bernoulli, referred to the inlet)."]
    dc = a.discharge
    standard = (f"ISO 5167-4 (machined convergent): {iso.stated()} for Re_D "
                f"{iso.re_d[0]:.0e}…{iso.re_d[1]:.0e}, β {iso.beta[0]:g}…{iso.beta[1]:g}, D "
                f"{iso.diameter_m[0] * 1e3:g}…{iso.diameter_m[1] * 1e3:g} mm.")
    if dc is None:
        out.append(_sentence("C not measured: " + a.reasons.get("discharge", "no point with flow")))
        out.append(standard)
        return out
    ok = np.isfinite(dc.c) & np.isfinite(dc.u_c)
    u_re = a.table.u_re if len(a.table) == len(dc.re_d) else np.full(len(dc.re_d), math.nan)
    mean = pm(dc.mean_c, dc.u_mean_c)
    if mean is None:
        out.append("Discharge coefficient: no uncertainty could be stated, so no value is given.")
    else:
        out.append(f"Discharge coefficient C = {mean} over Re_D {re_range(dc.re_d[ok], u_re[ok])} (from the throat "
                   "Cp against the inlet's own q).")
    if per_point:
        for i in np.flatnonzero(ok)[np.argsort(dc.re_d[ok], kind="stable")]:
            out.append(f"  Re_D {reynolds(dc.re_d[i], u_re[i])}: C {pm(dc.c[i], dc.u_c[i])}")
    labels = a.table.labels if len(a.table) == len(dc.c) else ()
    for i, state in enumerate(dc.states):
        if state:
            who = f"point {labels[i]}" if i < len(labels) and labels[i] else f"point {i + 1}"
            out.append(f"  {who}: no C ({state})")
    out.append(standard)
    if a.iso_outside:
        out.append("Outside the standard's range: " + "; ".join(a.iso_outside) + " (its C does not apply there).")
    return out


# -- a session in one line (comparisons) ---------------------------------------------------------------------------

def brief(a) -> list[str]:
    """The main results of an analysis as short phrases, each number with its uncertainty (for a comparison)."""
    out = []
    fit = a.fit
    if fit is not None:
        u = _combined(fit.u_slope_scatter, fit.u_slope_systematic)
        if (v := pm(fit.slope, u, PER_DEG)) is not None:
            out.append(f"lift slope {v} per degree")
        u0 = _combined(fit.u_alpha_zero_scatter, fit.u_alpha_zero_systematic)
        if (v := pm(fit.alpha_zero, u0, DEG)) is not None:
            out.append(f"zero lift at {v}°")
    st = a.stall
    if st is not None and st.stalled:
        out.append(f"stall at {_deg(st.alpha_stall)}°" + (f" ± {_deg(st.resolution)}°" if finite(st.resolution) else ""))
    if st is not None and (v := pm(st.cl_max, st.u_cl_max)) is not None:
        out.append(f"Cl max {v}")
    dc = a.discharge
    if dc is not None and (v := pm(dc.mean_c, dc.u_mean_c)) is not None:
        out.append(f"C = {v}")
    return out
