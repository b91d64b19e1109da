"""The input policy (README "Input policy"): every case behaves as written, and the
README's table is generated from the same cases, so the two cannot drift.

The rule checked: bad input gives a valid result or a one-line error that names the
function, the offending value and the fix (CONVENTIONS.md "Errors").
"""

from __future__ import annotations

import re

import pytest

import sqlrisk
from tests import input_policy as policy


@pytest.fixture(scope="module")
def con():
    c = sqlrisk.connect()
    yield c
    c.close()


@pytest.mark.parametrize("case", policy.CASES, ids=[c.input for c in policy.CASES])
def test_case_behaves_as_the_table_says(con, case):
    got = policy.observe(con, case)
    assert got == case.expect
    if got.startswith("error: "):
        message = got.removeprefix("error: ")
        assert "\n" not in message
        called = re.findall(r"(\w+)\(", policy.sql_of(case))
        assert message.split(":")[0] in called  # names the function that was called


def test_readme_table_is_generated_from_the_cases():
    text = policy.README.read_text()
    assert policy.readme_block(text) == policy.table(), (
        "README's input-policy table is stale: run `python -m tests.input_policy`")


DEAL_VALUE_ERROR = re.compile(r"^error: \w+: (amount|probability) \S+ is ")


@pytest.mark.parametrize("case", [c for c in policy.CASES if DEAL_VALUE_ERROR.match(c.expect)],
                         ids=lambda c: c.input)
def test_a_bad_amount_or_probability_counts_the_rows_sharing_it(case):
    """The row checks' errors say how many of the call's rows share the problem."""
    counted = r" \(\d[\d,]* of \d[\d,]* rows?( in \d[\d,]* groups)?;| all \d[\d,]* probabilities"
    assert re.search(counted, case.expect), case.expect
