"""Writing a query result as a table, CSV, JSON lines or Parquet."""

from __future__ import annotations

import csv
import datetime as dt
import decimal
import io
import json
import sys
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq

from . import text_format
from .errors import ParameterError

FORMATS = ("table", "csv", "json", "parquet")


def _jsonable(value):
    if isinstance(value, (dt.date, dt.datetime, dt.time)):
        return value.isoformat()
    if isinstance(value, decimal.Decimal):
        return float(value)
    if isinstance(value, dict):
        return {k: _jsonable(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_jsonable(v) for v in value]
    return value


def _cell(value) -> str:
    """CSV cell: nested values as JSON so they can be read back."""
    if value is None:
        return ""
    if isinstance(value, (list, dict)):
        return json.dumps(_jsonable(value))
    return str(_jsonable(value))


def to_text(table: pa.Table, fmt: str) -> str:
    rows = table.to_pylist()
    names = table.column_names
    if fmt == "table":
        return text_format.table(names, [[r[n] for n in names] for r in rows])
    if fmt == "csv":
        buffer = io.StringIO()
        writer = csv.writer(buffer, lineterminator="\n")
        writer.writerow(names)
        for r in rows:
            writer.writerow([_cell(r[n]) for n in names])
        return buffer.getvalue().rstrip("\n")
    if fmt == "json":
        return "\n".join(json.dumps(_jsonable(r)) for r in rows)
    raise ParameterError(f"run: --format {fmt!r} cannot be printed; give --output FILE")


def write(table: pa.Table, fmt: str, output: str | None) -> None:
    """Print or save ``table``; Parquet needs a file."""
    if fmt not in FORMATS:
        raise ParameterError(f"run: --format {fmt!r} is not one of {', '.join(FORMATS)}")
    if fmt == "parquet":
        if not output:
            raise ParameterError("run: --format parquet needs --output FILE.parquet")
        pq.write_table(table, output)
        return
    text = to_text(table, fmt)
    if output:
        Path(output).write_text(text + "\n")
    else:
        sys.stdout.write(text + "\n")
