"""Where the tables come from: ``sqlrisk.toml`` and the ``--source`` / ``--column`` options.

A project file maps each table a query reads onto the company's own source::

    [tables.pipeline]
    source = "extracts/deals.csv"     # Parquet/CSV path or glob, or a table of --db
    columns = { owner_id = "rep", amount = "acv", win_prob = "probability / 100" }

``sqlrisk.toml`` in the working directory is read when present, another file with
``--config FILE``. A relative ``source`` path is relative to the file's folder.
Command-line ``--source`` and ``--column`` override the file, table by table and
column by column.
"""

from __future__ import annotations

import tomllib
from pathlib import Path

from .errors import ParameterError, QueryLookupError
from .inputs import TableSpec, is_file_source

DEFAULT_FILE = "sqlrisk.toml"
_TABLE_KEYS = {"source", "columns"}


def _table(path: Path, name: str, entry) -> TableSpec:
    where = f"{path}: [tables.{name}]"
    if not isinstance(entry, dict) or set(entry) - _TABLE_KEYS:
        extra = sorted(set(entry) - _TABLE_KEYS) if isinstance(entry, dict) else [entry]
        raise ParameterError(f"{where} has {extra!r}; a table takes only "
                             "source = \"FILE or TABLE\" and columns = { name = \"SQL\" }")
    source = entry.get("source")
    columns = entry.get("columns", {})
    if source is not None and not isinstance(source, str):
        raise ParameterError(f"{where} source {source!r} must be text (a path or a table name)")
    if not isinstance(columns, dict) or not all(isinstance(v, str) for v in columns.values()):
        raise ParameterError(f"{where} columns must map names to SQL text, e.g. "
                             "columns = { owner_id = \"rep\" }")
    if source is not None and is_file_source(source) and not Path(source).expanduser().is_absolute():
        source = str(path.parent / source)
    return TableSpec(source, dict(columns))


def load(config: str | None) -> dict[str, TableSpec]:
    """The tables of ``config`` (a path), else of ./sqlrisk.toml when it exists, else none."""
    path = Path(config) if config is not None else Path(DEFAULT_FILE)
    if not path.exists():
        if config is not None:
            raise QueryLookupError(f"run: --config {config!r}: no such file")
        return {}
    try:
        data = tomllib.loads(path.read_text())
    except tomllib.TOMLDecodeError as exc:
        raise ParameterError(f"{path}: not valid TOML ({exc})") from None
    unknown = sorted(set(data) - {"tables"})
    if unknown:
        raise ParameterError(f"{path}: unknown section(s) {', '.join(unknown)}; "
                             "the file holds [tables.NAME] entries")
    tables = data.get("tables", {})
    return {name: _table(path, name, entry) for name, entry in tables.items()}


def split_column(pair: str) -> tuple[str, str, str]:
    """``TABLE.NAME=SQL`` as (table, name, sql)."""
    target, sep, expression = pair.partition("=")
    table, dot, name = target.strip().partition(".")
    if not sep or not dot or not table or not name or not expression.strip():
        raise ParameterError(f"run: --column {pair!r} is not TABLE.NAME=SQL_EXPRESSION, e.g. "
                             "--column pipeline.win_prob='probability / 100'")
    return table, name.strip(), expression.strip()


def table_specs(config: str | None, sources: dict[str, str],
                columns: list[str]) -> dict[str, TableSpec]:
    """The file's tables with the command line's ``--source`` and ``--column`` on top."""
    specs = load(config)
    for table, source in sources.items():
        specs.setdefault(table, TableSpec()).source = source
    for pair in columns:
        table, name, expression = split_column(pair)
        specs.setdefault(table, TableSpec()).columns[name] = expression
    return specs
