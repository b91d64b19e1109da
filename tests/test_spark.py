"""sqlrisk on a real Spark engine (local[2]): every registered function against DuckDB +
sqlrisk on the same rows.

The reference is DuckDB with sqlrisk registered (the issue's contract: same names,
arguments, NULL rule, errors and numbers); answers agree to 1e-12 (relative, for
totals) and ``outcome_sim`` bit for bit. One check goes outside the project: a
three-deal group's band odds on Spark against enumerating its 2^3 win/loss
scenarios (the definition of the won total's distribution, common practice).
"""

from __future__ import annotations

import itertools
import math
import re
from pathlib import Path

import numpy as np
import pyarrow as pa
import pytest

import sqlrisk
from sqlrisk.adapters.catalog import FUNCTIONS
from tests import spark_data

TOL = 1e-12


def close(a, b, path="") -> None:
    """Nested results equal: numbers to TOL (relative beyond 1), the rest exactly."""
    if isinstance(a, dict):
        assert isinstance(b, dict) and a.keys() == b.keys(), (path, a, b)
        for k in a:
            close(a[k], b[k], f"{path}.{k}")
    elif isinstance(a, (list, tuple)):
        assert isinstance(b, (list, tuple)) and len(a) == len(b), (path, a, b)
        if a and all(type(x) is float for x in a) and all(type(y) is float for y in b):
            x, y = np.array(a), np.array(b)  # an outcome's mass: compared at once
            scale = np.maximum(1.0, np.maximum(np.abs(x), np.abs(y)))
            assert np.array_equal(np.isnan(x), np.isnan(y)), path
            assert (np.abs(x - y)[~np.isnan(x)] <= TOL * scale[~np.isnan(x)]).all(), path
            return
        for i, (x, y) in enumerate(zip(a, b)):
            close(x, y, f"{path}[{i}]")
    elif isinstance(a, float) or isinstance(b, float):
        assert a is not None and b is not None, (path, a, b)
        if math.isnan(a) or math.isnan(b):
            assert math.isnan(a) and math.isnan(b), (path, a, b)
        else:
            assert abs(a - b) <= TOL * max(1.0, abs(a), abs(b)), (path, a, b)
    else:
        assert a == b, (path, a, b)


def spark_rows(spark, sql) -> list[dict]:
    return spark.sql(sql).toArrow().to_pylist()  # as Arrow: far quicker than Row objects


def duck_rows(con, sql) -> list[dict]:
    rel = con.sql(sql)
    return [dict(zip(rel.columns, r)) for r in rel.fetchall()]


def by_key(rows, key="owner_id") -> dict:
    """Rows by their key; a deal_swing list sorted by deal id (its order is the order the
    engine collected the group's rows in, which neither engine fixes)."""
    out = {}
    for r in rows:
        if r.get("swing"):
            r = {**r, "swing": sorted(r["swing"], key=lambda s: s["deal_id"])}
        out[r[key]] = r
    return out


def same(spark_result, duck_result, key="owner_id") -> int:
    s, d = by_key(spark_result, key), by_key(duck_result, key)
    assert s.keys() == d.keys()
    for k in s:
        close(s[k], d[k], str(k))
    return len(s)


@pytest.fixture(scope="module")
def tables():
    deals = spark_data.pipeline()
    return {"pipeline": deals, "quota_bands": spark_data.quota_bands(deals),
            "closed_deals": spark_data.closed_deals()}


@pytest.fixture(scope="module")
def engines(spark, tables):
    """The same tables in Spark (temp views) and in DuckDB (registered Arrow)."""
    con = sqlrisk.connect()
    for name, table in tables.items():
        spark.createDataFrame(table).createOrReplaceTempView(name)
        con.register(name, table)
    yield spark, con
    con.close()


def test_every_function_and_list_form_is_registered(spark):
    names = {f.name for f in spark.catalog.listFunctions()}
    contract = {"outcome_dist", "band_odds", "reach_odds", "total_quantiles", "outcome_sim",
                "outcome_merge", "calibration_map", "brier_score", "outcome_bands",
                "outcome_reach", "outcome_quantiles", "outcome_mean", "outcome_sd",
                "outcome_shift", "outcome_add", "outcome_error", "band_odds_list",
                "reach_odds_list", "total_quantiles_list", "outcome_dist_list",
                "outcome_sim_list", "outcome_pit", "outcome_crps", "band_rps"}
    assert contract <= set(sqlrisk.spark.registered_names()) <= names
    assert {f.name for f in FUNCTIONS} <= names


DEAL_AGGREGATES = {
    "o": "outcome_dist(amount, win_prob)",
    "sim": "outcome_sim(amount, win_prob, 2000, 7)",
    "bands": "band_odds(amount, win_prob, {cuts})",
    "reach": "reach_odds(amount, win_prob, q.target)",
    "qs": "total_quantiles(amount, win_prob, {levels})",
    "err": "odds_error(amount, win_prob)",
    "swing": "deal_swing(deal_id, amount, win_prob, q.target)",
}
DEAL_LISTS = {
    "o": "outcome_dist_list(collect_list(named_struct('amount', amount, 'prob', win_prob)))",
    "sim": "outcome_sim_list(collect_list(named_struct('amount', amount, 'prob', win_prob)), "
           "2000, 7)",
    "bands": "band_odds_list(collect_list(named_struct('amount', amount, 'prob', win_prob)), "
             "{cuts})",
    "reach": "reach_odds_list(collect_list(named_struct('amount', amount, 'prob', win_prob)), "
             "first(q.target))",
    "qs": "total_quantiles_list(collect_list(named_struct('amount', amount, 'prob', win_prob))"
          ", {levels})",
    "err": "odds_error_list(collect_list(named_struct('amount', amount, 'prob', win_prob)))",
    "swing": "deal_swing_list(collect_list(named_struct('deal_id', deal_id, 'amount', amount, "
             "'prob', win_prob)), first(q.target))",
}


def _select(calls: dict, cuts: str, levels: str, extra: str = "") -> str:
    body = ", ".join(f"{c.format(cuts=cuts, levels=levels)} AS {k}" for k, c in calls.items())
    return (f"SELECT owner_id, {body}{extra} FROM pipeline JOIN quota_bands q USING (owner_id) "
            "GROUP BY owner_id")


def test_aggregates_on_deals_match_duckdb(engines):
    spark, con = engines
    theirs = duck_rows(con, _select(DEAL_AGGREGATES, "[q.floor, q.target, q.stretch]",
                                    "[0.1, 0.5, 0.9]"))
    ours = spark_rows(spark, _select(DEAL_AGGREGATES, "array(q.floor, q.target, q.stretch)",
                                     "array(0.1, 0.5, 0.9)"))
    assert same(ours, theirs) == 240
    theirs_by = by_key(theirs)
    assert all(r["sim"] == theirs_by[r["owner_id"]]["sim"] for r in ours)  # bit for bit
    # the seller whose rows are all NULL gets NULLs, as SQL aggregates over no rows do
    nulls = by_key(ours)[spark_data.ALL_NULL]
    assert all(nulls[k] is None for k in DEAL_AGGREGATES)


def test_list_forms_match_duckdb_beside_builtin_aggregates(engines):
    spark, con = engines
    theirs = duck_rows(con, _select(DEAL_AGGREGATES, "[q.floor, q.target, q.stretch]",
                                    "[0.1, 0.5, 0.9]", ", sum(amount * win_prob) AS ev"))
    ours = spark_rows(spark, _select(DEAL_LISTS, "array(first(q.floor), first(q.target), "
                                     "first(q.stretch))", "array(0.1, 0.5, 0.9)",
                                     ", sum(amount * win_prob) AS ev"))
    assert same(ours, theirs) == 240


def test_optional_arguments_by_position_and_by_name(engines):
    spark, con = engines
    theirs = duck_rows(con, "SELECT owner_id, outcome_dist(amount, win_prob, step := 250.0) "
                       "AS a, outcome_sim(amount, win_prob, trials := 3000, seed := 11, "
                       "correlation := 0.2) AS b FROM pipeline GROUP BY owner_id")
    for sql in ("SELECT owner_id, outcome_dist(amount, win_prob, 250.0) AS a, "
                "outcome_sim(amount, win_prob, 3000, 11, 0.2) AS b FROM pipeline "
                "GROUP BY owner_id",
                "SELECT owner_id, outcome_dist(amount, win_prob, step => 250.0) AS a, "
                "outcome_sim(amount, win_prob, trials => 3000, seed => 11, "
                "correlation => 0.2) AS b FROM pipeline GROUP BY owner_id",
                "SELECT owner_id, outcome_dist_list(collect_list(named_struct('amount', "
                "amount, 'prob', win_prob)), step => 250.0) AS a, outcome_sim_list("
                "collect_list(named_struct('amount', amount, 'prob', win_prob)), "
                "seed => 11, trials => 3000, correlation => 0.2) AS b FROM pipeline "
                "GROUP BY owner_id"):
        assert same(spark_rows(spark, sql), theirs) == 240


def test_outcome_sim_is_the_same_bits_whatever_the_partitioning(engines, tables):
    spark, con = engines
    theirs = by_key(duck_rows(con, "SELECT owner_id, outcome_sim(amount, win_prob, 1500, 3) "
                              "AS s FROM pipeline GROUP BY owner_id"))
    shuffled = spark.createDataFrame(tables["pipeline"]).orderBy("deal_id", ascending=False)
    shuffled.repartition(7).createOrReplaceTempView("pipeline_shuffled")
    ours = by_key(spark_rows(spark, "SELECT owner_id, outcome_sim_list(collect_list("
                             "named_struct('amount', amount, 'prob', win_prob)), 1500, 3) AS s "
                             "FROM pipeline_shuffled GROUP BY owner_id"))
    assert ours.keys() == theirs.keys()
    assert all(ours[k] == theirs[k] for k in ours)  # bit for bit, not to a tolerance


def test_the_quota_join_runs_as_written(engines):
    spark, con = engines
    ours = spark_rows(spark, "SELECT owner_id, band_odds(amount, win_prob, array(q.floor, "
                      "q.target, q.stretch)) AS b FROM pipeline JOIN quota_bands q USING "
                      "(owner_id) GROUP BY owner_id")
    theirs = duck_rows(con, "SELECT owner_id, band_odds(amount, win_prob, [q.floor, q.target, "
                       "q.stretch]) AS b FROM pipeline JOIN quota_bands q USING (owner_id) "
                       "GROUP BY owner_id")
    assert same(ours, theirs) == 240


def test_window_form_gives_each_row_its_groups_answer(engines, tables):
    spark, _ = engines
    rows = spark_rows(spark, "SELECT owner_id, reach_odds(amount, win_prob, 30000.0) OVER "
                      "(PARTITION BY owner_id) AS w FROM pipeline")
    grouped = by_key(spark_rows(spark, "SELECT owner_id, reach_odds(amount, win_prob, 30000.0) "
                                "AS w FROM pipeline GROUP BY owner_id"))
    assert len(rows) == tables["pipeline"].num_rows
    for r in rows:
        close(r["w"], grouped[r["owner_id"]]["w"])


def test_calibration_aggregates_match_duckdb(engines):
    spark, con = engines
    calls = "calibration_map(prob, won) AS m, brier_score(prob, won) AS b, " \
            "brier_parts(prob, won) AS p"
    lists = ("calibration_map_list({c}) AS m, brier_score_list({c}) AS b, "
             "brier_parts_list({c}) AS p").format(
        c="collect_list(named_struct('prob', prob, 'won', won))")
    theirs = duck_rows(con, f"SELECT region, {calls} FROM closed_deals GROUP BY region")
    for sql in (f"SELECT region, {calls} FROM closed_deals GROUP BY region",
                f"SELECT region, {lists}, count(*) AS n FROM closed_deals GROUP BY region"):
        ours = [{k: v for k, v in r.items() if k != "n"} for r in spark_rows(spark, sql)]
        assert same(ours, theirs, "region") == 6


@pytest.fixture(scope="module")
def stored(engines):
    """Per-seller outcomes (exact and simulated) stored by each engine from its own rows."""
    spark, con = engines
    sql = ("SELECT owner_id, region, outcome_dist(amount, win_prob) AS o, "
           "outcome_sim(amount, win_prob, 4000, 5) AS s FROM pipeline "
           "GROUP BY owner_id, region")
    spark.sql(sql).localCheckpoint().createOrReplaceTempView("stored")  # computed once
    con.execute(f"CREATE OR REPLACE TABLE stored AS {sql}")
    return spark, con


SCALARS = ("outcome_bands(o, {cuts}) AS bands", "outcome_reach(o, 25000.0) AS reach",
           "outcome_quantiles(o, {levels}) AS qs", "outcome_mean(o) AS mean",
           "outcome_sd(o) AS sd", "outcome_error(o) AS err", "outcome_shift(o, -1250.5) AS moved",
           "outcome_add(o, s) AS added", "outcome_histogram(o, 12) AS hist",
           "outcome_bands_ci(s, {cuts}) AS ci", "outcome_bands_ci(s, {cuts}, 0.8) AS ci80",
           "outcome_pit(o, 21000.0) AS pit", "outcome_crps(o, 21000.0) AS crps",
           "outcome_interval(o) AS iv", "outcome_interval(o, 0.5) AS iv50",
           "band_of(outcome_mean(o), {cuts}) AS band",
           "band_rps(outcome_bands(o, {cuts}), 2) AS rps",
           "wilson_interval(7, 20) AS w", "wilson_interval(7, 20, 0.8) AS w80")


def test_scalars_on_stored_outcomes_match_duckdb(stored):
    spark, con = stored
    body = ", ".join(SCALARS)
    theirs = duck_rows(con, "SELECT owner_id, " + body.format(
        cuts="[15000.0, 40000.0]", levels="[0.1, 0.5, 0.9]") + " FROM stored")
    ours = spark_rows(spark, "SELECT owner_id, " + body.format(
        cuts="array(15000.0, 40000.0)", levels="array(0.1, 0.5, 0.9)") + " FROM stored")
    assert same(ours, theirs) == 240


def test_apply_calibration_takes_a_fitted_and_a_hand_written_map(engines, tables):
    spark, con = engines
    fitted = "SELECT calibration_map(prob, won) AS m FROM closed_deals"
    sql = ("SELECT owner_id, apply_calibration(m, win_prob) AS p, apply_calibration("
           "{hand}, win_prob) AS h FROM pipeline, ({fitted})")
    ours = spark_rows(spark, sql.format(fitted=fitted, hand="named_struct('prob', array(0.0, "
                      "1.0), 'rate', array(0.1, 0.7))").replace("owner_id,", "deal_id AS owner_id,"))
    theirs = duck_rows(con, sql.format(fitted=fitted, hand="{'prob': [0.0, 1.0], 'rate': "
                       "[0.1, 0.7]}").replace("owner_id,", "deal_id AS owner_id,"))
    assert same(ours, theirs) == tables["pipeline"].num_rows


def test_outcome_merge_rolls_up_stored_outcomes_as_duckdb(stored):
    spark, con = stored
    theirs = duck_rows(con, "SELECT region, outcome_merge(o) AS m FROM stored GROUP BY region")
    for sql in ("SELECT region, outcome_merge(o) AS m FROM stored GROUP BY region",
                "SELECT region, outcome_merge_list(collect_list(o)) AS m, count(*) AS n "
                "FROM stored GROUP BY region"):
        ours = [{k: v for k, v in r.items() if k != "n"} for r in spark_rows(spark, sql)]
        assert same(ours, theirs, "region") == 6


def test_parquet_outcomes_pass_between_the_engines_both_ways(stored, tmp_path):
    spark, con = stored
    from_spark, from_duck = str(tmp_path / "from_spark"), str(tmp_path / "from_duck.parquet")
    spark.sql("SELECT owner_id, o FROM stored").write.parquet(from_spark)
    con.execute(f"COPY (SELECT owner_id, o FROM stored) TO '{from_duck}' (FORMAT parquet)")
    # DuckDB reads what Spark wrote: the struct is DuckDB's outcome type, and reads the same
    kind = con.sql(f"SELECT typeof(o) FROM read_parquet('{from_spark}/*.parquet') LIMIT 1")
    assert kind.fetchall()[0][0] == sqlrisk.adapters.sql_types.OUTCOME_SQL
    theirs = duck_rows(con, "SELECT owner_id, outcome_bands(o, [20000.0]) AS b FROM "
                       f"read_parquet('{from_spark}/*.parquet')")
    # Spark reads what DuckDB wrote
    spark.read.parquet(from_duck).createOrReplaceTempView("duck_outcomes")
    ours = spark_rows(spark, "SELECT owner_id, outcome_bands(o, array(20000.0)) AS b "
                      "FROM duck_outcomes")
    assert same(ours, theirs) == 240
    back = duck_rows(con, "SELECT owner_id, outcome_bands(o, [20000.0]) AS b FROM stored")
    assert same(ours, back) == 240


def test_a_small_group_against_its_enumerated_scenarios(spark):
    deals = [(1200.5, 0.3), (800.0, 0.65), (2500.25, 0.1)]
    spark.createDataFrame(pa.table({"amount": [a for a, _ in deals],
                                    "p": [p for _, p in deals]})).createOrReplaceTempView("three")
    bands = spark.sql("SELECT band_odds(amount, p, array(1000.0, 2000.5)) AS b FROM three"
                      ).collect()[0]["b"]
    expected = [0.0, 0.0, 0.0]
    for wins in itertools.product((0, 1), repeat=3):  # the 8 win/loss scenarios
        weight = math.prod(p if w else 1 - p for w, (_, p) in zip(wins, deals))
        total = sum(a for w, (a, _) in zip(wins, deals) if w)
        expected[0 if total < 1000.0 else 1 if total < 2000.5 else 2] += weight
    assert bands == pytest.approx(expected, abs=1e-15)


def _spark_error(spark, sql) -> str:
    with pytest.raises(Exception) as caught:
        spark.sql(sql).collect()
    line = sqlrisk.spark.error_line(caught.value)
    assert line is not None, str(caught.value)[-600:]
    return line


def test_errors_reach_the_user_as_duckdbs_one_line_message(spark, con):
    from tests.conftest import udf_message

    bad = pa.table({"owner_id": ["a"] * 4, "amount": [1000.0, 250.5, 90.0, 4000.0],
                    "win_prob": [0.4, 40.0, 0.25, 0.5]})
    spark.createDataFrame(bad).createOrReplaceTempView("percent_rows")
    con.register("percent_rows", bad)
    with pytest.raises(Exception) as duck:
        con.execute("SELECT band_odds(amount, win_prob, [2000.0]) FROM percent_rows").fetchall()
    expected = udf_message(duck.value)
    assert expected.startswith("band_odds: ") and "40.0" in expected
    ours = _spark_error(spark, "SELECT band_odds(amount, win_prob, array(2000.0)) "
                        "FROM percent_rows")
    assert ours == expected
    listed = _spark_error(spark, "SELECT band_odds_list(collect_list(named_struct('amount', "
                          "amount, 'prob', win_prob)), array(2000.0)) FROM percent_rows")
    assert listed == "band_odds_list" + expected[len("band_odds"):]


@pytest.mark.parametrize("sql, message", [
    ("SELECT outcome_dist(amount, win_prob, CASE WHEN amount > 500 THEN 10.0 ELSE 20.0 END) "
     "FROM two_rows", "outcome_dist: step must be the same on every row of a group"),
    ("SELECT band_odds_list(collect_list(named_struct('value', amount, 'prob', win_prob)), "
     "array(1.0)) FROM two_rows", "band_odds_list: deals has no field 'amount' (its fields: "
     "value, prob); build it with collect_list(named_struct('amount', amount, 'prob', prob))"),
    ("SELECT outcome_sim(amount, win_prob, trails => 10) FROM two_rows",
     "outcome_sim: no parameter named 'trails' (did you mean 'trials'?)"),
    ("SELECT outcome_dist(amount, 'abc') FROM two_rows",
     "outcome_dist: prob of Spark type string cannot be read as DOUBLE"),
])
def test_spark_only_mistakes_get_one_line_errors(spark, sql, message):
    spark.createDataFrame(pa.table({"amount": [1000.0, 250.0], "win_prob": [0.5, 0.2]})
                          ).createOrReplaceTempView("two_rows")
    assert _spark_error(spark, sql).startswith(message)


def test_error_line_is_none_for_errors_that_are_not_sqlrisks():
    assert sqlrisk.spark.error_line(ValueError("Traceback...\nZeroDivisionError: x")) is None


README = (Path(__file__).resolve().parent.parent / "README.md").read_text()


def test_readme_spark_examples_run(engines):
    spark, _ = engines
    sql_blocks = re.findall(r"```sql spark\n(.*?)```", README, flags=re.S)
    py_blocks = re.findall(r"```python spark\n(.*?)```", README, flags=re.S)
    assert len(sql_blocks) >= 2 and len(py_blocks) >= 2
    for block in sql_blocks:
        assert len(spark.sql(block).collect()) == 240, block
    scope = {"spark": spark}
    for block in py_blocks:  # in order: the DataFrame example uses the import of the first
        exec(compile(block, "README.md", "exec"), scope)


def test_readme_lists_every_list_form_with_its_arguments():
    from sqlrisk.spark.udfs import list_params

    for f in FUNCTIONS:
        if f.kind == "aggregate":
            lead, _, group, others = list_params(f)
            names = ", ".join([lead] + [a.name for a in group + others])
            assert f"`{f.name}_list({names})`" in README, f.name
