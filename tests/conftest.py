"""Shared fixtures (``con``: in-memory DuckDB with sqlrisk registered, ``db_path``, ``demo_con``)
and the helpers several test modules use (``one``, ``mass_by_total``, ``udf_message``,
``run_saved``, ``assert_png``)."""

from __future__ import annotations

import os
import re
from pathlib import Path

import pytest

import sqlrisk
from sqlrisk import queries, runner

ROOT = Path(__file__).resolve().parent.parent


@pytest.fixture
def con():
    connection = sqlrisk.connect()
    yield connection
    connection.close()


@pytest.fixture
def db_path(tmp_path):
    return str(tmp_path / "test.duckdb")


@pytest.fixture
def demo_con(con):
    """``con`` with the demo seeds loaded as tables pipeline, owners, quota_bands, closed_deals,
    past_deals and past_quotas."""
    for name in ("pipeline", "owners", "quota_bands", "closed_deals", "past_deals", "past_quotas"):
        con.execute(f"CREATE TABLE {name} AS SELECT * FROM read_csv(?)",
                    [str(ROOT / "seeds" / f"{name}.csv")])
    return con


@pytest.fixture(scope="session")
def spark():
    """A local[2] SparkSession with sqlrisk registered, for the tests/test_spark*.py modules.

    Skipped, with the reason printed, when pyspark or Java is missing; a failure instead
    when SQLRISK_REQUIRE_SPARK=1 (CI sets it, so the Spark tests cannot vanish there).
    """
    from sqlrisk.spark.session import java_home

    reason = None
    try:
        import pyspark  # noqa: F401
    except ImportError:
        reason = "pyspark is not installed (make test installs it with '.[test]')"
    if reason is None and java_home() is None:
        reason = "no java on PATH and no JAVA_HOME (Spark needs Java 17 or later)"
    if reason:
        if os.environ.get("SQLRISK_REQUIRE_SPARK") == "1":
            pytest.fail(f"the Spark tests cannot run: {reason}; SQLRISK_REQUIRE_SPARK=1 "
                        "requires them")
        pytest.skip(f"Spark tests skipped: {reason}")
    import sqlrisk.spark

    session = sqlrisk.spark.local_session(2)
    yield session
    session.stop()


# -- helpers shared by the test modules -----------------------------------------------

def one(con, sql, params=()):
    """The single value a query returns (its first row's first column)."""
    return con.execute(sql, list(params)).fetchone()[0]


def mass_by_total(o) -> dict[float, float]:
    """An outcome struct as {total: probability}, one entry per lattice point."""
    return {o["origin"] + i * o["step"]: m for i, m in enumerate(o["mass"])}


def udf_message(exc: Exception) -> str:
    """The message a UDF raised, without DuckDB's "Python exception occurred ..." prefix."""
    return re.sub(r"^.*?Python exception occurred while executing the UDF: \w+: ", "", str(exc))


def run_saved(con, name, **params) -> list[dict]:
    """The rows of saved query ``name`` (from sql/) run on ``con`` with text parameters."""
    return runner.run_query(con, queries.find(name), params).table.to_pylist()


def assert_png(path, min_size=(200, 150)) -> tuple[int, int]:
    """``path`` decodes as a PNG image (matplotlib's reader) of at least ``min_size`` pixels
    (width, height), not blank; returns (width, height)."""
    from matplotlib import image

    pixels = image.imread(str(path), format="png")
    height, width = pixels.shape[:2]
    assert width >= min_size[0] and height >= min_size[1], (width, height)
    assert pixels.reshape(-1, pixels.shape[-1]).std(axis=0).max() > 0, f"{path} is one colour"
    return width, height
