"""The SQL surface: names, GROUP BY / no GROUP BY / window use, parameters from
joined tables, the NULL rule, registering twice, storage (DuckDB file, Parquet)
and error messages. Each rule is one the README's SQL reference states, unless a
comment says otherwise.
"""

from __future__ import annotations

import re

import duckdb
import numpy as np
import pytest

import sqlrisk
from conftest import ROOT

OUTCOME = sqlrisk.OUTCOME_SQL
AGGREGATES = ["outcome_dist", "band_odds", "reach_odds", "total_quantiles", "outcome_merge"]
SCALARS = ["outcome_bands", "outcome_reach", "outcome_quantiles", "outcome_mean", "outcome_sd",
           "outcome_shift", "outcome_add", "outcome_histogram", "outcome_error"]
#: The four deal aggregates on the demo pipeline, one column each.
FOUR_CALLS = ["outcome_dist(amount, win_prob)", "band_odds(amount, win_prob, [500000, 1000000])",
              "reach_odds(amount, win_prob, 800000)",
              "total_quantiles(amount, win_prob, [0.1, 0.5, 0.9])"]
FOUR = ", ".join(FOUR_CALLS)


def test_the_core_names_are_in_the_catalog_and_registered(con):
    """The core SQL names users call (never renamed); tests/test_catalog.py checks every
    catalog entry in full."""
    from sqlrisk.adapters.catalog import BY_NAME

    names = {r[0] for r in con.execute("SELECT function_name FROM duckdb_functions()").fetchall()}
    assert set(AGGREGATES + SCALARS) <= names & set(BY_NAME)


# -- GROUP BY, no GROUP BY, scalars ----------------------------------------------------

def test_aggregates_with_and_without_group_by(demo_con):
    grouped = demo_con.execute(
        f"SELECT owner_id, {FOUR} FROM pipeline GROUP BY owner_id ORDER BY owner_id").fetchall()
    assert len(grouped) == 54 and all(None not in row for row in grouped)
    for row in grouped[::13]:
        alone = demo_con.execute(f"SELECT {FOUR} FROM pipeline WHERE owner_id = ?",
                                 [row[0]]).fetchone()
        assert alone == row[1:]  # one group, with or without GROUP BY
    whole = demo_con.execute(f"SELECT {FOUR} FROM pipeline").fetchone()
    assert None not in whole and sum(whole[1]) == pytest.approx(1.0, abs=1e-12)


def test_scalars_on_grouped_outcomes(demo_con):
    rows = demo_con.execute("""
        WITH o AS (SELECT owner_id, outcome_dist(amount, win_prob) o,
                          sum(amount * win_prob) AS mean, sum(amount^2 * win_prob * (1 - win_prob)) AS var
                   FROM pipeline GROUP BY owner_id)
        SELECT mean, var, outcome_mean(o), outcome_sd(o), outcome_mean(outcome_shift(o, 1234)),
               outcome_mean(outcome_add(o, o)), outcome_histogram(o, 40),
               outcome_bands(o, [mean]), outcome_reach(o, mean), outcome_quantiles(o, [0.5])
        FROM o ORDER BY owner_id""").fetchall()
    for mean, var, got_mean, sd, shifted, doubled, hist, bands, reach, median in rows:
        assert got_mean == pytest.approx(mean, rel=1e-9)  # common practice: E[S] = sum(a p)
        # common practice: Var[S] = sum(a^2 p (1 - p)); the split adds at most 0.1 %
        assert sd == pytest.approx(var ** 0.5, rel=1e-3)
        assert shifted == pytest.approx(mean + 1234, rel=1e-9)
        assert doubled == pytest.approx(2 * mean, rel=1e-9)  # E[X + Y] = E[X] + E[Y]
        assert len(hist) == 40 and sum(b["prob"] for b in hist) == pytest.approx(1.0, abs=1e-12)
        assert all(a["hi"] == pytest.approx(b["lo"]) for a, b in zip(hist, hist[1:]))
        assert reach == bands[1] and len(median) == 1


def test_merge_by_region_with_and_without_group_by_and_as_a_window(demo_con):
    demo_con.execute("""CREATE TABLE parts AS SELECT region, owner_id, sum(amount * win_prob) m,
                        outcome_dist(amount, win_prob) o FROM pipeline GROUP BY region, owner_id""")
    rows = demo_con.execute("""
        SELECT region, outcome_mean(outcome_merge(o)), sum(m) FROM parts GROUP BY region""").fetchall()
    assert len(rows) > 1
    for _, merged_mean, mean in rows:
        assert merged_mean == pytest.approx(mean, rel=1e-9)  # common practice: means add up
    whole = demo_con.execute("SELECT outcome_mean(outcome_merge(o)), sum(m) FROM parts").fetchone()
    assert whole[0] == pytest.approx(whole[1], rel=1e-9)
    running = demo_con.execute("""
        SELECT region, outcome_mean(outcome_merge(o) OVER (PARTITION BY region ORDER BY owner_id)),
               sum(m) OVER (PARTITION BY region ORDER BY owner_id) FROM parts""").fetchall()
    assert len(running) == 54
    for _, merged_mean, mean in running:
        assert merged_mean == pytest.approx(mean, rel=1e-9)


# -- window functions -------------------------------------------------------------------

def test_window_functions_end_at_the_group_by_value(demo_con):
    window = "OVER (PARTITION BY owner_id ORDER BY expected_close)"
    running = demo_con.execute(f"""
        SELECT owner_id, expected_close,
               {', '.join(f'{call} {window}' for call in FOUR_CALLS)},
               max(expected_close) OVER (PARTITION BY owner_id) AS last
        FROM pipeline QUALIFY expected_close = last ORDER BY owner_id""").fetchall()
    grouped = demo_con.execute(
        f"SELECT owner_id, {FOUR} FROM pipeline GROUP BY owner_id ORDER BY owner_id").fetchall()
    last_rows = {r[0]: r[2:6] for r in running}
    assert {g[0]: g[1:] for g in grouped} == last_rows  # the full frame is the whole group


def _running_reach(con, table, target, noise=1e-15):
    """Rows and the steps where the running reach fell (by more than float noise)."""
    rows = con.execute(f"""
        SELECT owner_id, reach_odds(amount, win_prob, {target})
               OVER (PARTITION BY owner_id ORDER BY expected_close)
        FROM {table} ORDER BY owner_id, expected_close""").fetchall()
    drops = [(a[0], a[1], b[1]) for a, b in zip(rows, rows[1:]) if a[0] == b[0] and b[1] < a[1] - noise]
    return rows, drops


def test_running_reach_never_decreases_on_an_exact_lattice(con):
    rng = np.random.default_rng(21)
    n = 150
    con.execute("CREATE TABLE deals AS SELECT unnest(?::VARCHAR[]) owner_id, "
                "unnest(?::BIGINT[]) amount, unnest(?::DOUBLE[]) win_prob, "
                "DATE '2027-01-01' + unnest(?::INT[]) expected_close",
                [[f"own_{i}" for i in rng.integers(0, 5, n)],
                 (rng.integers(1, 40, n) * 100).tolist(),
                 rng.uniform(0.02, 0.98, n).round(2).tolist(), rng.integers(0, 90, n).tolist()])
    assert con.execute("SELECT bool_and(o.rounding = 0) FROM (SELECT outcome_dist(amount, "
                       "win_prob) o FROM deals GROUP BY owner_id)").fetchone()[0]
    for target in (1500, 9000, 30000):
        rows, drops = _running_reach(con, "deals", target)
        # common practice: adding a deal with a positive amount cannot lower P(S >= t)
        assert len(rows) == n and drops == []


def test_running_reach_on_the_demo_pipeline(demo_con):
    demo_con.execute("CREATE VIEW positive AS SELECT p.*, b.target FROM pipeline p "
                     "JOIN quota_bands b USING (owner_id) WHERE amount > 0")
    rows, drops = _running_reach(demo_con, "positive", "target")
    # On an inexact automatic lattice the odds are read off bins, so adding a deal (which can
    # change the step) may move them by the lattice error, well below 1e-3 (README).
    assert rows and all(before - after < 1e-3 for _, before, after in drops)
    exact = demo_con.execute("""
        SELECT owner_id, outcome_reach(outcome_dist(amount, win_prob, step := 100)
                   OVER (PARTITION BY owner_id ORDER BY expected_close), target)
        FROM positive ORDER BY owner_id, expected_close""").fetchall()
    falls = [(a, b) for a, b in zip(exact, exact[1:]) if a[0] == b[0] and b[1] < a[1] - 1e-12]
    # common practice: on an exact lattice a deal with a positive amount cannot lower P(S >= t)
    assert len(exact) == len(rows) and falls == []


def test_adding_a_positive_deal_cannot_lower_the_reach(con):
    one_deal = con.execute(
        "SELECT reach_odds(a, p, 270300) FROM (VALUES (270300, 0.95)) t(a, p)").fetchone()[0]
    two_deals = con.execute("SELECT reach_odds(a, p, 270300) "
                            "FROM (VALUES (270300, 0.95), (86300, 0.17)) t(a, p)").fetchone()[0]
    assert one_deal == pytest.approx(0.95, abs=1e-12)
    # common practice: P(S >= t) can only grow when a deal with a positive amount is added
    assert two_deals >= 0.95 - 1e-12


# -- parameters from a joined table -------------------------------------------------------

def test_cuts_target_and_levels_from_joined_tables(demo_con):
    demo_con.execute("CREATE TABLE levels AS SELECT owner_id, "
                     "[0.05 + (row_number() OVER (ORDER BY owner_id) % 7) / 100, 0.5, 0.95] qs "
                     "FROM owners")
    joined = demo_con.execute("""
        SELECT p.owner_id, band_odds(p.amount, p.win_prob, [b.floor, b.target, b.stretch]),
               reach_odds(p.amount, p.win_prob, b.target), total_quantiles(p.amount, p.win_prob, l.qs)
        FROM pipeline p JOIN quota_bands b USING (owner_id) JOIN levels l USING (owner_id)
        GROUP BY p.owner_id ORDER BY p.owner_id""").fetchall()
    assert len(joined) == 54
    for owner, bands, reach, qs in joined[::9]:
        floor, target, stretch, levels = demo_con.execute(
            "SELECT floor, target, stretch, qs FROM quota_bands JOIN levels USING (owner_id) "
            "WHERE owner_id = ?", [owner]).fetchone()
        alone = demo_con.execute(
            "SELECT outcome_bands(o, ?::DOUBLE[]), outcome_reach(o, ?), outcome_quantiles(o, ?) "
            "FROM (SELECT outcome_dist(amount, win_prob) o FROM pipeline WHERE owner_id = ?)",
            [[floor, target, stretch], target, levels, owner]).fetchone()
        assert (bands, reach, qs) == alone


# -- the NULL rule ---------------------------------------------------------------------------

NULL_ROWS = """(VALUES ('a', 100, 0.5), ('a', 250, 0.2), ('a', NULL, 0.9), ('a', 400, NULL),
                       ('b', NULL, 0.5), ('b', 300, NULL)) t(g, amount, prob)"""
ALL_FOUR = ("outcome_dist(amount, prob), band_odds(amount, prob, [200]), "
            "reach_odds(amount, prob, 200), total_quantiles(amount, prob, [0.5])")


def test_rows_with_null_amount_or_prob_are_skipped(con):
    with_nulls = con.execute(f"SELECT {ALL_FOUR} FROM {NULL_ROWS} WHERE g = 'a'").fetchone()
    without = con.execute(f"SELECT {ALL_FOUR} FROM {NULL_ROWS} "
                          "WHERE g = 'a' AND amount IS NOT NULL AND prob IS NOT NULL").fetchone()
    assert with_nulls == without


def test_a_group_without_usable_rows_is_null(con):
    rows = con.execute(f"SELECT g, {ALL_FOUR} FROM {NULL_ROWS} GROUP BY g ORDER BY g").fetchall()
    assert rows[1] == ("b", None, None, None, None)
    empty = con.execute(f"SELECT {ALL_FOUR} FROM {NULL_ROWS} WHERE false").fetchone()
    assert empty == (None, None, None, None)
    scalars = con.execute(
        f"SELECT outcome_bands(o, [1]), outcome_reach(o, 1), outcome_quantiles(o, [0.5]), "
        f"outcome_mean(o), outcome_sd(o), outcome_shift(o, 5), outcome_histogram(o, 3), "
        f"outcome_add(o, o) FROM (SELECT NULL::{OUTCOME} o)").fetchone()
    assert scalars == (None,) * 8  # common practice: SQL functions of NULL are NULL
    assert con.execute(f"SELECT outcome_merge(o) FROM (SELECT NULL::{OUTCOME} o)").fetchone() == (None,)


def test_merge_skips_null_outcomes(con):
    row = con.execute(f"""
        WITH parts AS (SELECT g, outcome_dist(amount, prob) o FROM {NULL_ROWS} GROUP BY g)
        SELECT outcome_merge(o), (SELECT o FROM parts WHERE g = 'a') FROM parts""").fetchone()
    merged, only = row
    assert merged["origin"] == only["origin"] and merged["step"] == only["step"]
    assert merged["mass"] == pytest.approx(only["mass"], abs=1e-15)


# -- registering twice, storage ------------------------------------------------------------------

def test_registering_twice_is_safe(con):
    sql = f"SELECT {FOUR} FROM (VALUES (300000, 0.5), (700000, 0.25)) t(amount, win_prob)"
    before = con.execute(sql).fetchone()
    assert sqlrisk.register(con) is con
    sqlrisk.register(con)
    assert con.execute(sql).fetchone() == before  # code conventions: registering twice is safe


STORED = """SELECT outcome_bands(o, [500000, 1000000]), outcome_reach(o, 800000),
                   outcome_quantiles(o, [0.1, 0.9]), outcome_mean(o), outcome_sd(o)
            FROM {table} ORDER BY owner_id"""


def test_outcomes_stored_in_a_database_file(db_path):
    con = sqlrisk.connect(db_path)
    con.execute("CREATE TABLE pipeline AS SELECT * FROM read_csv(?)",
                [str(ROOT / "seeds" / "pipeline.csv")])
    con.execute("CREATE TABLE stored AS SELECT owner_id, outcome_dist(amount, win_prob) o "
                "FROM pipeline GROUP BY owner_id")
    expected = con.execute(STORED.format(table="stored")).fetchall()
    con.close()
    plain = duckdb.connect(db_path)  # the TEMP macros were not written into the file
    assert plain.execute("SELECT count(*) FROM duckdb_functions() "
                         "WHERE function_name = 'outcome_dist'").fetchone()[0] == 0
    plain.close()
    con = sqlrisk.connect(db_path)
    assert con.execute(STORED.format(table="stored")).fetchall() == expected
    con.close()


def test_outcomes_survive_a_parquet_round_trip(demo_con, tmp_path):
    path = str(tmp_path / "outcomes.parquet")
    demo_con.execute("CREATE TABLE stored AS SELECT owner_id, outcome_dist(amount, win_prob) o "
                     "FROM pipeline GROUP BY owner_id")
    demo_con.execute(f"COPY (SELECT * FROM stored ORDER BY owner_id) TO '{path}' (FORMAT parquet)")
    back = demo_con.execute(f"SELECT * FROM read_parquet('{path}') ORDER BY owner_id").fetchall()
    assert back == demo_con.execute("SELECT * FROM stored ORDER BY owner_id").fetchall()
    table = f"read_parquet('{path}')"
    assert (demo_con.execute(STORED.format(table=table)).fetchall()
            == demo_con.execute(STORED.format(table="stored")).fetchall())


# -- error messages ----------------------------------------------------------------------------------

ONE_DEAL = "(VALUES (100, 0.4)) t(a, p)"


def test_percentage_probability_is_refused_with_a_hint(con):
    with pytest.raises(duckdb.Error, match=re.escape(
            "band_odds: probability 40.0 is outside [0, 1]")) as info:
        con.execute("SELECT band_odds(a, p, [1]) FROM (VALUES (100, 40)) t(a, p)").fetchall()
    assert "divide by 100" in str(info.value)


@pytest.mark.parametrize("sql, name", [
    (f"SELECT band_odds(a, p, [2, 1]) FROM {ONE_DEAL}", "band_odds"),
    (f"SELECT outcome_bands(outcome_dist(a, p), [5, 5]) FROM {ONE_DEAL}", "outcome_bands"),
])
def test_unsorted_cuts_are_refused(con, sql, name):
    with pytest.raises(duckdb.Error, match=f"{name}: cuts .* not strictly increasing"):
        con.execute(sql).fetchall()


@pytest.mark.parametrize("step", [0, -5])
def test_step_must_be_positive(con, step):
    with pytest.raises(duckdb.Error, match=r"outcome_dist: step .* must be > 0"):
        con.execute(f"SELECT outcome_dist(a, p, step := {step}) FROM {ONE_DEAL}").fetchall()


@pytest.mark.parametrize("call", ["total_quantiles(a, p, [0.5, 1.5])",
                                  "outcome_quantiles(outcome_dist(a, p), [1.5])"])
def test_quantile_level_above_one_is_refused(con, call):
    name = call.split("(")[0]
    with pytest.raises(duckdb.Error, match=re.escape(f"{name}: quantile level 1.5 is outside [0, 1]")):
        con.execute(f"SELECT {call} FROM {ONE_DEAL}").fetchall()
