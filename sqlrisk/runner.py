"""Running a saved query: sources, bound parameters, and atomic writes into tables.

Used by the CLI's ``run`` and ``chart`` commands; no terminal output here.
"""

from __future__ import annotations

import glob
import os
import re
from dataclasses import dataclass
from pathlib import Path

import duckdb
import pyarrow as pa

from . import queries
from .errors import InputDataError, ParameterError, QueryLookupError, SqlriskError
from .adapters.registry import connect

_IDENT = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")
_FORMATS = {".parquet": "read_parquet", ".pq": "read_parquet", ".csv": "read_csv",
            ".tsv": "read_csv", ".txt": "read_csv", ".gz": "read_csv"}
RESULT = "__sqlrisk_result"


def quote_ident(name: str, what: str = "table") -> str:
    """``schema.table`` or ``table`` as a quoted identifier; anything else is an error."""
    parts = name.split(".")
    if not 1 <= len(parts) <= 2 or not all(_IDENT.match(p) for p in parts):
        raise ParameterError(f"run: {what} name {name!r} is not a plain identifier "
                             "(letters, digits and _, optionally schema.name)")
    return ".".join(f'"{p}"' for p in parts)


def split_pairs(pairs: list[str], option: str) -> dict[str, str]:
    """``NAME=VALUE`` strings as a dict (the value may contain '=')."""
    out = {}
    for pair in pairs:
        name, sep, value = pair.partition("=")
        if not sep or not name.strip():
            raise ParameterError(f"run: {option} {pair!r} is not NAME=VALUE")
        out[name.strip()] = value
    return out


def open_database(db: str | None, read_only: bool = False) -> duckdb.DuckDBPyConnection:
    """A registered connection to ``db`` (in memory when None), with one-line errors."""
    if db is not None and db != ":memory:":
        path = Path(db)
        if not path.exists():
            raise QueryLookupError(f"run: database file {db!r} does not exist "
                                   "(check the path; DuckDB creates files only when asked)")
    try:
        return connect(db, read_only=read_only)
    except duckdb.IOException as exc:
        text = str(exc)
        if "lock" in text.lower():
            raise SqlriskError(f"run: database {db!r} is locked by another process; "
                               "retry when that job has finished") from None
        if "read-only" in text.lower() or "permission" in text.lower():
            raise SqlriskError(f"run: database {db!r} cannot be opened for writing "
                               "(read-only file or folder)") from None
        raise SqlriskError(f"run: cannot open database {db!r}: {' '.join(text.split())}") from None


def attach_sources(con: duckdb.DuckDBPyConnection, sources: dict[str, str]) -> None:
    """Expose each Parquet/CSV file (or glob) as a TEMP view with the given name."""
    for name, path in sources.items():
        view = quote_ident(name, "source")
        reader = _FORMATS.get(Path(path).suffix.lower())
        if reader is None:
            raise InputDataError(f"run: source {name}={path!r} is not a .parquet or .csv file")
        if not glob.glob(os.path.expanduser(path)):
            raise InputDataError(f"run: source {name}={path!r}: no such file")
        try:
            # A view cannot hold a prepared parameter: the path goes in as a quoted literal.
            literal = "'" + os.path.expanduser(path).replace("'", "''") + "'"
            con.execute(f"CREATE OR REPLACE TEMP VIEW {view} AS SELECT * FROM {reader}({literal})")
            con.execute(f"SELECT * FROM {view} LIMIT 0").fetchall()
        except duckdb.Error as exc:
            first = str(exc).split("\nLINE ")[0]  # not the internal view's SQL
            raise InputDataError(f"run: source {name}={path!r} cannot be read as "
                                 f"{reader[5:]}: {' '.join(first.split())[:200]}") from None


def query_text(query: queries.SavedQuery) -> str:
    """The query's SQL without trailing semicolons (so it can be wrapped)."""
    return query.sql.strip().rstrip(";").strip()


@dataclass
class RunResult:
    table: pa.Table
    written: int | None = None
    into: str | None = None


def run_query(con: duckdb.DuckDBPyConnection, query: queries.SavedQuery, params: dict[str, str],
              into: str | None = None, replace_rows: tuple[str, str] | None = None) -> RunResult:
    """Run ``query`` with bound ``params``; with ``into``, write the rows atomically.

    The write happens in one transaction: the result is computed into a temp
    table, the target created if missing, the ``replace_rows`` key deleted,
    and the rows inserted; any failure (or a kill) leaves the target as it was.
    """
    values = queries.bind(query, params)
    sql = query_text(query)
    if into is None:
        return RunResult(con.sql(sql, params=values).to_arrow_table())
    target = quote_ident(into)
    con.execute("BEGIN TRANSACTION")
    try:
        con.execute(f"CREATE OR REPLACE TEMP TABLE {RESULT} AS {sql}", values)
        con.execute(f"CREATE TABLE IF NOT EXISTS {target} AS SELECT * FROM {RESULT} LIMIT 0")
        if replace_rows is not None:
            column = quote_ident(replace_rows[0], "column")
            result_columns = [r[0] for r in con.execute(f"DESCRIBE {RESULT}").fetchall()]
            if replace_rows[0] not in result_columns:
                raise ParameterError(
                    f"run: --replace-rows column {replace_rows[0]!r} is not in the query's "
                    f"result (it has: {', '.join(result_columns)})")
            con.execute(f"DELETE FROM {target} WHERE {column} = ?", [replace_rows[1]])
        con.execute(f"INSERT INTO {target} BY NAME SELECT * FROM {RESULT}")
        written = con.execute(f"SELECT count(*) FROM {RESULT}").fetchall()[0][0]
        table = con.sql(f"SELECT * FROM {RESULT}").to_arrow_table()
        con.execute(f"DROP TABLE {RESULT}")
        con.execute("COMMIT")
    except BaseException:
        try:
            con.execute("ROLLBACK")
        except duckdb.TransactionException:
            pass  # a failed COMMIT has already ended the transaction: report its error
        raise
    return RunResult(table, written, into)
