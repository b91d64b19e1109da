"""How the odds moved: seeds/pipeline_weeks.csv, the weekly snapshots the demo writes into
band_history (sqlrisk/demo_history.py) and the saved query odds_history that reads them back.

The band columns are checked against owner_band_odds, which computes them from the deals
(the same band_odds on the same rows), and the weeks file against pipeline.csv and against
a fresh run of its generator.
"""

from __future__ import annotations

import datetime as dt
import json
from collections import defaultdict

import duckdb
import pytest
from typer.testing import CliRunner

import sqlrisk
from conftest import ROOT, run_saved
from sqlrisk import demo, demo_history, queries, runner
from sqlrisk.cli import app
from sqlrisk.errors import InputDataError, ParameterError
from sqlrisk.seeds import generate

SEEDS = ROOT / "seeds"
WEEKS = [dt.date(2026, 10, 26) + dt.timedelta(weeks=k) for k in range(6)]
TODAY = WEEKS[-1]
BANDS = ("below_floor", "floor_to_target", "target_to_stretch", "stretch_or_more")
ODDS = (*BANDS, "reach_target")
OWNERS = 54


def _seed_text(name: str) -> str:
    with open(SEEDS / name, newline="") as f:  # keep the CRLF line ends
        return f.read()


@pytest.fixture(scope="module")
def history_con():
    """The demo seeds, with the six weekly snapshots written into band_history."""
    con = sqlrisk.connect()
    demo.load_seeds(con)
    dates = demo_history.write_weekly_snapshots(con)
    yield con, dates
    con.close()


def _by_owner(rows: list[dict]) -> dict[str, list[dict]]:
    grouped = defaultdict(list)
    for row in rows:
        grouped[row["owner_id"]].append(row)
    return grouped


# -- the seed file ---------------------------------------------------------------------------

def test_the_last_week_is_todays_pipeline_row_for_row():
    weeks = _seed_text("pipeline_weeks.csv").splitlines()
    pipeline = _seed_text("pipeline.csv").splitlines()
    assert weeks[0] == "as_of," + pipeline[0]
    prefix = f"{TODAY.isoformat()},"
    today = [line[len(prefix):] for line in weeks[1:] if line.startswith(prefix)]
    assert today == pipeline[1:]


def test_the_weeks_generator_is_reproducible_and_leaves_the_other_seeds_alone():
    files = generate.make_seed_files()  # computes the files; writes nothing
    assert set(files) == {p.name for p in SEEDS.glob("*.csv")}
    for name, (header, rows) in files.items():
        assert generate.csv_text(header, rows) == _seed_text(name), name


def test_the_weeks_move_as_a_pipeline_does():
    con = duckdb.connect()
    con.execute("CREATE TABLE w AS SELECT * FROM read_csv(?)", [str(SEEDS / "pipeline_weeks.csv")])
    con.execute("CREATE TABLE p AS SELECT * FROM read_csv(?)", [str(SEEDS / "pipeline.csv")])
    dates = [r[0] for r in con.execute("SELECT DISTINCT as_of FROM w ORDER BY as_of").fetchall()]
    assert dates == WEEKS and all(d.weekday() == 0 for d in dates)  # six Mondays
    assert con.execute("SELECT count(*) FROM (SELECT as_of, deal_id FROM w "
                       "GROUP BY ALL HAVING count(*) > 1)").fetchone()[0] == 0
    first = "w.as_of = DATE '2026-10-26'"
    later_created, gone, max_today = con.execute(f"""
        SELECT count(*) FILTER (WHERE deal_id NOT IN (SELECT deal_id FROM w WHERE {first})),
               (SELECT count(DISTINCT deal_id) FROM w WHERE deal_id NOT IN (SELECT deal_id FROM p)),
               max(deal_id) FROM p""").fetchone()
    assert later_created > 0 and gone > 0
    # deals gone by today have ids of their own, above today's
    assert con.execute("SELECT min(deal_id) FROM w WHERE deal_id NOT IN "
                       "(SELECT deal_id FROM p)").fetchone()[0] > max_today
    stages = {"scout": 0, "scope": 1, "pitch": 2, "terms": 3, "handshake": 4}
    moved = con.execute(f"""SELECT w.stage, p.stage, w.win_prob, p.win_prob, w.amount, p.amount
                            FROM w JOIN p USING (deal_id) WHERE {first}""").fetchall()
    earlier = [m for m in moved if m[0] != m[1]]
    assert earlier and all(stages[a] < stages[b] and pa < pb for a, b, pa, pb, _, _ in earlier)
    assert any(m[4] != m[5] for m in moved)  # some amounts changed too
    assert (SEEDS / "pipeline_weeks.csv").stat().st_size < 1_500_000


# -- writing the snapshots ---------------------------------------------------------------------

def test_six_snapshots_are_written_and_the_pipeline_table_is_untouched(history_con):
    con, dates = history_con
    assert dates == WEEKS
    counts = con.execute("SELECT as_of, count(*), count(DISTINCT owner_id) FROM band_history "
                         "GROUP BY as_of ORDER BY as_of").fetchall()
    assert counts == [(d, OWNERS, OWNERS) for d in WEEKS]
    assert con.execute("SELECT count(*) FROM duckdb_views() WHERE view_name = 'pipeline'"
                       ).fetchone()[0] == 0
    table = con.execute("SELECT * FROM pipeline").fetchall()
    assert table == con.execute("SELECT * FROM read_csv(?)",
                                [str(SEEDS / "pipeline.csv")]).fetchall()


def test_writing_again_replaces_each_week_and_puts_back_a_callers_view(con):
    demo.load_seeds(con)
    con.execute("CREATE TEMP VIEW pipeline AS SELECT * FROM memory.main.pipeline "
                "WHERE owner_id = 'own_001'")
    mine = con.execute("SELECT count(*) FROM pipeline").fetchone()[0]
    for _ in range(2):
        demo_history.write_weekly_snapshots(con)
    assert con.execute("SELECT count(*) FROM band_history").fetchone()[0] == 6 * OWNERS
    assert con.execute("SELECT count(*) FROM pipeline").fetchone()[0] == mine < 2189


def test_writing_without_the_seeds_is_a_one_line_error(con):
    with pytest.raises(InputDataError, match=r"^write_weekly_snapshots: the database has no "
                                             r"table quota_bands, owners; load the demo seeds"):
        demo_history.write_weekly_snapshots(con)


# -- odds_history ------------------------------------------------------------------------------------

def test_six_rows_per_owner_in_owner_then_date_order(history_con):
    con, _ = history_con
    rows = run_saved(con, "odds_history")
    assert [(r["owner_id"], r["as_of"]) for r in rows] == sorted(
        (r["owner_id"], r["as_of"]) for r in rows)
    grouped = _by_owner(rows)
    assert len(grouped) == OWNERS
    assert all([r["as_of"] for r in owner_rows] == WEEKS for owner_rows in grouped.values())
    assert list(rows[0]) == ["as_of", "owner_id", "region", "deals", "expected_value", "floor",
                             "target", "stretch", *ODDS, "odds_error"]


def test_present_bands_sum_to_one_and_reach_target_is_the_bands_above_it(history_con):
    con, _ = history_con
    for row in run_saved(con, "odds_history"):
        present = [row[b] for b in BANDS if row[b] is not None]
        assert len(present) == 4  # every demo owner has floor, target and stretch
        assert sum(present) == pytest.approx(1.0, abs=1e-9), row["owner_id"]
        assert row["reach_target"] == pytest.approx(
            row["target_to_stretch"] + row["stretch_or_more"], abs=1e-12)
        assert 0 <= row["odds_error"] < 0.01


def test_todays_rows_are_owner_band_odds(history_con):
    con, _ = history_con
    today = {r["owner_id"]: r for r in run_saved(con, "odds_history", **{"from": "2026-11-30"})}
    direct = run_saved(con, "owner_band_odds")
    assert len(today) == len(direct) == OWNERS
    for want in direct:
        got = today[want["owner_id"]]
        assert got["as_of"] == TODAY and got["region"] == want["region"]
        assert got["deals"] == want["deals"]
        assert round(got["expected_value"]) == pytest.approx(want["expected_value"], abs=1)
        for column in ("floor", "target", "stretch"):
            assert got[column] == want[column]
        for column in ODDS:
            assert got[column] == pytest.approx(want[column], abs=1e-12), column


def test_some_owners_odds_rise_over_the_weeks_and_some_fall(history_con):
    con, _ = history_con
    change = {owner: rows[-1]["reach_target"] - rows[0]["reach_target"]
              for owner, rows in _by_owner(run_saved(con, "odds_history")).items()}
    assert sum(c > 0.2 for c in change.values()) >= 3
    assert sum(c < -0.2 for c in change.values()) >= 3


def test_one_owner_and_a_date_range(history_con):
    con, _ = history_con
    everyone = _by_owner(run_saved(con, "odds_history"))
    assert run_saved(con, "odds_history", owner="own_032") == everyone["own_032"]
    middle = run_saved(con, "odds_history", **{"from": "2026-11-09", "to": "2026-11-23"})
    assert sorted({r["as_of"] for r in middle}) == WEEKS[2:5]
    assert len(middle) == 3 * OWNERS
    assert run_saved(con, "odds_history", owner="own_999") == []


def test_a_bad_date_is_a_one_line_error_naming_the_fix(history_con):
    con, _ = history_con
    with pytest.raises(ParameterError, match=r"^run: odds_history parameter from must be a date "
                                             r"\(YYYY-MM-DD\), and 'last week' is not; give e\.g\."):
        run_saved(con, "odds_history", **{"from": "last week"})


def test_a_missing_cut_gives_null_bands_as_owner_band_odds_does(con):
    demo.load_seeds(con)
    con.execute("UPDATE quota_bands SET floor = NULL WHERE owner_id IN ('own_001', 'own_004')")
    con.execute("UPDATE quota_bands SET target = NULL WHERE owner_id = 'own_002'")
    con.execute("UPDATE quota_bands SET stretch = NULL WHERE owner_id IN ('own_003', 'own_004')")
    runner.run_query(con, queries.find("nightly_snapshot"), {"as_of": "2026-11-30"},
                     into="band_history")
    history = {r["owner_id"]: r for r in run_saved(con, "odds_history")}
    for want in run_saved(con, "owner_band_odds"):
        got = history[want["owner_id"]]
        for column in ODDS:
            if want[column] is None:
                assert got[column] is None, (want["owner_id"], column)
            else:
                assert got[column] == pytest.approx(want[column], abs=1e-12)
    assert history["own_004"]["floor_to_target"] is None is history["own_004"]["below_floor"]
    assert history["own_002"]["reach_target"] is None


# -- the CLI ------------------------------------------------------------------------------------------

def _cli_json(*args) -> list[dict]:
    result = CliRunner().invoke(app, ["run", "odds_history", *args, "--format", "json"])
    assert result.exit_code == 0, result.output
    return [json.loads(line) for line in result.stdout.strip().splitlines()]


def test_the_cli_runs_it_on_a_database_file_with_and_without_odds_error(history_con, db_path):
    con, _ = history_con
    want = run_saved(con, "odds_history", owner="own_032")
    con.execute(f"ATTACH '{db_path}' AS saved")
    con.execute("CREATE TABLE saved.band_history AS SELECT * FROM main.band_history")
    con.execute("DETACH saved")
    got = _cli_json("--db", db_path, "-p", "owner=own_032")
    assert [(r["owner_id"], r["as_of"]) for r in got] == [("own_032", d.isoformat()) for d in WEEKS]
    for g, w in zip(got, want):
        assert [g[c] for c in ODDS] == pytest.approx([w[c] for c in ODDS], abs=1e-12)
        assert g["odds_error"] == pytest.approx(w["odds_error"], abs=1e-15)

    older = duckdb.connect(db_path)  # a band_history written before odds_error existed
    older.execute("ALTER TABLE band_history DROP COLUMN odds_error")
    older.close()
    got = _cli_json("--db", db_path, "-p", "owner=own_032", "-p", "to=2026-11-16")
    assert [r["as_of"] for r in got] == [d.isoformat() for d in WEEKS[:4]]
    assert all(r["odds_error"] is None for r in got)
    for g, w in zip(got, want):
        assert [g[c] for c in ODDS] == pytest.approx([w[c] for c in ODDS], abs=1e-12)
