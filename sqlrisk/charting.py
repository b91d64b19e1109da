"""From a query result with an outcome column to chart files.

The numbers on a chart come from sqlrisk's own SQL functions
(``outcome_histogram``, ``outcome_bands``, ``outcome_bands_ci``,
``outcome_mean``) run on the result rows, so a picture shows exactly what a
query would return.
"""

from __future__ import annotations

from pathlib import Path

import duckdb
import pyarrow as pa

from . import chart
from .arrowio import OUTCOME_FIELDS
from .errors import ParameterError
from .registry import OUTCOME_SQL

HISTOGRAM_BINS = 60
ROWS = "__sqlrisk_chart_rows"


def outcome_column(table: pa.Table) -> str:
    for name, typ in zip(table.column_names, table.schema.types):
        if pa.types.is_struct(typ) and {typ.field(i).name for i in range(typ.num_fields)} >= set(
                OUTCOME_FIELDS):
            return name
    raise ParameterError("chart: the query returns no outcome column (a STRUCT like "
                         "outcome_dist's); select one, e.g. outcome_dist(amount, win_prob) AS outcome")


def label_column(table: pa.Table, skip: str) -> str | None:
    for name, typ in zip(table.column_names, table.schema.types):
        if name != skip and (pa.types.is_string(typ) or pa.types.is_large_string(typ)):
            return name
    return None


def _note(rounding: float, trials: int) -> str:
    if trials > 0:
        return (f"Monte Carlo, {trials:,} trials; band labels show 95% Wilson intervals; "
                f"lattice rounding {rounding:,.0f}.")
    if rounding > 0:
        return f"Exact odds on a lattice; totals within {rounding:,.0f} of the lattice (worst case)."
    return "Exact odds (to 1e-12)."


def draw_rows(con: duckdb.DuckDBPyConnection, table: pa.Table, out: Path,
              where: str | None = None, cuts: list[float] | None = None) -> list[Path]:
    """One chart per row of ``table`` (after ``where``); returns the files written."""
    column = outcome_column(table)
    label = label_column(table, column)
    con.register(ROWS, table)
    try:
        has_cuts = "cuts" in table.column_names and cuts is None
        cut_sql = "cuts::DOUBLE[]" if has_cuts else "?::DOUBLE[]"
        args = [] if has_cuts else [cuts or []]
        sql = (f"SELECT {('CAST(' + _q(label) + ' AS VARCHAR)') if label else 'NULL'} AS label, "
               f"{cut_sql} AS cuts, o, outcome_histogram(o, {HISTOGRAM_BINS}) AS hist, "
               f"outcome_bands(o, {cut_sql}) AS bands, "
               f"outcome_bands_ci(o, {cut_sql}, 0.95) AS ci, outcome_mean(o) AS mean "
               f"FROM (SELECT *, {_q(column)}::{OUTCOME_SQL} AS o FROM {ROWS}) AS r "
               f"WHERE o IS NOT NULL" + (f" AND ({where})" if where else ""))
        rows = con.execute(sql, args + args + args).fetchall()
    finally:
        con.unregister(ROWS)
    if not rows:
        raise ParameterError("chart: no row to draw" + (f" matches --where {where!r}" if where else ""))
    written = []
    for i, (name, row_cuts, o, hist, bands, ci, mean) in enumerate(rows, start=1):
        spec = chart.OutcomeChart(
            title=name or f"row {i}",
            bins=[(b["lo"], b["hi"], b["prob"]) for b in hist],
            cuts=list(row_cuts or []),
            bands=list(bands),
            band_ci=[(c["lo"], c["hi"]) for c in ci] if o["trials"] > 0 else None,
            mean=mean,
            note=_note(o["rounding"], o["trials"]),
        )
        path = out if len(rows) == 1 else out.with_name(f"{out.stem}-{i}{out.suffix}")
        if path.suffix.lower() == ".png":
            chart.to_png(spec, str(path))
        else:
            path.write_text(chart.to_svg(spec))
        written.append(path)
    return written


def _q(name: str) -> str:
    return '"' + name.replace('"', '""') + '"'

