"""From a query result with an outcome column (or a reliability table) to chart files.

The numbers on an outcome chart come from sqlrisk's own SQL functions
(``outcome_histogram``, ``outcome_bands``, ``outcome_bands_ci``,
``outcome_mean``) run on the result rows, so a picture shows exactly what a
query would return. A reliability diagram plots the bins of a result shaped
like ``sql/reliability_table.sql`` as they are.
"""

from __future__ import annotations

import re
from pathlib import Path

import duckdb
import pyarrow as pa

from . import chart_drawing as drawing
from .adapters.sql_types import OUTCOME_FIELDS, OUTCOME_SQL
from .errors import ParameterError

HISTOGRAM_BINS = 60
ROWS = "__sqlrisk_chart_rows"
#: Columns that give a row's cuts when it has no ``cuts`` column and no --cuts is given.
NAMED_CUTS = ("floor", "target", "stretch")


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
            "chart: the query returns no outcome column (a STRUCT like outcome_dist's) and no "
            f"reliability columns ({', '.join(RELIABILITY_COLUMNS)}); select an outcome, e.g. "
            "outcome_dist(amount, win_prob) AS outcome, or the bins of a reliability table "
            "(see sql/reliability_table.sql)")
    return column


def label_column(table: pa.Table, skip: str) -> str | None:
    for name, typ in zip(table.column_names, table.schema.types):
        if name != skip and (pa.types.is_string(typ) or pa.types.is_large_string(typ)):
            return name
    return None


def accuracy_text(error: float) -> str:
    """An outcome's accuracy in probability, as a reader of odds reads it (from outcome_error)."""
    if error == 0:
        return "exact odds"
    points = 100 * error
    return f"odds within +/-{points:.2g} percentage points"


def _note(error: float, trials: int) -> str:
    if trials > 0:
        return (f"Monte Carlo, {trials:,} trials: {accuracy_text(error)} (95%); "
                "band labels show 95% Wilson intervals.")
    return accuracy_text(error).capitalize() + "."


def draw_rows(con: duckdb.DuckDBPyConnection, table: pa.Table, out: Path,
              where: str | None = None, cuts: list[float] | None = None) -> list[Path]:
    """One chart per row of ``table`` (after ``where``); returns the files written.

    A result without an outcome column but with the reliability table's columns
    is drawn as a reliability diagram instead (see ``draw_reliability``).
    """
    if find_outcome_column(table) is None and is_reliability_table(table):
        return draw_reliability(con, table, out, where=where, cuts=cuts)
    column = outcome_column(table)
    label = label_column(table, column)
    con.register(ROWS, table)
    try:
        named = [c for c in NAMED_CUTS if c in table.column_names]
        args = []
        if cuts is None and "cuts" in table.column_names:
            cut_sql = "cuts::DOUBLE[]"
        elif cuts is None and named:  # the columns floor, target, stretch (those present)
            cut_sql = ("coalesce(list_filter([" + ", ".join(f"{_q(c)}::DOUBLE" for c in named)
                       + "], lambda c: c IS NOT NULL), [])::DOUBLE[]")
        else:
            cut_sql, args = "?::DOUBLE[]", [cuts or []]
        sql = (f"SELECT {('CAST(' + _q(label) + ' AS VARCHAR)') if label else 'NULL'} AS label, "
               f"{cut_sql} AS cuts, o, outcome_histogram(o, {HISTOGRAM_BINS}) AS hist, "
               f"outcome_bands(o, {cut_sql}) AS bands, "
               f"outcome_bands_ci(o, {cut_sql}, 0.95) AS ci, outcome_mean(o) AS mean, "
               f"outcome_error(o) AS error "
               f"FROM (SELECT *, {_q(column)}::{OUTCOME_SQL} AS o FROM {ROWS}) AS r "
               f"WHERE o IS NOT NULL" + (f" AND ({where})" if where else ""))
        rows = con.execute(sql, args + args + args).fetchall()
    finally:
        con.unregister(ROWS)
    if not rows:
        raise ParameterError("chart: no row to draw" + (f" matches --where {where!r}" if where else ""))
    written, taken = [], set()
    for i, (name, row_cuts, o, hist, bands, ci, mean, error) in enumerate(rows, start=1):
        spec = drawing.OutcomeChart(
            title=name or f"row {i}",
            bins=[(b["lo"], b["hi"], b["prob"]) for b in hist],
            cuts=list(row_cuts or []),
            bands=list(bands),
            band_ci=[(c["lo"], c["hi"]) for c in ci] if o["trials"] > 0 else None,
            mean=mean,
            note=_note(error, o["trials"]),
        )
        path = named_file(out, name, i, len(rows), taken)
        written.append(_save(spec, path, drawing.to_svg, drawing.to_png))
    return written


def slug(text: str) -> str:
    """``text`` as a file-name part: letters, digits, ``_`` and ``-``; runs of others -> ``-``."""
    return re.sub(r"[^A-Za-z0-9_]+", "-", text).strip("-").lower() or "row"


def named_file(out: Path, label: str | None, i: int, count: int, taken: set) -> Path:
    """``out`` for a single chart; for several, FILE-LABEL.svg after each row's label
    (``owners-own_017.svg``; ``row-3`` without one), a repeated label numbered on."""
    if count == 1:
        return out
    stem = f"{out.stem}-{slug(label) if label else f'row-{i}'}"
    candidate, n = stem, 2
    while candidate in taken:
        candidate, n = f"{stem}-{n}", n + 1
    taken.add(candidate)
    return out.with_name(candidate + out.suffix)


def _save(spec, path: Path, svg, png) -> Path:
    if path.suffix.lower() == ".png":
        png(spec, str(path))
    else:
        path.write_text(svg(spec))
    return path


# -- reliability diagrams ----------------------------------------------------------

RELIABILITY_COLUMNS = ("stated_mean", "observed_rate", "deals")
INTERVAL_COLUMNS = ("wilson_lo", "wilson_hi")


def is_reliability_table(table: pa.Table) -> bool:
    """True when ``table`` has the reliability table's columns (see sql/reliability_table.sql)."""
    return set(RELIABILITY_COLUMNS) <= set(table.column_names)


def draw_reliability(con: duckdb.DuckDBPyConnection, table: pa.Table, out: Path,
                     where: str | None = None, cuts: list[float] | None = None) -> list[Path]:
    """A reliability diagram of the rows of ``table`` (after ``where``); one per label.

    Rows are bins: ``stated_mean`` (x), ``observed_rate`` (y) and ``deals``
    (circle size), with ``wilson_lo``/``wilson_hi`` as whiskers when present.
    Bins without deals are left out. A text column, if any, splits the rows
    into one diagram per value (e.g. one per stage).
    """
    if cuts is not None:
        raise ParameterError("chart: --cuts marks band cuts on an outcome chart; a reliability "
                             "diagram has none (leave --cuts out)")
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
        spec = drawing.ReliabilityChart(
            title=name or "Stated win probability against observed win rate",
            points=[(r[1], r[2], r[3]) for r in mine],
            intervals=[(r[4], r[5]) for r in mine] if has_ci and all(
                r[4] is not None and r[5] is not None for r in mine) else None,
            note=(f"{deals:,} closed deals in {len(mine)} bins; circle area in proportion to deals"
                  + ("; whiskers: 95% Wilson intervals" if has_ci else "") + ".\n"
                  "Dashed line: observed = stated (a perfectly calibrated forecast)."),
        )
        path = named_file(out, name, i, len(labels), taken)
        written.append(_save(spec, path, drawing.reliability_svg, drawing.reliability_png))
    return written


def _q(name: str) -> str:
    return '"' + name.replace('"', '""') + '"'

