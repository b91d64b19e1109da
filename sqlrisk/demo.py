"""The demo: the invented company's pipeline in ``seeds/``, run through the saved queries."""

from __future__ import annotations

import textwrap
from pathlib import Path

import duckdb

from . import chart_rows, demo_history, queries, runner, text_format

SEED_TABLES = ("pipeline", "owners", "quota_bands", "closed_deals", "past_deals", "past_quotas")
BAND_COLUMNS = ("below_floor", "floor_to_target", "target_to_stretch", "stretch_or_more",
                "reach_now", "reach_if_won", "reach_if_lost", "swing", "win_prob",
                "below_floor_stated", "below_floor_calibrated", "stretch_or_more_stated",
                "stretch_or_more_calibrated", "coverage_80")
MONEY_COLUMNS = ("expected_value", "floor", "target", "stretch", "sd",
                 "p10", "p50", "p90", "cut", "amount", "expected_stated", "expected_calibrated")


def load_seeds(con: duckdb.DuckDBPyConnection, directory: Path | None = None) -> None:
    """Create one table per seed CSV (pipeline, owners, quota_bands, closed_deals, and the
    past quarters' past_deals and past_quotas)."""
    directory = directory or queries.seeds_dir()
    for name in SEED_TABLES:
        con.execute(f"CREATE OR REPLACE TABLE {name} AS SELECT * FROM read_csv(?)",
                    [str(directory / f"{name}.csv")])


def _section(con, name: str, title: str, columns: list[str] | None = None,
             only: tuple[str, object] | None = None, limit: int | None = None) -> str:
    """A saved query's result as a text table; ``only = (column, value)`` keeps those rows."""
    query = queries.find(name)
    rel = con.execute(query.sql, queries.bind(query, {}))
    headers = [d[0] for d in rel.description]
    rows = rel.fetchall()
    if only:
        rows = [r for r in rows if r[headers.index(only[0])] == only[1]]
    if limit:
        rows = rows[:limit]
    if columns:
        keep = [headers.index(c) for c in columns]
        headers = columns
        rows = [[r[i] for i in keep] for r in rows]
    formats = {c: text_format.pct for c in BAND_COLUMNS}
    formats.update({c: text_format.money for c in MONEY_COLUMNS})
    formats["odds_error"] = text_format.accuracy
    formats["crps"] = text_format.money
    source = query.path.relative_to(queries.PACKAGE_ROOT) if query.path.is_relative_to(
        queries.PACKAGE_ROOT) else query.path
    return (f"{title}\n(from {source}: {query.description})\n\n"
            + text_format.table_text(headers, rows, formats))


CHART_REGION = "Tidewater Bay"
SWING_OWNER = "own_032"


def write_chart(con: duckdb.DuckDBPyConnection, out_dir: Path) -> Path:
    """Chart of one region's outcome with its summed quota bands (sql/region_outcomes.sql)."""
    out_dir.mkdir(parents=True, exist_ok=True)
    query = queries.find("region_outcomes")
    result = runner.run_query(con, query, {})
    path = out_dir / "demo-region-chart.svg"
    return chart_rows.draw_rows(con, result.table, path,
                                where=f"region = '{CHART_REGION}'")[0]


def write_reliability_chart(con: duckdb.DuckDBPyConnection, out_dir: Path) -> Path:
    """Reliability diagram of the closed deals' stated probabilities (sql/reliability_table.sql)."""
    out_dir.mkdir(parents=True, exist_ok=True)
    result = runner.run_query(con, queries.find("reliability_table"), {})
    return chart_rows.draw_rows(con, result.table, out_dir / "demo-reliability.svg")[0]


def write_history_chart(con: duckdb.DuckDBPyConnection, out_dir: Path) -> Path:
    """Six weeks of nightly snapshots into band_history, and one owner's odds over them
    (sql/odds_history.sql)."""
    out_dir.mkdir(parents=True, exist_ok=True)
    demo_history.write_weekly_snapshots(con)
    result = runner.run_query(con, queries.find("odds_history"), {"owner": SWING_OWNER})
    return chart_rows.draw_rows(con, result.table, out_dir / "demo-odds-history.svg")[0]


BACKTEST_COLUMNS = ["method", "forecasts", "expected", "actual", "crps", "band_rps",
                    "reach_brier", "coverage_80", "pit"]


def backtest_section(con: duckdb.DuckDBPyConnection, out_dir: Path) -> str:
    """The past quarters' forecasts scored per method (sql/backtest.sql), the PIT chart, and
    the rho the past prefers (sql/choose_correlation.sql)."""
    out_dir.mkdir(parents=True, exist_ok=True)
    table = runner.run_query(con, queries.find("backtest"), {}).table
    chart = chart_rows.draw_rows(con, table, out_dir / "demo-backtest.svg")[0]
    rows = table.to_pylist()
    best = min(rows, key=lambda r: r["crps"])
    rhos = runner.run_query(con, queries.find("choose_correlation"), {}).table.to_pylist()
    overall = next(r for r in rhos if r["scope"] == "all regions")
    regions = {r["scope"]: r["best_rho"] for r in rhos if r["scope"] != "all regions"}
    formats = {"crps": text_format.money, "expected": text_format.money,
               "actual": text_format.money, "coverage_80": text_format.pct,
               "band_rps": _score, "reach_brier": _score, "pit": _score}
    table_rows = [[r[c] for c in BACKTEST_COLUMNS] for r in rows]
    by_region = ", ".join(f"{name} {rho:g}" for name, rho in regions.items())
    stated = rows[0]
    direction = "high" if stated["pit"] < 0.5 else "low"
    return "\n".join([
        "Were past odds right? Each 2026 quarter's forecast from its first day, per owner, "
        "scored against what was won",
        "(from sql/backtest.sql; lower crps, band_rps and reach_brier are better; coverage_80 "
        "should be near 80%, pit near 0.5)",
        "",
        text_format.table_text(BACKTEST_COLUMNS, table_rows, formats),
        "",
        textwrap.fill(
            f"The stated probabilities' 80% intervals held {stated['coverage_80']:.0%} of the "
            f"actual totals (80% if the spreads were right), and their mean PIT is "
            f"{stated['pit']:.2f} (0.5 if the centre were right): the forecasts ran {direction}, "
            f"{stated['expected']:,.0f} expected per owner and quarter against "
            f"{stated['actual']:,.0f} won. Best by mean CRPS: {best['method']}. The rho with "
            f"the lowest CRPS (sql/choose_correlation.sql): {overall['best_rho']:g} over all "
            f"regions; by region: {by_region}.", width=96),
        f"PIT histograms and interval coverage per method: {chart}",
        "(drawn by 'sqlrisk chart backtest')",
    ])


def _score(x) -> str:
    return "" if x is None else f"{x:.3f}"


def run_demo(con: duckdb.DuckDBPyConnection, out_dir: Path | None = None) -> str:
    """Load the seeds into ``con``, write the demo chart into ``out_dir``, return the report."""
    load_seeds(con)
    chart_path = write_chart(con, out_dir or Path("out"))
    reliability_path = write_reliability_chart(con, out_dir or Path("out"))
    history_path = write_history_chart(con, out_dir or Path("out"))
    backtest = backtest_section(con, out_dir or Path("out"))
    counts = con.execute(
        "SELECT count(*), count(DISTINCT owner_id), count(DISTINCT region) FROM pipeline").fetchall()[0]
    owner, owner_name = con.execute(
        "SELECT owner_id, owner_name FROM owners WHERE owner_id = ?", [SWING_OWNER]).fetchall()[0]
    parts = [
        "sqlrisk demo: Brindlewick Software (an invented company), open pipeline for 2027-Q1",
        f"{counts[0]:,} open deals, {counts[1]} owners, {counts[2]} regions, loaded from seeds/.",
        "",
        _section(con, "owner_band_odds",
                 "Per-owner odds of landing in each quota band (one GROUP BY query with band_odds)",
                 ["owner_name", "region", "deals", "expected_value", "target", "below_floor",
                  "floor_to_target", "target_to_stretch", "stretch_or_more", "odds_error"]),
        "",
        _section(con, "region_rollup", "Region and company roll-up of the owner outcomes"),
        "",
        _section(con, "top_swing_deals",
                 f"Which deals move {owner_name}'s odds of reaching the next band cut most "
                 "(deal_swing)",
                 ["deal_id", "stage", "amount", "win_prob", "cut_name", "reach_now",
                  "reach_if_won", "reach_if_lost", "swing"], only=("owner_id", owner)),
        "",
        _section(con, "stated_vs_calibrated",
                 "Band odds from the stated probabilities and from probabilities calibrated on "
                 "2026's closed deals (first 8 owners)",
                 ["owner_name", "expected_stated", "expected_calibrated", "below_floor_stated",
                  "below_floor_calibrated", "stretch_or_more_stated",
                  "stretch_or_more_calibrated"], limit=8),
        "",
        f"Chart of {CHART_REGION}'s won total with its quota bands: {chart_path}",
        "(from sql/region_outcomes.sql, drawn by 'sqlrisk chart region_outcomes')",
        f"Reliability diagram of the closed deals' stated probabilities: {reliability_path}",
        "(from sql/reliability_table.sql, drawn by 'sqlrisk chart reliability_table')",
        f"How {owner_name}'s odds moved over six weekly snapshots: {history_path}",
        "(nightly_snapshot run on each week of seeds/pipeline_weeks.csv into band_history, then",
        f"'sqlrisk chart odds_history -p owner={owner}')",
        "",
        "How to read this: expected_value is the weighted sum SUM(amount * win_prob); the band",
        "columns are the probabilities of the won total landing in each band, with the stated win",
        "probabilities taken at face value and deals independent. odds_error says how exact the",
        "band odds are, in probability: 'exact', or '+/-0.02 pts' for odds within 0.02 percentage",
        "points of the true ones (large groups are read off a lattice of totals). reach_if_won and",
        "reach_if_lost are the chance of reaching the cut with that deal won / lost; swing is their",
        "gap. Calibrated odds replace each stated probability by the win rate closed deals with",
        "that stated probability and stage actually had (isotonic regression); they assume the",
        "future closes like the past.",
        "",
        backtest,
        "",
        "The odds estimate; they do not decide anyone's pay or job.",
    ]
    return "\n".join(parts)
