"""Pictures of an outcome: the distribution of the total with the band cuts on it.

A chart is described once (``OutcomeChart``) and drawn as SVG (written here,
no dependency) or PNG (with matplotlib, the optional ``sqlrisk[chart]`` extra).
Each cut is a vertical line, each band's probability is written on its band,
the expected value is marked, and the axis is in currency units.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from xml.sax.saxutils import escape

from .errors import SqlriskError
from .render import pct

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

    out = [f'<svg xmlns="http://www.w3.org/2000/svg" width="{width}" height="{height}" '
           f'viewBox="0 0 {width} {height}" font-family="Helvetica, Arial, sans-serif">',
           f'<rect width="{width}" height="{height}" fill="white"/>',
           f'<text class="title" x="{left}" y="24" font-size="16" fill="{TEXT}">'
           f'{escape(chart.title)}</text>']
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
    if chart.note:
        out.append(f'<text class="note" x="{left}" y="{height - 10}" font-size="10" '
                   f'fill="#555555">{escape(chart.note)}</text>')
    out.append("</svg>")
    return "\n".join(out)


def to_png(chart: OutcomeChart, path: str) -> None:
    """The same picture through matplotlib (``pip install 'sqlrisk[chart]'``)."""
    try:
        import matplotlib
        matplotlib.use("Agg")
        import matplotlib.pyplot as plt
    except ImportError:
        raise SqlriskError("chart: PNG output needs matplotlib: pip install 'sqlrisk[chart]' "
                           "(or write .svg, which needs nothing)") from None
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
