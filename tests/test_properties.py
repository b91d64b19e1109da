"""Identities every outcome must satisfy, on random groups of deals (hypothesis).

The rules are those the README states for every outcome, and textbook facts about
distribution functions ("common practice"). Examples stay small so the file runs in well
under a minute; the numba kernels are compiled (or loaded from cache) once, by
the module's warm-up fixture.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import sqlrisk
from conftest import mass_by_total, one

OUTCOME = sqlrisk.OUTCOME_SQL
TOL = 1e-12
#: Float rounding allowed between two readings of one CDF (a few units in the last place).
NOISE = 1e-15
DEALS = "(SELECT unnest(?::DOUBLE[]) AS amount, unnest(?::DOUBLE[]) AS prob)"

# derandomize: a fixed sequence of examples, like a fixed seed (600 random ones per test
# also passed when this file was written).
SETTINGS = settings(max_examples=40, deadline=None, derandomize=True,
                    suppress_health_check=[HealthCheck.function_scoped_fixture])


@pytest.fixture(scope="module", autouse=True)
def warm_up():
    """Compile (or load) every kernel once, outside any example's timing."""
    con = sqlrisk.connect()
    con.execute(f"""SELECT outcome_bands(o, [1.0]), outcome_quantiles(o, [0.5]), outcome_reach(o, 1),
        outcome_mean(o), outcome_sd(o), outcome_add(o, o), outcome_histogram(o, 3)
        FROM (SELECT outcome_dist(amount, prob) o FROM {DEALS})""",
                [[1.0, 2.5, 1e6], [0.5, 0.5, 0.5]]).fetchall()
    con.close()


# -- strategies ------------------------------------------------------------------

probs = st.one_of(st.sampled_from([0.0, 1.0]), st.floats(0.0, 1.0))
#: Small whole amounts: the automatic lattice is exact (unit 1, within the exact budget).
exact_deals = st.lists(st.tuples(st.integers(-60, 120), probs), min_size=1, max_size=12)
#: Any amounts: cents, wide ranges, so the automatic lattice is often inexact.
amounts = st.one_of(st.integers(-60, 120).map(float),
                    st.integers(-10**8, 10**8).map(lambda c: c / 100),
                    st.floats(-1e7, 1e7, allow_nan=False).map(lambda x: round(x, 2)))
any_deals = st.lists(st.tuples(amounts, probs), min_size=1, max_size=12)


def columns(deals):
    return [[float(a) for a, _ in deals], [float(p) for _, p in deals]]


def dist(con, deals, step=None):
    return one(con, f"SELECT outcome_dist(amount, prob, step := ?) FROM {DEALS}",
               [step, *columns(deals)])


def assert_same_mass(o1, o2):
    m1, m2 = mass_by_total(o1), mass_by_total(o2)
    for total in set(m1) | set(m2):
        assert m1.get(total, 0.0) == pytest.approx(m2.get(total, 0.0), abs=TOL), total


# -- brute force: every win/loss scenario ---------------------------------------------

@SETTINGS
@given(deals=exact_deals, cuts=st.lists(st.integers(-700, 1500), max_size=5, unique=True))
def test_exact_outcome_equals_brute_force_over_every_scenario(con, deals, cuts):
    """Up to 12 deals (whole amounts, negatives included): the outcome's masses, and the
    band odds read off it, equal the sums over all 2^n win/loss scenarios (common practice)."""
    from test_reference_exact import brute_force, ref_bands

    amounts, probs = columns(deals)
    ref = brute_force(amounts, probs)
    o = dist(con, deals)
    assert o["rounding"] == 0.0 and o["trials"] == 0
    got = mass_by_total(o)
    for total in set(got) | set(ref):
        assert got.get(total, 0.0) == pytest.approx(ref.get(total, 0.0), abs=TOL), total
    cuts = sorted(float(c) for c in cuts)
    bands = one(con, f"SELECT band_odds(amount, prob, ?::DOUBLE[]) FROM {DEALS}",
                [cuts, amounts, probs])
    assert bands == pytest.approx(ref_bands(ref, cuts), abs=TOL)


# -- mass, bands, quantiles --------------------------------------------------------

@SETTINGS
@given(deals=any_deals, cuts=st.lists(st.floats(-2e7, 2e7), max_size=6, unique=True))
def test_mass_and_bands_sum_to_one(con, deals, cuts):
    o = dist(con, deals)
    # rule: an outcome's mass is a probability distribution (non-negative, sums to 1)
    assert min(o["mass"]) >= 0.0
    assert sum(o["mass"]) == pytest.approx(1.0, abs=TOL)
    bands = one(con, f"SELECT band_odds(amount, prob, ?::DOUBLE[]) FROM {DEALS}",
                [sorted(cuts), *columns(deals)])
    assert len(bands) == len(cuts) + 1 and min(bands) >= 0.0  # k cuts make k + 1 bands
    assert sum(bands) == pytest.approx(1.0, abs=TOL)  # common practice: bands partition


@SETTINGS
@given(deals=any_deals, fractions=st.lists(st.floats(-0.2, 1.2), min_size=2, max_size=25))
def test_probability_below_a_cut_never_decreases_as_the_cut_moves_up(con, deals, fractions):
    o = dist(con, deals)
    lo = o["origin"]
    hi = lo + o["step"] * (len(o["mass"]) - 1)
    cuts = sorted(lo + f * (hi - lo) for f in fractions)
    below = [r[0] for r in con.execute(
        f"SELECT outcome_bands(?::{OUTCOME}, [c])[1] FROM unnest(?::DOUBLE[]) u(c) ORDER BY c",
        [o, cuts]).fetchall()]
    # common practice: a CDF is non-decreasing
    assert all(b >= a - NOISE for a, b in zip(below, below[1:]))


@SETTINGS
@given(deals=any_deals, levels=st.lists(st.floats(0.0, 1.0), min_size=1, max_size=12))
def test_quantiles_never_decrease_in_the_level(con, deals, levels):
    levels = sorted(levels)
    qs = one(con, f"SELECT total_quantiles(amount, prob, ?::DOUBLE[]) FROM {DEALS}",
             [levels, *columns(deals)])
    assert qs == sorted(qs)  # common practice: a quantile function is non-decreasing


@SETTINGS
@given(deals=exact_deals)
def test_quantile_of_the_cdf_is_the_point_itself_on_exact_lattices(con, deals):
    o = dist(con, deals)
    assert o["rounding"] == 0.0
    cum = np.cumsum(o["mass"])
    # points whose own mass is above the 1e-12 level tolerance (readout.Q_TOL)
    points = [i for i, m in enumerate(o["mass"]) if m > 1e-9]
    levels = [min(float(cum[i]), 1.0) for i in points]
    qs = one(con, f"SELECT outcome_quantiles(?::{OUTCOME}, ?::DOUBLE[])", [o, levels])
    # common practice: Q(F(x)) = x for every support point x (inverted-CDF definition)
    assert qs == [o["origin"] + i * o["step"] for i in points]


# -- merge, add, shift ---------------------------------------------------------------

owned_deals = st.lists(st.tuples(st.integers(0, 3), st.integers(-40, 200), probs),
                       min_size=1, max_size=14)


@SETTINGS
@given(deals=owned_deals, step=st.sampled_from([1.0, 5.0, 25.0]))
def test_merge_of_owner_outcomes_is_the_outcome_of_all_deals(con, deals, step):
    owner, amount, prob = zip(*deals)
    amount = [a * step for a in amount]  # multiples of the step: one exact lattice
    sql = (f"SELECT outcome_merge(o) FROM (SELECT owner, outcome_dist(amount, prob, step := ?) o "
           "FROM (SELECT unnest(?::INT[]) owner, unnest(?::DOUBLE[]) amount, "
           "unnest(?::DOUBLE[]) prob) GROUP BY owner)")
    merged = one(con, sql, [step, list(owner), amount, list(prob)])
    whole = dist(con, list(zip(amount, prob)), step=step)
    # rule: merging the owners' outcomes is the outcome of all their deals together
    assert_same_mass(merged, whole)
    assert merged["rounding"] == 0.0


@SETTINGS
@given(deals=owned_deals, order=st.randoms(use_true_random=False))
def test_merge_is_commutative_and_associative(con, deals, order):
    owner, amount, prob = zip(*deals)
    con.execute("CREATE OR REPLACE TEMP TABLE parts AS SELECT owner, outcome_dist(amount, prob) o "
                "FROM (SELECT unnest(?::INT[]) owner, unnest(?::DOUBLE[]) amount, "
                "unnest(?::DOUBLE[]) prob) GROUP BY owner",
                [list(owner), [float(a) for a in amount], list(prob)])
    parts = con.execute("SELECT o FROM parts").fetchall()
    shuffled = [p[0] for p in parts]
    order.shuffle(shuffled)
    merged = one(con, "SELECT outcome_merge(o) FROM parts")
    reordered = one(con, f"SELECT outcome_merge(o) FROM unnest(?::{OUTCOME}[]) u(o)", [shuffled])
    # pairwise with outcome_add, left to right: ((o1 + o2) + o3) + ...
    chained = shuffled[0]
    for part in shuffled[1:]:
        chained = one(con, f"SELECT outcome_add(?::{OUTCOME}, ?::{OUTCOME})", [chained, part])
    # a merge of merges: the first half and the rest
    half = len(shuffled) // 2 or 1
    nested = one(con, f"SELECT outcome_merge(o) FROM (SELECT outcome_merge(o) o FROM "
                 f"unnest(?::{OUTCOME}[]) u(o) UNION ALL SELECT outcome_merge(o) FROM "
                 f"unnest(?::{OUTCOME}[]) u(o)) WHERE o IS NOT NULL",
                 [shuffled[:half], shuffled[half:]])
    for other in (reordered, chained, nested):
        assert_same_mass(merged, other)  # common practice: + is commutative and associative


#: Stored outcomes as a table might hold them: steps with and without a common
#: unit, zero bins at either end.
stored_outcomes = st.builds(
    lambda origin, step, inner, lead, trail: {
        "origin": float(origin), "step": step, "trials": 0, "rounding": 0.0,
        "mass": [0.0] * lead + [m / sum(inner) for m in inner] + [0.0] * trail},
    st.integers(-1000, 1000), st.sampled_from([1.0, 3.0, 0.7, 1.41421356237, 2.718281828]),
    st.lists(st.floats(0.01, 1.0), min_size=1, max_size=8),
    st.integers(0, 3), st.integers(0, 3))


def moments(o) -> tuple[float, float]:
    x = o["origin"] + o["step"] * np.arange(len(o["mass"]))
    m = np.array(o["mass"])
    mean = float(np.dot(x, m))
    return mean, float(np.dot((x - mean) ** 2, m))


@SETTINGS
@given(x=stored_outcomes, y=stored_outcomes)
def test_adding_two_stored_outcomes_keeps_the_mean_and_bounds_the_spread(con, x, y):
    """Mean of a sum is the sum of means (linearity of expectation, common practice).

    Moving a lattice onto a coarser step splits each point's mass between its two
    neighbours keeping its mean, so the mean stays exact and the variance can only
    grow, by at most step^2 / 4 per outcome moved. (Leading zero bins once shifted
    a moved outcome down by their number of steps.)
    """
    o = one(con, f"SELECT outcome_add(?::{OUTCOME}, ?::{OUTCOME})", [x, y])
    mean, var = moments(o)
    (mx, vx), (my, vy) = moments(x), moments(y)
    scale = max(1.0, abs(mx) + abs(my))
    assert mean == pytest.approx(mx + my, abs=1e-9 * scale)
    assert var >= vx + vy - 1e-9 * scale ** 2
    assert var <= vx + vy + 2 * o["step"] ** 2 / 4 + 1e-9 * scale ** 2


@SETTINGS
@given(deals=exact_deals, booked=st.integers(-10**6, 10**6),
       levels=st.lists(st.floats(0.0, 1.0), min_size=1, max_size=8))
def test_shift_moves_quantiles_and_bands_by_the_booked_amount(con, deals, booked, levels):
    o = dist(con, deals)
    shifted = one(con, f"SELECT outcome_shift(?::{OUTCOME}, ?)", [o, float(booked)])
    qs = one(con, f"SELECT outcome_quantiles(?::{OUTCOME}, ?::DOUBLE[])", [o, levels])
    moved = one(con, f"SELECT outcome_quantiles(?::{OUTCOME}, ?::DOUBLE[])", [shifted, levels])
    assert moved == [q + booked for q in qs]  # common practice: Q_{S+b}(q) = Q_S(q) + b
    cuts = sorted({o["origin"] + 0.5, o["origin"] + 3.0, qs[0], qs[-1] + 1.0})
    bands = one(con, f"SELECT outcome_bands(?::{OUTCOME}, ?::DOUBLE[])", [o, cuts])
    after = one(con, f"SELECT outcome_bands(?::{OUTCOME}, ?::DOUBLE[])",
                [shifted, [c + booked for c in cuts]])
    assert after == bands  # common practice: P(S + b < c + b) = P(S < c)


@SETTINGS
@given(deals=any_deals, booked=st.integers(-10**8, 10**8).map(lambda c: c / 100),
       levels=st.lists(st.floats(0.0, 1.0), min_size=1, max_size=8))
def test_shift_on_any_lattice_moves_quantiles_by_the_booked_amount(con, deals, booked, levels):
    o = dist(con, deals)
    shifted = one(con, f"SELECT outcome_shift(?::{OUTCOME}, ?)", [o, booked])
    assert shifted["mass"] == o["mass"] and shifted["step"] == o["step"]
    qs = one(con, f"SELECT outcome_quantiles(?::{OUTCOME}, ?::DOUBLE[])", [o, levels])
    moved = one(con, f"SELECT outcome_quantiles(?::{OUTCOME}, ?::DOUBLE[])", [shifted, levels])
    scale = abs(o["origin"]) + o["step"] * len(o["mass"]) + abs(booked)
    # common practice: Q_{S+b}(q) = Q_S(q) + b (up to float rounding of origin + b)
    assert moved == pytest.approx([q + booked for q in qs], rel=0, abs=1e-12 * scale)


# -- row order, threads -------------------------------------------------------------------

@SETTINGS
@given(deals=any_deals, order=st.randoms(use_true_random=False))
def test_shuffled_rows_give_bit_identical_results(con, deals, order):
    shuffled = list(deals)
    order.shuffle(shuffled)
    sql = (f"SELECT outcome_dist(amount, prob), band_odds(amount, prob, [0, 1000]), "
           f"total_quantiles(amount, prob, [0.1, 0.5, 0.9]), reach_odds(amount, prob, 500) "
           f"FROM {DEALS}")
    first = con.execute(sql, columns(deals)).fetchall()
    second = con.execute(sql, columns(shuffled)).fetchall()
    assert first == second  # rule: results do not depend on row order


def test_threads_and_row_order_do_not_change_results(con):
    rng = np.random.default_rng(11)
    n = 4000
    con.execute("CREATE TABLE deals AS SELECT unnest(?::INT[]) owner, unnest(?::DOUBLE[]) amount, "
                "unnest(?::DOUBLE[]) prob, unnest(range(?)) id",
                [rng.integers(0, 50, n).tolist(), rng.uniform(-5e3, 2e5, n).round(2).tolist(),
                 rng.uniform(0.0, 1.0, n).round(3).tolist(), n])
    sql = ("SELECT owner, outcome_dist(amount, prob), band_odds(amount, prob, [1e5, 5e5]), "
           "reach_odds(amount, prob, 3e5), total_quantiles(amount, prob, [0.1, 0.5, 0.9]) "
           "FROM (SELECT * FROM deals ORDER BY {order}) GROUP BY owner ORDER BY owner")
    con.execute("SET threads = 1")
    one_thread = con.execute(sql.format(order="id")).fetchall()
    con.execute("SET threads = 4")
    for order in ("id DESC", "hash(id)", "random()"):
        # rule: results do not depend on row order or threads
        assert con.execute(sql.format(order=order)).fetchall() == one_thread


def test_merge_is_bit_identical_under_row_order(con):
    con.execute("SET threads = 1")
    parts = [r[0] for r in con.execute(
        "SELECT outcome_dist(a, p) FROM (VALUES (1, 100, 0.5), (1, 300, 0.5), (2, 200, 0.5), "
        "(2, 100, 0.5), (3, 100, 0.1)) t(g, a, p) GROUP BY g ORDER BY g").fetchall()]
    sql = f"SELECT outcome_merge(o) FROM unnest(?::{OUTCOME}[]) u(o)"
    # rule: results do not depend on row order
    assert one(con, sql, [parts]) == one(con, sql, [parts[::-1]])


# -- aggregates against every scenario, with cuts on scenario totals ------------------

@SETTINGS
@given(deals=any_deals, picks=st.lists(st.floats(0.0, 1.0), max_size=5),
       others=st.lists(st.floats(-2e7, 2e7), max_size=3), target_pick=st.floats(0.0, 1.0),
       levels=st.lists(st.floats(0.0, 1.0), max_size=5))
def test_aggregates_equal_every_scenario_with_cuts_on_totals(con, deals, picks, others,
                                                            target_pick, levels):
    """band_odds, reach_odds and total_quantiles of up to 12 deals in any unit equal the sums
    over all 2^n win/loss scenarios (common practice), with cuts placed on scenario totals as
    well as anywhere; the stored outcome reads the same when it is exact."""
    from test_reference_exact import Q_TOL, brute_force, ref_bands, ref_quantile, ref_reach

    amounts, probs = columns(deals)
    ref = brute_force(amounts, probs)
    totals = sorted(ref)
    on_totals = [totals[min(int(f * len(totals)), len(totals) - 1)] for f in picks]
    cuts = sorted(set(on_totals) | set(others))
    target = totals[min(int(target_pick * len(totals)), len(totals) - 1)]
    row = con.execute(
        "SELECT band_odds(amount, prob, ?::DOUBLE[]), reach_odds(amount, prob, ?), "
        "total_quantiles(amount, prob, ?::DOUBLE[]), outcome_dist(amount, prob) "
        f"FROM {DEALS}", [cuts, target, levels, amounts, probs]).fetchone()
    # README "Bands": a total within 1e-13 below a cut, relative to the cut and the extreme
    # totals, counts as reaching it
    def reaching(c):
        return c - 1e-13 * max(1.0, abs(c), abs(totals[0]), abs(totals[-1]))

    # source: brute force over every scenario
    assert row[0] == pytest.approx(ref_bands(ref, [reaching(c) for c in cuts]), abs=TOL)
    assert row[1] == pytest.approx(ref_reach(ref, target), abs=TOL)  # source: brute force
    scale = max(1.0, *(abs(t) for t in totals))
    for got, q in zip(row[2], levels):  # source: brute force, inverted CDF (Hyndman & Fan 1)
        want = [ref_quantile(ref, q)]
        if q <= Q_TOL:  # the smallest total; its probability may underflow to 0 in a double
            want.append(min(sum(a for a, p in deals if p > 0 and a < 0)
                            + sum(a for a, p in deals if p >= 1 and a > 0), want[0]))
        assert any(got == pytest.approx(w, abs=1e-12 * scale) for w in want), q
    o = row[3]
    stored = con.execute(
        f"SELECT outcome_bands(?::{OUTCOME}, ?::DOUBLE[]), outcome_reach(?::{OUTCOME}, ?), "
        f"outcome_quantiles(?::{OUTCOME}, ?::DOUBLE[])",
        [o, cuts, o, target, o, levels]).fetchone()
    if o["rounding"] == 0.0:
        # rule: on an exact outcome the stored readers give the aggregates' numbers
        assert stored == (row[0], row[1], row[2])
    else:
        # a snapped small group: every total moved up by less than rounding, so a cut on a
        # total is read exactly unless another total lies less than rounding below it
        assert o["rounding"] < o["step"]
        below = [t for t in totals if target - o["rounding"] < t < target]
        if not below:
            assert stored[1] == pytest.approx(row[1], abs=TOL)
    assert Q_TOL == 1e-12
