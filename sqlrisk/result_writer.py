"""Writing a query result as a terminal table, CSV, JSON lines or Parquet.

CSV is for spreadsheets and BI tools, so every cell is one value: a list of numbers
becomes one column per element (``bands`` -> ``bands_1``, ``bands_2``, ...; a list
named by its levels, ``p10_p50_p90``, -> ``p10``, ``p50``, ``p90``), a struct of
scalars becomes ``NAME_field`` columns, and an outcome struct is left out unless
``keep_outcomes`` (then one JSON text cell). Anything else nested (lists of structs,
structs holding lists) is one JSON text cell. Numbers keep full precision. JSON
lines keep lists as arrays and structs (outcomes included) as objects.
"""

from __future__ import annotations

import csv
import datetime as dt
import decimal
import io
import json
import re
import sys
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq

from . import text_format
from .errors import ParameterError

FORMATS = ("table", "csv", "json", "parquet")
OUTCOME_FIELDS = {"origin", "step", "mass", "trials", "rounding"}
_LEVEL_NAMES = re.compile(r"^p\d+(?:_p\d+)+$")


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


def _scalar(value) -> str:
    """One CSV cell: full precision, dates as ISO text, nested values as JSON."""
    if value is None:
        return ""
    if isinstance(value, float):
        return repr(value)
    if isinstance(value, (list, dict)):
        return json.dumps(_jsonable(value))
    return str(_jsonable(value))


def is_outcome(kind: pa.DataType) -> bool:
    return pa.types.is_struct(kind) and {f.name for f in kind} == OUTCOME_FIELDS


def _is_plain(kind: pa.DataType) -> bool:
    return not (pa.types.is_list(kind) or pa.types.is_large_list(kind)
                or pa.types.is_struct(kind) or pa.types.is_map(kind))


def element_names(name: str, width: int) -> list[str]:
    """Column names for the elements of list column ``name``."""
    parts = name.split("_")
    if _LEVEL_NAMES.match(name) and len(parts) == width:
        return parts
    return [f"{name}_{i}" for i in range(1, width + 1)]


def csv_columns(table: pa.Table, keep_outcomes: bool = False):
    """(header, cell-getter) pairs: how each result column is spread over CSV columns."""
    out = []
    for field in table.schema:
        name, kind = field.name, field.type
        if is_outcome(kind):
            if keep_outcomes:
                out.append((name, lambda r, n=name: _scalar(r[n])))
            continue
        if (pa.types.is_list(kind) or pa.types.is_large_list(kind)) and _is_plain(kind.value_type):
            values = table.column(name).to_pylist()
            width = max((len(v) for v in values if v is not None), default=0)
            for i, header in enumerate(element_names(name, width)):
                out.append((header, lambda r, n=name, i=i:
                            _scalar(r[n][i]) if r[n] is not None and i < len(r[n]) else ""))
            continue
        if pa.types.is_struct(kind) and all(_is_plain(f.type) for f in kind):
            for sub in kind:
                out.append((f"{name}_{sub.name}", lambda r, n=name, s=sub.name:
                            _scalar(r[n][s]) if r[n] is not None else ""))
            continue
        out.append((name, lambda r, n=name: _scalar(r[n])))
    return out


def to_csv(table: pa.Table, keep_outcomes: bool = False) -> str:
    columns = csv_columns(table, keep_outcomes)
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow([header for header, _ in columns])
    for row in table.to_pylist():
        writer.writerow([cell(row) for _, cell in columns])
    return buffer.getvalue().rstrip("\n")


def to_text(table: pa.Table, fmt: str, keep_outcomes: bool = False) -> str:
    if fmt == "table":
        return text_format.result_table(table)
    if fmt == "csv":
        return to_csv(table, keep_outcomes)
    if fmt == "json":
        return "\n".join(json.dumps(_jsonable(r)) for r in table.to_pylist())
    raise ParameterError(f"run: --format {fmt!r} cannot be printed; give --output FILE")


def write(table: pa.Table, fmt: str, output: str | None, keep_outcomes: bool = False) -> None:
    """Print or save ``table``; Parquet needs a file."""
    if fmt not in FORMATS:
        raise ParameterError(f"run: --format {fmt!r} is not one of {', '.join(FORMATS)}")
    if fmt == "parquet":
        if not output:
            raise ParameterError("run: --format parquet needs --output FILE.parquet")
        pq.write_table(table, output)
        return
    text = to_text(table, fmt, keep_outcomes)
    if output:
        Path(output).write_text(text + "\n")
    else:
        sys.stdout.write(text + "\n")
