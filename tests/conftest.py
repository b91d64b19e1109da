"""Shared fixtures: ``con`` (in-memory DuckDB with sqlrisk registered) and ``db_path``."""

from __future__ import annotations

from pathlib import Path

import pytest

import sqlrisk

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
    """``con`` with the demo seeds loaded as tables pipeline, owners, quota_bands, closed_deals."""
    for name in ("pipeline", "owners", "quota_bands", "closed_deals"):
        con.execute(f"CREATE TABLE {name} AS SELECT * FROM read_csv(?)",
                    [str(ROOT / "seeds" / f"{name}.csv")])
    return con
