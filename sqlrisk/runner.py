"""Running a saved query: its inputs, bound parameters, and atomic writes into tables.

Used by the CLI's ``run`` and ``chart`` commands; no terminal output here (warnings
are returned as lines for the caller to print).
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path

import duckdb
import pyarrow as pa

from . import input_checks, inputs, queries
from .errors import InputDataError, ParameterError, QueryLookupError, SqlriskError
from .adapters.registry import connect

_IDENT = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")
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


def open_database(db: str | None, read_only: bool = False,
                  create: bool = False) -> duckdb.DuckDBPyConnection:
    """A registered connection to ``db`` (in memory when None), with one-line errors.

    A file that does not exist is an error unless ``create`` (a run that writes).
    """
    if db is not None and db != ":memory:":
        path = Path(db)
        if not path.exists() and not create:
            raise QueryLookupError(f"run: database file {db!r} does not exist (check the path; "
                                   "a run with --into creates it)")
        if not path.exists() and not path.parent.is_dir():
            raise QueryLookupError(f"run: cannot create database {db!r}: folder "
                                   f"{str(path.parent)!r} does not exist")
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


def prepare_inputs(con: duckdb.DuckDBPyConnection, query: queries.SavedQuery,
                   params: dict[str, str], specs: dict[str, inputs.TableSpec],
                   strict: bool = False) -> list[str]:
    """Make the query's tables from ``specs`` and return the warnings about them.

    With ``strict`` a warning is an error (raised after all were collected, so the
    caller can show them first: they are on the exception's ``warnings``).
    """
    values = queries.bind(query, params)  # a bad parameter is reported before any input
    prepared = inputs.prepare(con, query.name, query.reads, specs)
    warnings = input_checks.check(con, query.reads, values, absent=prepared.empty)
    if strict and warnings:
        error = InputDataError(f"run: --strict: {len(warnings)} warning(s) about the inputs "
                               "(above); nothing computed or written")
        error.warnings = warnings
        raise error
    return warnings


def query_text(query: queries.SavedQuery) -> str:
    """The query's SQL without trailing semicolons (so it can be wrapped)."""
    return query.sql.strip().rstrip(";").strip()


@dataclass
class RunResult:
    table: pa.Table
    written: int | None = None
    into: str | None = None


def _shown(values: dict) -> str:
    return ", ".join(f"{k}={v}" for k, v in values.items()) or "none"


def _check_replace_key(con, query: queries.SavedQuery, key: tuple[str, str]) -> None:
    """Every result row has COLUMN = VALUE, or nothing is written."""
    name, value = key
    types = dict(r[:2] for r in con.execute(f"DESCRIBE {RESULT}").fetchall())
    if name not in types:
        raise ParameterError(f"run: --replace-rows column {name!r} is not in the query's "
                             f"result (it has: {', '.join(types)})")
    column = quote_ident(name, "column")
    try:
        other, total = con.execute(
            f"SELECT count(*) FILTER (WHERE {column} IS DISTINCT FROM CAST($v AS {types[name]})), "
            f"count(*) FROM {RESULT}", {"v": value}).fetchall()[0]
    except duckdb.ConversionException:
        raise ParameterError(f"run: --replace-rows {name}={value!r}: {value!r} is not a "
                             f"{types[name]} like the result's {name} column") from None
    if other:
        found = [str(r[0]) for r in con.execute(
            f"SELECT DISTINCT {column} FROM {RESULT} WHERE {column} IS DISTINCT FROM "
            f"CAST($v AS {types[name]}) LIMIT 3", {"v": value}).fetchall()]
        raise ParameterError(
            f"run: --replace-rows {name}={value}, but {other} of {total} rows of {query.name} "
            f"have {name} {', '.join(found)}; nothing written (give --replace-rows the value the "
            f"query writes, e.g. the one given to -p {name})")


def _check_columns(con, query: queries.SavedQuery, into: str, target: str) -> None:
    """A table written by an older version may lack a column the query now returns
    (band_history before odds_error): say which, and how to add it."""
    have = {d[0].lower() for d in con.execute(f"SELECT * FROM {target} LIMIT 0").description}
    missing = [(r[0], r[1]) for r in con.execute(f"DESCRIBE SELECT * FROM {RESULT}").fetchall()
               if r[0].lower() not in have]
    if missing:
        name, typ = missing[0]
        raise InputDataError(
            f"run: {into} has no column {name}, which {query.name} now returns (a table written "
            f"by an earlier version); add it with ALTER TABLE {into} ADD COLUMN {name} {typ}, "
            "then run again")


def run_query(con: duckdb.DuckDBPyConnection, query: queries.SavedQuery, params: dict[str, str],
              into: str | None = None, replace_rows: tuple[str, str] | None = None,
              allow_empty: bool = False) -> RunResult:
    """Run ``query`` with bound ``params``; with ``into``, write the rows atomically.

    The write happens in one transaction: the result is computed into a temp
    table, checked (every row has the ``replace_rows`` key; no rows is an error
    unless ``allow_empty``), the target created if missing, the key's rows
    deleted, and the rows inserted; any failure (or a kill) leaves the target as
    it was.
    """
    values = queries.bind(query, params)
    sql = query_text(query)
    if into is None:
        return RunResult(con.sql(sql, params=values).to_arrow_table())
    target = quote_ident(into)
    if "." not in into:
        target = f'"main".{target}'  # not a TEMP view of the same name
    con.execute("BEGIN TRANSACTION")
    try:
        con.execute(f"CREATE OR REPLACE TEMP TABLE {RESULT} AS {sql}", values)
        if not allow_empty and not con.execute(f"SELECT count(*) FROM {RESULT}").fetchall()[0][0]:
            raise InputDataError(
                f"run: {query.name} returned no rows (parameters: {_shown(values)}); nothing "
                f"written into {into}: check the parameters and sources, or give --allow-empty")
        if replace_rows is not None:
            _check_replace_key(con, query, replace_rows)
        con.execute(f"CREATE TABLE IF NOT EXISTS {target} AS SELECT * FROM {RESULT} LIMIT 0")
        if replace_rows is not None:
            column = quote_ident(replace_rows[0], "column")
            con.execute(f"DELETE FROM {target} WHERE {column} = ?", [replace_rows[1]])
        _check_columns(con, query, into, target)
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
