"""The ``sqlrisk`` command line: the demo, the saved queries, and running them.

No numerics here: every command calls the library and the saved SQL.
"""

from __future__ import annotations

import re
import sys
from pathlib import Path
from typing import Optional

import duckdb
import typer

from . import demo as demo_module
from . import chart_rows, queries, result_writer, runner
from .adapters.registry import connect
from .errors import SqlriskError

app = typer.Typer(
    help="Exact and simulated odds for a sales pipeline's won total, in DuckDB SQL.",
    no_args_is_help=True,
    add_completion=False,
)


def fail(message: str) -> None:
    """One line on stderr, exit code 1."""
    typer.echo(f"error: {message}", err=True)
    raise typer.Exit(1)


def clean_error(exc: Exception) -> str:
    """The user's part of a DuckDB or sqlrisk error, on one line."""
    text = str(exc)
    text = re.sub(r"^.*?Python exception occurred while executing the UDF: \w+: ", "", text,
                  flags=re.S)
    text = " ".join(text.split())
    missing = re.search(r"Table with name (\w+) does not exist", text)
    if missing:
        text = (f"table {missing.group(1)!r} does not exist; give it with "
                f"--source {missing.group(1)}=FILE.parquet (or .csv) or open a --db that has it")
    return text


@app.command()
def demo(
    out_dir: Path = typer.Option(Path("out"), "--output-dir",
                                 help="Folder for the demo's chart (created if missing)."),
) -> None:
    """Run the saved queries on the invented demo company in seeds/ and print the odds.

    Example: sqlrisk demo --output-dir out
    """
    try:
        with connect() as con:
            typer.echo(demo_module.run_demo(con, out_dir))
    except (SqlriskError, duckdb.Error) as exc:
        fail(clean_error(exc))


@app.command("queries")
def list_saved() -> None:
    """List the saved queries in sql/ with what each answers and its parameters.

    Example: sqlrisk queries
    """
    for q in queries.list_queries():
        typer.echo(f"{q.name}\n    {q.description}")
        for p in q.params:
            typer.echo(f"    --param {p.name}=...  {p.help}")


QUERY_HELP = "A saved query's name (see 'sqlrisk queries') or a path to a .sql file."
DB_HELP = "DuckDB database file to open (default: a new in-memory database)."
SOURCE_HELP = ("Expose a Parquet or CSV file (or glob) as a view: NAME=PATH, e.g. "
               "--source pipeline=extracts/pipeline_*.parquet. Repeatable.")
PARAM_HELP = ("A query parameter: NAME=VALUE, bound as a prepared-statement value ($NAME), "
              "never pasted into the SQL. Repeatable.")


def _interactive() -> bool:
    return sys.stderr.isatty()


def _open(db: Optional[str], sources: list[str], write: bool = False) -> duckdb.DuckDBPyConnection:
    # Read-only unless the run writes (--into): reading works on a read-only file or share.
    con = runner.open_database(db, read_only=not write and db is not None)
    con.execute(f"SET enable_progress_bar = {str(_interactive()).lower()}")
    runner.attach_sources(con, runner.split_pairs(sources, "--source"))
    return con


@app.command()
def run(
    query: str = typer.Argument(..., help=QUERY_HELP),
    db: Optional[str] = typer.Option(None, "--db", help=DB_HELP),
    source: list[str] = typer.Option([], "--source", help=SOURCE_HELP),
    param: list[str] = typer.Option([], "--param", "-p", help=PARAM_HELP),
    into: Optional[str] = typer.Option(
        None, "--into", help="Write the result into this table of --db (created if missing), "
                             "in one transaction: a failure leaves the table as it was."),
    replace_rows: Optional[str] = typer.Option(
        None, "--replace-rows", help="With --into: first delete the table's rows where "
                                     "COLUMN=VALUE, in the same transaction, so re-running a "
                                     "night replaces its rows, e.g. --replace-rows as_of=2026-11-30."),
    fmt: str = typer.Option("table", "--format", help="table, csv, json (one object per line) "
                                                       "or parquet (needs --output)."),
    out: Optional[str] = typer.Option(None, "--output", "-o",
                                      help="Write the result to this file instead of printing."),
) -> None:
    """Run a saved query (or a .sql file) and print or store its result.

    Examples:
      sqlrisk run owner_band_odds
      sqlrisk run owner_band_odds --source pipeline=pipeline.parquet --format csv
      sqlrisk run nightly_snapshot --db forecast.duckdb -p as_of=2026-11-30 --into band_history --replace-rows as_of=2026-11-30
    """
    if replace_rows is not None and into is None:
        raise typer.BadParameter("--replace-rows needs --into TABLE", param_hint="--replace-rows")
    if fmt not in result_writer.FORMATS:
        raise typer.BadParameter(f"{fmt!r} is not one of {', '.join(result_writer.FORMATS)}",
                                 param_hint="--format")
    try:
        saved = queries.find(query)
        params = runner.split_pairs(param, "--param")
        key = None
        if replace_rows is not None:
            key = tuple(runner.split_pairs([replace_rows], "--replace-rows").items())[0]
        con = _open(db, source, write=into is not None)
        try:
            result = runner.run_query(con, saved, params, into=into, replace_rows=key)
        finally:
            con.close()
        if result.into is not None and out is None and fmt == "table":
            typer.echo(f"wrote {result.written} rows into {result.into}")
            return
        result_writer.write(result.table, fmt, out)
    except (SqlriskError, duckdb.Error) as exc:
        fail(clean_error(exc))


@app.command()
def chart(
    query: str = typer.Argument(..., help=QUERY_HELP),
    out: Path = typer.Option(..., "--output", "-o",
                             help="Picture to write: FILE.svg (no extra needed) or FILE.png "
                                  "(needs the sqlrisk[chart] extra). Several rows give "
                                  "FILE-1.svg, FILE-2.svg, ..."),
    where: Optional[str] = typer.Option(
        None, "--where", help="Keep only the result rows matching this SQL condition, "
                              "e.g. \"region = 'Tidewater Bay'\"."),
    cuts: Optional[str] = typer.Option(
        None, "--cuts", help="Band cuts to draw, comma separated (default: the result's "
                             "'cuts' column, if it has one)."),
    db: Optional[str] = typer.Option(None, "--db", help=DB_HELP),
    source: list[str] = typer.Option([], "--source", help=SOURCE_HELP),
    param: list[str] = typer.Option([], "--param", "-p", help=PARAM_HELP),
) -> None:
    """Draw the distribution of the total for each row of a query that returns an outcome,
    or a reliability diagram for a query that returns bins like reliability_table.

    On an outcome chart each cut is a vertical line with its band's probability written on
    the band; the expected value is marked. A result with columns stated_mean, observed_rate
    and deals (and wilson_lo, wilson_hi as whiskers) is drawn as a reliability diagram:
    one circle per bin, sized by its deals, against the diagonal of perfect calibration.

    Examples:
      sqlrisk chart region_outcomes --where "region = 'Tidewater Bay'" --output tidewater.svg
      sqlrisk chart reliability_table --db forecast.duckdb --output reliability.svg
    """
    if out.suffix.lower() not in (".svg", ".png"):
        raise typer.BadParameter("the picture must be a .svg or .png file", param_hint="--output")
    try:
        cut_values = [float(c) for c in cuts.split(",")] if cuts else None
    except ValueError:
        raise typer.BadParameter(f"{cuts!r} is not a comma-separated list of numbers",
                                 param_hint="--cuts") from None
    try:
        con = _open(db, source)
        try:
            result = runner.run_query(con, queries.find(query),
                                      runner.split_pairs(param, "--param"))
            written = chart_rows.draw_rows(con, result.table, out, where=where, cuts=cut_values)
        finally:
            con.close()
        for path in written:
            typer.echo(f"wrote {path}")
    except (SqlriskError, duckdb.Error) as exc:
        fail(clean_error(exc))


def main() -> None:  # pragma: no cover - console entry point
    app(prog_name="sqlrisk")


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
