"""The tables a query reads, made from the user's own sources and column names.

Each table a query declares (``-- reads:``) or the user maps (``--source``,
``--column``, ``sqlrisk.toml``) becomes a TEMP view of that name over its source:
a Parquet/CSV file or glob, a table of the open database, or (when nothing is
given) the database's table of the same name. The view has every declared
column: a mapped one is the user's SQL expression over the source's columns, a
present one is the source's column, a missing optional one is NULL; typed
columns (``amount number``) are cast, after a check that every value converts.
The source's other columns pass through unchanged. A missing required table or
column is a one-line error that lists what the source has and names the fix.
"""

from __future__ import annotations

import glob
import os
import re
from dataclasses import dataclass, field
from pathlib import Path

import duckdb

from .errors import InputDataError, QueryLookupError, did_you_mean
from .query_header import Column, TableRead

FILE_READERS = {".parquet": "read_parquet", ".pq": "read_parquet", ".csv": "read_csv",
                ".tsv": "read_csv", ".txt": "read_csv", ".gz": "read_csv"}
_IDENT = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")
_TEXT_TYPES = ("VARCHAR",)
_FIX = ("give it with --source {t}=FILE.csv (or .parquet), a [tables.{t}] entry in "
        "sqlrisk.toml, or a --db that has it")


@dataclass
class TableSpec:
    """Where one table comes from and how its columns map onto the source's."""
    source: str | None = None                            # file, glob or table of the database
    columns: dict[str, str] = field(default_factory=dict)  # declared name -> SQL expression


def quote(name: str) -> str:
    return '"' + name.replace('"', '""') + '"'


def literal(text: str) -> str:
    return "'" + text.replace("'", "''") + "'"


def is_file_source(source: str) -> bool:
    return Path(source).suffix.lower() in FILE_READERS or any(c in source for c in "*?/\\")


@dataclass
class Base:
    """A table's source as SQL (``FROM`` text), its columns and types, and how to name it."""
    sql: str
    columns: dict[str, str]  # name -> DuckDB type
    label: str               # e.g. "extracts/deals.csv" or "table pipeline of forecast.duckdb"
    csv_path: str | None = None


def _columns_of(con, sql: str) -> dict[str, str]:
    return {r[0]: r[1] for r in con.execute(f"DESCRIBE SELECT * FROM {sql}").fetchall()}


def _file_base(con, table: str, source: str) -> Base:
    path = os.path.expanduser(source)
    reader = FILE_READERS.get(Path(path).suffix.lower())
    if reader is None:
        raise InputDataError(f"run: source {table}={source!r} is not a .parquet or .csv file")
    if not glob.glob(path):
        raise InputDataError(f"run: source {table}={source!r}: no such file")
    sql = f"{reader}({literal(path)})"
    try:
        columns = _columns_of(con, sql)
    except duckdb.Error as exc:
        first = " ".join(str(exc).split("\nLINE ")[0].split())[:200]
        raise InputDataError(f"run: source {table}={source!r} cannot be read as "
                             f"{reader[5:]}: {first}") from None
    return Base(sql, columns, source, path if reader == "read_csv" else None)


def database_tables(con) -> set[str]:
    """The tables and views of the open database's main schema (not TEMP ones)."""
    rows = con.execute("SELECT table_name FROM duckdb_tables() WHERE NOT temporary "
                       "AND schema_name = 'main' UNION SELECT view_name FROM duckdb_views() "
                       "WHERE NOT temporary AND schema_name = 'main'").fetchall()
    return {r[0] for r in rows}


def _db_base(con, table: str, name: str) -> Base:
    database = con.execute("SELECT current_database()").fetchall()[0][0]
    sql = f"{quote(database)}.main.{quote(name)}"
    return Base(sql, _columns_of(con, sql), f"table {name} of the database")


def _base(con, table: str, spec: TableSpec, existing: set[str]) -> Base | None:
    if spec.source is not None and is_file_source(spec.source):
        return _file_base(con, table, spec.source)
    name = spec.source or table
    if name in existing:
        return _db_base(con, table, name)
    if spec.source is not None:
        raise QueryLookupError(f"run: source {table}={spec.source!r} is neither a .csv/.parquet "
                               f"file nor a table of the database{did_you_mean(name, existing)}")
    return None


def _missing_columns(query: str, read: TableRead, missing: list[str],
                     base: Base) -> QueryLookupError:
    have = ", ".join(base.columns) or "no columns"
    names = ", ".join(missing)
    guess = did_you_mean(missing[0], base.columns) if len(missing) == 1 else ""
    return QueryLookupError(
        f"run: {query} reads {read.table}({names}), which {base.label} does not have{guess} "
        f"(it has: {have}); map each with --column {read.table}.NAME=EXPR, an SQL expression "
        f"over those columns, e.g. --column {read.table}.{missing[0]}=...")


def _bad_values(con, base: Base, expr: str, sql_type: str) -> tuple[int, list[str]]:
    """How many values of ``expr`` do not convert to ``sql_type``, and up to five of them."""
    bad = (f"FROM {base.sql} WHERE ({expr}) IS NOT NULL "
           f"AND TRY_CAST(({expr}) AS {sql_type}) IS NULL")
    count = con.execute(f"SELECT count(*) {bad}").fetchall()[0][0]
    examples = [str(r[0]) for r in con.execute(f"SELECT DISTINCT ({expr}) {bad} LIMIT 5").fetchall()]
    return count, examples


def _csv_line(con, base: Base, column: str, sql_type: str) -> str:
    """Where DuckDB's CSV reader reports the first value of ``column`` that is not ``sql_type``."""
    try:
        con.execute(f"SELECT max({quote(column)}) FROM read_csv({literal(base.csv_path)}, "
                    f"types = {{{literal(column)}: {literal(sql_type)}}})").fetchall()
    except duckdb.Error as exc:
        match = re.search(r"Line: (\d+)", str(exc))
        if match:
            return f" (line {match.group(1)} of {base.label})"
    return ""


def _typed(con, read: TableRead, column: Column, expr: str, base: Base,
           raw: str) -> str:
    """``expr`` cast to the column's declared type, after checking that every value converts."""
    sql_type = column.sql_type()
    if sql_type is None:
        return expr
    actual = con.execute(f"SELECT typeof({expr}) FROM {base.sql} LIMIT 1").fetchall()
    if not actual or actual[0][0] not in _TEXT_TYPES:
        return f"CAST({expr} AS {sql_type})" if sql_type == "DATE" else expr
    count, examples = _bad_values(con, base, expr, sql_type)
    if not count:
        return f"CAST({expr} AS {sql_type})"
    # A bare column of a CSV file: DuckDB's reader can say on which line the text is.
    where = (_csv_line(con, base, raw, sql_type)
             if base.csv_path and raw in base.columns else "")
    shown = ", ".join(repr(e) for e in examples)
    fix = (f"TRY_CAST(replace(replace({raw}, '$', ''), ',', '') AS DOUBLE)"
           if column.kind == "number" else f"TRY_CAST({raw} AS {sql_type})")
    raise InputDataError(
        f"run: {read.table}.{column.name} must be a {column.kind}, but {count} value(s) of "
        f"{raw} in {base.label} are text that is not one: {shown}{where}; clean the "
        f"source, or map the column with an expression such as --column "
        f"{read.table}.{column.name}=\"{fix}\"")


def _view_sql(con, query: str, read: TableRead, spec: TableSpec, base: Base) -> str:
    """SELECT list of the view: declared (and mapped) columns first, then the rest."""
    selected, names = [], []
    missing = [c.name for c in read.required
               if c.name not in spec.columns and c.name not in base.columns]
    if missing:
        raise _missing_columns(query, read, missing, base)
    extra = [Column(n, None, False) for n in spec.columns if read.column(n) is None]
    for column in [*read.columns, *extra]:
        if column.name in spec.columns:
            raw = spec.columns[column.name].strip()
            expr = f"({raw})"
            try:
                con.execute(f"SELECT {expr} FROM {base.sql} LIMIT 0").fetchall()
            except duckdb.Error as exc:
                first = " ".join(str(exc).split("\nLINE ")[0].split())[:200]
                raise QueryLookupError(
                    f"run: --column {read.table}.{column.name}={spec.columns[column.name]!r} "
                    f"does not work on {base.label} ({first}); it has: "
                    f"{', '.join(base.columns)}") from None
        elif column.name in base.columns:
            raw, expr = column.name, quote(column.name)
        else:  # optional and missing: NULL
            sql_type = column.sql_type()
            selected.append(f"NULL::{sql_type} AS {quote(column.name)}" if sql_type
                            else f"NULL AS {quote(column.name)}")
            names.append(column.name)
            continue
        expr = _typed(con, read, column, expr, base, raw)
        selected.append(f"{expr} AS {quote(column.name)}")
        names.append(column.name)
    rest = [quote(c) for c in base.columns if c not in names]
    return f"SELECT {', '.join(selected + rest)} FROM {base.sql}"


def _empty_sql(read: TableRead) -> str:
    parts = [f"NULL::{c.sql_type()} AS {quote(c.name)}" if c.sql_type()
             else f"NULL AS {quote(c.name)}" for c in read.columns]
    return f"SELECT {', '.join(parts) or 'NULL AS none'} LIMIT 0"


@dataclass
class Prepared:
    """What ``prepare`` made: each table's label, and the optional tables read as empty."""
    labels: dict[str, str] = field(default_factory=dict)
    empty: list[str] = field(default_factory=list)


def prepare(con, query: str, reads: list[TableRead], specs: dict[str, TableSpec]) -> Prepared:
    """Create a TEMP view for every declared or mapped table; see the module docstring."""
    for table in specs:
        if not _IDENT.match(table):
            raise QueryLookupError(f"run: table name {table!r} is not a plain identifier "
                                   "(letters, digits and _)")
    existing = database_tables(con)
    declared = {r.table: r for r in reads}
    prepared = Prepared()
    for table in [*declared, *(t for t in specs if t not in declared)]:
        read = declared.get(table, TableRead(table, [], False))
        spec = specs.get(table, TableSpec())
        base = _base(con, table, spec, existing)
        if base is None and table not in declared:
            raise QueryLookupError(f"run: --column {table}.... maps a table that has no source; "
                                   + _FIX.format(t=table))
        if base is None:
            if read.required_table:
                cols = read.describe()
                raise QueryLookupError(f"run: {query} reads table {cols}, which is not given; "
                                       + _FIX.format(t=table))
            con.execute(f"CREATE OR REPLACE TEMP VIEW {quote(table)} AS {_empty_sql(read)}")
            prepared.empty.append(table)
            continue
        sql = _view_sql(con, query, read, spec, base)
        con.execute(f"CREATE OR REPLACE TEMP VIEW {quote(table)} AS {sql}")
        prepared.labels[table] = base.label
    return prepared
