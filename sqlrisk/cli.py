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

from . import project_config, queries
from .adapters.registry import connect
from .errors import SqlriskError

# The runner, the writers, the demo and the charts load in the commands that use them, so
# that `sqlrisk --help` and `sqlrisk queries` start about as fast as duckdb and typer import.

app = typer.Typer(
    help="Exact and simulated odds for a sales pipeline's won total, in DuckDB SQL.",
    # paragraphs are re-wrapped to the terminal; a paragraph that starts with \b (the
    # examples) keeps its lines
    rich_markup_mode=None,
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


def _text_param_hint(exc: Exception, saved, param: list[str]) -> str:
    """For a type error in a query whose parameters are untyped text: say how to type them."""
    if not isinstance(exc, duckdb.BinderException) or saved is None or saved.declares_params \
            or not param:
        return ""
    first = param[0].partition("=")[0]
    return (f" (--param values of a query without a parameter header are text: declare "
            f"'-- ${first} (number): ...' in its header, or write ${first}::DOUBLE)")


@app.command(short_help="The demo company's odds, charts and backtest, printed.")
def demo(
    out_dir: Path = typer.Option(Path("out"), "--output-dir",
                                 help="Folder for the demo's chart (created if missing)."),
) -> None:
    """Run the saved queries on the invented demo company in seeds/ and print the odds.

    Example: sqlrisk demo --output-dir out
    """
    try:
        from . import demo as demo_module

        with connect() as con:
            typer.echo(demo_module.run_demo(con, out_dir))
    except (SqlriskError, duckdb.Error) as exc:
        fail(clean_error(exc))


@app.command("queries", short_help="The saved queries, what each answers and reads.")
def list_saved() -> None:
    """List the saved queries in sql/: what each answers, the tables and columns it reads
    (optional ones after the ';') and its parameters.

    Example: sqlrisk queries
    """
    for q in queries.list_queries():
        typer.echo(f"{q.name}\n    {q.description}")
        for read in q.reads:
            typer.echo(f"    reads {read.describe()}")
        for p in q.params:
            kind = f" ({p.kind})" if p.kind != "text" else ""
            typer.echo(f"    --param {p.name}=...{kind}  {p.help}")


QUERY_HELP = ("A saved query's name (see 'sqlrisk queries'), a path to a .sql file, or - to "
              "read the SQL from standard input.")
DB_HELP = "DuckDB database file to open (default: a new in-memory database)."
SOURCE_HELP = ("Where a table the query reads comes from: TABLE=PATH for a Parquet or CSV file "
               "(or glob), or TABLE=OTHER_TABLE of --db, e.g. "
               "--source pipeline=extracts/pipeline_*.parquet. Repeatable.")
COLUMN_HELP = ("Map a column the query reads onto your own: TABLE.NAME=SQL_EXPRESSION over the "
               "source's columns, e.g. --column pipeline.owner_id=rep --column "
               "pipeline.win_prob='probability / 100'. Repeatable; overrides sqlrisk.toml.")
CONFIG_HELP = ("Project file with [tables.NAME] source and columns (default: ./sqlrisk.toml "
               "when it exists).")
PARAM_HELP = ("A query parameter: NAME=VALUE, bound as a prepared-statement value ($NAME), "
              "never pasted into the SQL, converted to the type its header line gives "
              "(-- $name (date|number|integer|text): ...). A .sql file whose header lists no "
              "parameters gets every $name it uses as text. Repeatable.")
SQL_HELP = "Run this SQL text instead of a saved query or file (a header comment is optional)."
STRICT_HELP = "Treat every warning about the inputs as an error: exit 1, nothing written."


def _interactive() -> bool:
    return sys.stderr.isatty()


def _query(query: Optional[str], sql: Optional[str]) -> queries.SavedQuery:
    """The query to run: --sql text, - (standard input), a saved name or a .sql path."""
    if sql is not None:
        if query is not None:
            raise typer.BadParameter("give a QUERY or --sql, not both", param_hint="--sql")
        return queries.from_text(sql, "--sql")
    if query is None:
        raise typer.BadParameter("give a saved query's name, a .sql file, - (standard input) "
                                 "or --sql TEXT", param_hint="QUERY")
    if query == "-":
        return queries.from_text(sys.stdin.read(), "stdin")
    return queries.find(query)


def _open(db: Optional[str], write: bool = False) -> tuple[duckdb.DuckDBPyConnection, bool]:
    """The connection, and whether its database file was created by this run."""
    created = write and db not in (None, ":memory:") and not Path(db).exists()
    # Read-only unless the run writes (--into): reading works on a read-only file or share.
    from . import runner

    con = runner.open_database(db, read_only=not write and db is not None, create=created)
    con.execute(f"SET enable_progress_bar = {str(_interactive()).lower()}")
    return con, created


def _remove_database(db: str) -> None:
    """A database this run created, removed after a failure: nothing is left behind."""
    for path in (Path(db), Path(db + ".wal")):
        path.unlink(missing_ok=True)


def _prepare(con, saved, params, config, source, column, strict) -> None:
    from . import runner

    specs = project_config.table_specs(config, runner.split_pairs(source, "--source"), column)
    try:
        warnings = runner.prepare_inputs(con, saved, params, specs, strict=strict)
    except SqlriskError as exc:
        warnings = getattr(exc, "warnings", [])
        for line in warnings:
            typer.echo(f"warning: {line}", err=True)
        raise
    for line in warnings:
        typer.echo(f"warning: {line}", err=True)


@app.command(short_help="Run a saved query, a .sql file or SQL text.")
def run(
    query: Optional[str] = typer.Argument(None, help=QUERY_HELP),
    sql: Optional[str] = typer.Option(None, "--sql", help=SQL_HELP),
    db: Optional[str] = typer.Option(None, "--db", help=DB_HELP),
    source: list[str] = typer.Option([], "--source", help=SOURCE_HELP),
    column: list[str] = typer.Option([], "--column", help=COLUMN_HELP),
    config: Optional[str] = typer.Option(None, "--config", help=CONFIG_HELP),
    param: list[str] = typer.Option([], "--param", "-p", help=PARAM_HELP),
    into: Optional[str] = typer.Option(
        None, "--into", help="Write the result into this table of --db (the table and the "
                             "file are created if missing), in one transaction: a failure "
                             "leaves the table as it was. No rows is an error."),
    replace_rows: Optional[str] = typer.Option(
        None, "--replace-rows", help="With --into: first delete the table's rows where "
                                     "COLUMN=VALUE, in the same transaction, so re-running a "
                                     "night replaces its rows, e.g. --replace-rows as_of=2026-11-30. "
                                     "Every result row must have COLUMN=VALUE, or nothing is "
                                     "written."),
    allow_empty: bool = typer.Option(False, "--allow-empty",
                                     help="With --into: a result of no rows writes nothing and "
                                          "succeeds (default: an error)."),
    strict: bool = typer.Option(False, "--strict", help=STRICT_HELP),
    keep_outcomes: bool = typer.Option(False, "--keep-outcomes",
                                       help="With --format csv: keep outcome columns, as JSON "
                                            "text (by default CSV leaves them out)."),
    fmt: str = typer.Option("table", "--format", help="table, csv (one column per list "
                                                       "element), json (one object per line) "
                                                       "or parquet (needs --output)."),
    out: Optional[str] = typer.Option(None, "--output", "-o",
                                      help="Write the result to this file instead of printing."),
) -> None:
    """Run a saved query (or a .sql file, or SQL text) and print or store its result.

    Before computing, every table and column the query declares is checked, and what
    would be skipped or double counted (NULL amounts, duplicate deal_id, owners without
    a quota, percentage probabilities) is reported on stderr.

    \b
    Examples:
      sqlrisk run owner_band_odds --source pipeline=deals.csv --column pipeline.owner_id=rep
      sqlrisk run owner_band_odds --source pipeline=pipeline.parquet --format csv
      sqlrisk run --sql "SELECT band_odds(amount, win_prob, [1e5]) FROM pipeline" --db f.duckdb
      sqlrisk run nightly_snapshot --db forecast.duckdb -p as_of=2026-11-30 --into band_history --replace-rows as_of=2026-11-30
    """
    if replace_rows is not None and into is None:
        raise typer.BadParameter("--replace-rows needs --into TABLE", param_hint="--replace-rows")
    from . import result_writer, runner

    if fmt not in result_writer.FORMATS:
        raise typer.BadParameter(f"{fmt!r} is not one of {', '.join(result_writer.FORMATS)}",
                                 param_hint="--format")
    created = False
    try:
        saved = _query(query, sql)
        params = runner.split_pairs(param, "--param")
        key = None
        if replace_rows is not None:
            key = tuple(runner.split_pairs([replace_rows], "--replace-rows").items())[0]
        con, created = _open(db, write=into is not None)
        try:
            _prepare(con, saved, params, config, source, column, strict)
            result = runner.run_query(con, saved, params, into=into, replace_rows=key,
                                      allow_empty=allow_empty)
        finally:
            con.close()
        if created:  # said once the run has succeeded: a failed first night removes the file
            typer.echo(f"created database {db}", err=True)
        created = False
        if result.into is not None and out is None and fmt == "table":
            typer.echo(f"wrote {result.written} rows into {result.into}")
            return
        result_writer.write(result.table, fmt, out, keep_outcomes=keep_outcomes)
    except (SqlriskError, duckdb.Error) as exc:
        if created:
            _remove_database(db)
        hint = _text_param_hint(exc, saved if "saved" in locals() else None, param)
        fail(clean_error(exc).split(". ")[0] + hint if hint else clean_error(exc))


@app.command(short_help="Draw outcomes, odds over time, reliability or a backtest.")
def chart(
    query: str = typer.Argument(..., help=QUERY_HELP),
    out: Path = typer.Option(..., "--output", "-o",
                             help="Picture to write: FILE.svg or FILE.png. Several rows "
                                  "give one file each, named after the row's label "
                                  "(FILE-tidewater-bay.svg, ...), or one page with --grid."),
    where: Optional[str] = typer.Option(
        None, "--where", help="Keep only the result rows matching this SQL condition, "
                              "e.g. \"region = 'Tidewater Bay'\"."),
    cuts: Optional[str] = typer.Option(
        None, "--cuts", help="Band cuts to draw, comma separated, each a number or NAME=NUMBER "
                             "(floor=800000,target=1200000); default: the result's 'cuts' "
                             "column, else its floor, target and stretch columns."),
    grid: bool = typer.Option(
        False, "--grid", help="Draw every row as a small panel of one page (in the query's "
                              "order) instead of one file per row."),
    db: Optional[str] = typer.Option(None, "--db", help=DB_HELP),
    source: list[str] = typer.Option([], "--source", help=SOURCE_HELP),
    column: list[str] = typer.Option([], "--column", help=COLUMN_HELP),
    config: Optional[str] = typer.Option(None, "--config", help=CONFIG_HELP),
    param: list[str] = typer.Option([], "--param", "-p", help=PARAM_HELP),
    strict: bool = typer.Option(False, "--strict", help=STRICT_HELP),
) -> None:
    """Draw, for each row of a query that returns an outcome, the chance of reaching at least
    each total; the odds over time for dated band odds; a reliability diagram; or a
    backtest's PIT histograms.

    On an outcome chart each cut is a labelled point on the curve with its reach odds, the
    bands are shaded, and a bar under the axis runs from P10 to P90. A result with a date
    column and band odds on several dates (odds_history, band_history) is drawn as the band
    odds over time. A result with columns stated_mean, observed_rate and deals is drawn as
    a reliability diagram. The backtest's result (method, pit_counts, coverage_80) is drawn
    as one PIT histogram per method and the coverage of the 80% interval against 80%.

    \b
    Examples:
      sqlrisk chart region_outcomes --where "region = 'Tidewater Bay'" --output tidewater.svg
      sqlrisk chart region_outcomes --grid --output regions.png
      sqlrisk chart odds_history --db forecast.duckdb -p owner=own_032 --output own_032.svg
      sqlrisk chart reliability_table --db forecast.duckdb --output reliability.svg
      sqlrisk chart backtest --db forecast.duckdb --output backtest.svg
    """
    if out.suffix.lower() not in (".svg", ".png"):
        raise typer.BadParameter("the picture must be a .svg or .png file", param_hint="--output")
    from . import chart_rows, runner

    cut_values = chart_rows.parse_cuts(cuts, typer.BadParameter) if cuts else None
    try:
        saved = queries.find(query)
        params = runner.split_pairs(param, "--param")
        con, _ = _open(db)
        try:
            _prepare(con, saved, params, config, source, column, strict)
            result = runner.run_query(con, saved, params)
            written = chart_rows.draw_rows(con, result.table, out, where=where, cuts=cut_values,
                                           grid=grid)
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
