"""The DataFrame fast path: one row per group with its outcome, without Spark SQL's aggregates.

``outcomes(df, by, ...)`` shuffles the deals so that each group sits whole in one
partition, sorted by its keys, and runs ``partitions.group_outcomes`` on each
partition through ``mapInArrow`` (the fastest of the routes measured: README,
"On Spark"). Each group is computed by one task.
"""

from __future__ import annotations

from functools import partial

from ..errors import QueryLookupError, SqlriskError, did_you_mean
from ..adapters.sql_types import OUTCOME_SQL
from .ddl import spark_ddl
from .partitions import AMOUNT, CUTS, KEY, PROB, group_outcomes


def _column(df, name: str, what: str) -> str:
    if name not in df.columns:
        raise QueryLookupError(f"outcomes: no column {name!r} for {what} in the DataFrame"
                               f"{did_you_mean(name, df.columns)}; its columns are "
                               f"{', '.join(df.columns)}")
    return name


def _keys(df, by) -> list[str]:
    keys = [by] if isinstance(by, str) else list(by)
    if not keys:
        raise SqlriskError("outcomes: give at least one group key in by")
    for k in keys:
        _column(df, k, "a group key")
        if k in ("outcome", "band_odds"):
            raise SqlriskError(f"outcomes: a group key may not be named {k!r} (a result "
                               "column has that name); rename it with withColumnRenamed")
    return keys


def outcomes(df, by, amount: str = "amount", prob: str = "prob", cuts=None, *,
             step: float | None = None, correlation: float = 0.0):
    """One row per group of ``df``: the ``by`` columns, ``outcome`` (as ``outcome_dist``
    stores it) and, when ``cuts`` is given, ``band_odds`` (as ``band_odds`` gives them).

    Parameters
    ----------
    df : pyspark.sql.DataFrame
        One row per deal.
    by : str or list of str
        The group keys (an owner, a region and quarter...).
    amount, prob : str
        The columns of the deal's amount and its win probability (NULL rows are
        skipped, as in SQL).
    cuts : list of numbers, str, list of str, or None
        The band cuts: the same numbers for every group, the name of an array column,
        or the names of number columns (``["floor", "target", "stretch"]`` after a join
        with a quota table); one value per group, as in SQL.
    step, correlation : as ``outcome_dist``'s.
    """
    from pyspark.sql import functions as F
    from pyspark.sql.types import DataType, StructField, StructType

    keys = _keys(df, by)

    def col(name: str):  # backticks: a name with a dot or a space is one column, not a path
        return F.col("`" + name.replace("`", "``") + "`")

    # The keys travel under plain names of our own (pyspark's mapInArrow cannot look up a
    # column whose name has a dot) and get theirs back at the end.
    inner = [f"{KEY}{i}" for i in range(len(keys))]
    columns = [col(k).alias(name) for k, name in zip(keys, inner)]
    columns += [col(_column(df, amount, "amount")).alias(AMOUNT),
                col(_column(df, prob, "prob")).alias(PROB)]
    constant_cuts = None
    if isinstance(cuts, str):
        columns.append(col(_column(df, cuts, "cuts")).alias(CUTS))
    elif cuts is not None and len(cuts) and all(isinstance(c, str) for c in cuts):
        columns.append(F.array(*[col(_column(df, c, "a cut")) for c in cuts]).alias(CUTS))
    elif cuts is not None:
        constant_cuts = [float(c) for c in cuts]
    fields = [StructField(name, df.schema[k].dataType) for k, name in zip(keys, inner)]
    fields.append(StructField("outcome", DataType.fromDDL(spark_ddl(OUTCOME_SQL))))
    names = [*keys, "outcome"]
    if cuts is not None:
        fields.append(StructField("band_odds", DataType.fromDDL("array<double>")))
        names.append("band_odds")
    work = partial(group_outcomes, keys=inner,
                   cuts=constant_cuts if constant_cuts is not None else (CUTS if cuts else None),
                   step=step, correlation=correlation)
    data = df.select(*columns).repartition(*inner).sortWithinPartitions(*inner)
    return data.mapInArrow(work, StructType(fields)).toDF(*names)
