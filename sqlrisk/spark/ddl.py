"""The catalog's SQL types (DuckDB's spelling) as Spark DDL and as Arrow types.

``catalog`` writes each type once, as DuckDB spells it (``DOUBLE[]``,
``STRUCT(origin DOUBLE, ...)``); Spark registers a function's result by a DDL
string (``array<double>``, ``struct<origin:double,...>``) and the adapters
conform Arrow inputs to the Arrow type of each argument. Both come from the same
text, so the outcome struct Spark writes to Parquet is the one DuckDB reads.
"""

from __future__ import annotations

import pyarrow as pa

_SCALARS = {
    "DOUBLE": ("double", pa.float64()),
    "BIGINT": ("bigint", pa.int64()),
    "INTEGER": ("int", pa.int32()),
    "VARCHAR": ("string", pa.string()),
}


def _split_fields(body: str) -> list[tuple[str, str]]:
    """``a DOUBLE, b STRUCT(x DOUBLE, y BIGINT)[]`` -> [(a, DOUBLE), (b, STRUCT(...)[])]."""
    fields, depth, start = [], 0, 0
    for i, ch in enumerate(body + ","):
        if ch == "(":
            depth += 1
        elif ch == ")":
            depth -= 1
        elif ch == "," and depth == 0:
            name, kind = body[start:i].strip().split(" ", 1)
            fields.append((name, kind.strip()))
            start = i + 1
    return fields


def _parse(text: str):
    """``(ddl, arrow type)`` of one SQL type."""
    text = text.strip()
    if text.endswith("[]"):
        ddl, arrow = _parse(text[:-2])
        return f"array<{ddl}>", pa.list_(arrow)
    if text.startswith("STRUCT(") and text.endswith(")"):
        fields = [(name, *_parse(kind)) for name, kind in _split_fields(text[7:-1])]
        ddl = "struct<" + ",".join(f"{name}:{d}" for name, d, _ in fields) + ">"
        return ddl, pa.struct([(name, a) for name, _, a in fields])
    if text in _SCALARS:
        return _SCALARS[text]
    raise ValueError(f"no Spark type for the SQL type {text!r}")


def spark_ddl(sql_type: str) -> str:
    """Spark's DDL for a catalog type: ``STRUCT(a DOUBLE)[]`` -> ``array<struct<a:double>>``."""
    return _parse(sql_type)[0]


def arrow_type(sql_type: str) -> pa.DataType:
    """The Arrow type DuckDB hands a UDF for a catalog type."""
    return _parse(sql_type)[1]
