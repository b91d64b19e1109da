"""Output people can paste: CSV with one value per cell, JSON lines with arrays, and the
terminal table showing probabilities as the demo does.

The rules checked are those of sqlrisk/result_writer.py's docstring; CSV is parsed back
with Python's csv module (RFC 4180 reading, common practice).
"""

from __future__ import annotations

import csv
import datetime as dt
import json

import pyarrow as pa

from conftest import ROOT
from sqlrisk import result_writer, text_format
from test_run import invoke

OUTCOME = {"origin": 0.0, "step": 10.0, "mass": [0.25, 0.75], "trials": 0, "rounding": 0.0}


def sample() -> pa.Table:
    return pa.table({
        "owner_id": ["a", "b", "c"],
        "as_of": [dt.date(2027, 1, 17)] * 3,
        "bands": [[0.1, 0.2, 0.7], [1.0], None],
        "p10_p50_p90": [[1.5, 2.5, 3.5]] * 3,
        "ci": [{"lo": 0.1, "hi": 0.3}, None, {"lo": 0.0, "hi": 1.0}],
        "outcome": [OUTCOME, None, OUTCOME],
    })


def parse(text: str) -> tuple[list[str], list[list[str]]]:
    rows = list(csv.reader(text.splitlines()))
    return rows[0], rows[1:]


def test_csv_spreads_lists_and_structs_and_leaves_outcomes_out():
    header, rows = parse(result_writer.to_csv(sample()))
    assert header == ["owner_id", "as_of", "bands_1", "bands_2", "bands_3", "p10", "p50", "p90",
                      "ci_lo", "ci_hi"]
    assert rows[0] == ["a", "2027-01-17", "0.1", "0.2", "0.7", "1.5", "2.5", "3.5", "0.1", "0.3"]
    assert rows[1][2:5] == ["1.0", "", ""]  # a shorter list: empty cells after it
    assert rows[2][2:5] == ["", "", ""] and rows[1][8:] == ["", ""]  # NULL list, NULL struct


def test_csv_keeps_outcomes_as_json_when_asked_and_full_precision():
    table = sample().append_column("third", pa.array([1 / 3, None, 2 / 3]))
    header, rows = parse(result_writer.to_csv(table, keep_outcomes=True))
    assert "outcome" in header
    assert json.loads(rows[0][header.index("outcome")]) == OUTCOME
    assert float(rows[0][header.index("third")]) == 1 / 3  # repr round-trips a double


def test_a_list_not_named_by_levels_is_numbered():
    names = result_writer.element_names
    assert names("p10_p50_p90", 3) == ["p10", "p50", "p90"]
    assert names("p10_p50_p90", 2) == ["p10_p50_p90_1", "p10_p50_p90_2"]
    assert names("independent_bands", 2) == ["independent_bands_1", "independent_bands_2"]


def test_json_lines_keep_arrays_and_objects():
    lines = result_writer.to_text(sample(), "json").splitlines()
    first = json.loads(lines[0])
    assert first["bands"] == [0.1, 0.2, 0.7] and first["outcome"] == OUTCOME
    assert first["as_of"] == "2027-01-17" and json.loads(lines[2])["bands"] is None


def test_terminal_table_shows_probabilities_as_the_demo_does():
    table = pa.table({"owner_id": ["a", "b"], "reach_target": [0.0004, 0.99971],
                      "bands": [[0.25, 0.75], [1.0, 0.0]], "expected_value": [0.5, 0.25],
                      "outcome": [OUTCOME, OUTCOME]})
    text = text_format.result_table(table)
    assert "<0.1%" in text and ">99.9%" in text and "[25.0%, 75.0%]" in text
    assert "[100.0%, 0.0%]" in text
    assert "0.5" in text and "50.0%" not in text  # expected_value is not a probability
    assert "outcome(exact, 2 points)" in text and "mass" not in text
    # a probability-like name whose values leave [0, 1] stays a plain number
    assert "%" not in text_format.result_table(pa.table({"gap_rate": [-0.2, 0.1]}))


def test_run_csv_of_a_bands_query_has_one_column_per_band(tmp_path):
    query = tmp_path / "bands.sql"
    query.write_text("SELECT owner_id, band_odds(amount, win_prob, [1e5, 2e5]) AS bands "
                     "FROM pipeline GROUP BY owner_id ORDER BY owner_id\n")
    out = invoke("run", str(query), "--source", f"pipeline={ROOT / 'seeds' / 'pipeline.csv'}",
                 "--format", "csv")
    assert out.exit_code == 0, out.output
    header, rows = parse(out.stdout)
    assert header == ["owner_id", "bands_1", "bands_2", "bands_3"] and len(rows) == 54
    assert all(abs(sum(float(x) for x in r[1:]) - 1.0) < 1e-12 for r in rows)


def test_accuracy_columns_show_as_exact_or_percentage_points_and_csv_keeps_the_number():
    table = pa.table({"owner_id": ["a", "b", "c"], "odds_error": [0.0, 0.0007, 0.001234],
                      "bands": [[0.25, 0.75]] * 3})
    shown = text_format.result_table(table).splitlines()
    # rule (issue 14): accuracy in probability, "exact" or within +/- percentage points
    assert shown[2].split()[1] == "exact"
    assert "+/-0.07 pts" in shown[3] and "+/-0.12 pts" in shown[4]
    assert "[25.0%, 75.0%]" in shown[2]
    header, rows = parse(result_writer.to_csv(table))
    assert [r[header.index("odds_error")] for r in rows] == ["0.0", "0.0007", "0.001234"]
    assert json.loads(result_writer.to_text(table, "json").splitlines()[2])["odds_error"] == 0.001234


def test_run_shows_odds_error_as_the_demo_does():
    result = invoke("run", "owner_band_odds", "--source",
                    f"pipeline={ROOT / 'seeds' / 'pipeline.csv'}", "--source",
                    f"quota_bands={ROOT / 'seeds' / 'quota_bands.csv'}", "--source",
                    f"owners={ROOT / 'seeds' / 'owners.csv'}")
    assert result.exit_code == 0, result.output
    header = result.output.splitlines()[0].split()
    assert header[-1] == "odds_error" and "rounding" not in header
    lines = [line for line in result.output.splitlines()[2:] if line.strip()]
    assert lines and all(line.endswith(("exact", " pts")) for line in lines)
