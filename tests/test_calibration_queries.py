"""The saved calibration queries of sql/: reliability_table, calibration_by_stage and
stated_vs_calibrated, run on the demo's closed deals.

Outside references are named beside each check: numpy means and numpy.interp, and SciPy's
Wilson interval (scipy.stats.binomtest(...).proportion_ci(method="wilson")).
"""

from __future__ import annotations

import duckdb
import numpy as np
import pytest
from scipy import stats

from conftest import one, run_saved

TOL = 1e-12


@pytest.fixture
def demo(demo_con):
    return demo_con


def test_reliability_table_matches_numpy_and_scipy_wilson(demo):
    rows = run_saved(demo, "reliability_table")
    prob, won = map(np.array, zip(*demo.execute("SELECT stated_prob, won FROM closed_deals")
                                  .fetchall()))
    assert [r["bin"] for r in rows] == list(range(1, 11))
    assert sum(r["deals"] for r in rows) == len(prob)
    for r in rows:
        k = r["bin"] - 1
        mine = (prob >= k / 10) & ((prob < (k + 1) / 10) | (k == 9))
        assert r["deals"] == mine.sum()
        assert r["stated_mean"] == pytest.approx(prob[mine].mean(), abs=TOL)  # numpy mean
        assert r["observed_rate"] == pytest.approx(won[mine].mean(), abs=TOL)
        ci = stats.binomtest(int(won[mine].sum()), int(mine.sum())).proportion_ci(method="wilson")
        # source: scipy.stats.binomtest(...).proportion_ci(method='wilson'), 95%
        assert (r["wilson_lo"], r["wilson_hi"]) == pytest.approx((ci.low, ci.high), abs=1e-12)


@pytest.mark.parametrize("bins", [10, 37, 100])
def test_reliability_table_bins_are_the_ones_brier_parts_uses(demo, bins):
    rows = run_saved(demo, "reliability_table", bins=str(bins))
    n = sum(r["deals"] for r in rows)
    rel = sum(r["deals"] * (r["stated_mean"] - r["observed_rate"]) ** 2 for r in rows
              if r["deals"]) / n
    got = one(demo, "SELECT brier_parts(stated_prob, won, bins := ?) FROM closed_deals", [bins])
    assert rel == pytest.approx(got["reliability"], abs=TOL)  # same bins, same reliability
    assert len(rows) == bins  # empty bins are listed with 0 deals
    assert bins != 100 or sum(r["deals"] > 0 for r in rows) == len(set(
        x[0] for x in demo.execute("SELECT stated_prob FROM closed_deals").fetchall()))


def test_calibration_by_stage_falls_back_to_the_stage_map(demo):
    rows = run_saved(demo, "calibration_by_stage")  # default min_deals: 60
    assert len(rows) == 54 * 5 and {r["map_from"] for r in rows} == {"stage"}
    stage_maps = dict(demo.execute("SELECT stage_at_snapshot, calibration_map(stated_prob, won) "
                                   "FROM closed_deals GROUP BY ALL").fetchall())
    assert all(r["map"] == stage_maps[r["stage"]] for r in rows)
    deals = demo.execute("SELECT owner_id, stage_at_snapshot, stated_prob, won FROM closed_deals"
                         ).fetchall()
    for r in rows[::17]:
        mine = [(p, w) for o, s, p, w in deals if o == r["owner_id"] and s == r["stage"]]
        p, w = map(np.array, zip(*mine))
        assert r["deals"] == len(mine)
        assert r["brier_stated"] == pytest.approx(np.mean((p - w) ** 2), abs=TOL)  # numpy
        cal = np.interp(p, r["map"]["prob"], r["map"]["rate"])  # source: numpy.interp
        assert r["brier_calibrated"] == pytest.approx(np.mean((cal - w) ** 2), abs=TOL)


def test_calibration_by_stage_uses_the_owners_map_with_enough_history(demo):
    rows = run_saved(demo, "calibration_by_stage", min_deals="30")
    own = [r for r in rows if r["map_from"] == "owner"]
    assert own and all(r["deals"] >= 30 for r in own)
    assert all(r["deals"] < 30 for r in rows if r["map_from"] == "stage")
    r = own[0]
    alone = one(demo, "SELECT calibration_map(stated_prob, won) FROM closed_deals "
                      "WHERE owner_id = ? AND stage_at_snapshot = ?", [r["owner_id"], r["stage"]])
    assert r["map"] == alone


def test_stated_vs_calibrated_stated_side_is_owner_band_odds(demo):
    rows = run_saved(demo, "stated_vs_calibrated")
    reference = {r["owner_id"]: r for r in run_saved(demo, "owner_band_odds")}
    bands = ("below_floor", "floor_to_target", "target_to_stretch", "stretch_or_more")
    assert len(rows) == len(reference) == 54
    for r in rows:
        ref = reference[r["owner_id"]]
        assert [r[f"{b}_stated"] for b in bands] == [ref[b] for b in bands]
        assert sum(r[f"{b}_calibrated"] for b in bands) == pytest.approx(1.0, abs=1e-12)
        assert r["uncalibrated_deals"] == 0  # every pipeline stage has closed deals
    # the demo's sellers are optimistic in late stages: calibration lowers expectations
    assert sum(r["expected_calibrated"] for r in rows) < sum(r["expected_stated"] for r in rows)


def test_stated_vs_calibrated_keeps_stated_prob_where_a_stage_has_no_history(demo):
    demo.execute("DELETE FROM closed_deals WHERE stage_at_snapshot = 'handshake'")
    rows = run_saved(demo, "stated_vs_calibrated")
    handshake = dict(demo.execute("SELECT owner_id, count(*) FROM pipeline "
                                  "WHERE stage = 'handshake' GROUP BY ALL").fetchall())
    assert {r["owner_id"]: r["uncalibrated_deals"] for r in rows if r["uncalibrated_deals"]} \
        == handshake


def test_reliability_table_refuses_bad_bins_and_probabilities(demo):
    with pytest.raises(duckdb.Error, match=r"reliability_table: bins 0 is not a whole number"):
        run_saved(demo, "reliability_table", bins="0")
    demo.execute("UPDATE closed_deals SET stated_prob = 45 WHERE deal_id = 'cd_00002'")
    with pytest.raises(duckdb.Error, match=r"probability 45.0 is outside \[0, 1\]"):
        run_saved(demo, "reliability_table")


def test_the_means_are_the_same_bits_on_one_thread_and_on_two():
    """A re-run on another machine stores the same numbers: the stated means are taken over
    sorted lists, not in the order DuckDB's threads finish (300,000 invented closed deals,
    enough for DuckDB to split the scan)."""
    import sqlrisk

    rng = np.random.default_rng(5)
    n = 300_000
    con = sqlrisk.connect()
    con.execute("CREATE TABLE closed_deals AS SELECT * FROM (SELECT unnest(?::VARCHAR[]) AS "
                "owner_id, unnest(?::VARCHAR[]) AS stage_at_snapshot, unnest(?::DOUBLE[]) AS "
                "stated_prob, unnest(?::INTEGER[]) AS won)",
                [[f"o{i}" for i in rng.integers(0, 40, n)],
                 [f"s{i}" for i in rng.integers(0, 5, n)],
                 rng.uniform(0, 1, n).round(7).tolist(), rng.integers(0, 2, n).tolist()])
    results = {}
    for threads in (2, 1):
        con.execute(f"SET threads = {threads}")
        results[threads] = [run_saved(con, name) for name in
                            ("reliability_table", "calibration_by_stage")]
    assert results[1] == results[2]
