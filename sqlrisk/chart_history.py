"""How the odds moved: band odds by snapshot date, per owner (or whatever the label is).

A result with a date column and band odds (a ``bands`` list, or the columns
``below_floor``, ``floor_to_target``, ``target_to_stretch``, ``stretch_or_more``) on two
or more dates for some label, shaped like ``band_history`` (``sql/nightly_snapshot.sql``)
or ``sql/odds_history.sql``, is drawn as stacked areas of the band probabilities over the
dates: the highest band at the bottom, so each boundary between two colours is the chance
of reaching that cut. ``reach_*`` columns are drawn as lines. A panel beside the plot
gives the latest odds and how far each band moved since the first date.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import duckdb
import numpy as np
import pyarrow as pa

from .chart_drawing import Drawn, Page, band_names, grid_page, swatch
from .chart_files import accuracy_text, label_column, named_file, quote
from .chart_style import (DPI, INK, QUIET, band_colours, percent_ticks, pyplot,
                          quiet_frame, save)
from .errors import ParameterError
from .text_format import pct

BAND_COLUMNS = {"below_floor": "below floor", "floor_to_target": "floor to target",
                "target_to_stretch": "target to stretch", "stretch_or_more": "stretch or more"}
CUT_COLUMNS = ("floor", "target", "stretch")
ROWS = "__sqlrisk_history_rows"
REST = "below the lowest cut given"


@dataclass
class HistoryChart:
    title: str
    dates: list  # datetime.date, ascending
    bands: list[tuple[str, list[float]]]  # (name, probability per date), lowest band first
    reach: list[tuple[str, list[float]]]  # (name, P(reach) per date)
    note: str
    error: float | None = None  # the largest odds_error of its snapshots, when stored


def date_column(table: pa.Table) -> str | None:
    for name, typ in zip(table.column_names, table.schema.types):
        if pa.types.is_date(typ) or pa.types.is_timestamp(typ):
            return name
    return None


def _odds_columns(table: pa.Table) -> tuple[bool, list[str], list[str]]:
    names = table.column_names
    has_list = "bands" in names and pa.types.is_list(table.schema.field("bands").type)
    return (has_list, [c for c in BAND_COLUMNS if c in names],
            [c for c in names if c.startswith("reach_")])


def is_history(table: pa.Table) -> bool:
    """A date column, band or reach odds, and some label on two or more dates."""
    date = date_column(table)
    has_list, bands, reach = _odds_columns(table)
    if date is None or not (has_list or bands or reach) or table.num_rows < 2:
        return False
    label = label_column(table, "")
    labels = table.column(label).to_pylist() if label else [None] * table.num_rows
    seen: dict = {}
    for who, when in zip(labels, table.column(date).to_pylist()):
        seen.setdefault(who, set()).add(when)
    return max(len(d) for d in seen.values()) >= 2


def history_charts(con: duckdb.DuckDBPyConnection, table: pa.Table,
                   where: str | None = None) -> list[HistoryChart]:
    date, label = date_column(table), label_column(table, "")
    has_list, band_cols, reach_cols = _odds_columns(table)
    cuts = [c for c in CUT_COLUMNS if c in table.column_names]
    error = "odds_error" if "odds_error" in table.column_names else None
    cols = [quote(label) if label else "NULL", quote(date),
            "bands::DOUBLE[]" if has_list else "NULL",
            *(f"{quote(c)}::DOUBLE" for c in [*band_cols, *reach_cols, *cuts]),
            f"{error}::DOUBLE" if error else "NULL"]
    con.register(ROWS, table)
    try:
        rows = con.execute(f"SELECT {', '.join(cols)} FROM {ROWS}"
                           + (f" WHERE ({where})" if where else "")
                           + f" ORDER BY 1, 2").fetchall()
    finally:
        con.unregister(ROWS)
    if not rows:
        raise ParameterError("chart: no row to draw" + (f" matches --where {where!r}" if where else ""))
    charts = []
    for who in dict.fromkeys(r[0] for r in rows):
        mine = [r for r in rows if r[0] == who]
        charts.append(_chart(who, mine, has_list, band_cols, reach_cols, cuts))
    return charts


def _row_bands(row, has_list, band_cols, cuts) -> dict[str, float]:
    """One snapshot's bands by name, lowest first."""
    values = row[3:3 + len(band_cols)]
    cut_values = row[-1 - len(cuts):-1]
    if has_list and row[2] is not None:
        present = [c for c, v in zip(cuts, cut_values) if v is not None]
        if len(present) + 1 != len(row[2]):
            present = [f"cut {k + 1}" for k in range(len(row[2]) - 1)]
        return dict(zip(band_names(present), row[2]))
    out = {BAND_COLUMNS[c]: v for c, v in zip(band_cols, values) if v is not None}
    rest = 1.0 - sum(out.values())
    if out and rest > 1e-9:
        out = {REST: rest, **out}
    return out


def _chart(who, rows, has_list, band_cols, reach_cols, cuts) -> HistoryChart:
    per_date = [_row_bands(r, has_list, band_cols, cuts) for r in rows]
    order = {REST: -1, "every total": -1}
    names: list[str] = []
    for bands in per_date:
        for name in bands:
            if name not in names:
                names.append(name)
    names.sort(key=lambda n: order.get(n, _rank(n)))
    bands = [(n, [b.get(n, 0.0) for b in per_date]) for n in names]
    start = 3 + len(band_cols)
    reach = [(c.removeprefix("reach_").replace("_", " "),
              [r[start + k] if r[start + k] is not None else math.nan for r in rows])
             for k, c in enumerate(reach_cols)]
    errors = [r[-1] for r in rows if r[-1] is not None]
    if not errors:
        note = "Band odds as each snapshot stored them."
    elif max(errors) == 0:
        note = "Band odds as each snapshot stored them; exact odds in every snapshot."
    else:
        note = (f"Band odds as each snapshot stored them; {accuracy_text(max(errors))} "
                "(the least exact snapshot).")
    return HistoryChart(title=who or "all rows", dates=[r[1] for r in rows], bands=bands,
                        reach=reach, note=note, error=max(errors) if errors else None)


def _rank(name: str) -> int:
    """Bands in cut order: below floor, floor to target, ..., stretch or more."""
    for k, cut in enumerate(CUT_COLUMNS):
        if name == f"below {cut}":
            return 2 * k
        if name.startswith(f"{cut} to") or name == f"{cut} or more":
            return 2 * k + 1
    return 100


def _stack(ax, chart: HistoryChart, gid: str) -> None:
    colours = band_colours(len(chart.bands))
    # highest band at the bottom: the top of each colour is the chance of reaching its cut
    ax.stackplot(chart.dates, *[p for _, p in reversed(chart.bands)],
                 colors=list(reversed(colours)), linewidth=0.6, edgecolor="white")
    for name, values in chart.reach:
        ax.plot(chart.dates, values, color=INK, linewidth=1.8, marker="o", markersize=3,
                gid=f"{gid}reach-{name.replace(' ', '-')}")
    ax.set_ylim(0, 1)
    ax.set_xlim(chart.dates[0], chart.dates[-1])
    percent_ticks(ax)
    quiet_frame(ax)
    ax.grid(False, axis="x")


def _date_ticks(ax, dates, count: int) -> None:
    picks = sorted(set(np.linspace(0, len(dates) - 1, min(count, len(dates))).round().astype(int)))
    ax.set_xticks([dates[i] for i in picks])
    ax.set_xticklabels([dates[i].strftime("%d %b") for i in picks])


def history_figure(chart: HistoryChart) -> Drawn:
    _, plt = pyplot()
    fig = plt.figure(figsize=(9.6, 5.2), dpi=DPI)
    page = Page(fig)
    ax = fig.add_axes((0.10, 0.17, 0.61, 0.71))
    _stack(ax, chart, "")
    _date_ticks(ax, chart.dates, 7)
    ax.set_ylabel("chance of landing in each band")
    ax.set_xlabel("snapshot date", labelpad=3)
    page.text("title", 0.10 * page.width, 0.925 * page.height,
              f"{chart.title}: how the odds moved", 15, weight="bold")
    x, right, y = 0.745 * page.width, 0.985 * page.width, 0.86 * page.height
    page.text("bands-heading", x, y, f"On {chart.dates[-1]:%d %b %Y}", 10, weight="bold")
    first = f"{chart.dates[0]:%d %b}"
    for k, ((name, values), colour) in enumerate(zip(chart.bands, band_colours(len(chart.bands))),
                                                 start=1):
        y -= 34
        fig.patches.append(swatch(page, x, y, colour, f"swatch-{k}"))
        page.text(f"band-name-{k}", x + 20, y, name[:24], 9)
        page.text(f"band-prob-{k}", right, y, pct(values[-1]), 9, ha="right", weight="bold")
        moved = 100 * (values[-1] - values[0])
        page.text(f"band-move-{k}", x + 20, y - 13, f"{moved:+.1f} pts since {first}", 7.5,
                  color=QUIET)
    for k, (name, values) in enumerate(chart.reach, start=1):
        y -= 30
        fig.lines.append(_key_line(page, x, y + 6, f"reach-key-{k}"))
        page.text(f"reach-name-{k}", x + 20, y, f"reach {name}"[:24], 9)
        page.text(f"reach-prob-{k}", right, y, pct(values[-1]), 9, ha="right", weight="bold")
    page.text("note", 0.10 * page.width, 0.02 * page.height, chart.note, 8.5, color=QUIET)
    return page.drawn


def _key_line(page: Page, x: float, y: float, gid: str):
    import matplotlib.lines as lines

    return lines.Line2D([x / page.width, (x + 13) / page.width], [y / page.height] * 2,
                        transform=page.fig.transFigure, color=INK, linewidth=1.8, gid=gid)


CELL = (3.3, 2.4)


def history_grid(charts: list[HistoryChart]) -> Drawn:
    """One small stacked-area panel per label on one page, with one key for the colours."""
    page, cols, width, height = grid_page(len(charts), CELL, 0.8)
    fig = page.fig
    for n, chart in enumerate(charts):
        r, c = divmod(n, cols)
        left = (0.15 + c * CELL[0] + 0.5) / width
        bottom = (height - (r + 1) * CELL[1] + 0.35) / height
        ax = fig.add_axes((left, bottom, (CELL[0] - 0.7) / width, (CELL[1] - 0.8) / height))
        _stack(ax, chart, f"p{n + 1}-")
        _date_ticks(ax, chart.dates, 3)
        ax.set_yticks([0, 0.5, 1.0])
        ax.tick_params(labelsize=7.5)
        top = (bottom + (CELL[1] - 0.8) / height) * page.height
        page.text(f"p{n + 1}-title", left * page.width - 30, top + 8, chart.title[:34], 9.5,
                  weight="bold")
    names = list(dict.fromkeys(n for ch in charts for n, _ in ch.bands))
    x = 0.15 * DPI
    for k, (name, colour) in enumerate(zip(names, band_colours(len(names))), start=1):
        fig.patches.append(swatch(page, x, 0.41 * DPI, colour, f"key-swatch-{k}"))
        box = page.text(f"key-{k}", x + 18, 0.41 * DPI, name, 8)
        x = box.x1 + 14
    worst = max(charts, key=lambda ch: -1.0 if ch.error is None else ch.error)
    page.text("note", 0.15 * DPI, 0.1 * DPI, worst.note, 8, color=QUIET)
    return page.drawn


def draw(con: duckdb.DuckDBPyConnection, table: pa.Table, out: Path, where: str | None = None,
         grid: bool = False) -> list[Path]:
    charts = history_charts(con, table, where)
    if grid:
        return [save(history_grid(charts).fig, out)]
    written, taken = [], set()
    for i, chart in enumerate(charts, start=1):
        path = named_file(out, chart.title, i, len(charts), taken)
        written.append(save(history_figure(chart).fig, path))
    return written
