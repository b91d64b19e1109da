"""Registering sqlrisk's functions on a SparkSession (``sqlrisk.spark.register``)."""

from __future__ import annotations

from ..adapters.catalog import FUNCTIONS
from ..errors import SqlriskError
from .ddl import spark_ddl
from .udfs import aggregate_udf, list_name, list_udf, result_sql, scalar_udf


def _arrow_udf():
    try:
        from pyspark.sql.functions import arrow_udf
    except ImportError as exc:
        raise SqlriskError("sqlrisk.spark needs pyspark 4.1 or later (Arrow UDFs): "
                           f"pip install 'sqlrisk[spark]' ({exc})") from None
    return arrow_udf


def registered_names() -> list[str]:
    """Every SQL name ``register`` creates: the catalog's functions and the aggregates'
    list forms."""
    names = [f.name for f in FUNCTIONS]
    return names + [list_name(f) for f in FUNCTIONS if f.kind == "aggregate"]


def register(spark):
    """Register every sqlrisk function on ``spark`` (a SparkSession) for Spark SQL;
    returns ``spark``.

    The aggregates (``band_odds(amount, prob, cuts)``, ``outcome_dist``, ...) are
    grouped-aggregate Arrow UDFs; each also has a list form (``band_odds_list(deals,
    cuts)`` on ``collect_list(named_struct('amount', amount, 'prob', prob))``) that may
    sit beside Spark's own aggregates. The scalars on stored outcomes and the scoring
    functions keep their DuckDB names. Registering again replaces the functions.
    """
    arrow_udf = _arrow_udf()
    for f in FUNCTIONS:
        returns = spark_ddl(result_sql(f))
        if f.kind == "aggregate":
            spark.udf.register(f.name, arrow_udf(aggregate_udf(f), returns))
            spark.udf.register(list_name(f), arrow_udf(list_udf(f), returns))
        else:
            spark.udf.register(f.name, arrow_udf(scalar_udf(f), returns))
    return spark


def error_line(exc: BaseException) -> str | None:
    """sqlrisk's one-line message inside a Spark error (a ``PythonException`` carries the
    worker's traceback; the message is the line after ``sqlrisk.errors.<Kind>:``), or None
    when the error is not sqlrisk's."""
    for line in reversed(str(exc).splitlines()):
        head, sep, message = line.partition(": ")
        if sep and head.strip().startswith("sqlrisk.errors."):
            return message.strip()
    return None
