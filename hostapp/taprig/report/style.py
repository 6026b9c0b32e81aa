"""How the handout looks: series told apart by marker, fill and line style as well as colour. Numbers are written
with their uncertainty by :mod:`taprig.analysis.wording` (the terminal and the dashboard use the same).

Colours are from Okabe and Ito's palette for colour-blind readers ("Color Universal Design", 2008); every pair of
series that a reader must tell apart also differs in marker shape, marker fill and line style, so the figures read
the same in grey print.
"""

from __future__ import annotations

import textwrap

BLUE, VERMILION, GREEN, ORANGE, PURPLE, SKY, INK, GREY = ("#0072B2", "#D55E00", "#009E73", "#E69F00", "#CC79A7",
                                                          "#56B4E9", "#1b1b1b", "#6b6b6b")

#: Upper and lower surface (and up and down legs of a sweep): shape, fill and dash differ, not only colour.
UPPER = dict(color=BLUE, marker="o", mfc=BLUE, ls="-", label="upper surface")
LOWER = dict(color=VERMILION, marker="s", mfc="white", ls="--", label="lower surface")
UP = dict(color=BLUE, marker="^", mfc=BLUE, ls="-", label="sweep up")
DOWN = dict(color=VERMILION, marker="v", mfc="white", ls="--", label="sweep down")
ONE_WAY = dict(color=BLUE, marker="o", mfc=BLUE, ls="-", label="points")
BALANCE = dict(color=GREEN, marker="D", mfc="white", ls=":", label="balance (load cell)")
THEORY = dict(color=GREY, ls=(0, (6, 2, 1, 2)), lw=1.0)

#: Several sessions or points on one axes: each its own marker, fill and dash.
CYCLE = [dict(color=c, marker=m, mfc=f, ls=l) for c, m, f, l in (
    (BLUE, "o", "full", "-"), (VERMILION, "s", "none", "--"), (GREEN, "^", "full", ":"), (PURPLE, "D", "none", "-."),
    (ORANGE, "v", "full", (0, (5, 1))), (SKY, "P", "none", (0, (1, 1))), (INK, "X", "full", (0, (3, 1, 1, 1, 1, 1))),
)]

PAGE = (8.27, 11.69)  # A4 portrait [in]
FIGURE = (6.4, 4.6)   # one figure alone (--png) [in]


def cycle(i: int) -> dict:
    """The i-th style of :data:`CYCLE` as keyword arguments of ``Axes.errorbar`` / ``plot``."""
    s = dict(CYCLE[i % len(CYCLE)])
    s["mfc"] = s["color"] if s["mfc"] == "full" else "white"
    return s


def marker_only(style: dict) -> dict:
    """``style`` without its label, for errorbar calls that draw the markers and bars only."""
    return {k: v for k, v in style.items() if k != "label"}


def wrap(text: str, width: int) -> list[str]:
    """Lines of at most ``width`` characters (an empty text stays one empty line)."""
    return textwrap.wrap(text, width) or [""]


def new_page():
    """An empty A4 page (a matplotlib Figure, not attached to any display)."""
    from matplotlib.figure import Figure

    return Figure(figsize=PAGE)


def new_figure(size=FIGURE):
    """An empty figure for one drawing alone."""
    from matplotlib.figure import Figure

    return Figure(figsize=size, layout="constrained")


class Writer:
    """Text written down a page in figure coordinates, wrapped, with headings."""

    def __init__(self, fig, x: float = 0.07, y: float = 0.95, width: int = 110, size: float = 8.0):
        self.fig, self.x, self.y, self.width, self.size = fig, x, y, width, size

    def line_height(self, size: float) -> float:
        return size * 1.45 / 72 / self.fig.get_figheight()

    def heading(self, text: str, size: float = 11.0) -> None:
        self.y -= 0.4 * self.line_height(size)
        self.fig.text(self.x, self.y, text, fontsize=size, fontweight="bold", va="top", color=INK)
        self.y -= self.line_height(size)

    def para(self, text: str, size: float | None = None, indent: str = "", color: str = INK, bold: bool = False,
             width: int | None = None) -> None:
        size = size or self.size
        width = width or int(self.width * 8.0 / size)
        for k, line in enumerate(wrap(text, width - len(indent))):
            self.fig.text(self.x, self.y, (indent if k == 0 else " " * len(indent)) + line, fontsize=size, va="top",
                          color=color, fontweight="bold" if bold else "normal", family="DejaVu Sans")
            self.y -= self.line_height(size)

    def bullets(self, items, size: float | None = None) -> None:
        for item in items:
            self.para(item, size, indent="•  ")

    def gap(self, fraction: float = 0.5) -> None:
        self.y -= fraction * self.line_height(self.size)
