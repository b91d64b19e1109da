"""Errors that point at the row: a bad amount or probability is named with the row's other
fields (amount, probability, deal_id), the rows sharing the problem are counted, and the
percentage hint is given only when the whole column looks like percentages.

The rule checked: CONVENTIONS.md "Errors" (quote the value, say where it is, suggest the fix)
and the README's input policy. The count is over the rows of the UDF call that failed, after
the NULL rule: a query without GROUP BY is one call over every row; with GROUP BY, DuckDB may
hand the groups to several calls (one per partition and thread), and the message then says
how many groups its rows come from.
"""

from __future__ import annotations

import re

import duckdb
import numpy as np
import pyarrow as pa
import pytest

from sqlrisk.adapters import deal_udfs
from sqlrisk.errors import InputDataError
from tests.conftest import udf_message

N = 290
DEALS = ("(SELECT unnest(?::VARCHAR[]) AS deal_id, unnest(?::DOUBLE[]) AS amount, "
         "unnest(?::DOUBLE[]) AS prob, unnest(?::BIGINT[]) AS g)")
#: every aggregate over deals, called on DEALS without GROUP BY
CALLS = {
    "band_odds": "band_odds(amount, prob, [500.0])",
    "reach_odds": "reach_odds(amount, prob, 500.0)",
    "total_quantiles": "total_quantiles(amount, prob, [0.5])",
    "outcome_dist": "outcome_dist(amount, prob)",
    "deal_swing": "deal_swing(deal_id, amount, prob, 500.0)",
    "outcome_sim": "outcome_sim(amount, prob, trials := 1000)",
}
#: the functions whose adapter hands the checks the rows' other fields (outcome_sim's
#: checks get the amounts and probabilities apart, so its errors count but do not locate)
LOCATED = [fn for fn in CALLS if fn != "outcome_sim"]


def pipeline(rng_seed=7):
    """N deals: distinct amounts 1000, 1001, ... (so a message's amount names one row),
    probabilities in [0, 1] with no two alike, five groups g = 0..4."""
    rng = np.random.default_rng(rng_seed)
    ids = [f"D-{i}" for i in range(N)]
    amount = 1000.0 + np.arange(N)
    prob = rng.permutation(np.linspace(0.01, 0.99, N))
    groups = np.arange(N) % 5
    return ids, amount, prob, groups


def message(con, sql, params) -> str:
    """The one-line message ``sql`` fails with."""
    with pytest.raises(duckdb.Error) as info:
        con.execute(sql, params).fetchall()
    assert "InputDataError: " in str(info.value), info.value
    text = udf_message(info.value)
    assert "\n" not in text
    return text


def column(values) -> list:
    return values.tolist() if isinstance(values, np.ndarray) else list(values)


def error_of(con, call, ids, amount, prob, groups, group_by=False) -> str:
    sql = (f"SELECT g, {call} FROM {DEALS} GROUP BY g" if group_by
           else f"SELECT {call} FROM {DEALS}")
    return message(con, sql, [column(v) for v in (ids, amount, prob, groups)])


# -- a lone typo among good probabilities -------------------------------------------------

@pytest.mark.parametrize("fn", list(CALLS))
def test_a_lone_150_is_a_typo_not_percentages(con, fn):
    ids, amount, prob, groups = pipeline()
    prob[137] = 150.0
    text = error_of(con, CALLS[fn], ids, amount, prob, groups)
    assert text.startswith(f"{fn}: probability 150.0 is outside [0, 1] (1 of 290 rows; a typo?)")
    assert "percentages" not in text and "divide by 100" not in text


@pytest.mark.parametrize("fn", LOCATED)
def test_the_row_is_named_by_its_amount(con, fn):
    ids, amount, prob, groups = pipeline()
    prob[137] = 150.0
    text = error_of(con, CALLS[fn], ids, amount, prob, groups)
    assert re.search(r"\) at the row with (deal_id '[^']*', )?amount 1137\.0$", text), text


def test_a_lone_typo_message_in_full(con):
    ids, amount, prob, groups = pipeline()
    prob[137] = 150.0
    assert error_of(con, CALLS["band_odds"], ids, amount, prob, groups) == (
        "band_odds: probability 150.0 is outside [0, 1] (1 of 290 rows; a typo?) at the row "
        "with amount 1137.0")


# -- a whole column of percentages --------------------------------------------------------

def test_a_percent_column_gets_the_percentage_hint(con):
    ids, amount, _, groups = pipeline()
    prob = np.round(np.linspace(0, 100, N))  # 0, 0, 1, 1, 1, 2, ...: none between 0 and 1
    text = error_of(con, CALLS["band_odds"], ids, amount, prob, groups)
    first = int(np.flatnonzero(prob > 1)[0])
    assert text == (f"band_odds: probability {prob[first]} is outside [0, 1] (were percentages "
                    "given? divide by 100): all 290 probabilities look like percentages (0-100), "
                    f"the first at the row with amount {amount[first]}")


def test_percentages_with_one_fraction_among_them_are_not_called_percentages(con):
    ids, amount, _, groups = pipeline()
    prob = np.round(np.linspace(0, 100, N))
    prob[200] = 0.5
    text = error_of(con, CALLS["band_odds"], ids, amount, prob, groups)
    assert "percentages" not in text
    share = int(np.count_nonzero(prob > 1))
    assert f"({share} of 290 rows; use values in [0, 1])" in text


# -- NaN probabilities, bad amounts --------------------------------------------------------

def test_a_nan_probability_is_counted_without_the_null_rows(con):
    ids, amount, prob, groups = pipeline()
    prob = prob.tolist()
    prob[42] = float("nan")
    prob[200] = 1.5  # outside [0, 1] too, but not NaN: not counted with the NaN rows
    for i in range(250, 260):  # NULL probabilities: skipped, neither offending nor counted
        prob[i] = None
    text = message(con, f"SELECT band_odds(amount, prob, [500.0]) FROM {DEALS}",
                   [column(v) for v in (ids, amount, prob, groups)])
    assert text == ("band_odds: probability nan is not a number (1 of 280 rows; from a failed "
                    "join or a division by zero? filter the row out or COALESCE it) at the row "
                    "with amount 1042.0")


@pytest.mark.parametrize("bad, problem, fix", [
    (float("inf"), "is not a finite number", "filter it out or COALESCE it to a real amount"),
    (1e300, "is beyond +/-1e+15", "a unit mix-up? give amounts in a larger unit, such as "
                                  "thousands"),
])
def test_a_bad_amount_names_the_rows_probability(con, bad, problem, fix):
    ids, amount, prob, groups = pipeline()
    amount[99] = bad
    text = error_of(con, CALLS["reach_odds"], ids, amount, prob, groups)
    assert text == (f"reach_odds: amount {bad!r} {problem} (1 of 290 rows; {fix}) at the row "
                    f"with probability {float(prob[99])!r}")


def test_outcome_sim_counts_bad_amounts(con):
    ids, amount, prob, groups = pipeline()
    amount[[3, 30, 300 % N]] = -float("inf")
    text = error_of(con, CALLS["outcome_sim"], ids, amount, prob, groups)
    assert text.startswith("outcome_sim: amount -inf is not a finite number (3 of 290 rows; "
                           "filter them out or COALESCE them to real amounts)")


# -- deal_swing names the deal ------------------------------------------------------------

def test_deal_swing_adapter_names_the_deal_id_when_the_rows_carry_it():
    """The adapter part: given rows with a deal_id field (NULL rows skipped before it
    counts), the message names the offending row's deal_id and amount."""
    rows = [{"deal_id": f"D-{i}", "amount": 100.0 + i, "prob": 0.5, "target": 150.0}
            for i in range(6)]
    rows[2]["prob"] = None
    rows[4]["prob"] = 40.0
    arr = pa.array([rows], type=pa.list_(pa.struct([
        ("amount", pa.float64()), ("prob", pa.float64()), ("target", pa.float64()),
        ("deal_id", pa.string())])))
    with pytest.raises(InputDataError) as info:
        deal_udfs.deal_swing(arr)
    assert str(info.value) == ("deal_swing: probability 40.0 is outside [0, 1] (1 of 5 rows; "
                               "a typo?) at the row with deal_id 'D-4', amount 104.0")


def test_deal_swing_names_the_deal_id(con):
    ids, amount, prob, groups = pipeline()
    prob[137] = 150.0
    text = error_of(con, CALLS["deal_swing"], ids, amount, prob, groups)
    assert text.endswith("(1 of 290 rows; a typo?) at the row with deal_id 'D-137', "
                         "amount 1137.0")


def test_outcome_sim_names_the_row(con):
    ids, amount, prob, groups = pipeline()
    prob[137] = 150.0
    text = error_of(con, CALLS["outcome_sim"], ids, amount, prob, groups)
    assert text.endswith("at the row with amount 1137.0")


# -- several rows with one problem, with GROUP BY and without -------------------------------

THREE = [10, 111, 212]  # in groups 0, 1 and 2


def three_bad(pipeline_rows):
    ids, amount, prob, groups = pipeline_rows
    prob[THREE] = -0.25
    return ids, amount, prob, groups


def test_three_bad_rows_are_counted(con):
    text = error_of(con, CALLS["band_odds"], *three_bad(pipeline()))
    assert text == ("band_odds: probability -0.25 is outside [0, 1] (3 of 290 rows; use values "
                    "in [0, 1]), the first at the row with amount 1010.0")


def test_three_bad_rows_are_counted_in_one_call_of_a_group_by(con):
    con.execute("SET threads = 1")  # one thread: DuckDB hands the 5 groups to one call
    text = error_of(con, CALLS["band_odds"], *three_bad(pipeline()), group_by=True)
    assert text.startswith("band_odds: probability -0.25 is outside [0, 1] (3 of 290 rows in "
                           "5 groups; use values in [0, 1]), the first at the row with amount ")
    assert int(text.rsplit(" ", 1)[1].split(".")[0]) - 1000 in THREE


@pytest.mark.parametrize("threads", [2, 4, 8])
def test_a_group_by_count_covers_only_the_groups_the_call_saw(con, threads):
    """With several threads a call may hold only some groups: its count and row total are
    then those of its groups, and it says how many."""
    con.execute(f"SET threads = {threads}")
    ids, amount, prob, groups = three_bad(pipeline())
    strings = [f"owner {g}" for g in groups]  # text keys: partitioned by hash
    sql = (f"SELECT g, band_odds(amount, prob, [500.0]) FROM (SELECT unnest(?::DOUBLE[]) AS "
           "amount, unnest(?::DOUBLE[]) AS prob, unnest(?::VARCHAR[]) AS g) GROUP BY g")
    text = message(con, sql, [column(amount), column(prob), strings])
    found = re.search(r"is outside \[0, 1\] \((\d+) of (\d+) rows?(?: in (\d+) groups)?; ", text)
    assert found, text
    bad, total, seen = int(found[1]), int(found[2]), int(found[3] or 1)
    assert total == 58 * seen and 1 <= bad <= min(3, seen)  # 290 rows in 5 groups of 58
