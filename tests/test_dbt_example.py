"""examples/dbt run by dbt itself: `dbt seed` then `dbt build --threads 4` through the
sqlrisk.dbt plugin, and the built tables checked against the same queries run directly with
sqlrisk.connect() on the seed files (equal to 1e-12). A second build with another as_of
appends one snapshot; a repeated one appends nothing (the incremental model)."""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

import sqlrisk
from conftest import ROOT

DBT = Path(sys.executable).with_name("dbt")
pytestmark = pytest.mark.skipif(not DBT.exists(), reason="dbt is installed by the test extra")


def dbt(project: Path, *args: str) -> str:
    env = {**os.environ, "DBT_PROFILES_DIR": str(project), "SQLRISK_DBT_PATH":
           str(project / "forecast.duckdb"), "DBT_SEND_ANONYMOUS_USAGE_STATS": "false"}
    proc = subprocess.run([str(DBT), *args, "--project-dir", str(project)], env=env,
                          capture_output=True, text=True, timeout=180)
    assert proc.returncode == 0, proc.stdout[-3000:] + proc.stderr[-2000:]
    return proc.stdout


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    project = tmp_path_factory.mktemp("dbt") / "project"
    shutil.copytree(ROOT / "examples" / "dbt", project,
                    ignore=shutil.ignore_patterns("target", "logs", "*.duckdb"))
    dbt(project, "seed")
    out = dbt(project, "build", "--threads", "4")
    assert "ERROR=0" in out and "PASS=" in out
    dbt(project, "build", "--threads", "4", "--select", "odds_snapshots",
        "--vars", "{as_of: '2026-12-07'}")
    dbt(project, "build", "--threads", "4", "--select", "odds_snapshots",
        "--vars", "{as_of: '2026-12-07'}")
    con = sqlrisk.connect(str(project / "forecast.duckdb"), read_only=True)
    seeds = project / "seeds"
    for name in ("pipeline", "quota_bands", "owners"):
        con.execute(f"CREATE TEMP TABLE direct_{name} AS SELECT * FROM read_csv(?)",
                    [str(seeds / f"{name}.csv")])
    yield con
    con.close()


def close(a, b, tol=1e-12):
    return all(abs(x - y) <= tol for x, y in zip(a, b)) and len(a) == len(b)


def test_owner_odds_equal_the_direct_query(built):
    got = dict((r[0], r[1:]) for r in built.execute(
        "SELECT owner_id, bands, p10_p50_p90, odds_error FROM owner_odds").fetchall())
    want = built.execute(
        "SELECT p.owner_id, band_odds(p.amount, p.win_prob, [q.floor, q.target, q.stretch]::DOUBLE[]), "
        "total_quantiles(p.amount, p.win_prob, [0.1, 0.5, 0.9]), odds_error(p.amount, p.win_prob) "
        "FROM direct_pipeline p JOIN direct_quota_bands q USING (owner_id) "
        "WHERE q.period = '2027-Q1' GROUP BY p.owner_id, q.floor, q.target, q.stretch").fetchall()
    assert len(got) == len(want) == 54
    for owner, bands, qs, err in want:
        g = got[owner]
        assert close(g[0], bands) and close(g[1], qs, 1e-9 * max(qs)) and abs(g[2] - err) <= 1e-12


def test_region_rollup_from_stored_outcomes_equals_the_direct_merge(built):
    got = dict(built.execute(
        "SELECT region, outcome_bands(outcome, [floor, target, stretch]) FROM region_rollup").fetchall())
    want = built.execute(
        "WITH o AS (SELECT owner_id, any_value(region) AS region, outcome_dist(amount, win_prob) "
        "AS outcome FROM direct_pipeline GROUP BY owner_id) SELECT o.region, outcome_bands("
        "outcome_merge(o.outcome), [sum(q.floor), sum(q.target), sum(q.stretch)]::DOUBLE[]) "
        "FROM o JOIN direct_quota_bands q USING (owner_id) GROUP BY o.region").fetchall()
    assert len(got) == len(want) == 7
    for region, bands in want:
        assert close(got[region], bands)


def test_incremental_snapshots_append_once_per_date(built):
    counts = built.execute(
        "SELECT as_of::VARCHAR, count(*) FROM odds_snapshots GROUP BY 1 ORDER BY 1").fetchall()
    assert counts == [("2026-11-30", 54), ("2026-12-07", 54)]


def test_importing_sqlrisk_does_not_import_dbt():
    code = "import sys, sqlrisk; print(any(m == 'dbt' or m.startswith('dbt.') for m in sys.modules))"
    assert subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          check=True).stdout.strip() == "False"
