"""From a query result with an outcome column to chart files (and, by the result's shape,
to the odds over time of ``chart_history``, the reliability diagram of
``chart_reliability`` or the backtest's PIT histograms of ``chart_backtest``).

The numbers on an outcome chart come from sqlrisk's own SQL functions (``outcome_reach``
on the curve, ``outcome_bands``, ``outcome_bands_ci``, ``outcome_quantiles``,
``outcome_mean``, ``outcome_error``, ``wilson_interval`` for a simulated curve's
envelope) run on the result rows, so a picture shows exactly what a query would return.
"""

from __future__ import annotations

from pathlib import Path

import duckdb
import numpy as np
import pyarrow as pa

from . import chart_drawing as drawing
from . import chart_history
from .chart_backtest import draw_backtest, is_backtest_table
from .chart_reliability import draw_reliability, is_reliability_table, RELIABILITY_COLUMNS
from .chart_files import label_column, named_file, note_for as _note, quote as _q
from .chart_style import pyplot, save, write
from .kernels.readout import is_smooth
from .adapters.sql_types import OUTCOME_FIELDS, OUTCOME_SQL
from .errors import ParameterError

ROWS = "__sqlrisk_chart_rows"
ROW_ID = "__sqlrisk_row"
POINTS = "__sqlrisk_chart_x"
#: Columns that give a row's cuts when it has no ``cuts`` column and no --cuts is given.
NAMED_CUTS = ("floor", "target", "stretch")
#: Totals at which the curve is evaluated on a smooth outcome; an outcome read as points
#: with at most STEP_POINTS totals in view is drawn as its exact step function instead.
CURVE_POINTS = 400
STEP_POINTS = 600


def find_outcome_column(table: pa.Table) -> str | None:
    for name, typ in zip(table.column_names, table.schema.types):
        if pa.types.is_struct(typ) and {typ.field(i).name for i in range(typ.num_fields)} >= set(
                OUTCOME_FIELDS):
            return name
    return None


def outcome_column(table: pa.Table) -> str:
    column = find_outcome_column(table)
    if column is None:
        raise ParameterError(
            "chart: the query returns no outcome column (a STRUCT like outcome_dist's), no "
            f"reliability columns ({', '.join(RELIABILITY_COLUMNS)}), no backtest scores "
            "(method, pit_counts, coverage_80) and no dated band odds "
            "(a date column with bands or below_floor ... stretch_or_more); select an outcome, "
            "e.g. outcome_dist(amount, win_prob) AS outcome (see sql/region_outcomes.sql)")
    return column


def parse_cuts(text: str, error=ParameterError) -> list[tuple[str | None, float]]:
    """``'floor=800000,target=1.2e6'`` or ``'800000,1200000'`` -> [(name or None, value)]."""
    out = []
    for item in text.split(","):
        name, _, value = item.strip().rpartition("=")
        try:
            out.append((name.strip() or None, float(value)))
        except ValueError:
            raise error(f"--cuts: {item.strip()!r} is not a number or NAME=NUMBER; write e.g. "
                        "floor=800000,target=1200000") from None
    return out


def _cut_sql(table: pa.Table, cuts) -> tuple[str, str, list]:
    """SQL for a row's cut values and cut names, and the parameters they bind."""
    if cuts is not None:
        return "?::DOUBLE[]", "?::VARCHAR[]", [[v for _, v in cuts], [n for n, _ in cuts]]
    if "cuts" in table.column_names:
        typ = table.schema.field("cuts").type
        if pa.types.is_list(typ) and pa.types.is_struct(typ.value_type):
            fields = {typ.value_type.field(i).name for i in range(typ.value_type.num_fields)}
            if not {"name", "value"} <= fields:
                raise ParameterError(
                    "chart: the cuts column holds structs without name and value fields "
                    f"({', '.join(sorted(fields))}); give cuts as numbers or as "
                    "{'name': ..., 'value': ...} structs")
            return ("list_transform(cuts, lambda c: c.value::DOUBLE)",
                    "list_transform(cuts, lambda c: c.name::VARCHAR)", [])
    named = [c for c in NAMED_CUTS if c in table.column_names]
    values = ", ".join(f"{_q(c)}::DOUBLE" for c in named)
    names = ", ".join(f"CASE WHEN {_q(c)} IS NOT NULL THEN '{c}' END" for c in named)
    named_values = f"coalesce(list_filter([{values}], lambda c: c IS NOT NULL), [])::DOUBLE[]"
    named_names = f"coalesce(list_filter([{names}], lambda c: c IS NOT NULL), [])::VARCHAR[]"
    if "cuts" in table.column_names:  # numbers; named after floor, target, stretch if they match
        if not named:
            return "cuts::DOUBLE[]", "NULL::VARCHAR[]", []
        return ("cuts::DOUBLE[]",
                f"CASE WHEN cuts::DOUBLE[] = {named_values} THEN {named_names} END", [])
    if named:
        return named_values, named_names, []
    return "[]::DOUBLE[]", "[]::VARCHAR[]", []


def outcome_charts(con: duckdb.DuckDBPyConnection, table: pa.Table, where: str | None = None,
                   cuts=None) -> list[drawing.OutcomeChart]:
    """One chart description per row of ``table`` (after ``where``), its numbers from
    sqlrisk's SQL functions on the row's outcome."""
    column = outcome_column(table)
    label = label_column(table, column)
    outcome = f"{_q(column)}::{OUTCOME_SQL}"
    values, names, args = _cut_sql(table, cuts)
    table = table.append_column(ROW_ID, pa.array(range(len(table)), pa.int64()))
    con.register(ROWS, table)
    try:
        sql = (f"SELECT {ROW_ID}, {('CAST(' + _q(label) + ' AS VARCHAR)') if label else 'NULL'}, "
               f"cv, cn, o, outcome_bands(o, cv), outcome_bands_ci(o, cv, 0.95), "
               f"outcome_mean(o), outcome_error(o), "
               f"outcome_quantiles(o, [0.001, 0.1, 0.5, 0.9, 0.999]) "
               f"FROM (SELECT *, {outcome} AS o, {values} AS cv, "
               f"{names} AS cn FROM {ROWS}) AS r "
               f"WHERE o IS NOT NULL" + (f" AND ({where})" if where else "")
               + f" ORDER BY {ROW_ID}")
        rows = con.execute(sql, args).fetchall()
        if not rows:
            raise ParameterError("chart: no row to draw"
                                 + (f" matches --where {where!r}" if where else ""))
        grids = {row[0]: _curve_points(row[4], row[2], row[9]) for row in rows}
        reach = _reach(con, grids, outcome)
    finally:
        con.unregister(ROWS)
    return [_chart(row, *grids[row[0]], reach[row[0]]) for row in rows]


def _curve_points(o, cut_values, q) -> tuple[np.ndarray, bool]:
    """Totals to evaluate the curve at, and whether they are the outcome's own points (a
    step function) or a grid over a smooth reading."""
    lo = min([q[0], *cut_values, q[1] - 1.0])
    hi = max([q[4], *cut_values, q[3] + 1.0])
    pad = 0.06 * (hi - lo)
    lo, hi = lo - pad, hi + pad
    mass = np.asarray(o["mass"], float)
    if o["trials"] == 0 and not is_smooth(o["step"], o["rounding"]):
        atoms = o["origin"] + o["step"] * np.flatnonzero(mass > 0)
        atoms = atoms[(atoms > lo) & (atoms < hi)]
        if len(atoms) <= STEP_POINTS:
            return np.concatenate([[lo], atoms, [hi]]), True
    return np.linspace(lo, hi, CURVE_POINTS), False


def _reach(con, grids, outcome: str) -> dict:
    """P(total >= x) at every grid point of every row (outcome_reach), with the 95% Wilson
    interval (wilson_interval) when the outcome is simulated."""
    ids = np.concatenate([np.full(len(x), k) for k, (x, _) in grids.items()])
    xs = np.concatenate([x for x, _ in grids.values()])
    con.register(POINTS, pa.table({"k": pa.array(ids, pa.int64()), "x": pa.array(xs)}))
    try:
        got = con.execute(
            "SELECT q.k, q.r, CASE WHEN q.trials > 0 THEN wilson_interval(round(q.r * q.trials), "
            "q.trials) END FROM (SELECT p.k, p.x, outcome_reach(s.o, p.x) AS r, "
            f"s.o.trials AS trials FROM {POINTS} AS p JOIN (SELECT {ROW_ID} AS k, {outcome} AS o "
            f"FROM {ROWS}) AS s USING (k)) AS q ORDER BY q.k, q.x").fetchall()
    finally:
        con.unregister(POINTS)
    out: dict = {}
    for k, r, ci in got:
        out.setdefault(k, []).append((r, ci))
    return out


def _chart(row, xs, steps, reach) -> drawing.OutcomeChart:
    _, name, cut_values, cut_names, o, bands, ci, mean, error, q = row
    ys = np.array([r for r, _ in reach])
    if steps:  # on (x[j-1], x[j]] the chance of reaching is the one at x[j]
        px = np.repeat(xs, 2)[:-1]
        py = np.repeat(ys, 2)[1:]
        curve = (px.tolist(), py.tolist())
    else:
        curve = (xs.tolist(), ys.tolist())
    envelope = None
    if o["trials"] > 0:
        envelope = (xs.tolist(), [c["lo"] for _, c in reach], [c["hi"] for _, c in reach])
    cut_names = list(cut_names) if cut_names else []
    names = [(cut_names[j] if j < len(cut_names) and cut_names[j] else f"cut {j + 1}")
             for j in range(len(cut_values))]
    marks = [drawing.CutMark(n, v, float(sum(bands[j + 1:])))
             for j, (n, v) in enumerate(zip(names, cut_values))]
    band_list = [drawing.Band(n, p, (c["lo"], c["hi"]) if o["trials"] > 0 else None)
                 for n, p, c in zip(drawing.band_names(names), bands, ci)]
    return drawing.OutcomeChart(title=name or f"row {row[0] + 1}", curve=curve, cuts=marks,
                                bands=band_list, mean=mean, quantiles=(q[1], q[2], q[3]),
                                note=_note(error, o["trials"]), envelope=envelope,
                                error=error, trials=o["trials"])


def grid_note(charts: list[drawing.OutcomeChart]) -> str:
    """The page's accuracy line: its least exact panel's."""
    worst = max(charts, key=lambda c: (c.error, c.trials))
    if len(charts) == 1 or worst.error == 0:
        return worst.note
    return worst.note.rstrip(".") + " (the least exact panel)."


def draw_rows(con: duckdb.DuckDBPyConnection, table: pa.Table, out: Path,
              where: str | None = None, cuts=None, grid: bool = False) -> list[Path]:
    """Charts of the rows of ``table`` (after ``where``); returns the files written.

    An outcome column gives one exceedance chart per row (``grid``: one page of panels).
    A date column with band odds, on several dates, gives the odds over time
    (``chart_history``); the reliability table's columns a reliability diagram; the
    backtest's (method, pit_counts, coverage_80) one page of PIT histograms per method
    (``chart_backtest``).
    """
    if is_backtest_table(table):  # before the outcome check: the backtest has no outcome
        return draw_backtest(con, table, out, where=where, cuts=cuts, grid=grid)
    if chart_history.is_history(table):
        return chart_history.draw(con, table, out, where=where, grid=grid)
    if find_outcome_column(table) is None and is_reliability_table(table):
        return draw_reliability(con, table, out, where=where, cuts=cuts, grid=grid)
    charts = outcome_charts(con, table, where, cuts)
    if grid:
        return [save(drawing.outcome_grid(charts, grid_note(charts)).fig, out)]
    written, taken = [], set()
    for i, spec in enumerate(charts, start=1):
        path = named_file(out, spec.title, i, len(charts), taken)
        written.append(save(drawing.outcome_figure(spec).fig, path))
    return written


def draw_outcome(outcome: dict, cuts=None, title: str = "outcome", path=None) -> str:
    """One outcome (the dict DuckDB returns for an outcome struct) as the exceedance chart,
    for a notebook: returns the SVG text and, given ``path``, also writes it (.svg or .png).

    ``cuts``: numbers, ``(name, value)`` pairs or a ``{name: value}`` dict.

    >>> import sqlrisk
    >>> con = sqlrisk.connect()
    >>> o = con.sql("SELECT outcome_dist(a, 0.5) FROM (VALUES (6.0), (5.0)) t(a)").fetchall()[0][0]
    >>> draw_outcome(o, {"target": 10}).startswith("<?xml")
    True
    """
    import io

    from .adapters.registry import connect

    if isinstance(cuts, dict):
        cuts = list(cuts.items())
    named = None if cuts is None else [c if isinstance(c, tuple) else (None, float(c)) for c in cuts]
    con = connect()
    try:
        table = con.sql(f"SELECT ?::VARCHAR AS label, ?::{OUTCOME_SQL} AS outcome",
                        params=[title, outcome]).to_arrow_table()
        chart = outcome_charts(con, table, cuts=named)[0]
    finally:
        con.close()
    fig = drawing.outcome_figure(chart).fig
    buffer = io.StringIO()
    write(fig, buffer, "svg")
    if path is not None:
        save(fig, Path(path))  # closes the figure
    else:
        pyplot()[1].close(fig)
    return buffer.getvalue()
