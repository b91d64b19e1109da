"""sqlrisk's functions as Spark Arrow UDFs, built from the same catalog as DuckDB's.

Each ``catalog.SqlFunction`` gives Spark up to two functions, and each calls the
very body DuckDB calls (``adapters/*_udfs.py``) on the Arrow it would get there,
so names, argument order, the NULL rule, errors and numbers are DuckDB's:

* an **aggregate** ``band_odds(amount, prob, cuts)`` is a grouped-aggregate Arrow
  UDF: Spark hands it one group's rows, which are packed into the one-group
  ``LIST(STRUCT(...))`` that DuckDB's macro builds; its list form
  ``band_odds_list(deals, cuts)`` is a scalar Arrow UDF on
  ``collect_list(named_struct('amount', amount, 'prob', prob))``, one row per group,
  with the group-level arguments (``cuts``, ``target``, ``qs``) beside the list;
* a **scalar** ``outcome_bands(o, cuts)`` is a scalar Arrow UDF.

Arguments with a DuckDB default may be left off, positionally from the end, or
passed by name (``step => 50``). Arrow only here; ``register`` (in ``__init__``)
hands these functions to pyspark.
"""

from __future__ import annotations

import inspect
from contextlib import contextmanager

import numpy as np
import pyarrow as pa

from ..adapters.arrow_io import as_array, read_groups
from ..adapters.catalog import Arg, SqlFunction
from ..errors import ParameterError, SqlriskError, did_you_mean
from . import conform as cf

#: Per-row arguments of DuckDB's aggregates that are one value per group: in a list form
#: they are arguments of their own, beside the list of deals.
GROUP_LEVEL = ("cuts", "target", "qs")


@contextmanager
def named_as(fn: str, *bodies: str):
    """sqlrisk errors raised inside, whose message starts with one of ``bodies``' names
    (``band_odds: ...``), re-raised in the name of ``fn``, the function the user called."""
    try:
        yield
    except SqlriskError as exc:
        head, sep, rest = str(exc).partition(": ")
        if sep and head in bodies:
            raise type(exc)(f"{fn}: {rest}") from None
        raise


def list_name(f: SqlFunction) -> str:
    return f"{f.name}_list"


def _default(arg: Arg):
    """The Python value of a DuckDB macro default (``NULL``, ``0.0``, ``100000``)."""
    if arg.default == "NULL":
        return None
    return int(arg.default) if arg.sql_type in ("BIGINT", "INTEGER") else float(arg.default)


def _bind(fn: str, names: list[str], required: int, cols: tuple, named: dict) -> dict:
    """Spark's positional and named arguments by parameter name (absent ones missing)."""
    if len(cols) > len(names):
        raise ParameterError(f"{fn}: takes at most {len(names)} arguments "
                             f"({', '.join(names)}), got {len(cols)}")
    given = dict(zip(names, cols))
    for key, value in named.items():
        if key not in names:
            raise ParameterError(f"{fn}: no parameter named {key!r}{did_you_mean(key, names)}; "
                                 f"its parameters are {', '.join(names)}")
        if key in given:
            raise ParameterError(f"{fn}: {key} is given twice, by position and by name")
        given[key] = value
    absent = [n for n in names[:required] if given.get(n) is None]
    if absent:
        raise ParameterError(f"{fn}: missing argument {absent[0]} (its arguments are "
                             f"{', '.join(names)})")
    return given


def _rows_given(fn: str, names: list[str], required: int, cols: tuple, named: dict):
    """The bound arguments and how many rows the call covers."""
    given = _bind(fn, names, required, cols, named)
    return given, len(next(v for v in given.values() if v is not None))


def _signed(call, names: list[str], required: int, returns):
    """``call`` with the annotated signature pyspark reads to pick the kind of Arrow UDF:
    every parameter ``pa.Array``; a ``pa.Array`` result for a scalar UDF, a ``pa.Scalar``
    one for a grouped aggregate."""
    kind = inspect.Parameter.POSITIONAL_OR_KEYWORD
    params = [inspect.Parameter(n, kind, annotation=pa.Array,
                                **({} if i < required else {"default": None}))
              for i, n in enumerate(names)]
    call.__signature__ = inspect.Signature(params, return_annotation=returns)
    call.__annotations__ = {**{n: pa.Array for n in names}, "return": returns}
    return call


def _required(args) -> int:
    """How many leading arguments have no default."""
    count = 0
    for a in args:
        if a.default is not None:
            break
        count += 1
    return count


def _value(fn: str, a: Arg, given: dict, n: int) -> pa.Array:
    """Argument ``a`` as a column of ``n`` rows: conformed, or its default repeated."""
    value = given.get(a.name)
    if value is None:
        return cf.repeat(_default(a), n, a.sql_type)
    return cf.conform(fn, a.name, value, a.sql_type, missing_is_null=a.cast)


# -- scalars ------------------------------------------------------------------------

def scalar_udf(f: SqlFunction):
    """``f`` (a scalar) as a function of Spark columns returning one Arrow column."""
    names, required = [a.name for a in f.args], _required(f.args)
    body = f.body

    def call(*cols, **named):
        given, n = _rows_given(f.name, names, required, cols, named)
        return as_array(body.resolve()(*[_value(f.name, a, given, n) for a in f.args]))

    call.__name__ = f.name
    return _signed(call, names, required, pa.Array)


# -- aggregates on one group's rows -----------------------------------------------------

def _rows_struct(fn: str, f: SqlFunction, fields: dict, n: int) -> pa.Array:
    """The per-row arguments as DuckDB's macro packs them: one struct per row, or the values
    themselves when there is one (``outcome_merge``'s outcomes)."""
    rows = [a for a in f.args if a.per_row and not a.carried]
    columns = []
    for a in rows:
        value = fields.get(a.name)
        columns.append(cf.nulls(n, a.sql_type) if value is None
                       else cf.conform(fn, a.name, value, a.sql_type, missing_is_null=a.cast))
    if len(rows) == 1:
        return columns[0]
    names = [a.name for a in rows]
    for a in f.args:
        if a.carried:  # the ids as text, for the body's error messages
            columns.append(_text(fields[a.name]))
            names.append(a.name)
    return pa.StructArray.from_arrays(columns, names=names)


def _others(fn: str, f: SqlFunction, given: dict) -> list[pa.Array]:
    """The group-level arguments (``step``, ``trials``) of one group: one row each."""
    out = []
    for a in f.args:
        if a.per_row:
            continue
        value = given.get(a.name)
        out.append(cf.repeat(_default(a), 1, a.sql_type) if value is None
                   else cf.one_per_group(fn, a.name, cf.conform(fn, a.name, value, a.sql_type)))
    return out


def _carried_back(result: pa.Array, ids: pa.Array, offsets: np.ndarray) -> pa.Array:
    """``deal_swing``'s positions turned back into the deals' ids (``ids``: the rows' ids as
    text, as packed for the body)."""
    lists = as_array(result)
    items = lists.values
    starts = np.repeat(offsets[:-1], np.diff(np.asarray(lists.offsets)))
    pos = starts + np.asarray(items.field("i"), dtype=np.int64) - 1
    text = ids.take(pa.array(pos))
    kept = [items.field(k) for k in ("reach_if_won", "reach_if_lost", "swing")]
    out = pa.StructArray.from_arrays([text, *kept],
                                     names=["deal_id", "reach_if_won", "reach_if_lost", "swing"])
    mask = lists.is_null() if lists.null_count else None
    return pa.ListArray.from_arrays(lists.offsets, out, mask=mask)


def _text(ids) -> pa.Array:
    """Deal ids of any type as text (DuckDB's macro casts them to VARCHAR)."""
    arr = as_array(ids)
    return pa.array([None if v is None else str(v) for v in arr.to_pylist()], pa.string())


def aggregate_udf(f: SqlFunction):
    """``f`` (an aggregate) as a grouped-aggregate function of one group's columns."""
    names, required = [a.name for a in f.args], _required(f.args)
    body = f.body

    def call(*cols, **named):
        given, n = _rows_given(f.name, names, required, cols, named)
        rows = _rows_struct(f.name, f, given, n)
        listed = pa.ListArray.from_arrays(pa.array([0, n], pa.int32()), rows)
        others = _others(f.name, f, given)
        result = body.resolve()(listed, *others)
        if any(a.carried for a in f.args):
            carried = next(a for a in f.args if a.carried)
            result = _carried_back(result, rows.field(carried.name), np.array([0, n]))
        answer = as_array(result)[0]
        return answer if answer.is_valid else None  # pyarrow cannot list a NULL list scalar

    call.__name__ = f.name
    return _signed(call, names, required, pa.Scalar)


# -- aggregates' list forms -------------------------------------------------------------

def list_params(f: SqlFunction) -> tuple[str, list[Arg], list[Arg], list[Arg]]:
    """``(name of the list, fields of its structs, group-level args, other args)``."""
    per_row = [a for a in f.args if a.per_row and a.name not in GROUP_LEVEL]
    group = [a for a in f.args if a.per_row and a.name in GROUP_LEVEL]
    others = [a for a in f.args if not a.per_row]
    if len(per_row) == 1 and not per_row[0].carried and per_row[0].sql_type.startswith("STRUCT"):
        lead = "outcomes"
    elif per_row and per_row[0].name == "prob":
        lead = "closed"
    else:
        lead = "deals"
    return lead, per_row, group, others


def _list_rows(fn: str, f: SqlFunction, deals, lead: str, fields: list[Arg]):
    """A ``collect_list(named_struct(...))`` column: its structs' fields by name, the
    offsets (from 0) and which lists are NULL."""
    arr = as_array(deals)
    if not (pa.types.is_list(arr.type) or pa.types.is_large_list(arr.type)):
        raise ParameterError(f"{fn}: {lead} must be a collect_list(...) of the group's rows, "
                             f"got Spark type {arr.type}")
    groups = read_groups(arr)
    values, offsets = groups.fields, groups.offsets
    if len(fields) == 1 and not fields[0].carried:
        return {fields[0].name: values}, offsets, groups.null_group
    wanted = ", ".join(f"'{a.name}', {a.name}" for a in fields if a.default is None)
    if not pa.types.is_struct(values.type):
        raise ParameterError(f"{fn}: {lead} must be collect_list(named_struct({wanted})), "
                             f"got a list of {values.type}")
    have = [values.type.field(i).name for i in range(values.type.num_fields)]
    out = {}
    for a in fields:
        if a.name in have:
            out[a.name] = values.field(a.name)
        elif a.default is None:
            raise ParameterError(
                f"{fn}: {lead} has no field {a.name!r} (its fields: {', '.join(have)}); "
                f"build it with collect_list(named_struct({wanted}))")
    return out, offsets, groups.null_group


def list_udf(f: SqlFunction):
    """``f``'s list form: a scalar function of one collected list per group."""
    lead, fields, group, others = list_params(f)
    names = [lead] + [a.name for a in group] + [a.name for a in others]
    required = 1 + len(group)
    fn, body = list_name(f), f.body

    def call(*cols, **named):
        given = _bind(fn, names, required, cols, named)
        rows, offsets, null_list = _list_rows(fn, f, given[lead], lead, fields)
        n_groups = len(offsets) - 1
        for a in group:
            rows[a.name] = cf.per_row(cf.conform(fn, a.name, given[a.name], a.sql_type), offsets)
        packed = _rows_struct(fn, f, rows, int(offsets[-1]))
        mask = pa.array(null_list) if null_list.any() else None
        listed = pa.ListArray.from_arrays(pa.array(offsets, pa.int64()).cast(pa.int32()),
                                          packed, mask=mask)
        extra = [_value(fn, a, given, n_groups) for a in others]
        with named_as(fn, f.name):
            result = body.resolve()(listed, *extra)
        carried = [a for a in f.args if a.carried]
        if carried:
            result = _carried_back(result, packed.field(carried[0].name), offsets)
        return as_array(result)

    call.__name__ = fn
    return _signed(call, names, required, pa.Array)


def result_sql(f: SqlFunction) -> str:
    """The result type Spark registers (``deal_swing``'s ids are text on Spark)."""
    if any(a.carried for a in f.args):
        return ("STRUCT(deal_id VARCHAR, reach_if_won DOUBLE, reach_if_lost DOUBLE, "
                "swing DOUBLE)[]")
    return f.returns
