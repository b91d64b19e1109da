"""Pictures of an outcome: the distribution of the total with the band cuts on it;
and reliability diagrams of stated win probabilities against observed win rates.

A chart is described once (``OutcomeChart``, ``ReliabilityChart``) and drawn as
SVG (written here, no dependency) or PNG (with matplotlib, the optional
``sqlrisk[chart]`` extra). On an outcome chart each cut is a vertical line,
each band's probability is written on its band, the expected value is marked,
and the axis is in currency units. On a reliability diagram each bin is a
circle (area in proportion to its deals, the count written beside it) at its
mean stated probability and observed win rate, with its interval as a whisker
where the query gives one; the dashed diagonal is a perfectly calibrated seller.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from xml.sax.saxutils import escape

from .errors import SqlriskError
from .text_format import pct

BAR = "#6c8ebf"
CUT = "#2b2b2b"
MEAN = "#c0632d"
TEXT = "#222222"
GRID = "#dddddd"


@dataclass
class OutcomeChart:
    title: str
    bins: list[tuple[float, float, float]]  # (lo, hi, prob)
    cuts: list[float] = field(default_factory=list)
    bands: list[float] = field(default_factory=list)
    band_ci: list[tuple[float, float]] | None = None
    mean: float = 0.0
    note: str = ""


def compact_money(x: float) -> str:
    """1234567 -> '1.23M', 45000 -> '45k' (axis labels)."""
    sign = "-" if x < 0 else ""
    x = abs(x)
    for unit, size in (("B", 1e9), ("M", 1e6), ("k", 1e3)):
        if x >= size:
            return f"{sign}{x / size:.4g}{unit}"
    return f"{sign}{x:.4g}"


def nice_ticks(lo: float, hi: float, count: int = 8) -> list[float]:
    """Round tick positions covering [lo, hi] (steps of 1, 2 or 5 x 10^k)."""
    if hi <= lo:
        return [lo]
    raw = (hi - lo) / count
    power = 10 ** math.floor(math.log10(raw))
    step = next(m * power for m in (1, 2, 5, 10) if m * power >= raw)
    start = math.ceil(lo / step) * step
    ticks = []
    x = start
    while x <= hi + 1e-9 * step:
        ticks.append(round(x, 10))
        x += step
    return ticks


def band_label(chart: OutcomeChart, i: int) -> str:
    text = pct(chart.bands[i])
    if chart.band_ci is not None:
        lo, hi = chart.band_ci[i]
        if hi > lo:
            text += f" ({pct(lo)} to {pct(hi)})"
    return text


def _band_spans(chart: OutcomeChart, lo: float, hi: float):
    edges = [lo] + [min(max(c, lo), hi) for c in chart.cuts] + [hi]
    return list(zip(edges[:-1], edges[1:]))


def to_svg(chart: OutcomeChart, width: int = 860, height: int = 440) -> str:
    left, right, top, bottom = 70, 20, 70, 70
    lo = min([b[0] for b in chart.bins] + chart.cuts + [chart.mean])
    hi = max([b[1] for b in chart.bins] + chart.cuts + [chart.mean])
    pad = (hi - lo) * 0.03 or 1.0
    lo, hi = lo - pad, hi + pad
    peak = max((b[2] for b in chart.bins), default=1.0) or 1.0
    plot_w, plot_h = width - left - right, height - top - bottom

    def x(v):
        return left + (v - lo) / (hi - lo) * plot_w

    def y(p):
        return top + plot_h - p / peak * plot_h

    out = _svg_head(width, height, left, chart.title)
    for t in nice_ticks(lo, hi):
        out.append(f'<line class="grid" x1="{x(t):.1f}" y1="{top}" x2="{x(t):.1f}" '
                   f'y2="{top + plot_h}" stroke="{GRID}"/>')
        out.append(f'<text class="tick" x="{x(t):.1f}" y="{top + plot_h + 18}" font-size="11" '
                   f'text-anchor="middle" fill="{TEXT}">{escape(compact_money(t))}</text>')
    for b_lo, b_hi, p in chart.bins:
        out.append(f'<rect class="bar" x="{x(b_lo):.2f}" y="{y(p):.2f}" '
                   f'width="{max(x(b_hi) - x(b_lo) - 0.5, 0.5):.2f}" '
                   f'height="{top + plot_h - y(p):.2f}" fill="{BAR}"/>')
    out.append(f'<line class="axis" x1="{left}" y1="{top + plot_h}" x2="{left + plot_w}" '
               f'y2="{top + plot_h}" stroke="{TEXT}"/>')
    for c in chart.cuts:
        out.append(f'<line class="cut" x1="{x(c):.1f}" y1="{top - 8}" x2="{x(c):.1f}" '
                   f'y2="{top + plot_h}" stroke="{CUT}" stroke-width="1.5"/>')
    for i, (a, b) in enumerate(_band_spans(chart, lo, hi)):
        if i < len(chart.bands):
            out.append(f'<text class="band" x="{(x(a) + x(b)) / 2:.1f}" y="{top - 14}" '
                       f'font-size="13" text-anchor="middle" fill="{TEXT}">'
                       f'{escape(band_label(chart, i))}</text>')
    out.append(f'<line class="mean" x1="{x(chart.mean):.1f}" y1="{top}" x2="{x(chart.mean):.1f}" '
               f'y2="{top + plot_h}" stroke="{MEAN}" stroke-width="2" stroke-dasharray="6 4"/>')
    out.append(f'<text class="mean-label" x="{x(chart.mean) + 4:.1f}" y="{top + 14}" '
               f'font-size="11" fill="{MEAN}">expected {escape(compact_money(chart.mean))}</text>')
    out.append(f'<text class="axis-label" x="{left + plot_w / 2}" y="{height - 30}" font-size="12" '
               f'text-anchor="middle" fill="{TEXT}">won total (currency units)</text>')
    return _svg_tail(out, chart.note, left, height)


def _svg_head(width: int, height: int, left: int, title: str) -> list[str]:
    return [f'<svg xmlns="http://www.w3.org/2000/svg" width="{width}" height="{height}" '
            f'viewBox="0 0 {width} {height}" font-family="Helvetica, Arial, sans-serif">',
            f'<rect width="{width}" height="{height}" fill="white"/>',
            f'<text class="title" x="{left}" y="24" font-size="16" fill="{TEXT}">'
            f'{escape(title)}</text>']


def _svg_tail(out: list[str], note: str, left: int, height: int) -> str:
    if note:
        out.append(f'<text class="note" x="{left}" y="{height - 10}" font-size="10" '
                   f'fill="#555555">{escape(note)}</text>')
    out.append("</svg>")
    return "\n".join(out)


def _pyplot():
    """matplotlib's pyplot on the file-only backend, or a one-line error without it."""
    try:
        import matplotlib
        matplotlib.use("Agg")
        import matplotlib.pyplot as plt
    except ImportError:
        raise SqlriskError("chart: PNG output needs matplotlib: pip install 'sqlrisk[chart]' "
                           "(or write .svg, which needs nothing)") from None
    return matplotlib, plt


def to_png(chart: OutcomeChart, path: str) -> None:
    """The same picture through matplotlib (``pip install 'sqlrisk[chart]'``)."""
    matplotlib, plt = _pyplot()
    fig, ax = plt.subplots(figsize=(8.6, 4.4), dpi=100)
    for b_lo, b_hi, p in chart.bins:
        ax.bar(b_lo, p, width=b_hi - b_lo, align="edge", color=BAR)
    lo, hi = ax.get_xlim()
    for c in chart.cuts:
        ax.axvline(c, color=CUT, linewidth=1.5)
    top = ax.get_ylim()[1]
    for i, (a, b) in enumerate(_band_spans(chart, lo, hi)):
        if i < len(chart.bands):
            ax.text((a + b) / 2, top * 1.02, band_label(chart, i), ha="center", fontsize=10)
    ax.axvline(chart.mean, color=MEAN, linestyle="--", linewidth=2)
    ax.text(chart.mean, top * 0.95, f" expected {compact_money(chart.mean)}", color=MEAN,
            fontsize=9)
    ax.xaxis.set_major_formatter(matplotlib.ticker.FuncFormatter(lambda v, _: compact_money(v)))
    ax.set_xlabel("won total (currency units)")
    ax.set_title(chart.title, loc="left", pad=24)
    if chart.note:
        fig.text(0.01, 0.01, chart.note, fontsize=8, color="#555555")
    fig.tight_layout()
    fig.savefig(path)
    plt.close(fig)


# -- reliability diagram ------------------------------------------------------------

DIAGONAL = "#888888"
POINT = "#2f6f4f"


@dataclass
class ReliabilityChart:
    title: str
    points: list[tuple[float, float, int]]  # (mean stated probability, observed rate, deals)
    intervals: list[tuple[float, float]] | None = None  # (lo, hi) of the observed rate
    note: str = ""


def _radius(deals: int, most: int) -> float:
    """Circle radius in pixels: area in proportion to the bin's deals (at least 2 pixels)."""
    return max(2.0, 14.0 * math.sqrt(deals / most)) if most > 0 else 2.0


def reliability_svg(chart: ReliabilityChart, width: int = 560, height: int = 590) -> str:
    left, right, top, bottom = 70, 30, 50, 80
    side = min(width - left - right, height - top - bottom)
    most = max((d for _, _, d in chart.points), default=0)

    def x(p):
        return left + p * side

    def y(p):
        return top + (1.0 - p) * side

    out = _svg_head(width, height, left, chart.title)
    for t in nice_ticks(0.0, 1.0, 5):
        out.append(f'<line class="grid" x1="{x(t):.1f}" y1="{top}" x2="{x(t):.1f}" '
                   f'y2="{top + side}" stroke="{GRID}"/>')
        out.append(f'<line class="grid" x1="{left}" y1="{y(t):.1f}" x2="{left + side}" '
                   f'y2="{y(t):.1f}" stroke="{GRID}"/>')
        out.append(f'<text class="tick" x="{x(t):.1f}" y="{top + side + 18}" font-size="11" '
                   f'text-anchor="middle" fill="{TEXT}">{t:.0%}</text>')
        out.append(f'<text class="tick" x="{left - 6}" y="{y(t) + 4:.1f}" font-size="11" '
                   f'text-anchor="end" fill="{TEXT}">{t:.0%}</text>')
    out.append(f'<rect class="axis" x="{left}" y="{top}" width="{side}" height="{side}" '
               f'fill="none" stroke="{TEXT}"/>')
    out.append(f'<line class="diagonal" x1="{x(0):.1f}" y1="{y(0):.1f}" x2="{x(1):.1f}" '
               f'y2="{y(1):.1f}" stroke="{DIAGONAL}" stroke-width="1.5" stroke-dasharray="6 4"/>')
    for i, (stated, observed, deals) in enumerate(chart.points):
        if chart.intervals is not None:
            lo, hi = chart.intervals[i]
            out.append(f'<line class="interval" x1="{x(stated):.1f}" y1="{y(lo):.1f}" '
                       f'x2="{x(stated):.1f}" y2="{y(hi):.1f}" stroke="{POINT}"/>')
        r = _radius(deals, most)
        out.append(f'<circle class="point" cx="{x(stated):.1f}" cy="{y(observed):.1f}" '
                   f'r="{r:.1f}" fill="{POINT}" fill-opacity="0.55" stroke="{POINT}"/>')
        out.append(f'<text class="deals" x="{x(stated) + r + 3:.1f}" y="{y(observed) + 4:.1f}" '
                   f'font-size="10" fill="{TEXT}">{deals:,}</text>')
    out.append(f'<text class="axis-label" x="{left + side / 2}" y="{top + side + 40}" '
               f'font-size="12" text-anchor="middle" fill="{TEXT}">stated win probability '
               f'(mean in bin)</text>')
    out.append(f'<text class="axis-label" x="18" y="{top + side / 2}" font-size="12" '
               f'text-anchor="middle" fill="{TEXT}" transform="rotate(-90 18 {top + side / 2})">'
               f'observed win rate</text>')
    lines = chart.note.splitlines()
    for k, line in enumerate(lines):
        out.append(f'<text class="note" x="{left}" y="{height - 10 - 13 * (len(lines) - 1 - k)}" '
                   f'font-size="10" fill="#555555">{escape(line)}</text>')
    return _svg_tail(out, "", left, height)


def reliability_png(chart: ReliabilityChart, path: str) -> None:
    """The same diagram through matplotlib (``pip install 'sqlrisk[chart]'``)."""
    matplotlib, plt = _pyplot()
    fig, ax = plt.subplots(figsize=(5.6, 5.9), dpi=100)
    ax.plot([0, 1], [0, 1], color=DIAGONAL, linestyle="--", linewidth=1.5)
    most = max((d for _, _, d in chart.points), default=0)
    for i, (stated, observed, deals) in enumerate(chart.points):
        if chart.intervals is not None:
            ax.vlines(stated, *chart.intervals[i], color=POINT, linewidth=1)
        r = _radius(deals, most)
        ax.scatter([stated], [observed], s=(1.5 * r) ** 2, color=POINT, alpha=0.55)
        ax.annotate(f"{deals:,}", (stated, observed), xytext=(0.75 * r + 3, -3),
                    textcoords="offset points", fontsize=8)
    ax.set_xlim(0, 1)
    ax.set_ylim(0, 1)
    ax.set_aspect("equal")
    percent = matplotlib.ticker.FuncFormatter(lambda v, _: f"{v:.0%}")
    ax.xaxis.set_major_formatter(percent)
    ax.yaxis.set_major_formatter(percent)
    ax.grid(color=GRID)
    ax.set_xlabel("stated win probability (mean in bin)")
    ax.set_ylabel("observed win rate")
    ax.set_title(chart.title, loc="left")
    if chart.note:
        fig.text(0.01, 0.01, chart.note, fontsize=7, color="#555555")
    fig.tight_layout(rect=(0, 0.025 * (1 + chart.note.count("\n")), 1, 1))
    fig.savefig(path)
    plt.close(fig)
