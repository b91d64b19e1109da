"""Every function in ``sqlrisk.adapters.catalog`` is registered, callable as described,
usable as a window function where it says so, and documented in the README's tables.

The calls use one sample value per argument name (``SAMPLES``): a function with an
argument no sample covers fails here, so a new function brings its sample along.
"""

from __future__ import annotations

import re

import pytest

from conftest import ROOT
from sqlrisk.adapters.catalog import FUNCTIONS

OUTCOME_LITERAL = ("{'origin': 0.0, 'step': 100.0, 'mass': [0.25, 0.5, 0.25], 'trials': 0, "
                   "'rounding': 0.0}")
#: A value for each argument name, as SQL; the per-row ones come from the table ``t``.
SAMPLES = {
    "amount": "t.amount", "prob": "t.prob", "won": "t.won", "deal_id": "t.deal_id",
    "cuts": "[50.0, 150.0]", "target": "150.0", "qs": "[0.1, 0.5, 0.9]",
    "step": "NULL", "correlation": "0.0", "trials": "500", "seed": "1",
    "low": "NULL", "high": "NULL", "bins": "5", "level": "0.9", "successes": "3",
    "o": f"({OUTCOME_LITERAL})", "o1": f"({OUTCOME_LITERAL})", "o2": f"({OUTCOME_LITERAL})",
    "map": "{'prob': [0.2, 0.8], 'rate': [0.1, 0.9]}",
    "actual": "120.0", "total": "120.0", "bands": "[0.25, 0.5, 0.25]", "landed": "2",
}
TABLE = ("(SELECT * FROM (VALUES ('d1', 100.0, 0.5, 1, 1), ('d2', 100.0, 0.5, 0, 2), "
         "('d3', 50.0, 0.25, 1, 3)) v(deal_id, amount, prob, won, k)) AS t")
IDS = [f.name for f in FUNCTIONS]


def call(f, named: bool = True) -> str:
    """``name(arg, ..., named := value)`` with the samples."""
    parts = [SAMPLES[a.name] if a.default is None else f"{a.name} := {SAMPLES[a.name]}"
             for a in f.args if a.default is None or named]
    return f"{f.name}({', '.join(parts)})"


def test_the_catalog_covers_every_public_name_once():
    assert len(IDS) == len(set(IDS))
    for f in FUNCTIONS:
        assert f.kind in ("aggregate", "scalar")
        assert all(a.name in SAMPLES for a in f.args), f.name
        assert f.summary


@pytest.mark.parametrize("f", FUNCTIONS, ids=IDS)
def test_registered_under_its_name(con, f):
    kinds = {r[0] for r in con.execute(
        "SELECT function_type FROM duckdb_functions() WHERE function_name = ?",
        [f.name]).fetchall()}
    assert kinds == ({"macro"} if f.needs_macro else {"scalar"})
    if f.needs_macro:
        udf = con.execute("SELECT count(*) FROM duckdb_functions() WHERE function_name = ? "
                          "AND function_type = 'scalar'", [f.udf_name]).fetchone()[0]
        assert udf == 1


@pytest.mark.parametrize("f", FUNCTIONS, ids=IDS)
def test_callable_as_described_and_returns_its_type(con, f):
    rows = con.execute(f"SELECT {call(f)} AS r, typeof({call(f)}) FROM {TABLE}"
                       + ("" if f.kind == "aggregate" else " LIMIT 1")).fetchall()
    value, kind = rows[0]
    assert value is not None
    expected = f.returns
    if not f.window and f.kind == "aggregate":  # the carried ids come back in place of i
        expected = expected.replace("i BIGINT", "deal_id VARCHAR")
    assert kind == con.execute(f"SELECT typeof(NULL::{expected})").fetchone()[0]


@pytest.mark.parametrize("f", [f for f in FUNCTIONS if any(a.default for a in f.args)],
                         ids=lambda f: f.name)
def test_named_parameters_have_their_defaults(con, f):
    with_defaults = con.execute(f"SELECT {call(f, named=False)} FROM {TABLE}"
                                + ("" if f.kind == "aggregate" else " LIMIT 1")).fetchone()[0]
    assert with_defaults is not None


@pytest.mark.parametrize("f", [f for f in FUNCTIONS if f.kind == "aggregate"],
                         ids=lambda f: f.name)
def test_aggregates_work_as_window_functions_where_described(con, f):
    sql = f"SELECT {call(f)} OVER (ORDER BY t.k) FROM {TABLE}"
    if f.window:
        assert len(con.execute(sql).fetchall()) == 3
    else:
        with pytest.raises(Exception):
            con.execute(sql).fetchall()


def test_every_function_is_in_the_readme_tables():
    readme = (ROOT / "README.md").read_text()
    in_tables = {name for line in readme.splitlines() if line.startswith("|")
                 for name in re.findall(r"`([a-z_]+)\(", line)}
    missing = [f.name for f in FUNCTIONS if f.name not in in_tables]
    assert not missing, f"README function tables lack {missing}"
