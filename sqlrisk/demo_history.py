"""The demo's weeks of nightly snapshots, written the way a scheduled job writes them.

``seeds/pipeline_weeks.csv`` (made by ``seeds/generate.py``) holds the open pipeline as it
stood on six Mondays, the last of which is ``seeds/pipeline.csv``. Each week is run
through the saved query ``nightly_snapshot`` into ``band_history`` by ``runner.run_query``
with ``replace_rows`` on its ``as_of``, as ``sqlrisk run nightly_snapshot ... --into
band_history --replace-rows as_of=...`` would; ``sql/odds_history.sql`` reads it back.

Example (``con`` from ``sqlrisk.connect()``)::

    demo.load_seeds(con)             # pipeline, owners, quota_bands, closed_deals
    write_weekly_snapshots(con)      # [date(2026, 10, 26), ..., date(2026, 11, 30)]
    runner.run_query(con, queries.find("odds_history"), {"owner": "own_032"})
"""

from __future__ import annotations

import datetime as dt

import duckdb

from . import queries, runner
from .errors import InputDataError

WEEKS_TABLE = "pipeline_weeks"
HISTORY_TABLE = "band_history"
#: The tables nightly_snapshot reads besides the week's pipeline (demo.load_seeds makes them).
OTHER_INPUTS = ("quota_bands", "owners")


def load_weeks(con: duckdb.DuckDBPyConnection) -> None:
    """Create (or replace) the table ``pipeline_weeks`` from the seed CSV."""
    con.execute(f"CREATE OR REPLACE TABLE {WEEKS_TABLE} AS SELECT * FROM read_csv(?)",
                [str(queries.seeds_dir() / f"{WEEKS_TABLE}.csv")])


def _main_tables(con) -> set[str]:
    return {r[0] for r in con.execute("SELECT table_name FROM duckdb_tables() "
                                      "WHERE schema_name = 'main' AND NOT temporary").fetchall()}


def _temp_pipeline(con) -> str | None:
    """The SQL of a TEMP view named pipeline the caller had, to put back afterwards."""
    rows = con.execute("SELECT sql FROM duckdb_views() WHERE temporary "
                       "AND view_name = 'pipeline'").fetchall()
    return rows[0][0] if rows else None


def write_weekly_snapshots(con: duckdb.DuckDBPyConnection) -> list[dt.date]:
    """Write one nightly_snapshot per week of ``pipeline_weeks`` into ``band_history``.

    ``pipeline_weeks`` is loaded from the seeds when the database has no such table. For
    each week a TEMP view named ``pipeline`` over that week's rows shadows the database's
    own ``pipeline`` table, which is never changed; afterwards the view is dropped (or a
    TEMP view of that name the caller had is put back). A week's earlier rows in
    ``band_history`` are replaced, so running this twice leaves one snapshot per week.

    Returns the snapshot dates, oldest first.
    """
    tables = _main_tables(con)
    missing = [t for t in OTHER_INPUTS if t not in tables]
    if missing:
        raise InputDataError(f"write_weekly_snapshots: the database has no table "
                             f"{', '.join(missing)}; load the demo seeds first "
                             "(demo.load_seeds(con)), then run it again")
    if WEEKS_TABLE not in tables:
        load_weeks(con)
    query = queries.find("nightly_snapshot")
    # named by database and schema: a TEMP object is in a schema called main too
    database = con.execute("SELECT current_database()").fetchall()[0][0].replace('"', '""')
    weeks = f'"{database}".main.{WEEKS_TABLE}'
    dates = [day for (day,) in con.execute(
        f"SELECT DISTINCT as_of FROM {weeks} ORDER BY as_of").fetchall()]
    before = _temp_pipeline(con)
    try:
        for day in dates:
            con.execute(f"CREATE OR REPLACE TEMP VIEW pipeline AS SELECT * EXCLUDE (as_of) "
                        f"FROM {weeks} WHERE as_of = DATE '{day.isoformat()}'")
            runner.run_query(con, query, {"as_of": day.isoformat()}, into=HISTORY_TABLE,
                             replace_rows=("as_of", day.isoformat()))
    finally:
        con.execute("DROP VIEW IF EXISTS temp.main.pipeline")
        if before is not None:
            con.execute(before)
    return dates
