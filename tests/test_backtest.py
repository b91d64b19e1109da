"""The saved queries backtest and choose_correlation on the demo's past quarters.

The scores themselves are checked against outside references in test_scoring.py; here: the
queries compute what their headers say (sums of won deals, the scalars on each forecast, means
of them), calibration never looks ahead, and their parameters fail with one-line errors.
"""

from __future__ import annotations

import csv
from collections import defaultdict

import pytest

from conftest import ROOT, run_saved
from sqlrisk import demo
from sqlrisk.errors import SqlriskError

SEEDS = ROOT / "seeds"
METHODS = ["stated", "calibrated", "stated, rho 0.15", "calibrated, rho 0.15"]


@pytest.fixture(scope="module")
def past_con():
    import sqlrisk

    con = sqlrisk.connect()
    demo.load_seeds(con)
    yield con
    con.close()


@pytest.fixture(scope="module")
def forecasts(past_con):
    return run_saved(past_con, "backtest", show="forecasts")


def test_one_summary_row_per_method_after_every_forecast(forecasts, past_con):
    summary = [r for r in forecasts if r["period"] == "all"]
    assert [r["method"] for r in summary] == METHODS
    assert all(r["owner_id"] == "all" for r in summary)
    assert forecasts[-len(summary):] == summary  # the summary comes last
    owners_quarters = past_con.execute(
        "SELECT count(*) FROM (SELECT DISTINCT period, owner_id FROM past_deals)").fetchall()[0][0]
    detail = [r for r in forecasts if r["period"] != "all"]
    assert len(detail) == 4 * owners_quarters
    assert all(r["forecasts"] == owners_quarters for r in summary)
    # the default shows only the summary, the same numbers
    assert run_saved(past_con, "backtest") == summary


def test_actual_is_the_won_deals_of_the_quarter_from_the_csv(forecasts):
    won = defaultdict(float)
    with open(SEEDS / "past_deals.csv", newline="") as f:
        for row in csv.DictReader(f):
            if row["result"] == "won":
                won[row["period"], row["owner_id"]] += float(row["amount"])
    stated = [r for r in forecasts if r["method"] == "stated" and r["period"] != "all"]
    assert stated and all(r["actual"] == round(won[r["period"], r["owner_id"]]) for r in stated)


def test_each_forecast_row_is_the_scalars_on_its_outcome(forecasts, past_con):
    row = next(r for r in forecasts if r["method"] == "stated, rho 0.15"
               and r["period"] == "2026-Q3")
    got = past_con.execute("""
        WITH o AS (SELECT outcome_dist(amount, win_prob, correlation := 0.15) AS o,
                          sum(CASE WHEN result = 'won' THEN amount ELSE 0 END) AS actual
                   FROM past_deals WHERE period = $1 AND owner_id = $2)
        SELECT outcome_pit(o, actual), outcome_crps(o, actual),
               (actual BETWEEN outcome_interval(o).lo AND outcome_interval(o).hi)::DOUBLE
        FROM o""", [row["period"], row["owner_id"]]).fetchall()[0]
    assert (row["pit"], row["crps"], row["coverage_80"]) == got
    cuts = [c for c in (row["floor"], row["target"], row["stretch"]) if c is not None]
    assert row["band_landed"] == 1 + sum(row["actual"] >= c for c in cuts)
    bands = [row["below_floor"], row["floor_to_target"], row["target_to_stretch"],
             row["stretch_or_more"]]
    assert sum(bands) == pytest.approx(1.0)


def test_summary_rows_are_means_of_the_forecasts_and_count_the_pit_bins(forecasts):
    for method in METHODS:
        rows = [r for r in forecasts if r["method"] == method and r["period"] != "all"]
        summary = next(r for r in forecasts if r["method"] == method and r["period"] == "all")
        n = len(rows)
        for score in ("crps", "band_rps", "reach_brier", "coverage_80", "pit"):
            assert summary[score] == pytest.approx(sum(r[score] for r in rows) / n, rel=1e-12)
        bins = [0] * 10
        for r in rows:
            bins[min(int(r["pit"] * 10), 9)] += 1
        assert summary["pit_counts"] == bins
        assert summary["pit_expected"] == pytest.approx(n / 10)


def test_calibrated_forecasts_do_not_look_ahead(past_con):
    """Flipping every deal closed on or after 2026-07-01 moves Q4's calibrated forecasts only."""
    before = run_saved(past_con, "backtest", show="forecasts")
    past_con.execute("CREATE TABLE closed_backup AS SELECT * FROM closed_deals")
    try:
        past_con.execute("UPDATE closed_deals SET won = 1 - won WHERE closed_on >= DATE '2026-07-01'")
        after = run_saved(past_con, "backtest", show="forecasts")
    finally:
        past_con.execute("CREATE OR REPLACE TABLE closed_deals AS SELECT * FROM closed_backup")
        past_con.execute("DROP TABLE closed_backup")
    key = lambda r: (r["method"], r["period"], r["owner_id"])  # noqa: E731
    after = {key(r): r for r in after}
    moved = {k for k, r in ((key(r), r) for r in before) if after[k] != r}
    assert moved  # the change does move something: Q4's calibrated forecasts
    assert all(k[1] in ("2026-Q4", "all") and k[0].startswith("calibrated") for k in moved)
    q3 = [r for r in before if r["period"] == "2026-Q3" and r["method"] == "calibrated"]
    assert q3 and all(after[key(r)] == r for r in q3)


def test_the_first_quarter_has_no_earlier_closed_deals_and_keeps_stated_odds(forecasts):
    q1 = {(r["method"], r["owner_id"]): r for r in forecasts if r["period"] == "2026-Q1"}
    for (method, owner), r in q1.items():
        if method == "calibrated":
            assert r["uncalibrated_deals"] == r["deals"]
            stated = q1["stated", owner]
            assert (r["crps"], r["pit"]) == (stated["crps"], stated["pit"])


def test_choose_correlation_scores_the_grid_and_names_the_lowest(past_con, forecasts):
    rows = run_saved(past_con, "choose_correlation", probs="stated")
    scopes = defaultdict(list)
    for r in rows:
        scopes[r["scope"]].append(r)
    assert list(scopes)[0] == "all regions"
    for scope, grid in scopes.items():
        assert [r["rho"] for r in grid] == [0.0, 0.05, 0.1, 0.15, 0.2, 0.3]
        lowest = min(grid, key=lambda r: r["crps"])
        assert all(r["best_rho"] == lowest["rho"] for r in grid)
        assert [r["lowest"] for r in grid].count(True) >= 1 and lowest["lowest"]
    # rho 0 and 0.15 over all regions are backtest's stated and correlated stated methods
    summary = {r["method"]: r for r in forecasts if r["period"] == "all"}
    overall = {r["rho"]: r for r in scopes["all regions"]}
    for rho, method in ((0.0, "stated"), (0.15, "stated, rho 0.15")):
        assert overall[rho]["crps"] == pytest.approx(summary[method]["crps"], rel=1e-12)
        assert overall[rho]["coverage_80"] == pytest.approx(summary[method]["coverage_80"])


def test_the_scores_are_the_same_bits_on_one_thread_and_on_two(past_con, forecasts):
    # a scheduled job re-run on another machine must store the same numbers: the means are
    # taken over lists in a fixed order, never in the order DuckDB's threads finish
    threads = past_con.execute("SELECT current_setting('threads')").fetchall()[0][0]
    two = run_saved(past_con, "choose_correlation", probs="stated")
    past_con.execute("SET threads = 1")
    try:
        assert run_saved(past_con, "backtest") == [r for r in forecasts if r["period"] == "all"]
        assert run_saved(past_con, "choose_correlation", probs="stated") == two
    finally:
        past_con.execute(f"SET threads = {threads}")


@pytest.mark.parametrize("name, params, message", [
    ("backtest", {"show": "everything"},
     "backtest: show everything is not summary or forecasts; give -p show=summary or "
     "-p show=forecasts"),
    ("backtest", {"rho": "1"}, "backtest: rho 1.0 is outside [0, 1); 0.05 to 0.3 is typical"),
    ("choose_correlation", {"probs": "calibrate"},
     "choose_correlation: probs calibrate is not stated or calibrated; give -p probs=stated "
     "or -p probs=calibrated"),
])
def test_bad_parameters_are_one_line_errors(past_con, name, params, message):
    import duckdb

    with pytest.raises((duckdb.Error, SqlriskError)) as info:
        run_saved(past_con, name, **params)
    assert message in str(info.value) and "\n" not in str(info.value).strip()


HISTORY_TOML = """
[tables.past_deals]
source = "past_quarters.csv"
columns = { period = "quarter_label", period_start = "quarter_opens", owner_id = "seller", deal_id = "deal_ref", amount = "contract_value", win_prob = "chance_pct / 100", result = "CASE WHEN status = 'Closed Won' THEN 'won' WHEN status = 'Pushed' THEN 'slipped' ELSE 'lost' END", stage = "phase", region = "territory" }

[tables.past_quotas]
source = "past_quota.csv"
columns = { owner_id = "seller", period = "quarter_label", target = "quota" }

[tables.closed_deals]
source = "closed.csv"
columns = { stage_at_snapshot = "phase", stated_prob = "chance_pct / 100", won = "outcome", closed_on = "closed_date" }
"""


def test_a_second_company_backtests_its_own_columns_and_hears_what_was_skipped(tmp_path,
                                                                                 monkeypatch):
    """Quillfeather's CRM export (tests/second_company.py): its own column names, percent
    probabilities, status words, a blank amount, a duplicated row, a seller without quotas."""
    import second_company
    from test_run import invoke

    second_company.write_history(tmp_path)
    (tmp_path / "sqlrisk.toml").write_text(HISTORY_TOML)
    monkeypatch.chdir(tmp_path)
    result = invoke("run", "backtest", "--format", "csv")
    assert result.exit_code == 0, result.output
    warnings = [line for line in result.stderr.splitlines() if line.startswith("warning:")]
    assert any("past_deals: 1 of" in w and "amount or win_prob is NULL" in w for w in warnings)
    assert any("appear more than once in one period" in w for w in warnings)
    assert any("s_nell FY26-1" in w and "no row in past_quotas" in w for w in warnings)
    summary = list(csv.DictReader(result.stdout.strip().splitlines()))
    assert [r["method"] for r in summary] == METHODS
    sellers = len(second_company.SELLERS)
    assert all(int(r["forecasts"]) == sellers * len(second_company.QUARTERS) for r in summary)
    # FY26-1 has no earlier closed deal, later quarters do: some deals were calibrated
    assert 0 < int(summary[1]["uncalibrated_deals"]) < int(summary[1]["deals"])
