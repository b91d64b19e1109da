"""`sqlrisk run` when things go wrong: failed writes, read-only or missing files, bad sources.

The rules checked here: a failed ``run`` leaves the table as it was (the ``--into``
help text: "a failure leaves the table as it was"); from
CONVENTIONS.md "Errors" (one line on stderr, exit code 1, no traceback for user
mistakes) and from sqlrisk/queries.py (parameters are prepared-statement values,
never pasted into the SQL).
"""

from __future__ import annotations

import ctypes
from datetime import date
import hashlib
import os
import subprocess
import sys
from pathlib import Path

import duckdb
import pytest
from hypothesis import example, given, settings
from hypothesis import strategies as st

from sqlrisk import queries
from sqlrisk.runner import open_database, run_query
from test_run import EXE, invoke, rows

BEFORE = [("2026-11-30", "o1", 0.5), ("2026-11-30", "o2", 0.25), ("2026-12-01", "o1", 0.75)]
REPLACE = "as_of=2026-11-30"

# Each query has one placeholder: the first value makes it fail part-way through
# execution, the second makes the same query succeed (the control that proves the
# command would otherwise have replaced the 2026-11-30 rows).
FAILING_QUERIES = {
    # A sqlrisk UDF raising on one group out of three (the InputDataError example).
    "udf_error_in_one_group": (
        "-- Band odds per owner; one owner's deal has a probability of {}.\n"
        "SELECT '2026-11-30' AS as_of, owner_id,\n"
        "       band_odds(amount, prob, [100.0, 200.0])[1] AS v\n"
        "FROM (VALUES ('o1', 100.0, 0.5), ('o1', 150.0, 0.3), ('o2', 120.0, {}),\n"
        "             ('o3', 90.0, 0.2)) AS t(owner_id, amount, prob)\n"
        "GROUP BY owner_id ORDER BY owner_id;\n",
        "40.0", "0.4", "probability 40.0"),
    # A SQL error() on row 150,000 of 200,000: many vectors have been computed by then.
    "sql_error_on_a_late_row": (
        "-- Fails on row {}.\n"
        "SELECT '2026-11-30' AS as_of, 'o' || i AS owner_id,\n"
        "       CASE WHEN i = {} THEN error('boom') ELSE i::DOUBLE END AS v\n"
        "FROM range(200000) AS t(i);\n",
        "150000", "-1", "boom"),
    # The SELECT succeeds; the INSERT into the DOUBLE column fails after the DELETE ran.
    "insert_fails_after_the_delete": (
        "-- A value the target column cannot hold: {}.\n"
        "SELECT '2026-11-30' AS as_of, 'o9' AS owner_id, {} AS v;\n",
        "'not a number'", "0.125", "Could not convert"),
}


def make_history(path: Path) -> str:
    con = duckdb.connect(str(path))
    con.execute("CREATE TABLE hist (as_of VARCHAR, owner_id VARCHAR, v DOUBLE)")
    con.executemany("INSERT INTO hist VALUES (?, ?, ?)", BEFORE)
    con.close()
    return str(path)


def table_names(db: str) -> list[str]:
    return [r[0] for r in rows(db, "SELECT table_name FROM duckdb_tables() ORDER BY 1")]


def assert_cli_one_line_error(result, *fragments):
    """In-process: exit 1 via typer.Exit (not an uncaught exception), one 'error:' line."""
    # source: CONVENTIONS.md "Errors" (one line, exit code 1, no tracebacks)
    assert isinstance(result.exception, SystemExit), repr(result.exception)
    assert result.exit_code == 1, result.output
    text = result.output.strip()
    assert "\n" not in text and text.startswith("error: "), text
    assert "Traceback" not in result.output
    for fragment in fragments:
        assert fragment in text, (fragment, text)


def assert_proc_one_line_error(proc, *fragments):
    # source: CONVENTIONS.md "Errors" (one line on stderr, exit code 1, no tracebacks)
    assert proc.returncode == 1, (proc.stdout, proc.stderr)
    assert proc.stdout == ""
    text = proc.stderr.strip()
    assert "\n" not in text and text.startswith("error: "), text
    assert "Traceback" not in proc.stderr
    for fragment in fragments:
        assert fragment in text, (fragment, text)


def fingerprint(path: Path):
    return hashlib.sha256(path.read_bytes()).hexdigest(), path.stat().st_mtime_ns


# --- 1. no partial write ------------------------------------------------------------------

@pytest.mark.parametrize("mode", ["in_process", "subprocess"])
@pytest.mark.parametrize("kind", list(FAILING_QUERIES))
def test_failed_into_leaves_the_replaced_rows_in_place(tmp_path, kind, mode):
    template, bad, good, message = FAILING_QUERIES[kind]
    db = make_history(tmp_path / "h.duckdb")
    query = tmp_path / "q.sql"
    query.write_text(template.format(bad, bad))
    args = ["run", str(query), "--db", db, "--into", "hist", "--replace-rows", REPLACE]
    if mode == "subprocess":
        proc = subprocess.run([EXE, *args], capture_output=True, text=True, timeout=120)
        assert_proc_one_line_error(proc, message)
    else:
        assert_cli_one_line_error(invoke(*args), message)
    # rule (--into help): "a failure leaves the table as it was"
    assert rows(db, "SELECT * FROM hist ORDER BY ALL") == BEFORE
    assert table_names(db) == ["hist"]

    # Control: the same command with the failure removed does delete those rows.
    query.write_text(template.format(good, good))
    done = invoke(*args)
    assert done.exit_code == 0, done.output
    kept = rows(db, "SELECT * FROM hist WHERE as_of <> '2026-11-30' ORDER BY ALL")
    assert kept == BEFORE[2:]
    replaced = rows(db, "SELECT owner_id, v FROM hist WHERE as_of = '2026-11-30'")
    assert replaced and not set(replaced) & {(o, v) for _, o, v in BEFORE}


def test_failed_into_a_new_table_does_not_create_it(tmp_path):
    template, bad, _, message = FAILING_QUERIES["udf_error_in_one_group"]
    db = make_history(tmp_path / "h.duckdb")
    query = tmp_path / "q.sql"
    query.write_text(template.format(bad, bad))
    result = invoke("run", str(query), "--db", db, "--into", "fresh_table")
    assert_cli_one_line_error(result, message)
    # rule: a failed run creates no table; CREATE TABLE IF NOT EXISTS is in the rolled-back
    # transaction
    assert table_names(db) == ["hist"]
    assert rows(db, "SELECT * FROM hist ORDER BY ALL") == BEFORE


# --- 2. read-only database file (and folder) ----------------------------------------------

_PR_CAPBSET_DROP = 24  # linux/prctl.h
_CAP_DAC_OVERRIDE, _CAP_DAC_READ_SEARCH = 1, 2  # linux/capability.h


def _without_file_override():
    """preexec_fn for root: drop the capabilities that let root write a 0o444 file.

    Switching to uid 65534 is not enough here: the interpreter may live under
    /root (mode 0700), which that user cannot reach. Dropping CAP_DAC_OVERRIDE
    from the bounding set keeps uid 0 (owner of the venv and of tmp_path) but
    makes the exec'd process obey file modes like any owner.
    """
    libc = ctypes.CDLL(None, use_errno=True)
    for cap in (_CAP_DAC_OVERRIDE, _CAP_DAC_READ_SEARCH):
        if libc.prctl(_PR_CAPBSET_DROP, cap, 0, 0, 0) != 0:
            raise OSError(ctypes.get_errno(), "prctl(PR_CAPBSET_DROP) failed")


def run_restricted(args, **kwargs):
    preexec = _without_file_override if os.geteuid() == 0 else None
    return subprocess.run(args, capture_output=True, text=True, timeout=120,
                          preexec_fn=preexec, **kwargs)


def require_unwritable(path: Path, probe: str):
    """Skip (with the reason) when this environment cannot make ``path`` unwritable."""
    try:
        proc = run_restricted([sys.executable, "-c", probe, str(path)])
    except subprocess.SubprocessError as exc:
        pytest.skip(f"cannot drop root's file-permission override here: {exc}")
    if proc.returncode != 3:
        pytest.skip(f"{path} is still writable by the test's subprocess: {proc.stderr[-300:]}")


@pytest.fixture
def read_only_db(tmp_path):
    db = tmp_path / "ro.duckdb"
    con = duckdb.connect(str(db))
    con.execute("CREATE TABLE t AS SELECT 1 AS x")
    con.close()
    query = tmp_path / "one.sql"  # calls no sqlrisk UDF: nothing to compile or cache
    query.write_text("-- One row.\nSELECT 2 AS x;\n")
    db.chmod(0o444)
    yield db, query
    db.chmod(0o644)


def test_read_only_database_file_can_be_read_but_not_written(read_only_db):
    db, query = read_only_db
    require_unwritable(db, "import sys\ntry: open(sys.argv[1], 'r+b')\n"
                           "except PermissionError: sys.exit(3)")
    before = fingerprint(db)
    # source: cli.py _open / commit 20d0c93: --db is opened read-only unless --into is given
    reading = run_restricted([EXE, "run", str(query), "--db", str(db), "--format", "csv"])
    assert reading.returncode == 0, reading.stderr
    assert reading.stdout == "x\n2\n"
    writing = run_restricted([EXE, "run", str(query), "--db", str(db), "--into", "t"])
    # source: runner.open_database message; CONVENTIONS.md "Errors"
    assert_proc_one_line_error(writing, str(db), "cannot be opened for writing")
    assert fingerprint(db) == before
    assert not Path(str(db) + ".wal").exists()
    assert rows(str(db), "SELECT x FROM t") == [(1,)]


@pytest.fixture
def db_in_read_only_folder(tmp_path):
    folder = tmp_path / "locked"
    folder.mkdir()
    db = folder / "f.duckdb"
    con = duckdb.connect(str(db))
    con.execute("CREATE TABLE t AS SELECT 1 AS x")
    con.close()
    query = tmp_path / "one.sql"
    query.write_text("-- One row.\nSELECT 2 AS x;\n")
    folder.chmod(0o555)  # the file stays writable; DuckDB cannot create its .wal beside it
    yield db, query
    folder.chmod(0o755)


def _write_into_read_only_folder(db_in_read_only_folder):
    db, query = db_in_read_only_folder
    require_unwritable(db.parent, "import sys, os\ntry: open(os.path.join(sys.argv[1], 'probe'), 'w')\n"
                                  "except PermissionError: sys.exit(3)")
    before = fingerprint(db)
    proc = run_restricted([EXE, "run", str(query), "--db", str(db), "--into", "t"])
    return db, before, proc


def test_into_a_database_in_a_read_only_folder_fails_cleanly_and_changes_nothing(
        db_in_read_only_folder):
    db, before, proc = _write_into_read_only_folder(db_in_read_only_folder)
    # rule (CONVENTIONS.md "Errors"): one line, exit 1, and the database is left as it was
    assert_proc_one_line_error(proc)
    assert fingerprint(db) == before
    assert sorted(p.name for p in db.parent.iterdir()) == ["f.duckdb"]
    assert rows(str(db), "SELECT x FROM t") == [(1,)]


def test_into_a_database_in_a_read_only_folder_names_the_cause(db_in_read_only_folder):
    _, _, proc = _write_into_read_only_folder(db_in_read_only_folder)
    # source: CONVENTIONS.md "Errors" (messages state the problem and suggest the fix);
    # a failed COMMIT once surfaced as "cannot rollback - no transaction is active"
    assert "cannot rollback" not in proc.stderr
    assert "permission" in proc.stderr.lower() or "read-only" in proc.stderr.lower()


# --- 3. missing database file ---------------------------------------------------------------

def test_missing_database_file_is_an_error_when_only_reading(tmp_path):
    query = tmp_path / "one.sql"
    query.write_text("-- One row.\nSELECT 2 AS x;\n")
    missing = tmp_path / "nonexistent.duckdb"
    # rule (run --help, CONVENTIONS.md "Errors"): without --into a missing file is an error
    assert_cli_one_line_error(invoke("run", str(query), "--db", str(missing)),
                              repr(str(missing)), "does not exist")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["one.sql"]


def test_into_a_missing_database_file_creates_it_and_says_so(tmp_path):
    query = tmp_path / "one.sql"
    query.write_text("-- One row.\nSELECT 2 AS x;\n")
    db = tmp_path / "history.duckdb"
    result = invoke("run", str(query), "--db", str(db), "--into", "t")
    assert result.exit_code == 0, result.output
    # rule (--into help): the first night creates the file, and says so on stderr
    assert f"created database {db}" in result.stderr
    assert rows(str(db), "SELECT * FROM t") == [(2,)]


def test_a_failed_first_night_leaves_no_database_file_behind(tmp_path):
    query = tmp_path / "none.sql"
    query.write_text("-- No rows.\nSELECT 2 AS x WHERE false;\n")
    db = tmp_path / "history.duckdb"
    result = invoke("run", str(query), "--db", str(db), "--into", "t")
    assert_cli_one_line_error(result, "returned no rows", "--allow-empty")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["none.sql"]


# --- 4. --source problems -------------------------------------------------------------------

SOURCE_CASES = {
    "missing_file": ("absent.parquet", None, "no such file"),
    "json_file": ("deals.json", b'{"owner_id": "o1", "amount": 5}\n', "is not a .parquet or .csv"),
    "csv_text_named_parquet": ("deals.parquet", b"owner_id,amount\no1,5\n", "cannot be read as parquet"),
    "binary_garbage_named_csv": ("deals.csv", bytes(range(256)) * 64, "cannot be read as csv"),
}


@pytest.mark.parametrize("case", list(SOURCE_CASES))
def test_bad_source_is_one_line_naming_the_source(tmp_path, case):
    name, content, message = SOURCE_CASES[case]
    path = tmp_path / name
    if content is not None:
        path.write_bytes(content)
    query = tmp_path / "q.sql"
    query.write_text("-- Every deal.\nSELECT * FROM pipeline;\n")
    result = invoke("run", str(query), "--source", f"pipeline={path}")
    # source: runner.attach_sources messages; CONVENTIONS.md "Errors"
    assert_cli_one_line_error(result, f"source pipeline={str(path)!r}", message)


def test_csv_source_failing_past_the_sniffed_rows_is_one_line_naming_the_file(tmp_path):
    # The first 20,480 rows (DuckDB's sniff sample) are numbers, so the view is created;
    # the bad value only fails when the query reads that far.
    path = tmp_path / "late.csv"
    path.write_text("owner_id,amount\n" + "".join(f"o{i},{i}\n" for i in range(50000))
                    + "oX,not_a_number\n")
    query = tmp_path / "q.sql"
    query.write_text("-- Total amount.\nSELECT sum(amount) AS total FROM pipeline;\n")
    result = invoke("run", str(query), "--source", f"pipeline={path}")
    # source: CONVENTIONS.md "Errors"
    assert_cli_one_line_error(result, str(path), "not_a_number")


# --- 5. fuzzed parameter values -------------------------------------------------------------

HOSTILE = [
    "'", "''", '"', "it's", "'; DROP TABLE sentinel; --", "\"; DROP TABLE sentinel; --",
    "/* */", "*/ SELECT 1 /*", "$label", "$1", "?", "%s", "{label}", "\\", "\\'", "a\\nb",
    "line1\nline2", "\r\n", "\t", "", " ", "=", "label=x", "-p", "--into",
    "Zoë 北京 \u2028 \U0001F600", "\u202e\u200b", "a\x00b",
]


@pytest.fixture
def echo_db(tmp_path):
    db = str(tmp_path / "h.duckdb")
    con = duckdb.connect(db)
    con.execute("CREATE TABLE sentinel AS SELECT 1 AS x")
    con.close()
    query = tmp_path / "echo.sql"
    query.write_text("-- Echo.\n-- $label: any text\nSELECT $label AS label;\n")
    return db, query


def echo_state(con):
    return (con.execute("SELECT label FROM echoes").fetchall(),
            con.execute("SELECT x FROM sentinel").fetchall(),
            [r[0] for r in con.execute("SELECT table_name FROM duckdb_tables() ORDER BY 1").fetchall()])


def test_parameter_values_round_trip_verbatim_and_run_no_sql(echo_db):
    db, path = echo_db
    query = queries.find(str(path))
    con = open_database(db)  # one connection: the fuzz exercises binding, not process start-up

    @settings(max_examples=60, deadline=None, derandomize=True)
    @given(label=st.text())
    def check(label):
        con.execute("DROP TABLE IF EXISTS echoes")
        result = run_query(con, query, {"label": label}, into="echoes")
        assert result.written == 1 and result.table.to_pylist() == [{"label": label}]
        # source: queries.py / --param help: bound as a prepared-statement value, never pasted
        assert echo_state(con) == ([(label,)], [(1,)], ["echoes", "sentinel"])

    for value in HOSTILE:  # NUL included: DuckDB stores it (checked), so no clean-error branch
        check = example(label=value)(check)
    try:
        check()
    finally:
        con.close()


@pytest.mark.parametrize("label", HOSTILE, ids=[ascii(h) for h in HOSTILE])
def test_hostile_parameter_values_survive_the_command_line(echo_db, label):
    db, query = echo_db
    result = invoke("run", str(query), "--db", db, "-p", f"label={label}", "--into", "echoes")
    assert result.exit_code == 0, result.output
    assert result.output == "wrote 1 rows into echoes\n"
    con = duckdb.connect(db, read_only=True)
    try:
        # source: --param help: "bound as a prepared-statement value ($NAME), never pasted into the SQL"
        assert echo_state(con) == ([(label,)], [(1,)], ["echoes", "sentinel"])
    finally:
        con.close()


def test_parameter_that_is_not_valid_unicode_is_a_clean_error(echo_db):
    # A lone surrogate (possible from a mis-decoded argv) cannot become a DuckDB VARCHAR.
    db, query = echo_db
    result = invoke("run", str(query), "--db", db, "-p", "label=\ud800", "--into", "echoes")
    # rule (CONVENTIONS.md "Errors"): one line, exit 1, and the database is left as it was
    assert_cli_one_line_error(result, "surrogate")
    assert table_names(db) == ["sentinel"]


def _old_band_history(tmp_path) -> str:
    """A forecast database whose band_history was written before odds_error existed."""
    db = str(tmp_path / "forecast.duckdb")
    con = duckdb.connect(db)
    for name in ("pipeline", "owners", "quota_bands"):
        con.execute(f"CREATE TABLE {name} AS SELECT * FROM read_csv(?)",
                    [str(Path(__file__).resolve().parent.parent / "seeds" / f"{name}.csv")])
    con.close()
    first = invoke("run", "nightly_snapshot", "--db", db, "-p", "as_of=2026-11-30",
                   "--into", "band_history")
    assert first.exit_code == 0, first.output
    con = duckdb.connect(db)
    con.execute("ALTER TABLE band_history DROP COLUMN odds_error")
    con.close()
    return db


def test_appending_to_a_band_history_without_odds_error_names_the_column_and_the_fix(tmp_path):
    db = _old_band_history(tmp_path)
    before = rows(db, "SELECT * EXCLUDE (outcome) FROM band_history ORDER BY ALL")
    result = invoke("run", "nightly_snapshot", "--db", db, "-p", "as_of=2026-12-01",
                    "--into", "band_history")
    # rule (CONVENTIONS.md "Errors"): one line naming the table, the column and the fix
    assert result.exit_code == 1
    message = result.output.strip()
    assert "\n" not in message and "band_history" in message and "odds_error" in message
    assert "ALTER TABLE band_history ADD COLUMN odds_error DOUBLE" in message
    assert rows(db, "SELECT * EXCLUDE (outcome) FROM band_history ORDER BY ALL") == before
    con = duckdb.connect(db)
    con.execute("ALTER TABLE band_history ADD COLUMN odds_error DOUBLE")
    con.close()
    fixed = invoke("run", "nightly_snapshot", "--db", db, "-p", "as_of=2026-12-01",
                   "--into", "band_history")
    assert fixed.exit_code == 0, fixed.output
    assert rows(db, "SELECT as_of, count(odds_error) FROM band_history GROUP BY ALL "
                    "ORDER BY ALL") == [(date(2026, 11, 30), 0), (date(2026, 12, 1), 54)]


def test_rollup_from_snapshot_reads_a_band_history_without_odds_error(tmp_path):
    db = _old_band_history(tmp_path)
    result = invoke("run", "rollup_from_snapshot", "--db", db, "-p", "as_of=2026-11-30",
                    "--format", "csv")
    assert result.exit_code == 0, result.output
    header = result.output.splitlines()[0].split(",")
    assert header[-1] == "odds_error"  # outcome_error of each merged stored outcome
