"""The ``sqlrisk`` command line: the demo, the saved queries, and running them.

No numerics here: every command calls the library and the saved SQL.
"""

from __future__ import annotations

import re
import sys

import duckdb
import typer

from . import demo as demo_module
from . import queries, render
from .errors import SqlriskError
from .registry import connect

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
    return " ".join(text.split())


@app.command()
def demo() -> None:
    """Run the saved queries on the invented demo company in seeds/ and print the odds.

    Example: sqlrisk demo
    """
    try:
        con = connect()
        typer.echo(demo_module.run_demo(con))
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


def main() -> None:  # pragma: no cover - console entry point
    app(prog_name="sqlrisk")


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
