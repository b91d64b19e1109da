"""Calibration of single deals: calibration_map, apply_calibration, brier_score and
brier_parts. The saved queries built on them are in test_calibration_queries.py, the
reliability diagram in test_reliability_chart.py.

Outside references are named beside each check: SciPy's isotonic regression,
the min-max formula of isotonic regression, numpy.interp, direct numpy sums,
Murphy's (1973) partition of the Brier score and the two extra within-bin terms
of Stephenson, Coelho & Jolliffe (2008), and SciPy's Wilson interval. Every
random input comes from a seeded ``numpy.random.Generator``.
"""

from __future__ import annotations

import duckdb
import numpy as np
import pytest
from scipy.optimize import isotonic_regression

from hypothesis import given, settings
from hypothesis import strategies as st

from conftest import one, udf_message
from sqlrisk.kernels import calibration as kernel
from sqlrisk.adapters.sql_types import MAP_SQL, PARTS_SQL

TOL = 1e-12
CLOSED = "(SELECT unnest(?::DOUBLE[]) AS prob, unnest(?::DOUBLE[]) AS won)"
GROUPED = ("(SELECT unnest(?::BIGINT[]) AS g, unnest(?::DOUBLE[]) AS prob, "
           "unnest(?::DOUBLE[]) AS won)")


# -- helpers ------------------------------------------------------------------

def fit(con, prob, won):
    return one(con, f"SELECT calibration_map(prob, won) FROM {CLOSED}",
               [[float(p) for p in prob], [float(w) for w in won]])


def read_map(con, m, probs):
    """apply_calibration(m, p) for every p, in one query."""
    rows = con.execute(f"SELECT apply_calibration(?::{MAP_SQL}, p) FROM unnest(?::DOUBLE[]) "
                       "WITH ORDINALITY AS t(p, i) ORDER BY i", [m, [float(p) for p in probs]])
    return np.array([r[0] for r in rows.fetchall()])


def pooled_isotonic(prob, won):
    """Reference: deals pooled by stated probability, then scipy's weighted isotonic fit."""
    distinct, where = np.unique(prob, return_inverse=True)
    deals = np.bincount(where).astype(float)
    wins = np.bincount(where, weights=won)
    return distinct, isotonic_regression(wins / deals, weights=deals).x, deals


def closed_deals(rng, n, decimals=2):
    """Stated probabilities (rounded, so that many tie) and outcomes won at a bent rate."""
    prob = rng.uniform(0.0, 1.0, n).round(decimals)
    won = (rng.uniform(size=n) < 0.1 + 0.7 * prob ** 1.5).astype(float)
    return prob, won


@pytest.fixture
def demo(demo_con):
    return demo_con


# -- calibration_map --------------------------------------------------------------

@pytest.mark.parametrize("seed, n, decimals", [(1, 40, 1), (2, 500, 2), (3, 3000, 2), (4, 800, 6)])
def test_map_matches_scipy_isotonic_regression_on_random_data(con, seed, n, decimals):
    prob, won = closed_deals(np.random.default_rng(seed), n, decimals)
    m = fit(con, prob, won)
    distinct, fitted, _ = pooled_isotonic(prob, won)
    # source: scipy.optimize.isotonic_regression on the pooled, count-weighted win rates
    np.testing.assert_allclose(read_map(con, m, distinct), fitted, rtol=0, atol=TOL)
    assert m["deals"] == n
    assert set(m["prob"]) <= set(distinct.tolist())  # breakpoints are stated probabilities
    assert np.all(np.diff(m["prob"]) > 0) and np.all(np.diff(m["rate"]) >= 0)
    assert len(m["prob"]) < len(distinct) or len(distinct) < 5  # flat runs are kept as two points


def test_map_matches_scipy_on_the_demo_closed_deals_per_stage_and_overall(demo):
    rows = demo.execute("""
        SELECT stage_at_snapshot, calibration_map(stated_prob, won), list(stated_prob),
               list(won::DOUBLE)
        FROM closed_deals GROUP BY ALL
        UNION ALL
        SELECT 'all', calibration_map(stated_prob, won), list(stated_prob), list(won::DOUBLE)
        FROM closed_deals""").fetchall()
    assert len(rows) == 6
    for _, m, prob, won in rows:
        distinct, fitted, deals = pooled_isotonic(np.array(prob), np.array(won))
        # source: scipy.optimize.isotonic_regression on the same pooled data
        np.testing.assert_allclose(read_map(demo, m, distinct), fitted, rtol=0, atol=TOL)
        assert m["deals"] == len(prob) == deals.sum()


def test_pool_adjacent_violators_by_hand(con):
    # Stated probability: deals (won)      pooled rate (weight)
    #   0.1: 1 (0 won)                     0    (1)
    #   0.3: 2 (2 won)                     1    (2)
    #   0.5: 2 (1 won)                     0.5  (2)
    #   0.7: 2 (0 won)                     0    (2)
    #   0.9: 1 (1 won)                     1    (1)
    # Pool adjacent violators, left to right:
    #   [0] [1]                       in order
    #   [0] [1] [0.5]                 1 > 0.5: pool to (2*1 + 2*0.5)/4 = 0.75 (weight 4)
    #   [0] [0.75] [0]                0.75 > 0: pool to (4*0.75 + 2*0)/6 = 0.5 (weight 6)
    #   [0] [0.5] [1]                 in order: done.
    # Fit: 0.1 -> 0, 0.3/0.5/0.7 -> 0.5, 0.9 -> 1. Inside the flat run only its ends are kept.
    prob = [0.1, 0.3, 0.3, 0.5, 0.5, 0.7, 0.7, 0.9]
    won = [0, 1, 1, 1, 0, 0, 0, 1]
    m = fit(con, prob, won)
    assert m == {"prob": [0.1, 0.3, 0.7, 0.9], "rate": [0.0, 0.5, 0.5, 1.0], "deals": 8}
    got = read_map(con, m, [0.0, 0.1, 0.2, 0.5, 0.8, 0.9, 1.0])
    # by hand: constant below 0.1 and above 0.9; halfway between breakpoints -> halfway rates
    np.testing.assert_allclose(got, [0.0, 0.0, 0.25, 0.5, 0.75, 1.0, 1.0], rtol=0, atol=TOL)
    # by hand: the squared error of the fit, 0 + 2*... = sum over deals of (won - fit)^2
    sse = sum((w - f) ** 2 for w, f in zip(won, [0, .5, .5, .5, .5, .5, .5, 1]))
    assert sse == pytest.approx(1.5)


@pytest.mark.parametrize("seed", [5, 6, 7])
def test_map_agrees_with_the_min_max_formula(con, seed):
    # source: Barlow, Bartholomew, Bremner & Brunk (1972), Statistical Inference under Order
    # Restrictions, Thm 1.4: fit_i = max over s <= i of min over t >= i of the weighted mean of
    # the pooled rates s..t. Independent of any PAVA code.
    rng = np.random.default_rng(seed)
    prob, won = closed_deals(rng, 60, decimals=1)
    distinct, where = np.unique(prob, return_inverse=True)
    deals = np.bincount(where).astype(float)
    wins = np.bincount(where, weights=won)
    k = len(distinct)
    expected = [max(min(wins[s:t + 1].sum() / deals[s:t + 1].sum() for t in range(i, k))
                    for s in range(i + 1)) for i in range(k)]
    np.testing.assert_allclose(read_map(con, fit(con, prob, won), distinct), expected,
                               rtol=0, atol=TOL)


def test_results_do_not_depend_on_row_order(con):
    # DuckDB's list() order varies between runs under threads; the kernels sort first.
    rng = np.random.default_rng(8)
    prob, won = closed_deals(rng, 2000, decimals=5)
    sql = (f"SELECT calibration_map(prob, won), brier_score(prob, won), "
           f"brier_parts(prob, won, bins := 7) FROM {CLOSED}")
    first = con.execute(sql, [prob.tolist(), won.tolist()]).fetchall()
    for _ in range(3):
        order = rng.permutation(len(prob))
        again = con.execute(sql, [prob[order].tolist(), won[order].tolist()]).fetchall()
        assert again == first  # bit for bit


@settings(max_examples=200, deadline=None)
@given(st.lists(st.tuples(st.sampled_from([0.0, 0.25, 0.5, 0.75, 1.0]), st.booleans()),
                min_size=1, max_size=30))
def test_kernel_map_on_edge_data(deals):
    prob = np.array([p for p, _ in deals])
    won = np.array([float(w) for _, w in deals])
    breaks, rates, offsets, n = kernel.fit_maps(prob, won, np.array([0, len(deals)]))
    distinct, fitted, _ = pooled_isotonic(prob, won)
    assert offsets.tolist() == [0, len(breaks)] and n.tolist() == [len(deals)]
    assert np.all(np.diff(breaks) > 0) and np.all(np.diff(rates) >= 0)
    assert np.all((rates >= 0) & (rates <= 1))
    # source: scipy.optimize.isotonic_regression, read back with numpy.interp
    np.testing.assert_allclose(np.interp(distinct, breaks, rates), fitted, rtol=0, atol=TOL)


def test_bin_edges_are_the_doubles_k_over_bins():
    # source: numpy.searchsorted on the edges k/bins (k = 1..bins-1), at and beside every edge
    rng = np.random.default_rng(16)
    for bins in [1, 2, 3, 7, 10, 37, 100, 999, 1000]:
        edges = np.arange(1, bins) / bins
        prob = np.concatenate([edges, np.nextafter(edges, 0), np.nextafter(edges, 1),
                               [0.0, 1.0], rng.uniform(size=200)])
        expected = np.searchsorted(edges, prob, side="right")
        assert kernel.bin_index(prob, np.full(len(prob), bins)).tolist() == expected.tolist()


def test_map_struct_layout(demo):
    kind = demo.execute("SELECT typeof(calibration_map(stated_prob, won)), "
                        "typeof(brier_parts(stated_prob, won)) FROM closed_deals").fetchall()[0]
    assert kind == (MAP_SQL, PARTS_SQL)  # the layouts README "Calibration maps" documents


# -- apply_calibration ---------------------------------------------------------------

def test_apply_calibration_matches_numpy_interp_on_many_maps(con):
    rng = np.random.default_rng(9)
    maps, probs = [], []
    for _ in range(300):
        size = int(rng.integers(1, 12))
        breaks = np.unique(rng.uniform(0.05, 0.95, size).round(3))
        maps.append({"prob": breaks.tolist(), "rate": rng.uniform(0, 1, len(breaks)).tolist(),
                     "deals": None})
        probs.append(float(rng.choice([rng.uniform(), 0.0, 1.0, breaks[0], breaks[-1]])))
    got = [r[0] for r in con.execute(
        f"SELECT apply_calibration(m, p) FROM (SELECT unnest(?::{MAP_SQL}[]) AS m, "
        "unnest(?::DOUBLE[]) AS p, generate_subscripts(?::DOUBLE[], 1) AS i) ORDER BY i",
        [maps, probs, probs]).fetchall()]
    for m, p, value in zip(maps, probs, got):
        # source: numpy.interp (linear inside, end values held beyond the ends)
        assert value == pytest.approx(np.interp(p, m["prob"], m["rate"]), abs=1e-15)


def test_apply_calibration_is_constant_beyond_the_ends_and_within_0_1(con):
    m = {"prob": [0.2, 0.6], "rate": [0.1, 0.9]}
    got = read_map(con, m, [0.0, 0.1, 0.2, 0.4, 0.6, 0.8, 1.0])
    np.testing.assert_allclose(got, np.interp([0, .1, .2, .4, .6, .8, 1], [.2, .6], [.1, .9]),
                               rtol=0, atol=TOL)  # source: numpy.interp
    assert got[0] == got[1] == 0.1 and got[-1] == got[-2] == 0.9


def test_hand_written_map_without_deals_is_accepted(con):
    assert one(con, "SELECT apply_calibration({'prob': [0.2, 0.6], 'rate': [0.1, 0.5]}, 0.4)") \
        == pytest.approx(0.3)  # by hand: halfway between (0.2, 0.1) and (0.6, 0.5)


# -- Brier score and its partition ---------------------------------------------------

def brier_reference(prob, won, bins):
    """Murphy (1973) terms and the Stephenson et al. (2008) within-bin terms, with loops."""
    n = len(prob)
    base = sum(won) / n
    edges = [k / bins for k in range(bins)]
    groups: dict[int, list[int]] = {}
    for i, p in enumerate(prob):
        k = max(j for j, e in enumerate(edges) if e <= p)
        groups.setdefault(k, []).append(i)
    rel = res = wbv = wbc = 0.0
    for members in groups.values():
        f = sum(prob[i] for i in members) / len(members)
        o = sum(won[i] for i in members) / len(members)
        rel += len(members) * (f - o) ** 2 / n
        res += len(members) * (o - base) ** 2 / n
        wbv += sum((prob[i] - f) ** 2 for i in members) / n
        wbc += sum((prob[i] - f) * (won[i] - o) for i in members) / n
    return rel, res, base * (1 - base), wbv - 2 * wbc


def parts(con, prob, won, bins):
    got = con.execute(f"SELECT brier_parts(prob, won, bins := ?), brier_score(prob, won) "
                      f"FROM {CLOSED}", [bins, list(map(float, prob)), list(map(float, won))])
    p, score = got.fetchall()[0]
    return p["reliability"], p["resolution"], p["uncertainty"], score


@pytest.mark.parametrize("seed, n", [(10, 200), (11, 5000)])
def test_brier_score_matches_numpy(con, seed, n):
    prob, won = closed_deals(np.random.default_rng(seed), n, decimals=4)
    *_, score = parts(con, prob, won, 10)
    assert score == pytest.approx(np.mean((prob - won) ** 2), abs=TOL)  # source: Brier (1950)


@pytest.mark.parametrize("bins", [10, 100])
def test_brier_partition_is_exact_when_each_bin_holds_one_stated_probability(con, bins):
    # Bin k of `bins` holds exactly the probability k/bins (2 decimals suffice for 100 bins; 0.29
    # must land in bin 29, not 28 as floor(0.29 * 100) would put it).
    rng = np.random.default_rng(12)
    prob = rng.integers(0, bins, 4000) / bins
    won = (rng.uniform(size=4000) < 0.2 + 0.5 * prob).astype(float)
    rel, res, unc, score = parts(con, prob, won, bins)
    # source: Murphy, "A new vector partition of the probability score", J. Appl. Meteor. 1973
    assert score == pytest.approx(rel - res + unc, abs=TOL)
    base = won.mean()
    assert unc == pytest.approx(base * (1 - base), abs=TOL)  # uncertainty = w(1 - w)
    ref = brier_reference(prob.tolist(), won.tolist(), bins)
    assert (rel, res) == pytest.approx(ref[:2], abs=TOL)


def test_brier_partition_is_exact_on_the_demo_data_with_100_bins(demo):
    # every stated probability in closed_deals has 2 decimals: one per bin of width 0.01
    row = demo.execute("SELECT brier_parts(stated_prob, won, bins := 100), "
                       "brier_score(stated_prob, won), avg(won) FROM closed_deals").fetchall()[0]
    p, score, base = row
    # source: Murphy (1973), and uncertainty = w(1 - w) for the base rate w
    assert score == pytest.approx(p["reliability"] - p["resolution"] + p["uncertainty"], abs=TOL)
    assert p["uncertainty"] == pytest.approx(base * (1 - base), abs=TOL)


@pytest.mark.parametrize("bins", [1, 5, 10])
def test_brier_partition_gap_is_the_within_bin_terms(con, bins):
    prob, won = closed_deals(np.random.default_rng(13), 3000, decimals=6)
    rel, res, unc, score = parts(con, prob, won, bins)
    ref_rel, ref_res, ref_unc, gap = brier_reference(prob.tolist(), won.tolist(), bins)
    assert (rel, res, unc) == pytest.approx((ref_rel, ref_res, ref_unc), abs=TOL)
    # source: Stephenson, Coelho & Jolliffe, "Two extra components in the Brier score
    # decomposition", Wea. Forecasting 2008: BS = REL - RES + UNC + WBV - 2 WBC
    assert score - (rel - res + unc) == pytest.approx(gap, abs=TOL)
    assert abs(gap) > 1e-5  # far beyond rounding: the identity alone is only approximate


def test_brier_parts_bins_is_the_number_of_equal_width_bins(con):
    # by hand: bins := 2 puts 0.2 and 0.4 together (rate 1/2, mean 0.3) and 0.6, 1.0 together
    rel, res, unc, _ = parts(con, [0.2, 0.4, 0.6, 1.0], [0, 1, 1, 1], 2)
    assert rel == pytest.approx((2 * (0.3 - 0.5) ** 2 + 2 * (0.8 - 1.0) ** 2) / 4)
    assert res == pytest.approx((2 * (0.5 - 0.75) ** 2 + 2 * (1.0 - 0.75) ** 2) / 4)
    assert unc == pytest.approx(0.75 * 0.25)


# -- SQL surface: GROUP BY, windows, NULLs, booleans, errors ----------------------

CALLS = "calibration_map(prob, won), brier_score(prob, won), brier_parts(prob, won, bins := 5)"


def test_group_by_and_no_group_by_agree(con):
    rng = np.random.default_rng(14)
    g = rng.integers(0, 4, 3000)
    prob, won = closed_deals(rng, 3000)
    params = [g.tolist(), prob.tolist(), won.tolist()]
    grouped = con.execute(f"SELECT g, {CALLS} FROM {GROUPED} GROUP BY g ORDER BY g",
                          params).fetchall()
    assert len(grouped) == 4
    for row in grouped:
        alone = con.execute(f"SELECT {CALLS} FROM {GROUPED} WHERE g = ?",
                            params + [row[0]]).fetchall()[0]
        assert alone == row[1:]  # one group, with or without GROUP BY
        mine = g == row[0]
        assert row[2] == pytest.approx(np.mean((prob[mine] - won[mine]) ** 2), abs=TOL)


def test_maps_of_groups_in_one_batch_stay_apart(con):
    # Groups arrive back to back in one UDF call; equal probabilities and equal rates at the
    # seam between two groups must not be pooled or merged across it.
    rows = con.execute(f"SELECT g, calibration_map(prob, won) FROM {GROUPED} GROUP BY g ORDER BY g",
                       [[1, 1, 2, 2, 3, 3], [0.1, 0.5, 0.5, 0.9, 0.5, 0.7],
                        [1, 1, 1, 1, 1, 1]]).fetchall()
    assert rows == [(1, {"prob": [0.1, 0.5], "rate": [1.0, 1.0], "deals": 2}),  # by hand
                    (2, {"prob": [0.5, 0.9], "rate": [1.0, 1.0], "deals": 2}),
                    (3, {"prob": [0.5, 0.7], "rate": [1.0, 1.0], "deals": 2})]
    rng = np.random.default_rng(15)
    g = rng.integers(0, 50, 5000)
    prob, won = closed_deals(rng, 5000, decimals=1)
    got = con.execute(f"SELECT g, calibration_map(prob, won) FROM {GROUPED} GROUP BY g",
                      [g.tolist(), prob.tolist(), won.tolist()]).fetchall()
    assert len(got) == 50
    for group, m in got:
        distinct, fitted, _ = pooled_isotonic(prob[g == group], won[g == group])
        # source: scipy.optimize.isotonic_regression, group by group
        np.testing.assert_allclose(read_map(con, m, distinct), fitted, rtol=0, atol=TOL)


def test_aggregates_work_as_window_functions(con):
    windowed = {r[0]: r[1:3] for r in con.execute(f"""
        SELECT g, calibration_map(prob, won) OVER (PARTITION BY g),
               brier_score(prob, won) OVER (PARTITION BY g)
        FROM {GROUPED}""", [[1, 1, 2], [0.3, 0.5, 0.2], [1, 0, 1]]).fetchall()}
    assert windowed[1] == ({"prob": [0.3, 0.5], "rate": [0.5, 0.5], "deals": 2},
                           pytest.approx((0.7 ** 2 + 0.5 ** 2) / 2))
    assert windowed[2][0] == {"prob": [0.2], "rate": [1.0], "deals": 1}


def test_boolean_and_integer_won_give_the_same_results(demo):
    as_int = demo.execute("SELECT calibration_map(stated_prob, won), "
                          "brier_score(stated_prob, won), brier_parts(stated_prob, won) "
                          "FROM closed_deals").fetchall()
    as_bool = demo.execute("SELECT calibration_map(stated_prob, won = 1), "
                           "brier_score(stated_prob, won::BOOLEAN), "
                           "brier_parts(stated_prob, won = 1) FROM closed_deals").fetchall()
    assert as_bool == as_int


def test_rows_with_null_prob_or_won_are_skipped(con):
    prob = [0.2, None, 0.5, 0.7, None]
    won = [0, 1, None, 1, None]
    with_nulls = con.execute(f"SELECT {CALLS} FROM {CLOSED}", [prob, won]).fetchall()
    without = con.execute(f"SELECT {CALLS} FROM {CLOSED}", [[0.2, 0.7], [0, 1]]).fetchall()
    assert with_nulls == without  # source: the project's NULL rule (as SQL aggregates skip NULLs)


def test_group_without_usable_rows_is_null(con):
    rows = con.execute(f"SELECT g, {CALLS} FROM {GROUPED} GROUP BY g ORDER BY g",
                       [[1, 1, 2], [None, 0.4, 0.5], [1, None, 1]]).fetchall()
    assert rows[0][1:] == (None, None, None)
    assert rows[1][1] == {"prob": [0.5], "rate": [1.0], "deals": 1}
    empty = con.execute(f"SELECT {CALLS} FROM {CLOSED} WHERE false", [[0.1], [1]]).fetchall()
    assert empty == [(None, None, None)]


def test_apply_calibration_null_map_or_null_prob_is_null(con):
    m = "{'prob': [0.2, 0.6], 'rate': [0.1, 0.5]}"
    assert con.execute(f"SELECT apply_calibration(NULL, 0.4), apply_calibration({m}, NULL), "
                       f"brier_parts(0.4, 1, bins := NULL)").fetchall() == [(None, None, None)]


ERRORS = [
    ("SELECT calibration_map(p, w) FROM (VALUES (40, 1)) t(p, w)",
     "calibration_map: probability 40.0 is outside [0, 1] (were percentages given? divide by 100)"),
    ("SELECT brier_score(p, w) FROM (VALUES (-0.1, 1)) t(p, w)",
     "brier_score: probability -0.1 is outside [0, 1] (1 of 1 row; use values in [0, 1])"),
    ("SELECT calibration_map(p, w) FROM (VALUES (0.4, 2)) t(p, w)",
     "calibration_map: won 2 is not 0/1 or true/false (give 1 or true"),
    ("SELECT brier_parts(p, w) FROM (VALUES (0.4, 0.5)) t(p, w)",
     "brier_parts: won 0.5 is not 0/1 or true/false"),
    ("SELECT brier_parts(p, w, bins := 0) FROM (VALUES (0.4, 1)) t(p, w)",
     "brier_parts: bins 0 is not a whole number in [1, 1000] (10 equal-width bins is usual"),
    ("SELECT brier_parts(p, w, bins := 2.5) FROM (VALUES (0.4, 1)) t(p, w)",
     "brier_parts: bins 2.5 is not a whole number in [1, 1000]"),
    ("SELECT brier_parts(p, w, bins := 1001) FROM (VALUES (0.4, 1)) t(p, w)",
     "brier_parts: bins 1001 is not a whole number in [1, 1000]"),
    ("SELECT apply_calibration({'prob': [0.5, 0.2], 'rate': [0.1, 0.2]}, 0.3)",
     "apply_calibration: malformed map: breakpoints [0.5, 0.2] are not strictly increasing; "
     "pass a map built by calibration_map"),
    ("SELECT apply_calibration({'prob': [0.2, 0.2], 'rate': [0.1, 0.2]}, 0.3)",
     "apply_calibration: malformed map: breakpoints [0.2, 0.2] are not strictly increasing"),
    ("SELECT apply_calibration({'prob': [0.2, 0.5], 'rate': [0.1, 1.2]}, 0.3)",
     "apply_calibration: malformed map: rate 1.2 is outside [0, 1]; pass a map built by"),
    ("SELECT apply_calibration({'prob': [0.2, 0.5], 'rate': [0.1]}, 0.3)",
     "apply_calibration: malformed map: 2 breakpoints but 1 rates"),
    ("SELECT apply_calibration({'prob': []::DOUBLE[], 'rate': []::DOUBLE[]}, 0.3)",
     "apply_calibration: malformed map: it has no breakpoints"),
    ("SELECT apply_calibration({'prob': [0.2, NULL], 'rate': [0.1, 0.2]}, 0.3)",
     "apply_calibration: malformed map: prob contains a NULL"),
    ("SELECT apply_calibration({'prob': [0.2, 0.5], 'rate': [0.1, 0.2]}, 30)",
     "apply_calibration: probability 30.0 is outside [0, 1] (were percentages given?"),
]


@pytest.mark.parametrize("sql, message", ERRORS, ids=[m.split(":")[0] + str(i)
                                                      for i, (_, m) in enumerate(ERRORS)])
def test_errors_are_one_line_naming_the_function_value_and_fix(con, sql, message):
    with pytest.raises(duckdb.Error) as info:
        con.execute(sql).fetchall()
    text = udf_message(info.value)
    assert text.startswith(message) and "\n" not in text


def test_a_malformed_map_in_a_later_row_is_found(con):
    maps = [{"prob": [0.1, 0.5], "rate": [0.2, 0.4], "deals": 3}] * 3 + \
           [{"prob": [0.1, 0.9, 0.5], "rate": [0.2, 0.3, 0.4], "deals": 3}]
    with pytest.raises(duckdb.Error, match=r"breakpoints \[0.1, 0.9, 0.5\] are not strictly"):
        con.execute(f"SELECT apply_calibration(unnest(?::{MAP_SQL}[]), 0.3)", [maps]).fetchall()
