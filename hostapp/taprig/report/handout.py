"""The handout: a PDF of one or more sessions (``write_handout``) and the figures alone (``write_figures``).

Pages, in order, for each session: the cover (rig, date, ambient conditions, the reference-pressure assumption,
what the numbers rest on and what they omit, the calibration with its residuals, the link's counters, the safety
note); the lift curve (airfoils) or the venturi page or the Cp of every point against theory (cylinder, bump); the
Cp distribution of every point; the table of points with their uncertainties and the link's counters. With several
sessions a comparison page follows the first cover.

Drawing uses matplotlib's Agg canvas and its PDF backend directly (no display, no global pyplot state), so it runs
on a server thread as well as in a terminal.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path
from typing import Callable, Sequence

import numpy as np

from taprig.analysis import ISO_MACHINED, wording
from taprig.analysis.wording import as_number, pm, reynolds
from taprig.physics.units import Unit, from_si
from taprig.report import figures as F
from taprig.report.content import HandoutError, SessionContent, load_session
from taprig.report.style import GREY, INK, VERMILION, Writer, new_figure, new_page
from taprig.rig import RigKind

ALIGN_CHOICES = ("alpha", "q")
CP_PER_PAGE = 6
ROWS_PER_PAGE = 34

#: The safety note every handout carries (README, Safety, in short): a rig with a fan and a servo moves.
SAFETY = ("Safety. A bench rig's fan, its mains wiring and any compressed air can hurt people. Run fans only with "
          "their guards on, inlet and outlet; keep hair, sleeves, cables and fingers clear, and wait for the rotor "
          "to stop before reaching in. A computer fan's PWM input runs the fan at full speed while the line is not "
          "driven: wire it to fail off. A servo's safe value is a position: keep hands out of the test section "
          "whenever the board has power. Eye protection with compressed air. The board's watchdog is a "
          "convenience, not a safety device: a hardware stop stays in reach. Local codes, your institution's rules "
          "and your supervisor's instructions come first.")


@dataclass(frozen=True)
class Figure:
    """One drawing of the handout: a file name (for ``--png``), a title, and how to draw it onto an Axes."""

    name: str
    draw: Callable


def load_sessions(paths: Sequence[str | Path], coefficients: str = "best") -> list[SessionContent]:
    """Every session of ``paths`` read for a handout (:class:`HandoutError` naming the first that cannot be)."""
    if not paths:
        raise HandoutError("no session file given", 2)
    return [load_session(p, coefficients) for p in paths]


# -- text blocks ---------------------------------------------------------------------------------------------------

def counters_lines(c: SessionContent) -> tuple[bool, list[str]]:
    """(whole, sentences) on the link's counters from a fresh decode of every stored byte (as ``taprig info``)."""
    s = c.summary
    whole = not any(s[k] for k in ("crc_errors", "framing_errors", "gaps", "frames_lost", "scans_lost")) \
        and not s["link_outages"] and s["counters_match"] is not False and not s["recording_error"]
    lines = [f"scans {s['scans']}, frames {s['frames']}; CRC errors {s['crc_errors']}, framing errors "
             f"{s['framing_errors']}, gaps {s['gaps']}, frames lost {s['frames_lost']}, scans lost {s['scans_lost']}, "
             f"board resets {s['resets']}, link outages {s['link_outages']}."]
    if s["counters_match"] is None:
        lines.append("The live run stored no counters at stop (it did not end cleanly): these come from the file.")
    elif s["counters_match"]:
        lines.append("The live run's counters stored at stop agree with this decode.")
    else:
        lines.append("The live run's counters differ from this decode in: " + ", ".join(s["counters_differing"]) + ".")
    if s["recording_error"]:
        lines.append(f"Recording error: {s['recording_error']}.")
    lines.insert(0, "The record is whole: every frame arrived and decoded, nothing lost." if whole else
                 "THE RECORD IS NOT WHOLE: read the counts below before trusting the points.")
    return whole, lines


def rests_on(c: SessionContent) -> tuple[list[str], list[str]]:
    """What the numbers rest on and what they omit, in sentences."""
    rig, a = c.rig, c.analysis
    rest = [f"{s[0].upper()}{s[1:]}." if not s.endswith(".") else s for s in c.assumptions]
    windows = sorted({as_number(p.record.get("window_s")) for p in c.points if math.isfinite(as_number(p.record.get("window_s")))})
    methods_u = sorted({str(p.record.get("uncertainty_method") or "first order (GUM, JCGM 100:2008 §5)")
                        for p in c.shown})
    if windows:
        rest.append(f"Each point is the mean of {', '.join(f'{w:g}' for w in windows)} s of scans taken once the flow "
                    "was steady; every ± is a standard uncertainty (k = 1), the sensors' shared (systematic) errors "
                    "included, propagated by: " + "; ".join(methods_u) + ".")
    methods = sorted({m for m in (a.table.method if a is not None else ()) if m})
    if methods:
        words = {"plain": "the trapezoid over the taps", "shape": "the shape-aware fit through the taps",
                 "shape+walls": "the shape-aware fit through the taps, with 2-D wall corrections",
                 "plain+walls": "the trapezoid over the taps, with 2-D wall corrections",
                 "modal": "the Fourier-series (modal) fit of the cylinder's Cp through the taps"}
        rest.append("Coefficients: " + "; ".join(words.get(m, m) for m in methods) + ".")
    omit = []
    if "cd_p" in rig.kind.coefficients:
        omit.append("Cd_p is pressure drag only: the taps do not see skin friction, so it is not the section's drag.")
    if rig.kind is RigKind.AIRFOIL:
        omit.append("Cl and Cm are of the midspan section (2-D), from the taps' pressures alone.")
        if not any("walls" in m for m in methods):
            omit.append("No wall corrections are applied to these coefficients.")
    if rig.balance is not None:
        omit.append("The balance sees the whole model with its end gaps and support, the taps only the midspan.")
    if rig.kind is RigKind.VENTURI and a is not None and "discharge" in a.reasons:
        omit.append(a.reasons["discharge"][0].upper() + a.reasons["discharge"][1:] + ".")
    omit.append("The tubing between taps and sensors damps fast fluctuations: unsteadiness is compared as a ratio "
                "to attached flow, not as a level.")
    states = [p for p in c.points if not p.shown]
    if states:
        words = sorted({p.state for p in states})
        omit.append(f"{len(states)} of {len(c.points)} points are in a state ({', '.join(words)}): they are named in "
                    "the table and left out of every plot and fit.")
    return rest, omit


def _ambient_lines(c: SessionContent) -> list[str]:
    amb = c.ambient
    t = float(from_si(amb.temperature, Unit.CELSIUS))
    lines = [f"pressure {float(from_si(amb.pressure, Unit.HPA)):.1f} hPa, temperature {t:.1f} °C"
             + (f", relative humidity {100 * amb.relative_humidity:.0f} %" if c.rig.fluid.medium.value == "air" else "")
             + f"; {c.rig.fluid.medium.value} density {c.density:.4f} kg/m³."]
    if not c.ambient_stored:
        lines.append("The session stored no ambient conditions: these are the rig file's defaults.")
    return lines


def _calibration_lines(c: SessionContent) -> list[str]:
    cal = c.calibration
    out = []
    if c.calibration_failed:
        out.append("THE CALIBRATION FAILED ITS OWN CHECKS (used because forced): no number of this session is shown.")
    if cal is None:
        out.append("No calibration stored: the sensors' nominal transfer functions and datasheet uncertainties.")
        return out
    levels: dict[str, list[str]] = {}
    for name, ch in cal.channels.items():
        levels.setdefault(ch.level.name.lower(), []).append(name)
    out.append(f"Calibration of {cal.date:%Y-%m-%d %H:%M} UTC{(' (' + cal.operator_note + ')') if cal.operator_note else ''}: "
               + "; ".join(f"{level}: {len(names)} channel{'s' if len(names) != 1 else ''}"
                           for level, names in sorted(levels.items())) + ".")
    if cal.flagged:
        out.append("Flagged: " + "; ".join(f"{n} ({', '.join(f)})" for n, f in cal.flagged.items()) + ".")
    return out


# -- pages ---------------------------------------------------------------------------------------------------------

def _started(meta: dict) -> str:
    text = meta.get("started_utc") or ""
    try:
        return datetime.fromisoformat(text).strftime("%Y-%m-%d %H:%M UTC")
    except ValueError:
        return text or "unknown"


def cover_page(c: SessionContent, others: Sequence[SessionContent] = ()):
    """Page 1 of a session: what, when, in what air, on what assumptions, how calibrated, how whole, and safety."""
    fig = new_page()
    w = Writer(fig, y=0.965)
    fig.text(0.07, w.y, c.title, fontsize=17, fontweight="bold", va="top", color=INK)
    w.y -= w.line_height(17) * 1.1
    kind = c.rig.kind.value
    w.para(f"Handout of session {c.path.name}  ·  rig {c.rig.id} ({kind})  ·  started {_started(c.meta)}  ·  "
           f"{c.summary['duration_s']:.0f} s recorded  ·  {len(c.shown)} of {len(c.points)} points with numbers",
           size=8.5, color=GREY)
    if others:
        w.para("Compared on page 2 with: " + ", ".join(o.path.name for o in others) + ".", size=8.5, color=GREY)
    w.heading("What the numbers rest on")
    rest, omit = rests_on(c)
    w.para("Reference pressure: " + (c.assumptions[0] if c.assumptions else "not stated") + ".", bold=True)
    w.bullets(rest[1:])
    w.heading("What they omit")
    w.bullets(omit)
    w.heading("Ambient conditions")
    for line in _ambient_lines(c):
        w.para(line)
    w.heading("Calibration")
    for line in _calibration_lines(c):
        w.para(line, color=VERMILION if line.isupper() or line.startswith("THE") else INK)
    top = w.y
    ax = fig.add_axes([0.10, top - 0.20, 0.36, 0.16])
    F.draw_calibration(ax, c)
    ax_rig = fig.add_axes([0.55, top - 0.22, 0.40, 0.20])
    F.draw_rig(ax_rig, c)
    w.y = top - 0.255
    w.heading("The record")
    whole, lines = counters_lines(c)
    w.para(lines[0], bold=True, color=INK if whole else VERMILION)
    for line in lines[1:]:
        w.para(line)
    w.gap()
    fig.patches  # noqa: B018 (the box below is drawn in figure coordinates)
    from matplotlib.patches import FancyBboxPatch

    box_top = w.y - 0.005
    w.x += 0.015
    w.y -= 0.012
    w.para("Safety", size=9, bold=True, color=VERMILION)
    w.para(SAFETY.removeprefix("Safety. "), size=7.5, width=125)
    fig.add_artist(FancyBboxPatch((0.07, w.y - 0.004), 0.86, box_top - w.y + 0.002, boxstyle="round,pad=0.004",
                                  transform=fig.transFigure, fc="none", ec=VERMILION, lw=1.0))
    fig.text(0.5, 0.02, f"taprig handout · {c.path.name} · page 1", ha="center", fontsize=6, color=GREY)
    return fig


def _page_with(c: SessionContent, title: str, n: int):
    fig = new_page()
    fig.text(0.07, 0.975, title, fontsize=13, fontweight="bold", va="top")
    fig.text(0.07, 0.952, f"{c.title} · {c.path.name}", fontsize=7, va="top", color=GREY)
    fig.text(0.5, 0.02, f"taprig handout · {c.path.name} · page {n}", ha="center", fontsize=6, color=GREY)
    return fig


def _results(fig, lines: list[str], y: float, size: float = 8.0) -> None:
    w = Writer(fig, y=y, size=size)
    w.bullets(lines)


def reynolds_page(c: SessionContent, n: int):
    fig = _page_with(c, "Coefficients against the Reynolds number", n)
    F.draw_reynolds(fig.add_axes([0.1, 0.60, 0.82, 0.33]), c)
    _results(fig, wording.reynolds_lines(c.analysis), 0.55)
    F.draw_reynolds(fig.add_axes([0.1, 0.07, 0.36, 0.27]), c, "cd_p", "Cd_p")
    F.draw_reynolds(fig.add_axes([0.58, 0.07, 0.36, 0.27]), c, "cm_qc", "Cm¼")
    return fig


def lift_page(c: SessionContent, n: int):
    if F.reynolds_sweep(c):
        return reynolds_page(c, n)
    fig = _page_with(c, "Lift curve, stall and hysteresis", n)
    ax = fig.add_axes([0.1, 0.56, 0.82, 0.38])
    F.draw_lift(ax, c)
    _results(fig, wording.lift_lines(c.analysis) if c.analysis is not None else
             ["No point with flow: nothing to analyse."], 0.51)
    if c.analysis is not None and c.analysis.unsteadiness is not None:
        F.draw_polar(fig.add_axes([0.10, 0.07, 0.23, 0.25]), c)
        F.draw_moment(fig.add_axes([0.42, 0.07, 0.23, 0.25]), c)
        F.draw_unsteadiness(fig.add_axes([0.74, 0.07, 0.22, 0.25]), c)
    else:
        F.draw_polar(fig.add_axes([0.1, 0.07, 0.36, 0.27]), c)
        F.draw_moment(fig.add_axes([0.58, 0.07, 0.36, 0.27]), c)
    return fig


def venturi_page(c: SessionContent, n: int):
    fig = _page_with(c, "Venturi: pressures, flow rate, discharge coefficient", n)
    F.draw_venturi_cp(fig.add_axes([0.1, 0.62, 0.82, 0.31]), c)
    _results(fig, wording.venturi_lines(c.analysis, ISO_MACHINED, per_point=False) if c.analysis is not None else
             ["No point with flow through the venturi."], 0.57)
    F.draw_venturi_flow(fig.add_axes([0.1, 0.08, 0.36, 0.36]), c)
    F.draw_discharge(fig.add_axes([0.58, 0.08, 0.36, 0.36]), c)
    return fig


def theory_page(c: SessionContent, n: int):
    """Cylinder and bump: every point's Cp on one axes, beside potential flow where there is a theory."""
    what = "Cylinder: Cp against angle beside potential flow" if c.rig.kind is RigKind.CYLINDER else \
        "Cp along the model at every point"
    fig = _page_with(c, what, n)
    ax = fig.add_axes([0.1, 0.50, 0.82, 0.42])
    layout = c.rig.tap_layout()
    for i, p in enumerate(c.shown):
        cp_map, u_map = p.record.get("cp") or {}, p.record.get("u_cp") or {}
        cp = [as_number(cp_map.get(t)) for t in layout.names]
        u = [as_number(u_map.get(t)) for t in layout.names]
        x = np.degrees(layout.theta) if layout.theta is not None else (layout.x_c if layout.x_c is not None
                                                                           else np.arange(len(cp)))
        v = pm(p.record.get("q_pa"), p.record.get("u_q_pa"))
        F._errorbar(ax, x, cp, u, F.cycle(i), label=f"{p.label}: q {v} Pa"
                    + (" (saturated taps left out)" if p.saturated_taps else ""))
    for curve in c.reference:
        ax.plot(curve.x, curve.y, label=curve.label, **{**F.THEORY, "color": INK, "lw": 1.6})
    ax.invert_yaxis()
    ax.set_ylabel("Cp  (negative up)")
    ax.set_xlabel("θ from the front stagnation point [°]" if layout.theta is not None else "x/c")
    ax.grid(True, lw=0.3, alpha=0.5)
    ax.legend(fontsize=7)
    lines = []
    if c.rig.kind is RigKind.CYLINDER:
        lines.append("Potential flow has Cp = 1 at the front, −3 at the shoulders and full recovery behind; a real "
                     "cylinder separates (near 80° when laminar, common practice) and its base pressure stays "
                     "negative: a gap between the curves behind the shoulders is the wake.")
    for p in c.shown if "cd_p" in c.rig.kind.coefficients else ():  # a bump claims no Cd_p (RigKind.coefficients)
        line = wording.drag_point_line(p.label, F.best_coefficients(p.record), p.record)
        if line is not None:
            lines.append(line)
    _results(fig, lines, 0.44)
    return fig


def cp_pages(c: SessionContent, first: int) -> list:
    pages = []
    points = list(c.points)
    for k in range(0, len(points), CP_PER_PAGE):
        fig = _page_with(c, "Cp distribution of each point" + (" (continued)" if k else ""), first + len(pages))
        for j, p in enumerate(points[k:k + CP_PER_PAGE]):
            row, col = divmod(j, 2)
            ax = fig.add_axes([0.09 + col * 0.47, 0.68 - row * 0.305, 0.38, 0.24])
            F.draw_cp_point(ax, c, p, legend=(j == 0))
        pages.append(fig)
    return pages


TABLE_COLUMNS = ("point", "state", "α set [°]", "q [Pa]", "V [m/s]", "Re", "Cl", "Cd_p", "Cm¼", "Cl balance", "ṁ [g/s]")


def table_rows(c: SessionContent) -> list[list[str]]:
    """The table of points: every number with its uncertainty; a point in a state shows the state, no numbers.

    V and Re with the uncertainties the reduction recorded (``u_v_ms``, ``u_re``). A point recorded before those
    were stated, or one whose uncertainty does not hold (null), shows "not stated" for V and Re to two figures
    marked ≈, a description of the conditions.
    """
    rows = []
    for p in c.points:
        r = p.record
        alpha = as_number(r.get("alpha_rad"))
        head = [p.label, p.state or ("flow" + (", saturated taps left out" if p.saturated_taps else "")),
                f"{math.degrees(alpha):.1f}" if math.isfinite(alpha) else "–"]
        if not p.shown:
            rows.append(head + [p.state.upper()] + ["–"] * (len(TABLE_COLUMNS) - 4))
            continue
        cf = F.best_coefficients(r)

        def coeff(name):  # only what the rig's kind claims (RigKind.coefficients): a bump has no Cd_p
            return (pm(cf.get(name), cf.get(f"u_{name}")) or "–") if name in c.rig.kind.coefficients else "–"

        v, re = as_number(r.get("v_ms")), as_number(r.get("re"))
        rows.append(head + [
            pm(r.get("q_pa"), r.get("u_q_pa")) or "–",
            pm(v, r.get("u_v_ms")) or ("not stated" if math.isfinite(v) else "–"),
            reynolds(re, r.get("u_re")),
            coeff("cl"), coeff("cd_p"), coeff("cm_qc"),
            pm(r.get("cl_balance"), r.get("u_cl_balance")) or "–",
            pm(r.get("mass_flow_kg_s"), r.get("u_mass_flow_kg_s"), 1e3) or "–",
        ])
    return rows


def table_pages(c: SessionContent, first: int) -> list:
    from taprig.protocol import ActuatorKind

    rows = table_rows(c)
    has_angle = c.rig.actuator_of_kind(ActuatorKind.ANGLE) is not None
    keep = [i for i, name in enumerate(TABLE_COLUMNS)
            if i < 2 or (i == 2 and has_angle) or (i > 2 and any(row[i] != "–" for row in rows))]
    pages = []
    for k in range(0, max(len(rows), 1), ROWS_PER_PAGE):
        chunk = rows[k:k + ROWS_PER_PAGE]
        fig = _page_with(c, "Points with their uncertainties" + (" (continued)" if k else ""), first + len(pages))
        height = 0.019 * (len(chunk) + 1)
        ax = fig.add_axes([0.04, 0.93 - height, 0.92, height])
        ax.set_axis_off()
        table = ax.table(cellText=[[row[i] for i in keep] for row in chunk], colLabels=[TABLE_COLUMNS[i] for i in keep],
                         loc="upper center", cellLoc="center", bbox=[0, 0, 1, 1])
        table.auto_set_font_size(False)
        table.set_fontsize(6.5)
        table.auto_set_column_width(list(range(len(keep))))
        for (i, _), cell in table.get_celld().items():
            cell.set_linewidth(0.3)
            if i == 0:
                cell.set_text_props(fontweight="bold")
        w = Writer(fig, y=0.93 - height - 0.03)
        w.para("Each value ± its standard uncertainty (k = 1); u(V) and u(Re) carry u(q), the run's temperature "
               "and a typed room pressure (ρ and μ through them). A point recorded before the reduction stated "
               "them shows V as not stated and Re ≈ to two figures, a description of the conditions. A point in a state (no flow, reference invalid, saturated, "
               "implausible, bad calibration) shows the state, never a number.", size=7)
        if k + ROWS_PER_PAGE >= len(rows):
            w.heading("The link's counters")
            whole, lines = counters_lines(c)
            w.para(lines[0], bold=True, color=INK if whole else VERMILION)
            for line in lines[1:]:
                w.para(line)
        pages.append(fig)
    return pages


def comparison_page(contents: Sequence[SessionContent], align: str, n: int):
    c = contents[0]
    fig = _page_with(c, "Sessions compared", n)
    top = fig.add_axes([0.1, 0.64, 0.82, 0.28])
    why_not = F.draw_comparison(top, list(contents), align)
    lines = []
    if why_not:  # no headline quantity to compare (a bump): the reason in words, no empty axes
        fig.delaxes(top)
        lines.append(why_not[0].upper() + why_not[1:])
    for s in contents:
        a = s.analysis
        text = "; ".join([f"{s.path.name} ({s.title}, {_started(s.meta)}): {len(s.shown)} points with numbers",
                          *(wording.brief(a) if a is not None else ())])
        lines.append(text + ".")
    w = Writer(fig, y=0.595)
    w.bullets(lines)
    overlay = fig.add_axes([0.1, 0.07, 0.82, min(0.42, w.y - 0.13)])
    why = F.draw_cp_overlay(overlay, list(contents), align)
    if why:  # no shared angle (or q): the reason in words, no figure
        fig.delaxes(overlay)
        w.gap()
        w.para("Cp overlay: " + why + ".")
    return fig


def session_pages(c: SessionContent, first: int) -> list:
    """Every page of one session after its cover, numbered from ``first``."""
    pages = []
    if c.rig.kind is RigKind.AIRFOIL:
        pages.append(lift_page(c, first))
    elif c.rig.kind is RigKind.VENTURI:
        pages.append(venturi_page(c, first))
    else:
        pages.append(theory_page(c, first))
    pages += cp_pages(c, first + len(pages))
    pages += table_pages(c, first + len(pages))
    return pages


def handout_pages(contents: Sequence[SessionContent], align: str = "alpha") -> list:
    """Every page of the handout of ``contents`` in order (matplotlib Figures)."""
    if align not in ALIGN_CHOICES:
        raise HandoutError(f"align {align!r}: expected one of {', '.join(ALIGN_CHOICES)}", 2)
    pages = []
    for i, c in enumerate(contents):
        pages.append(cover_page(c, contents[1:] if i == 0 else ()))
        if i == 0 and len(contents) > 1:
            pages.append(comparison_page(contents, align, 2))
        pages += session_pages(c, len(pages) + 1)
    return pages


def write_handout(paths: Sequence[str | Path], out: str | Path, align: str = "alpha",
                  coefficients: str = "best") -> int:
    """Write the PDF handout of the sessions ``paths`` to ``out``; returns the number of pages.

    :class:`HandoutError` (one sentence) for a missing file, a file that is not a session, a session without
    points, or an output that cannot be written; the PDF is written to a temporary name and renamed, so a failed
    run leaves no half-written handout.
    """
    contents = load_sessions(paths, coefficients)
    pages = handout_pages(contents, align)
    return save_pdf(pages, out, contents)


def save_pdf(pages, out: str | Path, contents: Sequence[SessionContent] = ()) -> int:
    """Save ``pages`` as one PDF at ``out`` (through a temporary file in the same folder)."""
    from matplotlib.backends.backend_pdf import PdfPages

    out = Path(out)
    if out.is_dir():
        raise HandoutError(f"{out}: is a folder; expected the PDF file to write", 2)
    if not out.parent.is_dir():
        raise HandoutError(f"{out.parent}: no such folder to write the handout into", 2)
    tmp = out.with_name(f".{out.name}.part")
    title = ", ".join(c.title for c in contents) or "taprig handout"
    try:
        with PdfPages(tmp, metadata={"Title": f"Handout: {title}", "Creator": "taprig handout"}) as pdf:
            for page in pages:
                pdf.savefig(page)
        tmp.replace(out)
    except OSError as exc:
        tmp.unlink(missing_ok=True)
        raise HandoutError(f"{out}: cannot write the handout ({exc.strerror or exc})", 1) from None
    return len(pages)


def pdf_bytes(pages, contents: Sequence[SessionContent] = ()) -> bytes:
    """``pages`` as the bytes of one PDF (for the dashboard's download)."""
    import io

    from matplotlib.backends.backend_pdf import PdfPages

    buffer = io.BytesIO()
    title = ", ".join(c.title for c in contents) or "taprig handout"
    with PdfPages(buffer, metadata={"Title": f"Handout: {title}", "Creator": "taprig handout"}) as pdf:
        for page in pages:
            pdf.savefig(page)
    return buffer.getvalue()


def figures_of(c: SessionContent) -> list[Figure]:
    """The drawings of one session alone (for ``--png``)."""
    out = [Figure("rig", F.draw_rig), Figure("calibration", F.draw_calibration)]
    if c.rig.kind is RigKind.AIRFOIL:
        out += [Figure("lift-curve", F.draw_lift), Figure("drag-polar", F.draw_polar),
                Figure("moment", F.draw_moment), Figure("unsteadiness", F.draw_unsteadiness)]
    if c.rig.kind is RigKind.VENTURI:
        out += [Figure("venturi-cp", F.draw_venturi_cp), Figure("venturi-flow", F.draw_venturi_flow),
                Figure("discharge-coefficient", F.draw_discharge)]
    for i, p in enumerate(c.points, start=1):
        out.append(Figure(f"cp-{i:02d}", lambda ax, content, p=p: F.draw_cp_point(ax, content, p)))
    return out


def write_figures(paths: Sequence[str | Path], folder: str | Path, align: str = "alpha",
                  coefficients: str = "best", dpi: int = 150) -> list[Path]:
    """Write every drawing of the sessions as its own PNG into ``folder`` (made if missing); returns the files.

    Files are named ``<session stem>-<drawing>.png`` (``lift-curve``, ``cp-03`` …) and ``comparison.png`` for
    several sessions, with ``comparison-cp.png`` (their Cp at a shared angle or q) where they share one.
    """
    if align not in ALIGN_CHOICES:
        raise HandoutError(f"align {align!r}: expected one of {', '.join(ALIGN_CHOICES)}", 2)
    contents = load_sessions(paths, coefficients)
    folder = Path(folder)
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise HandoutError(f"{folder}: cannot make the folder for the figures ({exc.strerror or exc})", 1) from None
    if not folder.is_dir():
        raise HandoutError(f"{folder}: not a folder", 2)
    written = []

    def save(fig, name: str) -> None:
        path = folder / f"{name}.png"
        try:
            fig.savefig(path, dpi=dpi)
        except OSError as exc:
            raise HandoutError(f"{path}: cannot write ({exc.strerror or exc})", 1) from None
        written.append(path)

    for c in contents:
        for figure in figures_of(c):
            fig = new_figure()
            figure.draw(fig.add_subplot(), c)
            save(fig, f"{c.path.stem}-{figure.name}")
    if len(contents) > 1:
        fig = new_figure()
        F.draw_comparison(fig.add_subplot(), contents, align)
        save(fig, "comparison")
        fig = new_figure()
        if not F.draw_cp_overlay(fig.add_subplot(), contents, align):
            save(fig, "comparison-cp")
    return written
