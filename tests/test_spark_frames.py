"""The DataFrame fast path ``sqlrisk.spark.outcomes`` against DuckDB + sqlrisk on the same rows,
and its per-partition work (``partitions.group_outcomes``) on Arrow batches without Spark.

The reference is DuckDB's ``outcome_dist`` and ``band_odds`` per group (the issue's
contract: the fast path returns what SQL returns), to 1e-12.
"""

from __future__ import annotations

import pyarrow as pa
import pytest

import sqlrisk
from sqlrisk.errors import QueryLookupError
from sqlrisk.spark import partitions
from tests import spark_data
from tests.test_spark import by_key, close, duck_rows, same


@pytest.fixture(scope="module")
def frames(spark):
    deals = spark_data.pipeline()
    quotas = spark_data.quota_bands(deals)
    con = sqlrisk.connect()
    con.register("pipeline", deals)
    con.register("quota_bands", quotas)
    yield spark.createDataFrame(deals), spark.createDataFrame(quotas), con
    con.close()


def _rows(df) -> list[dict]:
    return df.toArrow().to_pylist()


def test_outcomes_with_constant_cuts_match_sql(frames):
    deals, _, con = frames
    ours = _rows(sqlrisk.spark.outcomes(deals, "owner_id", amount="amount", prob="win_prob",
                                        cuts=[15000, 40000]))
    theirs = duck_rows(con, "SELECT owner_id, outcome_dist(amount, win_prob) AS outcome, "
                       "band_odds(amount, win_prob, [15000.0, 40000.0]) AS band_odds "
                       "FROM pipeline GROUP BY owner_id")
    assert same(ours, theirs) == 240


def test_outcomes_by_two_keys_with_cuts_from_a_quota_join(frames):
    deals, quotas, con = frames
    joined = deals.join(quotas, "owner_id")
    ours = _rows(sqlrisk.spark.outcomes(joined, ["region", "owner_id"], amount="amount",
                                        prob="win_prob", cuts=["floor", "target", "stretch"],
                                        correlation=0.1))
    # with a correlation the bands are read off the correlated outcome
    theirs = duck_rows(con, "SELECT region, owner_id, outcome, outcome_bands(outcome, cuts) AS "
                       "band_odds FROM (SELECT region, owner_id, outcome_dist(amount, win_prob, "
                       "correlation := 0.1) AS outcome, first([q.floor, q.target, q.stretch]) "
                       "AS cuts FROM pipeline JOIN quota_bands q USING (owner_id) "
                       "GROUP BY region, owner_id)")
    assert same(ours, theirs) == 240
    assert list(ours[0]) == ["region", "owner_id", "outcome", "band_odds"]


def test_outcomes_without_cuts_gives_the_outcome_only(frames):
    deals, _, con = frames
    # column names with a dot and a space are names, not struct paths
    renamed = deals.withColumnRenamed("win_prob", "prob").withColumnRenamed("region", "sales.area")
    ours = _rows(sqlrisk.spark.outcomes(renamed.withColumnRenamed("amount", "deal value"),
                                        "sales.area", amount="deal value"))
    theirs = duck_rows(con, 'SELECT region AS "sales.area", outcome_dist(amount, win_prob) AS '
                       "outcome FROM pipeline GROUP BY region")
    assert same(ours, theirs, "sales.area") == 6


def test_outcomes_on_a_requested_step_read_the_bands_off_the_outcome(frames):
    deals, _, con = frames
    ours = _rows(sqlrisk.spark.outcomes(deals, "region", prob="win_prob", cuts=[2e5, 3e5],
                                        step=500.0))
    theirs = duck_rows(con, "SELECT region, o AS outcome, outcome_bands(o, [2e5, 3e5]) AS "
                       "band_odds FROM (SELECT region, outcome_dist(amount, win_prob, "
                       "step := 500.0) AS o FROM pipeline GROUP BY region)")
    assert same(ours, theirs, "region") == 6
    assert all(r["outcome"]["step"] == 500.0 for r in ours)


def test_an_unknown_column_is_named_with_a_suggestion(frames):
    deals, _, _ = frames
    with pytest.raises(QueryLookupError, match=r"no column 'win_probs' for prob .*did you mean "
                       r"'win_prob'\?"):
        sqlrisk.spark.outcomes(deals, "owner_id", prob="win_probs")


# -- one partition's work, without Spark ------------------------------------------------

def test_one_computation_gives_outcome_dist_and_band_odds_bit_for_bit(con):
    from sqlrisk.adapters import deal_udfs

    con.register("pipeline", spark_data.pipeline())
    sql = ("SELECT owner_id, outcome_dist(amount, win_prob) AS o, band_odds(amount, win_prob, "
           "[9000.0, 30000.0]) AS b, list({{'amount': amount, 'prob': win_prob, 'cuts': "
           "[9000.0, 30000.0]}}) AS rows FROM pipeline GROUP BY owner_id ORDER BY owner_id")
    table = con.sql(sql.format()).arrow()
    table = table.read_all() if hasattr(table, "read_all") else table
    outcome, bands = deal_udfs.outcomes_and_bands(table.column("rows"))
    assert outcome.to_pylist() == table.column("o").to_pylist()  # ==, not to a tolerance
    assert bands.to_pylist() == table.column("b").to_pylist()
    assert sum(len(r) <= 3 for r in table.column("rows").to_pylist()) > 10  # scenario groups


def _sorted_partition():
    table = spark_data.pipeline().rename_columns(
        ["owner_id", "region", "deal_id", partitions.AMOUNT, partitions.PROB])
    return table.select(["owner_id", partitions.AMOUNT, partitions.PROB]).sort_by("owner_id")


def _collect(batches) -> dict:
    rows = pa.Table.from_batches(list(batches)).to_pylist()
    return by_key(rows)


@pytest.mark.parametrize("chunk, batch", [(1, 7), (50, 13), (10_000, 64)])
def test_a_partition_gives_the_same_groups_however_its_batches_fall(monkeypatch, chunk, batch):
    table = _sorted_partition()
    whole = _collect(partitions.group_outcomes(iter(table.to_batches()), ["owner_id"],
                                               cuts=[20000.0]))
    monkeypatch.setattr(partitions, "CHUNK_ROWS", chunk)
    pieces = _collect(partitions.group_outcomes(iter(table.to_batches(max_chunksize=batch)),
                                                ["owner_id"], cuts=[20000.0]))
    assert len(whole) == 240 and whole.keys() == pieces.keys()
    for k in whole:
        close(pieces[k], whole[k], k)


def test_group_starts_treat_nulls_and_nans_as_one_key_each():
    table = pa.table({"k": pa.array([None, None, 1.0, float("nan"), float("nan"), 2.0])})
    assert partitions.group_starts(table, ["k"]).tolist() == [0, 2, 3, 5]


def test_a_bad_row_is_refused_in_the_name_of_outcomes(frames):
    deals, _, _ = frames
    from pyspark.sql import functions as F

    percent = deals.withColumn("pct", F.col("win_prob") * 100)
    with pytest.raises(Exception) as caught:
        sqlrisk.spark.outcomes(percent, "owner_id", prob="pct").collect()
    line = sqlrisk.spark.error_line(caught.value)
    assert line.startswith("sqlrisk.spark.outcomes: probability ") and "divide by 100" in line
