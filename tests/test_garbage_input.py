"""Random garbage into every public SQL function (hypothesis).

NaN, infinities, huge and subnormal numbers, negatives, zeros and NULLs, mixed.
Whatever comes in, a call either returns a valid answer (odds finite, in [0, 1]
and summing to 1; quantiles and moments finite; outcomes with non-negative mass
summing to 1) or raises the documented one-line error, which names the function
(``InputDataError: fn: ...`` or ``ParameterError: fn: ...`` inside DuckDB's
message). Anything else (another exception, a NaN answer, a crash) fails.
The rule checked: README "Input policy" and CONVENTIONS.md "Errors".
"""

from __future__ import annotations

import math
import re

import duckdb
import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import sqlrisk

OUTCOME = sqlrisk.OUTCOME_SQL
DEALS = "(SELECT unnest(?::DOUBLE[]) AS amount, unnest(?::DOUBLE[]) AS prob)"
SETTINGS = settings(max_examples=60, deadline=None, derandomize=True,
                    suppress_health_check=[HealthCheck.function_scoped_fixture])

special = st.sampled_from([math.nan, math.inf, -math.inf, 0.0, -0.0, 1e300, -1e300, 1e308, 5e-324,
                           1e-12, 1.0, 0.5, 1 - 1e-12, 40.0, 1e15, -1e15])
number = st.one_of(special, st.floats(allow_nan=True, allow_infinity=True),
                   st.floats(-1e7, 1e7), st.integers(-10**6, 10**6).map(float))
maybe = st.one_of(st.none(), number)
probability = st.one_of(st.none(), special, st.floats(0.0, 1.0), st.floats(-2.0, 120.0))
deal_rows = st.lists(st.tuples(maybe, probability), min_size=0, max_size=10)
value_list = st.one_of(st.none(), st.lists(maybe, max_size=6))


def valid_probabilities(values) -> bool:
    return all(v is not None and math.isfinite(v) and 0.0 <= v <= 1.0 for v in values)


def check_outcome(o) -> None:
    if o is None:
        return
    mass = np.array(o["mass"], dtype=float)
    assert np.isfinite([o["origin"], o["step"], o["rounding"]]).all()
    assert o["step"] >= 0 and o["rounding"] >= 0 and o["trials"] >= 0
    assert len(mass) and np.isfinite(mass).all() and (mass >= 0).all()
    assert abs(mass.sum() - 1.0) <= 1e-9


def call(con, fn: str, sql: str, params, check) -> None:
    """Run ``sql``: a valid result passes ``check``; an error must be the documented one."""
    try:
        rows = con.execute(sql, params).fetchall()
    except duckdb.Error as exc:
        text = str(exc)
        assert re.search(rf"(InputDataError|ParameterError): {fn}: [^\n]+$", text), text
        return
    for (value,) in rows:
        check(value)


def columns(rows):
    return [[a for a, _ in rows], [p for _, p in rows]]


def bands_ok(n_cuts):
    def check(bands):
        if bands is None:
            return
        assert len(bands) == n_cuts + 1 and valid_probabilities(bands)
        assert abs(sum(bands) - 1.0) <= 1e-9
    return check


def finite_list(values):
    assert values is None or all(v is not None and math.isfinite(v) for v in values)


def finite_or_null(value):
    assert value is None or math.isfinite(value)


def probability_or_null(value):
    assert value is None or valid_probabilities([value])


def histogram_ok(bars):
    if bars is None:
        return
    for bar in bars:
        finite_list([bar["lo"], bar["hi"]])
        assert bar["lo"] <= bar["hi"] and valid_probabilities([bar["prob"]])
    assert abs(sum(bar["prob"] for bar in bars) - 1.0) <= 1e-9


def intervals_ok(n_cuts):
    def check(intervals):
        if intervals is None:
            return
        assert len(intervals) == n_cuts + 1
        for band in intervals:
            assert valid_probabilities([band["lo"], band["hi"]]) and band["lo"] <= band["hi"]
    return check


@SETTINGS
@given(rows=deal_rows, cuts=value_list)
def test_band_odds(con, rows, cuts):
    n = len(cuts) if cuts is not None else 0
    call(con, "band_odds", f"SELECT band_odds(amount, prob, ?::DOUBLE[]) FROM {DEALS}",
         [cuts, *columns(rows)], bands_ok(n))


@SETTINGS
@given(rows=deal_rows, target=maybe)
def test_reach_odds(con, rows, target):
    call(con, "reach_odds", f"SELECT reach_odds(amount, prob, ?::DOUBLE) FROM {DEALS}",
         [target, *columns(rows)], probability_or_null)


@SETTINGS
@given(rows=deal_rows)
def test_odds_error(con, rows):
    call(con, "odds_error", f"SELECT odds_error(amount, prob) FROM {DEALS}", columns(rows),
         probability_or_null)


@SETTINGS
@given(rows=deal_rows, levels=value_list)
def test_total_quantiles(con, rows, levels):
    call(con, "total_quantiles", f"SELECT total_quantiles(amount, prob, ?::DOUBLE[]) FROM {DEALS}",
         [levels, *columns(rows)], finite_list)


@SETTINGS
@given(rows=deal_rows, step=maybe, rho=st.one_of(st.none(), special, st.floats(-0.5, 1.5)))
def test_outcome_dist(con, rows, step, rho):
    call(con, "outcome_dist",
         f"SELECT outcome_dist(amount, prob, step := ?::DOUBLE, correlation := ?::DOUBLE) "
         f"FROM {DEALS}", [step, rho, *columns(rows)], check_outcome)


@SETTINGS
@given(rows=deal_rows, trials=st.one_of(st.none(), st.integers(-5, 3000), st.sampled_from([0, 10**9])),
       seed=st.one_of(st.none(), st.integers(-2**63, 2**63 - 1)),
       rho=st.one_of(st.none(), special, st.floats(-0.5, 1.5)), low=maybe, high=maybe, step=maybe)
def test_outcome_sim(con, rows, trials, seed, rho, low, high, step):
    call(con, "outcome_sim",
         f"SELECT outcome_sim(amount, prob, trials := ?::BIGINT, seed := ?::BIGINT, "
         f"correlation := ?::DOUBLE, low := ?::DOUBLE, high := ?::DOUBLE, step := ?::DOUBLE) "
         f"FROM {DEALS}", [trials, seed, rho, low, high, step, *columns(rows)], check_outcome)


# -- outcome structs -------------------------------------------------------------

normalised = (st.lists(st.floats(0.0, 1.0), min_size=1, max_size=6)
              .map(lambda m: [x / sum(m) for x in m] if sum(m) > 0 else [1.0]))
outcomes = st.one_of(
    st.none(),
    # anything in any field
    st.fixed_dictionaries({
        "origin": maybe, "step": maybe,
        "mass": st.one_of(st.none(), st.lists(maybe, max_size=6), normalised),
        "trials": st.one_of(st.none(), st.integers(-3, 10**6)),
        "rounding": maybe}),
    # well-formed mass, extreme origin and step
    st.fixed_dictionaries({
        "origin": number, "step": st.one_of(special, st.floats(0.0, 1e308)), "mass": normalised,
        "trials": st.integers(0, 10**6), "rounding": st.one_of(special, st.floats(0.0, 1e6))}))


@settings(SETTINGS, max_examples=150)
@given(o=outcomes, cuts=value_list, target=maybe, levels=value_list, shift=maybe,
       bins=st.one_of(st.none(), st.integers(-3, 20_000)), level=maybe)
def test_scalars_on_garbage_outcomes(con, o, cuts, target, levels, shift, bins, level):
    n = len(cuts) if cuts is not None else 0
    for fn, sql, params, check in [
        ("outcome_bands", f"SELECT outcome_bands(?::{OUTCOME}, ?::DOUBLE[])", [o, cuts], bands_ok(n)),
        ("outcome_reach", f"SELECT outcome_reach(?::{OUTCOME}, ?::DOUBLE)", [o, target],
         probability_or_null),
        ("outcome_quantiles", f"SELECT outcome_quantiles(?::{OUTCOME}, ?::DOUBLE[])", [o, levels],
         finite_list),
        ("outcome_mean", f"SELECT outcome_mean(?::{OUTCOME})", [o], finite_or_null),
        ("outcome_sd", f"SELECT outcome_sd(?::{OUTCOME})", [o], finite_or_null),
        ("outcome_error", f"SELECT outcome_error(?::{OUTCOME})", [o], probability_or_null),
        ("outcome_shift", f"SELECT outcome_shift(?::{OUTCOME}, ?::DOUBLE)", [o, shift], check_outcome),
        ("outcome_add", f"SELECT outcome_add(?::{OUTCOME}, ?::{OUTCOME})", [o, o], check_outcome),
        ("outcome_histogram", f"SELECT outcome_histogram(?::{OUTCOME}, ?::BIGINT)", [o, bins],
         histogram_ok),
        ("outcome_bands_ci", f"SELECT outcome_bands_ci(?::{OUTCOME}, ?::DOUBLE[], ?::DOUBLE)",
         [o, cuts, level], intervals_ok(n)),
    ]:
        call(con, fn, sql, params, check)


@SETTINGS
@given(parts=st.lists(outcomes, max_size=5))
def test_outcome_merge(con, parts):
    call(con, "outcome_merge",
         f"SELECT outcome_merge(o) FROM (SELECT unnest(?::{OUTCOME}[]) AS o)", [parts],
         check_outcome)


def test_adding_outcomes_finer_than_their_totals(con):
    """Found by hypothesis: a step of 3e-131 at origin 3 leaves every total of the sum the same
    double; the sum was all cut away by its windows and came back as mass [nan]."""
    o = {"origin": 3.0, "step": 2.927549601861179e-131, "mass": [0.1, 0.2, 0.3, 0.4],
         "trials": 0, "rounding": 0.0}
    for sql, params in [(f"SELECT outcome_add(?::{OUTCOME}, ?::{OUTCOME})", [o, o]),
                        (f"SELECT outcome_merge(o) FROM (SELECT unnest(?::{OUTCOME}[]) AS o)",
                         [[o, o]])]:
        (value,), = con.execute(sql, params).fetchall()
        check_outcome(value)
        assert value["origin"] == 6.0 and value["mass"] == [1.0]
        assert value["rounding"] >= 6 * o["step"]  # the points it merged lie within rounding


def test_the_checks_themselves_can_fail(con):
    """A NaN answer or a foreign exception would be caught (guards against a vacuous test)."""
    with pytest.raises(AssertionError):
        bands_ok(1)([math.nan, 1.0])
    with pytest.raises(AssertionError):
        call(con, "band_odds", "SELECT error('ValueError: band_odds: not ours')", [], bands_ok(0))


# -- deal swings and calibration ---------------------------------------------------------

def swings_ok(value):
    if value is None:
        return
    for item in value:
        assert valid_probabilities([item["reach_if_won"], item["reach_if_lost"]])
        assert item["swing"] == item["reach_if_won"] - item["reach_if_lost"]


@SETTINGS
@given(rows=deal_rows, target=maybe)
def test_deal_swing(con, rows, target):
    ids = list(range(len(rows)))
    call(con, "deal_swing",
         "SELECT deal_swing(i, amount, prob, ?::DOUBLE) FROM (SELECT unnest(?::BIGINT[]) AS i, "
         "unnest(?::DOUBLE[]) AS amount, unnest(?::DOUBLE[]) AS prob)",
         [target, ids, *columns(rows)], swings_ok)


closed_rows = st.lists(st.tuples(probability, st.one_of(st.none(), st.sampled_from(
    [0.0, 1.0, 0.5, 2.0, -1.0, math.nan]))), max_size=12)
CLOSED = "(SELECT unnest(?::DOUBLE[]) AS prob, unnest(?::DOUBLE[]) AS won)"


@SETTINGS
@given(rows=closed_rows, bins=st.one_of(st.none(), st.integers(-2, 1200), special), x=probability)
def test_calibration_functions(con, rows, bins, x):
    params = [[p for p, _ in rows], [w for _, w in rows]]

    def map_ok(m):
        if m is None:
            return
        assert valid_probabilities(m["prob"]) and valid_probabilities(m["rate"])
        assert list(m["prob"]) == sorted(set(m["prob"])) and m["deals"] >= 1
        call(con, "apply_calibration", "SELECT apply_calibration(?::STRUCT(prob DOUBLE[], "
             "rate DOUBLE[], deals BIGINT), ?::DOUBLE)", [m, x], probability_or_null)

    def parts_ok(parts):
        if parts is None:
            return
        assert all(math.isfinite(parts[k]) and parts[k] >= 0
                   for k in ("reliability", "resolution", "uncertainty"))

    call(con, "calibration_map", f"SELECT calibration_map(prob, won) FROM {CLOSED}", params, map_ok)
    call(con, "brier_score", f"SELECT brier_score(prob, won) FROM {CLOSED}", params,
         probability_or_null)
    call(con, "brier_parts", f"SELECT brier_parts(prob, won, bins := ?::DOUBLE) FROM {CLOSED}",
         [bins, *params], parts_ok)


@SETTINGS
@given(successes=maybe, trials=maybe, level=st.one_of(st.none(), special, st.floats(-1.0, 2.0)))
def test_wilson_interval(con, successes, trials, level):
    def interval_ok(ci):
        if ci is None:
            return
        assert 0.0 <= ci["lo"] <= ci["hi"] <= 1.0
        assert ci["lo"] <= successes / trials <= ci["hi"]  # the share lies inside its interval

    call(con, "wilson_interval", "SELECT wilson_interval(?::DOUBLE, ?::DOUBLE, "
         "level := coalesce(?::DOUBLE, 0.95))", [successes, trials, level], interval_ok)
