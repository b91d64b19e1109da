"""Exact outcomes against outside references.

SciPy's Poisson-binomial and binomial distributions, a worked example from
Mathematics Stack Exchange, and brute-force enumeration of every win/loss
scenario written here (no sqlrisk code involved). Every random input comes
from a seeded ``numpy.random.Generator``.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
from scipy import stats

import sqlrisk
from conftest import mass_by_total, one

TOL = 1e-12
#: readout.py: a CDF within 1e-12 of the level q counts as reaching q.
Q_TOL = 1e-12

OUTCOME = sqlrisk.OUTCOME_SQL
DEALS = "(SELECT unnest(?::DOUBLE[]) AS amount, unnest(?::DOUBLE[]) AS prob)"


# -- helpers ------------------------------------------------------------------

def dist(con, amounts, probs, step=None):
    return one(con, f"SELECT outcome_dist(amount, prob, step := ?) FROM {DEALS}",
               [step, [float(a) for a in amounts], [float(p) for p in probs]])


def brute_force(amounts, probs) -> dict[float, float]:
    """P(total = s) for every total s, adding up all 2^n win/loss scenarios."""
    totals: dict[float, float] = {}
    for won in itertools.product((False, True), repeat=len(amounts)):
        chance = math.prod(p if w else 1.0 - p for p, w in zip(probs, won))
        total = sum(a for a, w in zip(amounts, won) if w)
        totals[total] = totals.get(total, 0.0) + chance
    return {s: m for s, m in totals.items() if m > 0.0}


def ref_bands(ref, cuts):
    edges = [-math.inf, *cuts, math.inf]
    return [sum(m for s, m in ref.items() if lo <= s < hi) for lo, hi in zip(edges, edges[1:])]


def ref_reach(ref, target):
    return sum(m for s, m in ref.items() if s >= target)


def ref_quantile(ref, q):
    """Smallest total x with P(S <= x) >= q (inverted CDF, Hyndman & Fan type 1)."""
    running = 0.0
    for s in sorted(ref):
        running += ref[s]
        if running >= q - Q_TOL:
            return s
    return max(ref)


def random_probs(rng, n):
    probs = rng.uniform(0.0, 1.0, n).round(3)
    probs[rng.uniform(size=n) < 0.1] = 0.0
    probs[rng.uniform(size=n) < 0.1] = 1.0
    return probs


def assert_mass_matches(o, ref):
    got = mass_by_total(o)
    assert min(o["mass"]) >= 0.0
    assert sum(o["mass"]) == pytest.approx(1.0, abs=TOL)
    for total in set(got) | set(ref):
        assert got.get(total, 0.0) == pytest.approx(ref.get(total, 0.0), abs=TOL), total


# -- SciPy: Poisson-binomial and binomial --------------------------------------

@pytest.mark.parametrize("amount", [1, 250])
@pytest.mark.parametrize("n, seed", [(1, 1), (5, 2), (17, 3), (33, 4), (60, 5)])
def test_equal_amounts_match_scipy_poisson_binom(con, amount, n, seed):
    assert hasattr(stats, "poisson_binom")  # SciPy >= 1.15
    rng = np.random.default_rng(seed)
    probs = rng.uniform(0.0, 1.0, n)
    probs[: n // 6] = 0.0
    probs[n // 6: n // 3] = 1.0
    rng.shuffle(probs)
    o = dist(con, [amount] * n, probs)
    assert o["rounding"] == 0.0 and o["trials"] == 0
    got = mass_by_total(o)
    pmf = stats.poisson_binom(probs).pmf(np.arange(n + 1))
    for k in range(n + 1):
        # source: scipy.stats.poisson_binom (SciPy >= 1.15)
        assert got.get(float(k * amount), 0.0) == pytest.approx(pmf[k], abs=TOL), k
    assert set(got) <= {float(k * amount) for k in range(n + 1)}


def test_equal_probabilities_match_scipy_binom(con):
    n, p = 40, 0.3
    amounts, probs = [1.0] * n, [p] * n
    o = dist(con, amounts, probs)
    got = mass_by_total(o)
    for k in range(n + 1):
        # source: scipy.stats.binom.pmf
        assert got.get(float(k), 0.0) == pytest.approx(stats.binom.pmf(k, n, p), abs=TOL)

    cuts = [5.0, 10.5, 12.0, 17.25, 30.0]
    below = [stats.binom.cdf(math.ceil(c) - 1, n, p) for c in cuts]  # P(S < c) on integers
    expected = np.diff([0.0, *below, 1.0])
    bands = one(con, f"SELECT band_odds(amount, prob, ?::DOUBLE[]) FROM {DEALS}",
                [cuts, amounts, probs])
    assert bands == pytest.approx(expected, abs=TOL)  # source: scipy.stats.binom.cdf
    assert one(con, f"SELECT outcome_bands(?::{OUTCOME}, ?::DOUBLE[])", [o, cuts]) == bands

    for target in (0.0, 9.0, 12.0, 12.5, 41.0):
        reach = one(con, f"SELECT reach_odds(amount, prob, ?) FROM {DEALS}",
                    [target, amounts, probs])
        # source: scipy.stats.binom.sf (P(S > k) = P(S >= k + 1))
        assert reach == pytest.approx(stats.binom.sf(math.ceil(target) - 1, n, p), abs=TOL)

    levels = sorted(np.random.default_rng(6).uniform(0.001, 0.999, 12).tolist())
    qs = one(con, f"SELECT total_quantiles(amount, prob, ?::DOUBLE[]) FROM {DEALS}",
             [levels, amounts, probs])
    # source: scipy.stats.binom.ppf, the same inverted-CDF definition
    assert qs == stats.binom.ppf(levels, n, p).tolist()


# -- a published worked example -------------------------------------------------

def test_math_stackexchange_worked_example(con):
    probs = [0.5, 0.3, 0.7, 0.3, 0.9]
    o = dist(con, [1] * 5, probs)
    got = mass_by_total(o)
    # source: Mathematics Stack Exchange, "What is an approximation for Poisson
    # binomial distribution?": P(K = 2) = 0.3167 for p = (0.5, 0.3, 0.7, 0.3, 0.9)
    assert got[2.0] == pytest.approx(0.3167, abs=5e-5)
    # source: the same example's full pmf as quoted in the issue (exact decimals;
    # scipy.stats.poisson_binom gives the same figures)
    pmf = [0.00735, 0.09695, 0.3167, 0.3747, 0.17595, 0.02835]
    assert [got.get(float(k), 0.0) for k in range(6)] == pytest.approx(pmf, abs=TOL)


# -- brute force over all 2^n scenarios, exact lattices ---------------------------

@pytest.mark.parametrize("seed", range(10))
def test_brute_force_on_automatic_exact_lattice(con, seed):
    rng = np.random.default_rng(100 + seed)
    n = int(rng.integers(1, 15))
    # whole multiples of 25, negative ones included: the automatic lattice is exact
    amounts = (rng.integers(-40, 80, n) * 25).astype(float).tolist()
    probs = random_probs(rng, n).tolist()
    ref = brute_force(amounts, probs)
    o = dist(con, amounts, probs)
    assert o["rounding"] == 0.0
    assert_mass_matches(o, ref)
    _check_readings(con, rng, amounts, probs, o, ref, aggregates=True)


@pytest.mark.parametrize("seed", range(6))
def test_brute_force_on_explicit_step(con, seed):
    rng = np.random.default_rng(200 + seed)
    n = int(rng.integers(2, 15))
    # multiples of 7 over a wide range: exact only with the explicit step 7
    amounts = (rng.integers(-3000, 9000, n) * 7).astype(float).tolist()
    probs = random_probs(rng, n).tolist()
    ref = brute_force(amounts, probs)
    o = dist(con, amounts, probs, step=7.0)
    assert o["rounding"] == 0.0 and o["step"] == 7.0
    assert_mass_matches(o, ref)
    _check_readings(con, rng, amounts, probs, o, ref, aggregates=False)


def _check_readings(con, rng, amounts, probs, o, ref, aggregates):
    totals = sorted(ref)
    attainable = rng.choice(totals, size=min(3, len(totals)), replace=False).tolist()
    loose = rng.uniform(totals[0] - 50, totals[-1] + 50, 3).round(2).tolist()
    cuts = sorted(set(attainable + loose))
    levels = sorted(rng.uniform(0.0, 1.0, 6).tolist()) + [1.0]
    params = [amounts, probs]

    bands = one(con, f"SELECT outcome_bands(?::{OUTCOME}, ?::DOUBLE[])", [o, cuts])
    assert bands == pytest.approx(ref_bands(ref, cuts), abs=TOL)  # source: brute force
    qs = one(con, f"SELECT outcome_quantiles(?::{OUTCOME}, ?::DOUBLE[])", [o, levels])
    assert qs == [ref_quantile(ref, q) for q in levels]  # source: brute force
    for target in cuts:
        reach = one(con, f"SELECT outcome_reach(?::{OUTCOME}, ?)", [o, target])
        assert reach == pytest.approx(ref_reach(ref, target), abs=TOL)  # source: brute force
    if aggregates:
        assert one(con, f"SELECT band_odds(amount, prob, ?::DOUBLE[]) FROM {DEALS}",
                   [cuts, *params]) == bands
        assert one(con, f"SELECT total_quantiles(amount, prob, ?::DOUBLE[]) FROM {DEALS}",
                   [levels, *params]) == qs
        for target in cuts:
            reach = one(con, f"SELECT reach_odds(amount, prob, ?) FROM {DEALS}",
                        [target, *params])
            assert reach == pytest.approx(ref_reach(ref, target), abs=TOL)  # brute force


# -- coarse lattices: the rounding guarantee -------------------------------------

@pytest.mark.parametrize("seed", range(8))
def test_coarse_step_reach_within_rounding(con, seed):
    rng = np.random.default_rng(300 + seed)
    n = int(rng.integers(1, 13))
    amounts = rng.uniform(-800.0, 3000.0, n).round(2).tolist()
    probs = random_probs(rng, n).tolist()
    step = float(rng.uniform(50.0, 400.0))
    _check_rounding_guarantee(con, rng, amounts, probs, step)


@pytest.mark.parametrize("seed", range(4))
def test_automatic_inexact_lattice_reach_within_rounding(con, seed):
    rng = np.random.default_rng(400 + seed)
    n = int(rng.integers(3, 13))
    amounts = rng.uniform(-50_000.0, 900_000.0, n).round(2).tolist()
    probs = random_probs(rng, n).tolist()
    _check_rounding_guarantee(con, rng, amounts, probs, None)


def _check_rounding_guarantee(con, rng, amounts, probs, step):
    ref = brute_force(amounts, probs)
    o = dist(con, amounts, probs, step=step)
    if any(0.0 < p < 1.0 for p in probs):
        assert o["rounding"] > 0.0  # the amounts really are off the lattice
    totals = np.array(sorted(ref))
    targets = np.concatenate([
        rng.uniform(totals[0] - 500.0, totals[-1] + 500.0, 60),
        totals, totals + 0.01, totals - 0.01,
    ]).tolist()
    rows = con.execute(
        f"SELECT t, outcome_reach(?::{OUTCOME}, t) FROM unnest(?::DOUBLE[]) u(t)",
        [o, targets]).fetchall()
    slack = o["rounding"]
    for t, reach in rows:
        # rule (README "The lattice and `rounding`"): no total moves by more than
        # `rounding`, so P(S >= t + rounding) <= reach <= P(S >= t - rounding)
        assert ref_reach(ref, t + slack) - TOL <= reach <= ref_reach(ref, t - slack) + TOL, t
    mean = one(con, f"SELECT outcome_mean(?::{OUTCOME})", [o])
    expected = sum(a * p for a, p in zip(amounts, probs))
    if o["rounding"] >= o["step"]:
        # rule: splitting an amount between two lattice points keeps its mean, so
        # E[S] = sum(a * p) (linearity of expectation, common practice)
        assert mean == pytest.approx(expected, rel=1e-9, abs=1e-9)
    else:
        # a small group's totals moved up to the next point (never down, by < rounding)
        assert expected - 1e-9 <= mean <= expected + slack + 1e-9


# -- large groups: an independent recursion instead of 2^n scenarios ------------------

def recursion_reference(amounts, probs):
    """P(S = lo + i) for whole amounts, adding one deal at a time:
    f'(s) = (1 - p) f(s) + p f(s - a) (common practice: the Poisson-binomial recursion)."""
    lo = int(sum(a for a in amounts if a < 0))
    hi = int(sum(a for a in amounts if a > 0))
    f = np.zeros(hi - lo + 1)
    f[-lo] = 1.0
    for a, p in zip(amounts, probs):
        if a == 0:
            continue  # winning nothing leaves the total as it is
        g = (1.0 - p) * f
        if a > 0:
            g[a:] += p * f[:-a]
        elif a < 0:
            g[:a] += p * f[-a:]
        f = g
    return lo, f


def test_large_group_on_a_window_of_an_exact_lattice(con):
    rng = np.random.default_rng(500)
    amounts = rng.integers(-6, 30, 2000)
    probs = rng.uniform(0.0, 1.0, 2000).round(3)
    lo, ref = recursion_reference(amounts.tolist(), probs.tolist())
    o = dist(con, amounts, probs)
    assert o["rounding"] == 0.0 and o["step"] == 1.0
    assert len(o["mass"]) < len(ref) / 2  # the lattice covers a window, not the whole range
    index = np.rint(o["origin"] + np.arange(len(o["mass"])) - lo).astype(int)
    assert o["mass"] == pytest.approx(ref[index], abs=TOL)  # source: the recursion above
    assert 1.0 - ref[index].sum() < TOL  # the window leaves out less than 1e-12


def test_large_group_on_an_inexact_lattice_within_rounding(con):
    rng = np.random.default_rng(501)
    amounts = rng.integers(-20, 100, 3000)
    amounts[amounts == 0] = 1
    probs = rng.uniform(0.0, 1.0, 3000).round(3)
    lo, ref = recursion_reference(amounts.tolist(), probs.tolist())
    o = dist(con, amounts, probs)
    assert o["rounding"] > 0.0
    tail = np.cumsum(ref[::-1])[::-1]  # tail[i] = P(S >= lo + i)

    def reach(t):
        i = int(math.ceil(t - lo))
        return 1.0 if i <= 0 else (0.0 if i >= len(tail) else float(tail[i]))

    targets = rng.uniform(lo + 0.2 * len(ref), lo + 0.5 * len(ref), 200).tolist()
    rows = con.execute(f"SELECT t, outcome_reach(?::{OUTCOME}, t) FROM unnest(?::DOUBLE[]) u(t)",
                       [o, targets]).fetchall()
    for t, got in rows:
        # rule (README "The lattice and `rounding`"): no total moves by more than
        # `rounding`, so P(S >= t + rounding) <= reach <= P(S >= t - rounding)
        assert reach(t + o["rounding"]) - TOL <= got <= reach(t - o["rounding"]) + TOL, t
    mean = one(con, f"SELECT outcome_mean(?::{OUTCOME})", [o])
    # rule: the split keeps each amount's mean, E[S] = sum(a * p) (linearity of expectation)
    assert mean == pytest.approx(float(amounts @ probs), rel=1e-9)


# -- very large groups: pooled leaves (4,096 deals and more) -------------------------

@pytest.mark.parametrize("step", [None, 250.0, 125.0])
def test_pooled_group_of_equal_amounts_matches_scipy_poisson_binom(con, step):
    rng = np.random.default_rng(502)
    probs = rng.uniform(0.0, 1.0, 6_000).round(4)  # scipy's pmf costs O(n^2): ~2 s here
    probs[:300] = 0.0
    probs[300:500] = 1.0
    o = dist(con, [250] * len(probs), probs, step)
    assert o["rounding"] == 0.0 and o["step"] == (step or 250.0)
    totals = o["origin"] + o["step"] * np.arange(len(o["mass"]))
    mass = np.array(o["mass"])
    on_250 = np.abs(totals / 250 - np.rint(totals / 250)) < 1e-9
    assert (mass[~on_250] == 0).all()  # a finer explicit step leaves the odd points empty
    pmf = stats.poisson_binom(probs).pmf(np.arange(len(probs) + 1))  # source: SciPy >= 1.15
    k = np.rint(totals[on_250] / 250).astype(int)
    assert mass[on_250] == pytest.approx(pmf[k], abs=TOL)
    assert 1.0 - pmf[k].sum() < 1e-11  # the cut tails hold almost nothing


def test_pooled_group_of_small_whole_amounts_matches_the_recursion(con):
    rng = np.random.default_rng(503)
    amounts = rng.integers(-2, 6, 10_000)
    probs = rng.uniform(0.0, 1.0, 10_000).round(3)
    lo, ref = recursion_reference(amounts.tolist(), probs.tolist())
    o = dist(con, amounts, probs)
    assert o["rounding"] == 0.0 and o["step"] == 1.0
    index = np.rint(o["origin"] + np.arange(len(o["mass"])) - lo).astype(int)
    assert o["mass"] == pytest.approx(ref[index], abs=TOL)  # source: the recursion above
    assert 1.0 - ref[index].sum() < 1e-11


def test_pooled_group_with_an_explicit_step_too_fine_is_refused(con):
    rng = np.random.default_rng(505)
    amounts = np.round(rng.lognormal(np.log(40_000), 1.0, 5_000), 2)
    with pytest.raises(Exception, match="outcome_dist: step 0.01 would need more than 4,194,304 bins"):
        dist(con, amounts, rng.uniform(0.1, 0.9, 5_000), 0.01)


def test_pooled_group_on_an_explicit_inexact_step_keeps_the_mean(con):
    rng = np.random.default_rng(506)
    amounts = np.round(rng.lognormal(np.log(40_000), 1.0, 5_000), 2)
    probs = rng.uniform(0.1, 0.9, 5_000).round(3)
    o = dist(con, amounts, probs, 777.0)
    assert o["step"] == 777.0 and o["rounding"] > 0
    mean = one(con, f"SELECT outcome_mean(?::{OUTCOME})", [o])
    assert mean == pytest.approx(float(amounts @ probs), rel=1e-12)  # splitting keeps the mean


def edgeworth_cdf(amounts, probs, x):
    """P(S <= mean + x sd) to order 1/n: the Edgeworth expansion with the deals' exact
    cumulants (Hall, "The Bootstrap and Edgeworth Expansion", 1992, sec. 2.2; from memory)."""
    a, p = np.asarray(amounts, float), np.asarray(probs, float)
    sd = math.sqrt(np.sum(a ** 2 * p * (1 - p)))
    g1 = np.sum(a ** 3 * p * (1 - p) * (1 - 2 * p)) / sd ** 3
    g2 = np.sum(a ** 4 * p * (1 - p) * (1 - 6 * p * (1 - p))) / sd ** 4
    he2, he3, he5 = x ** 2 - 1, x ** 3 - 3 * x, x ** 5 - 10 * x ** 3 + 15 * x
    return stats.norm.cdf(x) - stats.norm.pdf(x) * (g1 / 6 * he2 + g2 / 24 * he3
                                                     + g1 ** 2 / 72 * he5)


def test_pooled_group_of_varied_amounts_against_the_edgeworth_expansion(con):
    """Log-normal amounts in cents: the leaves and their sum are on inexact lattices.
    The bands must stay within the benchmark's 1e-3 of the expansion (whose own error,
    O(n^-3/2) plus a lattice term of order step / sd, is below 1e-5 here) and the mean exact."""
    rng = np.random.default_rng(504)
    amounts = np.round(rng.lognormal(np.log(40_000), 1.0, 50_000), 2)
    amounts[:2000] *= -0.1  # credit notes
    probs = rng.uniform(0.02, 0.95, 50_000).round(3)
    o = dist(con, amounts, probs)
    assert o["rounding"] > 0.0 and o["trials"] == 0
    mean = float(amounts @ probs)
    sd = math.sqrt(float(np.sum(amounts ** 2 * probs * (1 - probs))))
    x = np.array([-2.0, -1.0, 0.0, 1.0, 2.0])
    bands = one(con, f"SELECT outcome_bands(?::{OUTCOME}, ?::DOUBLE[])", [o, list(mean + sd * x)])
    assert np.cumsum(bands)[:-1] == pytest.approx(edgeworth_cdf(amounts, probs, x), abs=1e-3)
    got_mean = one(con, f"SELECT outcome_mean(?::{OUTCOME})", [o])
    assert got_mean == pytest.approx(mean, rel=1e-12)  # splitting keeps the mean exactly


# -- input types ---------------------------------------------------------------------

AMOUNTS_SQL = "(VALUES (1200, 0.5), (300, 0.25), (-100, 0.7), (45, 1.0), (800, 0.0)) t(a, p)"
CENTS_SQL = "(VALUES (1234.56, 0.5), (300.10, 0.25), (-100.01, 0.7), (0.99, 0.35)) t(a, p)"


def test_decimal_integer_double_amounts_give_the_same_outcome(con):
    row = con.execute(
        "SELECT outcome_dist(a::DECIMAL(12,2), p), outcome_dist(a::INTEGER, p), "
        f"outcome_dist(a::BIGINT, p), outcome_dist(a::DOUBLE, p) FROM {AMOUNTS_SQL}").fetchone()
    # rule: an amount's SQL type does not change the outcome, only its value does
    assert row[0] == row[1] == row[2] == row[3]
    row = con.execute(
        "SELECT outcome_dist(a::DECIMAL(12,2), p), outcome_dist(a::DOUBLE, p), "
        "band_odds(a::DECIMAL(12,2), p, [0, 1000]), band_odds(a::DOUBLE, p, [0, 1000]) "
        f"FROM {CENTS_SQL}").fetchone()
    assert row[0] == row[1]  # the same rule for amounts in cents
    assert row[2] == row[3]
    row = con.execute(
        "SELECT outcome_dist(a::DECIMAL(12,2), p, step := 0.01), "
        f"outcome_dist(a::DOUBLE, p, step := 0.01) FROM {CENTS_SQL}").fetchone()
    assert row[0] == row[1] and row[0]["rounding"] == 0.0  # whole cents: exact on 0.01


# -- edges: p = 0, p = 1, zero amounts, one deal ----------------------------------------

def test_lost_deals_change_nothing_and_won_deals_shift_exactly(con):
    rng = np.random.default_rng(7)
    amounts = (rng.integers(-20, 60, 8) * 50).astype(float).tolist()
    probs = rng.uniform(0.05, 0.95, 8).round(2).tolist()
    base = dist(con, amounts, probs)
    lost = dist(con, amounts + [700.0, -350.0], probs + [0.0, 0.0])
    assert lost == base  # common practice: a deal that cannot close adds nothing
    won = dist(con, amounts + [700.0, -350.0], probs + [1.0, 1.0])
    assert won["mass"] == base["mass"] and won["step"] == base["step"]
    assert won["origin"] == base["origin"] + 350.0  # common practice: a sure deal is booked


def test_all_won_group_is_a_single_point(con):
    o = dist(con, [5, 7, -2], [1.0, 1.0, 1.0])
    assert o["mass"] == [1.0] and o["origin"] == 10.0  # common practice
    bands = one(con, f"SELECT outcome_bands(?::{OUTCOME}, [9.5, 10, 10.5])", [o])
    assert bands == [0.0, 0.0, 1.0, 0.0]  # reaching a cut puts the total in the upper band
    assert one(con, f"SELECT outcome_quantiles(?::{OUTCOME}, [0, 0.5, 1])", [o]) == [10.0] * 3
    assert one(con, f"SELECT outcome_reach(?::{OUTCOME}, 10)", [o]) == 1.0
    assert one(con, f"SELECT outcome_sd(?::{OUTCOME})", [o]) == 0.0


def test_all_amounts_zero_is_the_point_zero(con):
    o = dist(con, [0, 0, 0], [0.2, 0.9, 1.0])
    assert o["mass"] == [1.0] and o["origin"] == 0.0  # common practice
    assert one(con, f"SELECT outcome_reach(?::{OUTCOME}, 0)", [o]) == 1.0


@pytest.mark.parametrize("amount", [250.0, -120.0])
def test_single_deal(con, amount):
    o = dist(con, [amount], [0.3])
    assert mass_by_total(o) == pytest.approx({0.0: 0.7, amount: 0.3}, abs=TOL)  # Bernoulli
    reach = one(con, f"SELECT reach_odds(amount, prob, ?) FROM {DEALS}", [amount, [amount], [0.3]])
    assert reach == pytest.approx(0.3 if amount > 0 else 1.0, abs=TOL)  # common practice
