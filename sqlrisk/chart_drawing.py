"""The outcome chart: the chance of reaching at least each total, P(total >= x), as a curve.

Read from the left: at the lowest totals the curve is at 100% (the group reaches them for
sure) and it falls to 0% past the best case. Each cut (floor, target, stretch, or the names
given) is a point on the curve labelled with its name, its value and its reach odds; the
area under the curve is shaded band by band (``chart_style``'s palette), and a panel beside
the plot lists each band's probability and the key totals. Under the total axis a bar runs
from P10 to P90 with a tick at P50 and a diamond at the expected value. Simulated outcomes
carry their 95% Wilson band as a thin envelope around the curve. One line at the foot says
how exact the odds are (``outcome_error``).

``outcome_figure`` draws one chart, ``outcome_grid`` one panel per chart on a page (small
multiples). Both return the figure and every text box they placed (``Drawn``), so tests can
check that no label overlaps another or the curve.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from .chart_layout import Box, place_one, text_size
from .chart_style import (DPI, INK, QUIET, band_colours, compact_money, fig_px, money_ticks,
                          percent_ticks, pyplot, quiet_frame)
from .text_format import money, pct


@dataclass
class CutMark:
    name: str
    value: float
    reach: float  # P(total >= value)


@dataclass
class Band:
    name: str
    prob: float
    ci: tuple[float, float] | None = None  # 95% Wilson interval of a simulated band


@dataclass
class OutcomeChart:
    title: str
    curve: tuple[list[float], list[float]]  # polyline of P(total >= x) over x
    cuts: list[CutMark]
    bands: list[Band]
    mean: float
    quantiles: tuple[float, float, float]  # P10, P50, P90
    note: str
    envelope: tuple[list[float], list[float], list[float]] | None = None  # x, lo, hi
    error: float = 0.0  # outcome_error of the outcome
    trials: int = 0


@dataclass
class Drawn:
    """A drawn figure and, in pixels (y up), the text boxes placed on it and the lines
    (curves, drop lines) labels must keep off."""

    fig: object
    boxes: dict[str, Box] = field(default_factory=dict)
    lines: list[tuple[list[float], list[float]]] = field(default_factory=list)


def band_names(cut_names: list[str]) -> list[str]:
    """Band names from cut names: below floor, floor to target, ..., stretch or more."""
    if not cut_names:
        return ["every total"]
    inner = [f"{a} to {b}" for a, b in zip(cut_names[:-1], cut_names[1:])]
    return [f"below {cut_names[0]}", *inner, f"{cut_names[-1]} or more"]


# -- pieces shared by the single chart and the panels ------------------------------

class Page:
    """Text placed on a figure in pixels, remembered as boxes."""

    def __init__(self, fig):
        self.fig, self.drawn = fig, Drawn(fig)
        self.width, self.height = fig_px(fig)

    def text(self, gid: str, x: float, y: float, text: str, size: float, ha: str = "left",
             va: str = "bottom", **style) -> Box:
        w, h = text_size(text, size, DPI)
        x0 = {"left": x, "right": x - w, "center": x - w / 2}[ha]
        y0 = {"bottom": y, "top": y - h, "center": y - h / 2}[va]
        box = Box(x0, y0, x0 + w, y0 + h)
        self.fig.text(x0 / self.width, y0 / self.height, text, fontsize=size, ha="left",
                      va="bottom", gid=gid, **style)
        self.drawn.boxes[gid] = box
        return box

    def frame(self, ax) -> Box:
        x0, y0, w, h = ax.get_position().bounds
        return Box(x0 * self.width, y0 * self.height, (x0 + w) * self.width,
                   (y0 + h) * self.height)


def _to_px(ax, xs, ys) -> tuple[list[float], list[float]]:
    pts = ax.transData.transform(np.column_stack([xs, ys]))
    return pts[:, 0].tolist(), pts[:, 1].tolist()


def _piece(xs, ys, a: float, b: float):
    """The polyline (xs, ys) between x = a and x = b, ends interpolated."""
    xs, ys = np.asarray(xs, float), np.asarray(ys, float)
    keep = (xs >= a) & (xs <= b)  # a step's two vertices at one x both stay
    head = [] if a in xs else [a]
    tail = [] if b in xs else [b]
    return (np.concatenate([head, xs[keep], tail]),
            np.concatenate([np.interp(head, xs, ys), ys[keep], np.interp(tail, xs, ys)]))


def _plot_curve(ax, page: Page, chart: OutcomeChart, gid: str, lw: float) -> None:
    xs, ys = chart.curve
    lo, hi = xs[0], xs[-1]
    ax.set_xlim(lo, hi)
    ax.set_ylim(0, 1)
    edges = [lo] + [min(max(c.value, lo), hi) for c in chart.cuts] + [hi]
    for k, colour in enumerate(band_colours(len(edges) - 1)):
        if edges[k + 1] > edges[k]:
            px, py = _piece(xs, ys, edges[k], edges[k + 1])
            ax.fill_between(px, 0, py, color=colour, linewidth=0, gid=f"{gid}band-{k + 1}")
    if chart.envelope is not None:
        ex, elo, ehi = chart.envelope
        ax.fill_between(ex, elo, ehi, color=INK, alpha=0.3, linewidth=0, gid=f"{gid}envelope")
        lw *= 0.6
        page.drawn.lines += [_to_px(ax, ex, elo), _to_px(ax, ex, ehi)]
    ax.plot(xs, ys, color=INK, linewidth=lw, gid=f"{gid}curve", solid_joinstyle="miter")
    page.drawn.lines.append(_to_px(ax, xs, ys))
    for i, c in enumerate(chart.cuts, start=1):
        if lo <= c.value <= hi:
            ax.plot([c.value, c.value], [0, c.reach], color=INK, linewidth=0.8,
                    linestyle=(0, (2, 2)), alpha=0.7, gid=f"{gid}cut-drop-{i}")
            page.drawn.lines.append(_to_px(ax, [c.value, c.value], [0, c.reach]))
            ax.plot([c.value], [c.reach], marker="o", markersize=6.5 if lw > 1.5 else 4.5,
                    markerfacecolor="white", markeredgecolor=INK, markeredgewidth=1.5,
                    gid=f"{gid}cut-point-{i}")


def _label_cuts(ax, page: Page, chart: OutcomeChart, gid: str, size: float,
                text_of, fixed: list[Box]) -> None:
    """Each cut's label at the nearest free place; where a crowded panel has none, the
    label folds onto two lines (name, odds), and failing that shows the odds alone."""
    lo, hi = chart.curve[0][0], chart.curve[0][-1]
    shown = [(i, c) for i, c in enumerate(chart.cuts, start=1) if lo <= c.value <= hi]
    anchors = [tuple(ax.transData.transform((c.value, c.reach))) for _, c in shown]
    texts, boxes = [], []
    for (_, cut), anchor in zip(shown, anchors):
        for text in dict.fromkeys([text_of(cut), f"{cut.name}\n{pct(cut.reach)}",
                                   pct(cut.reach)]):
            box, free = place_one(anchor, text_size(text, size, DPI), page.drawn.lines,
                                  page.frame(ax), [*boxes, *fixed])
            if free:
                break
        texts.append(text)
        boxes.append(box)
    for (i, _), text, box, (x, y) in zip(shown, texts, boxes, anchors):
        page.text(f"{gid}cut-label-{i}", box.x0, box.y0, text, size, color=INK)
        near_x = min(max(x, box.x0), box.x1)
        near_y = min(max(y, box.y0), box.y1)
        if math.hypot(near_x - x, near_y - y) > 14:  # far from its point: a leader line
            page.fig.lines.append(_leader(page, x, y, near_x, near_y, f"{gid}cut-leader-{i}"))


def _leader(page: Page, x0: float, y0: float, x1: float, y1: float, gid: str):
    import matplotlib.lines as lines

    w, h = page.width, page.height
    return lines.Line2D([x0 / w, x1 / w], [y0 / h, y1 / h], transform=page.fig.transFigure,
                        color=INK, linewidth=0.6, alpha=0.6, gid=gid)


# -- one chart --------------------------------------------------------------------

MAIN = (0.10, 0.30, 0.61, 0.58)  # the plot, in figure fractions
STRIP = (0.10, 0.115, 0.61, 0.06)  # the P10-P90 bar under it
PANEL_X = 0.745


def outcome_figure(chart: OutcomeChart) -> Drawn:
    _, plt = pyplot()
    fig = plt.figure(figsize=(9.6, 5.2), dpi=DPI)
    page = Page(fig)
    ax = fig.add_axes(MAIN)
    quiet_frame(ax)
    _plot_curve(ax, page, chart, "", 2.0)
    percent_ticks(ax)
    money_ticks(ax)
    ax.set_yticks([0, 0.2, 0.4, 0.6, 0.8, 1.0])
    ax.set_ylabel("chance of reaching\nat least this total")
    ax.set_xlabel("won total", labelpad=3)
    page.text("title", 0.10 * page.width, 0.925 * page.height, chart.title, 15, weight="bold")
    _label_cuts(ax, page, chart, "", 9,
                lambda c: f"{c.name} {compact_money(c.value)}\n{pct(c.reach)} reach", [])
    _strip(fig, ax, page, chart)
    _side_panel(page, chart)
    page.text("note", 0.10 * page.width, 0.02 * page.height, chart.note, 8.5, color=QUIET)
    return page.drawn


def _strip(fig, ax, page: Page, chart: OutcomeChart) -> None:
    """P10 to P90 as a bar, P50 as a tick, the expected value as a diamond."""
    strip = fig.add_axes(STRIP, sharex=ax)
    strip.set_ylim(0, 1)
    strip.axis("off")
    p10, p50, p90 = chart.quantiles
    strip.plot([p10, p90], [0.5, 0.5], color=INK, alpha=0.3, linewidth=7,
               solid_capstyle="butt", gid="range-bar")
    strip.plot([p50, p50], [0.12, 0.88], color=INK, linewidth=2, gid="p50-tick")
    strip.plot([chart.mean], [0.5], marker="D", markersize=6, color=INK,
               markeredgecolor="white", gid="expected-mark")
    frame = page.frame(strip)
    mid = (frame.y0 + frame.y1) / 2

    def at(v):
        return ax.transData.transform((v, 0))[0]

    page.text("p10-label", at(p10) - 5, mid, "P10", 8.5, ha="right", va="center", color=QUIET)
    page.text("p90-label", at(p90) + 5, mid, "P90", 8.5, ha="left", va="center", color=QUIET)
    page.text("p50-label", at(p50), frame.y1 + 1, "P50", 8.5, ha="center", color=QUIET)
    page.text("expected-label", at(chart.mean), frame.y0 - 1, "expected", 8.5, ha="center",
              va="top", color=QUIET)


def _side_panel(page: Page, chart: OutcomeChart) -> None:
    """Each band's probability beside its colour, then the key totals."""
    x, right = PANEL_X * page.width, 0.985 * page.width
    y = 0.86 * page.height
    page.text("bands-heading", x, y, "Band odds", 10, weight="bold")
    colours = band_colours(len(chart.bands))
    for k, (band, colour) in enumerate(zip(chart.bands, colours), start=1):
        y -= 25
        page.fig.patches.append(swatch(page, x, y, colour, f"swatch-{k}"))
        page.text(f"band-name-{k}", x + 20, y, band.name[:24], 9)
        page.text(f"band-prob-{k}", right, y, pct(band.prob), 9, ha="right", weight="bold")
        if band.ci is not None:
            y -= 14
            page.text(f"band-ci-{k}", x + 20, y, f"95%: {pct(band.ci[0])} to {pct(band.ci[1])}",
                      7.5, color=QUIET)
    y -= 40
    page.text("totals-heading", x, y, "Won total", 10, weight="bold")
    p10, p50, p90 = chart.quantiles
    for key, value in (("expected", chart.mean), ("P10", p10), ("P50", p50), ("P90", p90)):
        y -= 22
        page.text(f"total-name-{key}", x + 20, y, key, 9)
        page.text(f"total-value-{key}", right, y, money(value), 9, ha="right")


def swatch(page: Page, x: float, y: float, colour: str, gid: str):
    """A small square of a band's colour at (x, y) pixels, beside its name."""
    import matplotlib.patches as patches

    return patches.Rectangle((x / page.width, (y + 1) / page.height), 13 / page.width,
                             11 / page.height, transform=page.fig.transFigure,
                             facecolor=colour, edgecolor=INK, linewidth=0.6, gid=gid)


# -- small multiples --------------------------------------------------------------

CELL = (3.3, 2.5)  # inches per panel


def grid_page(count: int, cell: tuple[float, float], foot: float):
    """A page for ``count`` panels of ``cell`` inches (up to 4 across) and ``foot`` inches
    below them: (page, columns, width, height)."""
    _, plt = pyplot()
    cols = 1 if count == 1 else 2 if count <= 4 else 3 if count <= 9 else 4
    width, height = cols * cell[0] + 0.3, math.ceil(count / cols) * cell[1] + foot
    return Page(plt.figure(figsize=(width, height), dpi=DPI)), cols, width, height


def outcome_grid(charts: list[OutcomeChart], note: str) -> Drawn:
    """Every chart as a small panel of one page, in the given order, with its own cuts."""
    page, cols, width, height = grid_page(len(charts), CELL, 0.45)
    fig = page.fig
    placed: list[Box] = []
    for n, chart in enumerate(charts):
        r, c = divmod(n, cols)
        left = (0.15 + c * CELL[0] + 0.5) / width
        bottom = (height - (r + 1) * CELL[1] + 0.35) / height
        ax = fig.add_axes((left, bottom, (CELL[0] - 0.7) / width, (CELL[1] - 0.95) / height))
        quiet_frame(ax)
        gid = f"p{n + 1}-"
        _plot_curve(ax, page, chart, gid, 1.4)
        percent_ticks(ax)
        money_ticks(ax, 4)
        ax.set_yticks([0, 0.5, 1.0])
        ax.tick_params(labelsize=7.5)
        top = (bottom + (CELL[1] - 0.95) / height) * page.height
        p10, _, p90 = chart.quantiles
        page.text(f"{gid}title", left * page.width - 30, top + 21, chart.title[:34], 9.5,
                  weight="bold")
        page.text(f"{gid}subtitle", left * page.width - 30, top + 6,
                  f"expected {compact_money(chart.mean)} · P10-P90 {compact_money(p10)}"
                  f"-{compact_money(p90)}", 7.5, color=QUIET)
        _label_cuts(ax, page, chart, gid, 7.5, lambda m: f"{m.name} {pct(m.reach)}", placed)
        placed = list(page.drawn.boxes.values())
    page.text("note", 0.15 * DPI, 0.08 * DPI, note, 8, color=QUIET)
    return page.drawn
