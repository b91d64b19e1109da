"""`sqlrisk run` and `sqlrisk chart`: saved queries, sources, parameters, atomic writes."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import duckdb
import pytest
from typer.testing import CliRunner

from conftest import ROOT
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
    for name in ("pipeline", "owners", "quota_bands", "closed_deals", "past_deals", "past_quotas"):
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
