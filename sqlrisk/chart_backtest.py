"""The backtest chart: where each won total fell in its forecast, per forecast method.

Rows are shaped like ``sql/backtest.sql``'s summary rows (one per method, ``pit_counts`` not
NULL); its per-forecast rows (``-p show=forecasts``, ``pit_counts`` NULL) are left out. Each
method gets a histogram of its PIT values, the forecast's own probability of a total below
the one won: right forecasts give a flat histogram, so a dashed line marks the count each
bin expects (``pit_expected``) and a grey band its binomial 95% range with n = the method's
forecasts (each bin holds Binomial(n, 1/bins) of them). Bars outside the band are drawn in
a deeper colour. A U shape means the spreads are too narrow, a hump too wide, a slope a
biased mean (the usual reading of a PIT histogram: Gneiting, Balabdaoui and Raftery,
"Probabilistic forecasts, calibration and sharpness", 2007). Under the histograms
one row per method gives the share of won totals inside the forecast's 80% interval against
the ideal 80% and its binomial 95% range, Binomial(n, 0.8) / n.

``backtest_chart`` reads the description from a result table, ``backtest_figure`` draws it
and ``draw_backtest`` writes the file (SVG or PNG by the suffix).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import duckdb
import pyarrow as pa

from .chart_drawing import Drawn, Page
from .chart_layout import CHAR_EM
from .chart_style import (BAND_EDGES, BAND_FILLS, DPI, INK, NEUTRAL_FILL, QUIET, TEXT,
                          percent_ticks, pyplot, quiet_frame, save)
from .chart_files import quote as _q
from .errors import ParameterError
from .text_format import money

ROWS = "__sqlrisk_backtest_rows"
ROW_ID = "__sqlrisk_row"
BACKTEST_COLUMNS = ("method", "pit_counts", "coverage_80")
#: Optional columns read when present (a hand-written query may leave them out).
OPTIONAL_COLUMNS = {"forecasts": "BIGINT", "pit_expected": "DOUBLE", "crps": "DOUBLE",
                    "band_rps": "DOUBLE"}
LEVEL = 0.95  # the reference bands' probability
IDEAL_COVERAGE = 0.8
INSIDE_FILL = BAND_FILLS[3]  # sea green: a bar consistent with a uniform PIT
OUTSIDE_FILL = BAND_EDGES[0]  # deep clay: a bar outside the band
#: Page geometry in inches.
PANEL_W, PANEL_GAP, PANEL_H, LEFT, RIGHT = 2.3, 0.4, 2.0, 0.75, 0.3
HEAD, PANEL_TOP, PANEL_FOOT, ROW_H, FOOT = 0.85, 0.5, 0.55, 0.3, 0.55
MIN_WIDTH, PER_ROW = 7.8, 4
NOTE = ("Bars inside the grey band fit a uniform PIT (dashed: its count per bin); deeper bars "
        "fall outside it.\nA U shape means spreads too narrow (raise rho), a hump too wide, a "
        "slope a biased mean.")


@dataclass
class MethodScores:
    """One method's summary row as drawn."""

    method: str
    counts: list[int]  # forecasts per PIT bin, bins of equal width over [0, 1]
    expected: float  # the count per bin if the PIT is uniform (pit_expected)
    band: tuple[float, float]  # binomial 95% range of one bin's count
    forecasts: int
    coverage: float | None  # share of won totals inside the 80% interval
    coverage_range: tuple[float, float]  # binomial 95% range of that share if right
    crps: float | None = None  # mean CRPS, in currency
    rps: float | None = None  # mean band RPS


@dataclass
class BacktestChart:
    title: str
    methods: list[MethodScores]  # in the query's order
    subtitle: str = ""
    note: str = ""


def binomial_range(trials: int, p: float, level: float = LEVEL) -> tuple[float, float]:
    """The central ``level`` range of a Binomial(trials, p) count: its (1 - level) / 2 and
    (1 + level) / 2 quantiles (scipy.stats.binom.ppf)."""
    from scipy.stats import binom  # lazy: import sqlrisk does not load SciPy

    tail = (1.0 - level) / 2.0
    return float(binom.ppf(tail, trials, p)), float(binom.ppf(1.0 - tail, trials, p))


def method_scores(method: str, counts, forecasts: int, coverage: float | None,
                  expected: float | None = None, crps: float | None = None,
                  rps: float | None = None) -> MethodScores:
    """A method's panel from its summary numbers, with both binomial reference ranges."""
    counts = [int(c) for c in counts]
    bins = len(counts)
    lo, hi = binomial_range(forecasts, IDEAL_COVERAGE)
    return MethodScores(method, counts, forecasts / bins if expected is None else expected,
                        binomial_range(forecasts, 1.0 / bins), forecasts, coverage,
                        (lo / forecasts, hi / forecasts), crps, rps)


def is_backtest_table(table: pa.Table) -> bool:
    """True when ``table`` has the backtest's columns (see sql/backtest.sql)."""
    return set(BACKTEST_COLUMNS) <= set(table.column_names)


def backtest_chart(con: duckdb.DuckDBPyConnection, table: pa.Table,
                   where: str | None = None) -> BacktestChart:
    """The chart of ``table``'s summary rows (``pit_counts`` not NULL) after ``where``."""
    names = set(table.column_names)
    optional = [f"{_q(c)}::{t}" if c in names else f"NULL::{t}"
                for c, t in OPTIONAL_COLUMNS.items()]
    table = table.append_column(ROW_ID, pa.array(range(len(table)), pa.int64()))
    con.register(ROWS, table)
    try:
        rows = con.execute(
            "SELECT CAST(method AS VARCHAR), pit_counts::BIGINT[], coverage_80::DOUBLE, "
            + ", ".join(optional) + f" FROM {ROWS} WHERE pit_counts IS NOT NULL"
            + (f" AND ({where})" if where else "") + f" ORDER BY {ROW_ID}").fetchall()
    finally:
        con.unregister(ROWS)
    if not rows:
        if where:
            raise ParameterError(f"chart: no backtest summary row (one with pit_counts) matches "
                                 f"--where {where!r}; keep a method's summary row, e.g. "
                                 "--where \"method = 'stated'\"")
        raise ParameterError("chart: the result has no backtest summary row (one with "
                             "pit_counts, period 'all'); keep the summary rows of "
                             "sql/backtest.sql in the result")
    methods = []
    for method, counts, coverage, forecasts, expected, crps, rps in rows:
        if len(counts) < 2 or any(c is None or c < 0 for c in counts):
            raise ParameterError(f"chart: pit_counts {counts!r} of method {method!r} is not a "
                                 "list of two or more counts >= 0 (one per PIT bin)")
        forecasts = sum(counts) if forecasts is None else forecasts
        if forecasts <= 0:
            raise ParameterError(f"chart: method {method!r} has forecasts {forecasts!r}; a PIT "
                                 "histogram needs at least one forecast")
        methods.append(method_scores(method or "(no method)", counts, forecasts, coverage,
                                     expected, crps, rps))
    n = sorted({m.forecasts for m in methods})
    many = f"{n[0]:,}" if len(n) == 1 else f"{n[0]:,} to {n[-1]:,}"
    return BacktestChart(
        title="Backtest: won totals against their forecasts",
        methods=methods,
        subtitle=(f"{many} forecasts per method; PIT: the forecast's chance of a total below "
                  "the one won"),
        note=NOTE)


def _chars(inches: float, size: float) -> int:
    """How many characters of ``size`` points fit in ``inches`` (chart_layout's estimate)."""
    return max(4, int(inches * 72 / (CHAR_EM * size)))


def _fit(text: str, inches: float, size: float) -> str:
    most = _chars(inches, size)
    return text if len(text) <= most else text[:most - 1] + "…"


def _scores_text(m: MethodScores) -> str:
    parts = [f"mean CRPS {money(m.crps)}" if m.crps is not None else "",
             f"RPS {m.rps:.3f}" if m.rps is not None else ""]
    return " · ".join(p for p in parts if p) or "no scores"


def backtest_figure(chart: BacktestChart) -> Drawn:
    """PIT histograms side by side (up to four a row, one y scale), then the coverage rows."""
    _, plt = pyplot()
    count = len(chart.methods)
    cols, rows = min(count, PER_ROW), math.ceil(count / PER_ROW)
    width = max(MIN_WIDTH, LEFT + cols * PANEL_W + (cols - 1) * PANEL_GAP + RIGHT)
    panel_w = (width - LEFT - RIGHT - (cols - 1) * PANEL_GAP) / cols
    block = PANEL_TOP + PANEL_H + PANEL_FOOT
    coverage_h = ROW_H * count + 0.15
    height = HEAD + rows * block + 0.6 + coverage_h + 0.35 + FOOT
    fig = plt.figure(figsize=(width, height), dpi=DPI)
    page = Page(fig)

    def inch(x: float, y: float) -> tuple[float, float]:
        return x * DPI, y * DPI

    page.text("title", *inch(LEFT, height - 0.42), chart.title, 15, weight="bold")
    page.text("subtitle", *inch(LEFT, height - 0.64), chart.subtitle, 9, color=QUIET)
    top_count = max(max(max(m.counts), m.band[1], m.expected) for m in chart.methods)
    for k, m in enumerate(chart.methods, start=1):
        r, c = divmod(k - 1, PER_ROW)
        x0 = LEFT + c * (panel_w + PANEL_GAP)
        y1 = height - HEAD - r * block - PANEL_TOP
        ax = fig.add_axes((x0 / width, (y1 - PANEL_H) / height, panel_w / width,
                           PANEL_H / height))
        _histogram(ax, m, f"p{k}-", 1.12 * top_count)
        if c > 0:
            ax.tick_params(labelleft=False)
        else:
            ax.set_ylabel("forecasts")
        page.text(f"p{k}-title", *inch(x0, y1 + 0.24), _fit(m.method, panel_w, 10), 10,
                  weight="bold")
        page.text(f"p{k}-scores", *inch(x0, y1 + 0.07), _fit(_scores_text(m), panel_w, 8), 8,
                  color=QUIET)
    top = height - HEAD - rows * block
    page.text("coverage-heading", *inch(LEFT, top - 0.2),
              "Share of won totals inside the forecast's 80% interval", 10, weight="bold")
    page.text("coverage-key", *inch(LEFT, top - 0.4),
              "dashed: the ideal 80%; grey: its binomial 95% range for that many forecasts",
              8, color=QUIET)
    _coverage(fig, page, chart, width, height, top - 0.6, coverage_h)
    for k, line in enumerate(reversed(chart.note.splitlines())):
        page.text(f"note-{k + 1}", 0.15 * DPI, 8 + 13 * k, line, 8, color=QUIET)
    return page.drawn


def _histogram(ax, m: MethodScores, gid: str, top: float) -> None:
    import matplotlib.ticker as ticker

    quiet_frame(ax)
    ax.grid(False, axis="x")
    bins = len(m.counts)
    lo, hi = m.band
    ax.axhspan(lo, hi, color=NEUTRAL_FILL, linewidth=0, zorder=0.5, gid=f"{gid}band")
    for b, count in enumerate(m.counts, start=1):
        inside = lo <= count <= hi
        ax.bar((b - 1) / bins, count, width=1.0 / bins, align="edge", linewidth=0.8,
               color=INSIDE_FILL if inside else OUTSIDE_FILL,
               edgecolor="white", zorder=1, gid=f"{gid}bar-{b}")
    for edge in (lo, hi):  # the band's edges stay visible across the bars
        ax.axhline(edge, color=QUIET, linewidth=0.6, alpha=0.6, zorder=2)
    ax.axhline(m.expected, color=INK, linewidth=1.3, linestyle=(0, (4, 3)), zorder=3,
               gid=f"{gid}expected")
    ax.set_xlim(0, 1)
    ax.set_ylim(0, top)
    ax.set_xticks([0, 0.5, 1.0])
    ax.xaxis.set_major_formatter(ticker.FuncFormatter(lambda v, _: f"{v:g}"))
    ax.yaxis.set_major_locator(ticker.MaxNLocator(5, integer=True))
    ax.tick_params(labelsize=8)
    ax.set_xlabel("PIT of the won total", fontsize=9, labelpad=2)


def _coverage(fig, page: Page, chart: BacktestChart, width: float, height: float,
              top: float, size: float) -> None:
    """One row per method: the ideal's range shaded, a stem from 80% to the method's share."""
    names = [_fit(m.method, 3.0, 9) for m in chart.methods]
    longest = max(len(name) for name in names)
    left = max(LEFT, 0.3 + longest * CHAR_EM * 9 / 72)
    ax = fig.add_axes((left / width, (top - size) / height, (width - left - RIGHT) / width,
                       size / height))
    quiet_frame(ax)
    ax.grid(False, axis="y")
    count = len(chart.methods)
    shares = [m.coverage for m in chart.methods if m.coverage is not None]
    low = min([IDEAL_COVERAGE, *shares, *(m.coverage_range[0] for m in chart.methods)])
    step = 0.1 if low >= 0.5 else 0.2  # ticks every 10 points on a short axis, else 20
    start = min(0.5, step * math.floor(low / step + 1e-9))
    room = 48 / (DPI * (width - left - RIGHT))  # a label beside a dot at 100%, as a share
    pad = room * (1.0 - start) / (1.0 - 2 * room)  # of the axis width, in data units
    ax.set_xlim(start - pad, 1.0 + pad)
    ax.set_ylim(count - 0.4, -0.6)  # first method on top
    ax.axvline(IDEAL_COVERAGE, color=INK, linewidth=1.1, linestyle=(0, (4, 3)), gid="ideal")
    for k, m in enumerate(chart.methods, start=1):
        y = k - 1
        lo, hi = m.coverage_range
        ax.barh(y, hi - lo, left=lo, height=0.56, color=NEUTRAL_FILL, linewidth=0,
                gid=f"coverage-range-{k}")
        if m.coverage is None:
            text, at, ha = "none", IDEAL_COVERAGE, "left"
        else:
            ax.plot([IDEAL_COVERAGE, m.coverage], [y, y], color=INK, linewidth=1.2,
                    gid=f"coverage-stem-{k}")
            ax.plot([m.coverage], [y], marker="o", markersize=6.5, color=INK,
                    markeredgecolor="white", gid=f"coverage-dot-{k}")
            text, at = f"{100 * m.coverage:.0f}%", m.coverage
            ha = "left" if at >= IDEAL_COVERAGE else "right"  # away from the stem
        x, yy = ax.transData.transform((at, y))
        page.text(f"coverage-{k}", x + (9 if ha == "left" else -9), yy, text, 9, ha=ha,
                  va="center", color=INK, weight="bold")
    ax.set_yticks(range(count))
    ax.set_yticklabels(names)
    ax.tick_params(axis="y", length=0, labelsize=9, labelcolor=TEXT)
    ax.tick_params(axis="x", labelsize=8)
    ax.set_xticks([round(start + t * step, 9) for t in range(round((1.0 - start) / step) + 1)])
    percent_ticks(ax, "x")


def draw_backtest(con: duckdb.DuckDBPyConnection, table: pa.Table, out: Path,
                  where: str | None = None, cuts=None, grid: bool = False) -> list[Path]:
    """The backtest chart of ``table`` (sql/backtest.sql's result, after ``where``): one file.

    The summary rows (``pit_counts`` not NULL) are drawn, one PIT histogram per method in
    the query's order, and the coverage of the 80% interval; per-forecast rows are left out.
    ``grid`` changes nothing (the methods already share one page).
    """
    if cuts is not None:
        raise ParameterError("chart: --cuts marks band cuts on an outcome chart; the backtest "
                             "chart has none (leave --cuts out)")
    return [save(backtest_figure(backtest_chart(con, table, where)).fig, out)]
