"""`sqlrisk run` and `sqlrisk chart`: saved queries, sources, parameters, atomic writes."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
import xml.etree.ElementTree as ET
from pathlib import Path

import duckdb
import pytest
from typer.testing import CliRunner

import sqlrisk
from conftest import ROOT, assert_png
from sqlrisk import queries
from sqlrisk.cli import app

runner = CliRunner()
SEEDS = ROOT / "seeds"
EXE = str(Path(sys.executable).with_name("sqlrisk"))
PARAMS_FOR_TESTS = {"as_of": "2026-11-30"}


@pytest.fixture
def demo_db(tmp_path):
    path = tmp_path / "forecast.duckdb"
    con = duckdb.connect(str(path))
    for name in ("pipeline", "owners", "quota_bands", "closed_deals"):
        con.execute(f"CREATE TABLE {name} AS SELECT * FROM read_csv(?)", [str(SEEDS / f"{name}.csv")])
    con.close()
    return str(path)


def invoke(*args):
    return runner.invoke(app, list(args))


def rows(db, sql):
    con = duckdb.connect(db, read_only=True)
    try:
        return con.execute(sql).fetchall()
    finally:
        con.close()


@pytest.mark.parametrize("query", [q.name for q in queries.list_queries()])
def test_every_saved_query_header_lists_exactly_its_parameters(query):
    saved = queries.find(query)
    assert saved.description, f"{query} has no description line"
    assert queries.used_params(saved.sql) == set(saved.param_names())


def test_every_saved_query_runs_on_the_demo_data(demo_db):
    # rollup_from_snapshot reads what nightly_snapshot writes, so the snapshot goes first.
    first = invoke("run", "nightly_snapshot", "--db", demo_db, "-p", "as_of=2026-11-30",
                   "--into", "band_history")
    assert first.exit_code == 0, first.output
    for saved in queries.list_queries():
        params = [f"{p}={PARAMS_FOR_TESTS[p]}" for p in saved.param_names()
                  if p in PARAMS_FOR_TESTS]
        args = ["run", saved.name, "--db", demo_db, "--format", "json"]
        for p in params:
            args += ["--param", p]
        result = invoke(*args)
        assert result.exit_code == 0, (saved.name, result.output)
        lines = [json.loads(line) for line in result.output.strip().splitlines()]
        assert lines, saved.name


def test_run_reads_parquet_and_csv_sources(tmp_path):
    con = duckdb.connect()
    parquet = tmp_path / "pipeline.parquet"
    con.execute(f"COPY (SELECT * FROM read_csv('{SEEDS / 'pipeline.csv'}')) TO '{parquet}' (FORMAT parquet)")
    result = invoke("run", "owner_quantiles", "--source", f"pipeline={parquet}",
                    "--source", f"quota_bands={SEEDS / 'quota_bands.csv'}", "--format", "csv")
    assert result.exit_code == 0, result.output
    header, *body = result.output.strip().splitlines()
    assert header.startswith("owner_id,target,expected_value,p10,p50,p90")
    assert len(body) == 54


def test_into_with_replace_rows_is_idempotent(demo_db):
    args = ["run", "nightly_snapshot", "--db", demo_db, "-p", "as_of=2026-11-30",
            "--into", "band_history", "--replace-rows", "as_of=2026-11-30"]
    for _ in range(2):
        result = invoke(*args)
        assert result.exit_code == 0, result.output
        assert "wrote 54 rows into band_history" in result.output
    assert rows(demo_db, "SELECT count(*), count(DISTINCT owner_id) FROM band_history") == [(54, 54)]
    other = invoke("run", "nightly_snapshot", "--db", demo_db, "-p", "as_of=2026-12-01",
                   "--into", "band_history", "--replace-rows", "as_of=2026-12-01")
    assert other.exit_code == 0
    assert rows(demo_db, "SELECT count(*) FROM band_history") == [(108,)]


def test_unknown_and_missing_parameters_list_the_expected_ones(demo_db):
    unknown = invoke("run", "owner_quantiles", "--db", demo_db, "-p", "perio=2027-Q1")
    assert unknown.exit_code == 1
    assert "did you mean 'period'" in unknown.output and "it takes: period" in unknown.output
    missing = invoke("run", "nightly_snapshot", "--db", demo_db)
    assert missing.exit_code == 1
    assert "needs --param as_of=" in missing.output and "as_of, period" in missing.output


def test_user_errors_exit_1_and_usage_errors_exit_2(demo_db, tmp_path):
    assert invoke("run", "no_such_query").exit_code == 1
    assert invoke("run", "owner_quantiles", "--db", str(tmp_path / "absent.duckdb")).exit_code == 1
    assert invoke("run", "owner_quantiles", "--source", "pipeline=nope.parquet").exit_code == 1
    assert invoke("run", "owner_quantiles", "--replace-rows", "a=b").exit_code == 2
    assert invoke("run", "owner_quantiles", "--format", "xml").exit_code == 2
    assert invoke("run").exit_code == 2


def test_locked_database_gives_one_line_error(demo_db):
    holder = subprocess.Popen(
        [sys.executable, "-c",
         "import duckdb, sys, time; c = duckdb.connect(sys.argv[1]); print('ready', flush=True); "
         "time.sleep(60)", demo_db], stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "ready"
        proc = subprocess.run([EXE, "run", "owner_quantiles", "--db", demo_db],
                              capture_output=True, text=True, timeout=120)
        assert proc.returncode == 1
        assert proc.stderr.strip().count("\n") == 0 and "locked" in proc.stderr
        assert "Traceback" not in proc.stderr
    finally:
        holder.kill()
        holder.wait()


def test_kill_during_into_leaves_the_table_unchanged(demo_db, tmp_path):
    con = duckdb.connect(demo_db)
    con.execute("CREATE TABLE slow_results AS SELECT 'before' AS k, 0.0::DOUBLE AS v")
    con.close()
    slow = tmp_path / "slow.sql"  # ~20 billion rows of arithmetic: far longer than the wait below
    slow.write_text("-- A deliberately slow query.\n"
                    "SELECT 'after' AS k, sum(sqrt(i::DOUBLE)) AS v FROM range(20000000000) t(i);\n")
    proc = subprocess.Popen([EXE, "run", str(slow), "--db", demo_db, "--into", "slow_results",
                             "--replace-rows", "k=before"],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    time.sleep(6)
    assert proc.poll() is None, "the slow query finished before it could be killed"
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()
    assert rows(demo_db, "SELECT k, v FROM slow_results") == [("before", 0.0)]


def test_chart_writes_valid_svg_with_cut_lines_and_band_labels(demo_db, tmp_path):
    out = tmp_path / "tide.svg"
    result = invoke("chart", "region_outcomes", "--db", demo_db, "--where",
                    "region = 'Tidewater Bay'", "--output", str(out))
    assert result.exit_code == 0, result.output
    tree = ET.parse(out)
    ns = {"s": "http://www.w3.org/2000/svg"}
    cuts = tree.findall(".//s:line[@class='cut']", ns)
    bands = [t.text for t in tree.findall(".//s:text[@class='band']", ns)]
    assert len(cuts) == 3 and len(bands) == 4
    assert all(b.endswith("%") for b in bands)
    assert tree.findall(".//s:line[@class='mean']", ns)
    assert tree.find(".//s:text[@class='title']", ns).text == "Tidewater Bay"


def test_chart_png_and_one_file_per_row(demo_db, tmp_path):
    result = invoke("chart", "region_outcomes", "--db", demo_db, "--output", str(tmp_path / "r.png"))
    assert result.exit_code == 0, result.output
    files = sorted(tmp_path.glob("r-*.png"))
    assert len(files) == 7
    for f in files:
        assert_png(f)


def test_chart_needs_an_outcome_column(demo_db, tmp_path):
    result = invoke("chart", "owner_quantiles", "--db", demo_db, "--output", str(tmp_path / "x.svg"))
    assert result.exit_code == 1 and "no outcome column" in result.output


def test_chart_files_are_named_after_the_rows_label(demo_db, tmp_path):
    result = invoke("chart", "region_outcomes", "--db", demo_db, "--output", str(tmp_path / "r.svg"))
    assert result.exit_code == 0, result.output
    regions = [r[0] for r in rows(demo_db, "SELECT DISTINCT region FROM owners ORDER BY 1")]
    expected = {"r-" + "-".join(region.lower().split()) + ".svg" for region in regions}
    assert {p.name for p in tmp_path.glob("r-*.svg")} == expected  # never r-1.svg, r-2.svg


def test_chart_takes_cuts_from_floor_target_and_stretch_columns(tmp_path):
    query = tmp_path / "q.sql"
    query.write_text("-- Cuts as columns.\nSELECT 'x' AS who, 50.0 AS floor, NULL::DOUBLE AS target,"
                     " 120.0 AS stretch, outcome_dist(t, 0.5) AS outcome FROM range(1, 20) r(t)\n")
    result = invoke("chart", str(query), "--output", str(tmp_path / "q.svg"))
    assert result.exit_code == 0, result.output
    tree = ET.parse(tmp_path / "q.svg")
    ns = {"s": "http://www.w3.org/2000/svg"}
    assert len(tree.findall(".//s:line[@class='cut']", ns)) == 2  # floor and stretch; no target
    assert len(tree.findall(".//s:text[@class='band']", ns)) == 3


def test_chart_states_accuracy_in_probability_not_currency(demo_db, tmp_path):
    result = invoke("chart", "region_outcomes", "--db", demo_db, "--output", str(tmp_path / "r.svg"))
    assert result.exit_code == 0, result.output
    ns = {"s": "http://www.w3.org/2000/svg"}
    con = duckdb.connect(demo_db, read_only=True)
    sqlrisk.register(con)
    try:  # rule (README "outcome_error"): the accuracy a reader of odds reads, in probability
        errors = dict(con.execute(
            "SELECT region, outcome_error(outcome_dist(amount, win_prob)) FROM pipeline "
            "GROUP BY region").fetchall())
    finally:
        con.close()
    for path in tmp_path.glob("r-*.svg"):
        note = ET.parse(path).find(".//s:text[@class='note']", ns).text
        region = ET.parse(path).find(".//s:text[@class='title']", ns).text
        assert note == f"Odds within +/-{100 * errors[region]:.2g} percentage points.", note
        assert "rounding" not in note and "within 0" not in note


def test_chart_of_an_exact_outcome_says_exact(tmp_path):
    query = tmp_path / "q.sql"
    query.write_text("-- Exact.\nSELECT 'x' AS who, outcome_dist(t, 0.5) AS outcome "
                     "FROM range(1, 20) r(t)\n")
    assert invoke("chart", str(query), "--output", str(tmp_path / "q.svg")).exit_code == 0
    ns = {"s": "http://www.w3.org/2000/svg"}
    assert ET.parse(tmp_path / "q.svg").find(".//s:text[@class='note']", ns).text == "Exact odds."
