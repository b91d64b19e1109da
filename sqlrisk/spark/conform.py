"""Spark's Arrow columns turned into the types DuckDB hands sqlrisk's UDFs.

DuckDB casts every argument to the catalog's type before a UDF sees it; Spark
hands a Python UDF its columns as they are (``1.0`` is a ``decimal(2,1)``, an
amount may be an integer or a string). ``conform`` does DuckDB's part, so the
adapters' bodies see the same Arrow types on both engines, and a value that
cannot be read is refused in one line naming the function and the argument.
Arrow only: this module runs on Spark's Python workers and needs no pyspark.
"""

from __future__ import annotations

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from ..adapters.arrow_io import as_array
from ..errors import ParameterError
from .ddl import arrow_type


def _cast(fn: str, name: str, arr: pa.Array, target: pa.DataType, sql_type: str) -> pa.Array:
    try:
        return pc.cast(arr, target)
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError) as exc:
        reason = str(exc).splitlines()[0]
        raise ParameterError(
            f"{fn}: {name} of Spark type {arr.type} cannot be read as {sql_type} ({reason}); "
            f"CAST it to {sql_type.replace('[]', ' array')} in the query, or filter the rows "
            "that do not convert") from None


def _struct(fn: str, name: str, arr: pa.Array, target: pa.StructType, sql_type: str,
            missing_is_null: bool) -> pa.Array:
    if not pa.types.is_struct(arr.type):
        raise ParameterError(f"{fn}: {name} must be a struct {sql_type}, got Spark type "
                             f"{arr.type}")
    have = [arr.type.field(i).name for i in range(arr.type.num_fields)]
    children = []
    for i in range(target.num_fields):
        field = target.field(i)
        if field.name in have:
            child = arr.field(field.name)
            children.append(child if child.type == field.type
                            else _cast(fn, f"{name}.{field.name}", child, field.type, sql_type))
        elif missing_is_null:
            children.append(pa.nulls(len(arr), field.type))
        else:
            raise ParameterError(
                f"{fn}: {name} has no field {field.name!r} (its fields: {', '.join(have)}); "
                f"pass a struct {sql_type}")
    mask = arr.is_null() if arr.null_count else None
    return pa.StructArray.from_arrays(children, fields=list(target), mask=mask)


def conform(fn: str, name: str, values, sql_type: str, missing_is_null: bool = False) -> pa.Array:
    """``values`` (one Spark column) as the Arrow type of ``sql_type``.

    A struct is matched by field names; a field it lacks is an error, or NULL when
    ``missing_is_null`` (DuckDB's cast of a hand-written calibration map without its
    ``deals`` field).
    """
    arr = as_array(values)
    target = arrow_type(sql_type)
    if arr.type == target:
        return arr
    if pa.types.is_null(arr.type):
        return pa.nulls(len(arr), target)
    if pa.types.is_struct(target):
        return _struct(fn, name, arr, target, sql_type, missing_is_null)
    return _cast(fn, name, arr, target, sql_type)


def nulls(n: int, sql_type: str) -> pa.Array:
    return pa.nulls(n, arrow_type(sql_type))


def repeat(value, n: int, sql_type: str) -> pa.Array:
    """A column of ``n`` copies of an argument's default (DuckDB's macro default)."""
    return pa.array([value] * n, arrow_type(sql_type))


def one_per_group(fn: str, name: str, column: pa.Array) -> pa.Array:
    """The one value a group's rows give a group-level argument (``step``, ``trials``).

    DuckDB takes such an argument outside the aggregate, so it must be the same for the
    whole group (a constant, or a GROUP BY column); Spark passes it row by row, and
    rows that disagree are refused.
    """
    if len(column) <= 1:
        return column.slice(0, 1) if len(column) else column
    first = column.slice(0, 1)
    same = pc.equal(column, first[0]) if first.null_count == 0 else pc.is_null(column)
    same = same.fill_null(False) if same.null_count else same
    if not pc.all(same).as_py():
        other = column.filter(pc.invert(same))[0].as_py()
        raise ParameterError(
            f"{fn}: {name} must be the same on every row of a group; one group has "
            f"{first[0].as_py()!r} and {other!r} (give a constant, or a column the query "
            "groups by)")
    return first


def per_row(column: pa.Array, offsets: np.ndarray) -> pa.Array:
    """Each group's value repeated on its rows (``offsets`` delimits the groups)."""
    parents = np.repeat(np.arange(len(offsets) - 1), np.diff(offsets))
    return column.take(pa.array(parents))
