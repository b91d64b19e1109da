"""Registering sqlrisk's functions and macros on a DuckDB connection.

Every function comes from ``catalog.FUNCTIONS``: Python UDFs (vectorised,
Arrow in and out) and, for the aggregates and scalars with named parameters,
TEMP macros around them. TEMP macros live with the connection, so nothing is
written into a user's database file; the Python UDFs live in the database
instance, shared by every connection to it.
"""

from __future__ import annotations

import duckdb

from .catalog import FUNCTIONS


def sql_type(text: str):
    """A DuckDB type object from its SQL spelling."""
    return duckdb.sqltype(text)


def _existing(con: duckdb.DuckDBPyConnection) -> set[str]:
    """Which of our UDF names the database already has (one catalog query)."""
    rows = con.execute("SELECT DISTINCT function_name FROM duckdb_functions() "
                       "WHERE function_name IN (SELECT unnest(?::VARCHAR[]))",
                       [[f.udf_name for f in FUNCTIONS]]).fetchall()
    return {r[0] for r in rows}


def register_udfs(con: duckdb.DuckDBPyConnection) -> None:
    """The Python functions, each removed and created anew.

    DuckDB keeps Python functions in the database instance, which all connections
    to one file in a process share; a function another such connection registered
    cannot be removed from here, and is kept (it is this same module's function,
    so it is never stale).
    """
    existing = _existing(con)
    for f in FUNCTIONS:
        if f.udf_name in existing:
            try:
                con.remove_function(f.udf_name)
            except duckdb.InvalidInputException:
                continue  # registered by another connection to the same database
        params = [sql_type(p) for p in f.udf_params()]
        con.create_function(f.udf_name, f.body.bound(len(params)), params,
                            sql_type(f.returns), type="arrow", null_handling="special")


def register_macros(con: duckdb.DuckDBPyConnection) -> duckdb.DuckDBPyConnection:
    """The TEMP macros (aggregates and scalars with named parameters) on ``con``."""
    for f in FUNCTIONS:
        if f.needs_macro:
            con.execute(f"CREATE OR REPLACE TEMP MACRO {f.name}({f.macro_params()}) AS "
                        f"{f.macro_body()}")
    return con


def register(con: duckdb.DuckDBPyConnection) -> duckdb.DuckDBPyConnection:
    """Register every sqlrisk function and macro on ``con``; returns ``con``.

    Safe to call again: a second call replaces what an earlier call on this
    connection registered.
    """
    register_udfs(con)
    return register_macros(con)


def connect(path: str | None = None, *, read_only: bool = False,
            config: dict | None = None) -> duckdb.DuckDBPyConnection:
    """Open a DuckDB connection (in memory when ``path`` is None) with sqlrisk registered."""
    con = duckdb.connect(path or ":memory:", read_only=read_only, config=config or {})
    return register(con)
