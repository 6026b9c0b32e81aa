"""Drawing a rig picture (:func:`taprig.rig.picture.rig_picture`) to a PNG or SVG file with matplotlib.

The model is drawn to scale in its walls; tap labels (name and device channel) stand in a row above the upper
surface and one below the lower, spread apart where taps crowd and joined to their tap by a thin line; anything
suspicious is red, with its reason written under the drawing.
"""

from __future__ import annotations

import math
from pathlib import Path

from taprig.rig.picture import RigPicture, TapMark

SUFFIXES = (".png", ".svg")
WIDTH_IN = 12.0  # figure width [in]
MAX_PLOT_HEIGHT_IN = 7.5
OVERVIEW_HEIGHT_IN = 3.2
DETAIL_HEIGHT_IN = 3.5  # at most, for the model enlarged (labels aside)  # the to-scale view of the whole test section, when the model is drawn enlarged too
FONT = 7.5  # label size [pt]
LINE_IN = FONT * 1.45 / 72  # spacing of neighbouring labels [in]
TEXT_LINE_IN = 0.19  # a line of the text under the drawing [in]
MAX_LISTED = 14  # problems listed under the drawing before "and N more"
RED, GREY, INK = "#c0182b", "#777777", "#1b1b1b"


def _spread(wanted: list[float], gap: float, lo: float, hi: float) -> list[float]:
    """Positions near ``wanted`` (sorted) at least ``gap`` apart, kept within [lo, hi] where there is room."""
    if not wanted:
        return []
    pos = list(wanted)
    for i in range(1, len(pos)):
        pos[i] = max(pos[i], pos[i - 1] + gap)
    shift = (sum(wanted) - sum(pos)) / len(pos)  # centre the run on the taps it labels
    pos = [p + shift for p in pos]
    room = hi - lo
    if (len(pos) - 1) * gap <= room:
        if pos[0] < lo:
            pos = [p + lo - pos[0] for p in pos]
        if pos[-1] > hi:
            pos = [p - (pos[-1] - hi) for p in pos]
    for i in range(1, len(pos)):  # the clamps may have pushed neighbours together again
        pos[i] = max(pos[i], pos[i - 1] + gap)
    return pos


def _label_text(tap: TapMark, values: dict[str, str] | None) -> str:
    text = tap.label
    if values and tap.name in values:
        text += f"  {values[tap.name]}"
    return text


def _text_length_in(text: str) -> float:
    return len(text) * FONT * 0.62 / 72 + 0.05


def _body_box(picture: RigPicture) -> tuple[float, float, float, float]:
    """The region of the model and its taps, a little padded."""
    pts = list(picture.outline) + [(t.x, t.y) for t in picture.taps if t.x is not None and t.y is not None]
    if picture.pivot is not None:
        pts.append(picture.pivot)
    if not pts:
        return picture.extent
    xs, ys = [p[0] for p in pts], [p[1] for p in pts]
    pad = 0.06 * (max(xs) - min(xs) or 0.05)
    return min(xs) - pad, max(xs) + pad, min(ys) - pad, max(ys) + pad


def draw_rig(picture: RigPicture, path: str | Path, values: dict[str, str] | None = None) -> Path:
    """Draw ``picture`` to ``path`` (``.png`` or ``.svg``); ``values`` maps a tap name to a text shown beside it.

    When the model is small in its test section, a to-scale view of the whole test section comes first and an
    enlarged view of the model, where the taps are labelled, under it. Returns the path written; raises
    ValueError for another suffix.
    """
    from matplotlib.figure import Figure

    path = Path(path)
    if path.suffix.lower() not in SUFFIXES:
        raise ValueError(f"{path}: can draw to .png or .svg, not {path.suffix or 'a name without a suffix'}")
    xmin, xmax, ymin, ymax = picture.extent
    box = _body_box(picture)
    two = picture.kind in ("airfoil", "bump", "cylinder") and (box[1] - box[0]) < 0.5 * (xmax - xmin)
    lines = _text_lines(picture)
    text_h = TEXT_LINE_IN * (len(lines) + 1)
    plot_w = WIDTH_IN - 1.0
    panels = []  # (extent, labelled, width [in], height [in], scale)
    if two:
        scale = max((xmax - xmin) / plot_w, (ymax - ymin) / OVERVIEW_HEIGHT_IN)
        panels.append(((xmin, xmax, ymin, ymax), False, (xmax - xmin) / scale, (ymax - ymin) / scale, scale))
        detail = box
    else:
        detail = picture.extent
    panels.append(_labelled_extent(picture, detail, plot_w, values, DETAIL_HEIGHT_IN if two else MAX_PLOT_HEIGHT_IN))
    heights = [p[3] for p in panels]
    fig_h = 0.6 + sum(heights) + 0.35 * (len(panels) - 1) + 0.2 + text_h
    fig = Figure(figsize=(WIDTH_IN, fig_h))
    title = picture.title
    if picture.kind == "airfoil":
        title += f"   α = {math.degrees(picture.alpha):g}°"
    fig.text(0.5, 1 - 0.3 / fig_h, title, ha="center", va="center", fontsize=11, color=INK)
    top = fig_h - 0.6
    for i, (extent, labelled, w, h, scale) in enumerate(panels):
        left = (WIDTH_IN - w) / 2
        ax = fig.add_axes((left / WIDTH_IN, (top - h) / fig_h, w / WIDTH_IN, h / fig_h))
        ax.set_xlim(extent[0], extent[1])
        ax.set_ylim(extent[2], extent[3])
        ax.set_aspect("equal")
        ax.axis("off")
        _draw_body(ax, picture, scale, full=not two or not labelled)
        if labelled:
            _draw_labels(ax, picture, scale, extent, values)
        else:
            _draw_taps(ax, picture)
            (x0, x1, y0, y1) = detail
            ax.plot([x0, x1, x1, x0, x0], [y0, y0, y1, y1, y0], color=GREY, lw=0.8, ls="--")
            ax.text(x1, y1, " enlarged below", fontsize=FONT, color=GREY, va="bottom", ha="left")
        if two and labelled:
            fig.text(0.5 / WIDTH_IN, (top + 0.12) / fig_h, "the model enlarged, taps labelled", fontsize=8.5, color=GREY)
        top -= h + 0.35
    y = text_h - TEXT_LINE_IN * 0.8
    for text, colour in lines:
        fig.text(0.5 / WIDTH_IN, y / fig_h, text, fontsize=8.5, color=colour, va="top", ha="left")
        y -= TEXT_LINE_IN
    from matplotlib import rc_context

    with rc_context({"svg.fonttype": "none"}):  # SVG text stays text: searchable, and drawn in the reader's font
        fig.savefig(path, dpi=150)
    return path


def _rows(picture: RigPicture):
    placed = [t for t in picture.taps if t.x is not None and t.y is not None]
    upper = sorted((t for t in placed if t.ny >= 0), key=lambda t: t.x)
    lower = sorted((t for t in placed if t.ny < 0), key=lambda t: t.x)
    return placed, upper, lower


def _labelled_extent(picture: RigPicture, extent, plot_w: float, values, body_h: float):
    """The labelled panel: its data extent grown to hold the label rows, size [in] and scale [m/in]."""
    xmin, xmax, ymin, ymax = extent
    width, height = xmax - xmin or 1.0, ymax - ymin or 0.1
    placed, upper, lower = _rows(picture)
    longest = max((_text_length_in(_label_text(t, values)) for t in placed), default=0.5)
    band = longest + 0.4
    scale = width / plot_w
    room = MAX_PLOT_HEIGHT_IN - band * (bool(upper) + bool(lower))
    scale = max(scale, height / max(min(room, body_h), 1.5))
    top_body = max([t.y for t in upper] + [p[1] for p in picture.outline if xmin <= p[0] <= xmax] or [ymax])
    bottom_body = min([t.y for t in lower] + [p[1] for p in picture.outline if xmin <= p[0] <= xmax] or [ymin])
    y_top = max(ymax, top_body + band * scale) if upper else ymax
    y_bottom = min(ymin, bottom_body - band * scale) if lower else ymin
    return (xmin, xmax, y_bottom, y_top), True, width / scale, (y_top - y_bottom) / scale, scale


def _draw_body(ax, picture: RigPicture, scale: float, full: bool) -> None:
    from matplotlib.patches import Polygon

    for wall in picture.walls:
        ax.plot([p[0] for p in wall], [p[1] for p in wall], color="#444444", lw=2.5, solid_capstyle="butt")
    if picture.outline:
        ax.add_patch(Polygon(picture.outline, closed=True, facecolor="#d9dde3", edgecolor=INK, lw=1.0))
    if picture.pivot is not None:
        px, py = picture.pivot
        ax.plot([px], [py], marker="o", ms=7, mfc="white", mec=INK, mew=1.2, zorder=5)
        ax.plot([px], [py], marker="+", ms=7, color=INK, mew=1.2, zorder=6)
    if full:
        (fx0, fy0), (fx1, fy1) = picture.flow
        ax.annotate("", xy=(fx1, fy1), xytext=(fx0, fy0), arrowprops=dict(arrowstyle="-|>", color=GREY, lw=1.2))
        ax.text(fx0, fy0 - 0.08 * scale, "flow", fontsize=FONT, color=GREY, va="top")
        _draw_ports(ax, picture, scale)


def _draw_taps(ax, picture: RigPicture) -> None:
    for tap in picture.taps:
        if tap.x is None or tap.y is None:
            continue
        ax.plot([tap.x], [tap.y], marker="o", ms=2.2, color=RED if tap.problems else INK, zorder=6)
        if tap.problems:
            ax.plot([tap.x], [tap.y], marker="o", ms=9, mfc="none", mec=RED, mew=1.2, zorder=6)


def _draw_labels(ax, picture: RigPicture, scale: float, extent, values) -> None:
    xmin, xmax = extent[0], extent[1]
    placed, upper, lower = _rows(picture)
    gap = LINE_IN * scale
    top_body = max([t.y for t in upper] + [p[1] for p in picture.outline if xmin <= p[0] <= xmax] or [0.0])
    bottom_body = min([t.y for t in lower] + [p[1] for p in picture.outline if xmin <= p[0] <= xmax] or [0.0])
    for row, taps, up in ((top_body + 0.3 * scale, upper, True), (bottom_body - 0.3 * scale, lower, False)):
        xs = _spread([t.x for t in taps], gap, xmin + gap, xmax - gap)
        for tap, lx in zip(taps, xs):
            bad = bool(tap.problems)
            colour = RED if bad else INK
            bend = row - (0.1 if up else -0.1) * scale
            ax.plot([tap.x, tap.x + tap.nx * 0.05 * scale, lx, lx],
                    [tap.y, tap.y + tap.ny * 0.05 * scale, bend, row],
                    color=RED if bad else "#9aa3ad", lw=0.6, zorder=3)
            ax.plot([tap.x], [tap.y], marker="o", ms=3.2, color=colour, zorder=6)
            if bad:
                ax.plot([tap.x], [tap.y], marker="o", ms=11, mfc="none", mec=RED, mew=1.4, zorder=6)
            ax.text(lx, row, _label_text(tap, values), rotation=90, fontsize=FONT, color=colour,
                    ha="center", va="bottom" if up else "top", zorder=7, fontweight="bold" if bad else "normal")


def _draw_ports(ax, picture: RigPicture, scale: float) -> None:
    """The pitot-static probe with its ports, and a venturi's reference station."""
    probe = [p for p in picture.ports if p.x is not None and p.role in ("total", "static", "pitot")]
    if probe:
        px, py = probe[0].x, probe[0].y
        length = 0.55 * scale
        ax.plot([px, px + length], [py, py], color=INK, lw=2.2, solid_capstyle="round", zorder=4)
        stem_top = max([p[1] for wall in picture.walls for p in wall] or [py + 0.35 * scale])
        ax.plot([px + length, px + length], [py, stem_top], color=INK, lw=2.2, zorder=4)
        ax.plot([px], [py], marker="<", ms=6, color="#1f6fb2", zorder=5)
        ax.plot([px + 0.3 * length], [py], marker="o", ms=5, mfc="white", mec="#1f6fb2", mew=1.2, zorder=5)
        text = "\n".join(p.label for p in probe)
        ax.text(px, py - 0.12 * scale, text, fontsize=FONT, color="#1f6fb2", va="top", ha="left")
    for p in picture.ports:
        if p.role == "inlet" and p.x is not None:
            ax.plot([p.x], [p.y], marker="s", ms=8, mfc="none", mec="#1f6fb2", mew=1.2, zorder=6)
            ax.text(p.x, p.y - 0.15 * scale, p.label, fontsize=FONT, color="#1f6fb2", va="top", ha="center")


def _text_lines(picture: RigPicture) -> list[tuple[str, str]]:
    """The lines under the drawing: problems (red), ports off the drawing, notes (grey)."""
    out: list[tuple[str, str]] = []
    problems = list(picture.problems)
    if problems:
        out.append((f"{len(problems)} thing(s) to look at:", RED))
        out += [(f"  • {p.text}", RED) for p in problems[:MAX_LISTED]]
        if len(problems) > MAX_LISTED:
            out.append((f"  … and {len(problems) - MAX_LISTED} more (taprig check lists every one)", RED))
    else:
        out.append(("nothing suspicious found: every tap on its surface, one tap per channel, every channel used", INK))
    off = [p.label for p in picture.ports if p.x is None]
    if off:
        out.append(("besides the taps:", "#1f6fb2"))
        out += [(f"  • {label}", "#1f6fb2") for label in off]
    legend = "labels: tap name and device channel (chN = its index in the board's description)"
    if picture.pivot is not None:
        legend += "; ⊕ the pivot"
    if any(p.x is not None and p.role in ("total", "static", "pitot") for p in picture.ports):
        legend += "; probe: ◀ total port, ○ static port"
    out.append((legend, GREY))
    out += [(f"note: {n}", GREY) for n in picture.notes]
    return out
