"""The reliability diagram: stated win probabilities against observed win rates.

Rows are bins shaped like ``sql/reliability_table.sql``: each bin is a circle (area in
proportion to its deals, the count written beside it) at its mean stated probability and
observed win rate, with its Wilson interval as a whisker where the query gives one; the
dashed diagonal is a perfectly calibrated forecast (the usual reliability diagram: common
practice). Drawn once with matplotlib, saved as SVG or PNG.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import duckdb
import pyarrow as pa

from .chart_drawing import Drawn, Page
from .chart_files import label_column, named_file, quote as _q
from .chart_style import DPI, INK, QUIET, percent_ticks, pyplot, quiet_frame, save
from .errors import ParameterError

ROWS = "__sqlrisk_chart_rows"
POINT = "#2f7d74"


@dataclass
class ReliabilityChart:
    title: str
    points: list[tuple[float, float, int]]  # (mean stated probability, observed rate, deals)
    intervals: list[tuple[float, float]] | None = None  # (lo, hi) of the observed rate
    note: str = ""


def _radius(deals: int, most: int) -> float:
    """Circle radius in points: area in proportion to the bin's deals (at least 1.5)."""
    return max(1.5, 10.0 * math.sqrt(deals / most)) if most > 0 else 1.5


def reliability_figure(chart: ReliabilityChart) -> Drawn:
    _, plt = pyplot()
    fig = plt.figure(figsize=(5.8, 6.2), dpi=DPI)
    page = Page(fig)
    ax = fig.add_axes((0.15, 0.2, 0.78, 0.72))
    quiet_frame(ax)
    ax.set_xlim(0, 1)
    ax.set_ylim(0, 1)
    ax.plot([0, 1], [0, 1], color=QUIET, linestyle=(0, (5, 4)), linewidth=1.2, gid="diagonal")
    most = max((d for _, _, d in chart.points), default=0)
    for i, (stated, observed, deals) in enumerate(chart.points, start=1):
        if chart.intervals is not None:
            ax.plot([stated, stated], chart.intervals[i - 1], color=POINT, linewidth=1.2,
                    gid=f"interval-{i}")
        r = _radius(deals, most)
        ax.plot([stated], [observed], marker="o", markersize=2 * r, color=POINT, alpha=0.55,
                markeredgecolor=POINT, gid=f"point-{i}")
        x, y = ax.transData.transform((stated, observed))
        page.text(f"deals-{i}", x + r * DPI / 72 + 3, y, f"{deals:,}", 8, va="center",
                  color=INK)
    percent_ticks(ax, "x")
    percent_ticks(ax, "y")
    ax.set_xlabel("stated win probability (mean in bin)")
    ax.set_ylabel("observed win rate")
    page.text("title", 0.15 * page.width, 0.945 * page.height, chart.title, 13, weight="bold")
    for k, line in enumerate(reversed(chart.note.splitlines())):
        page.text(f"note-{k + 1}", 0.03 * page.width, 8 + 13 * k, line, 8, color=QUIET)
    return page.drawn


RELIABILITY_COLUMNS = ("stated_mean", "observed_rate", "deals")
INTERVAL_COLUMNS = ("wilson_lo", "wilson_hi")


def is_reliability_table(table: pa.Table) -> bool:
    """True when ``table`` has the reliability table's columns (see sql/reliability_table.sql)."""
    return set(RELIABILITY_COLUMNS) <= set(table.column_names)


def draw_reliability(con: duckdb.DuckDBPyConnection, table: pa.Table, out: Path,
                     where: str | None = None, cuts=None, grid: bool = False) -> list[Path]:
    """A reliability diagram of the rows of ``table`` (after ``where``); one per label.

    Rows are bins: ``stated_mean`` (x), ``observed_rate`` (y) and ``deals``
    (circle size), with ``wilson_lo``/``wilson_hi`` as whiskers when present.
    Bins without deals are left out. A text column, if any, splits the rows
    into one diagram per value (e.g. one per stage).
    """
    if cuts is not None:
        raise ParameterError("chart: --cuts marks band cuts on an outcome chart; a reliability "
                             "diagram has none (leave --cuts out)")
    if grid:
        raise ParameterError("chart: --grid puts outcome charts or odds histories side by side; "
                             "a reliability diagram is one per label (leave --grid out)")
    label = label_column(table, "")
    has_ci = set(INTERVAL_COLUMNS) <= set(table.column_names)
    con.register(ROWS, table)
    try:
        sql = (f"SELECT {('CAST(' + _q(label) + ' AS VARCHAR)') if label else 'NULL'} AS label, "
               "stated_mean::DOUBLE, observed_rate::DOUBLE, deals::BIGINT, "
               + ("wilson_lo::DOUBLE, wilson_hi::DOUBLE " if has_ci else "NULL, NULL ")
               + f"FROM {ROWS} WHERE deals > 0 AND stated_mean IS NOT NULL "
               "AND observed_rate IS NOT NULL" + (f" AND ({where})" if where else "")
               + " ORDER BY label, stated_mean")
        rows = con.execute(sql).fetchall()
    finally:
        con.unregister(ROWS)
    if not rows:
        raise ParameterError("chart: no bin with deals to draw"
                             + (f" matches --where {where!r}" if where else ""))
    for name, value in (("stated_mean", min(r[1] for r in rows)),
                        ("stated_mean", max(r[1] for r in rows)),
                        ("observed_rate", min(r[2] for r in rows)),
                        ("observed_rate", max(r[2] for r in rows))):
        if not 0.0 <= value <= 1.0:
            raise ParameterError(f"chart: {name} {value!r} is outside [0, 1]; a reliability "
                                 "diagram plots probabilities (were percentages given?)")
    labels = list(dict.fromkeys(r[0] for r in rows))
    written, taken = [], set()
    for i, name in enumerate(labels, start=1):
        mine = [r for r in rows if r[0] == name]
        deals = sum(r[3] for r in mine)
        spec = ReliabilityChart(
            title=name or "Stated win probability against observed win rate",
            points=[(r[1], r[2], r[3]) for r in mine],
            intervals=[(r[4], r[5]) for r in mine] if has_ci and all(
                r[4] is not None and r[5] is not None for r in mine) else None,
            note=(f"{deals:,} closed deals in {len(mine)} bins; circle area in proportion to deals"
                  + ("; whiskers: 95% Wilson intervals" if has_ci else "") + ".\n"
                  "Dashed line: observed = stated (a perfectly calibrated forecast)."),
        )
        path = named_file(out, name, i, len(labels), taken)
        written.append(save(reliability_figure(spec).fig, path))
    return written
