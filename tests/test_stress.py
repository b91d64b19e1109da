"""Numerical stress: extreme probabilities and amounts, degenerate groups.

Every case checks the properties any distribution of a total must have (common
practice): masses non-negative and summing to 1 (within 1e-9 here), the
probability below a cut never decreasing as the cut moves up, quantiles never
decreasing in the level, nothing NaN; and the mean of the total, which is
sum(amount * prob) by linearity of expectation (common practice), to 1e-9
relative (the lattice keeps it exactly; a simulation is held to 5 standard errors).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import sqlrisk

OUTCOME = sqlrisk.OUTCOME_SQL
DEALS = "(SELECT unnest(?::DOUBLE[]) AS amount, unnest(?::DOUBLE[]) AS prob)"
MASS_TOL = 1e-9
LEVELS = [0.0, 1e-9, 0.001, 0.01, 0.1, 0.25, 0.5, 0.75, 0.9, 0.99, 0.999, 1 - 1e-9, 1.0]

FUNCTIONS = {
    "exact": "outcome_dist(amount, prob)",
    "correlated": "outcome_dist(amount, prob, correlation := 0.2)",
    "simulated": "outcome_sim(amount, prob, trials := 20000, seed := 7)",
}


def tiny_and_sure(n: int, seed: int):
    """Log-normal amounts in cents; probabilities from 1e-12 up to 1 - 1e-12."""
    rng = np.random.default_rng(seed)
    amount = np.round(rng.lognormal(np.log(20_000), 1.2, n), 2)
    prob = 10.0 ** rng.uniform(-12, 0, n)
    prob[::2] = 1.0 - prob[::2]
    prob[:4] = [1e-12, 1 - 1e-12, 0.5, 1e-12]
    return amount, prob


def wide_amounts(n: int, seed: int):
    """Amounts from 0.01 to 1e12 in one group, some negative."""
    rng = np.random.default_rng(seed)
    amount = np.round(10.0 ** rng.uniform(-2, 12, n), 2)
    amount[amount == 0] = 0.01
    amount[:2] = [0.01, 1e12]
    amount[rng.random(n) < 0.05] *= -1
    return amount, rng.uniform(0.0, 1.0, n)


def outcome_of(con, fn: str, amount, prob, trials: int = 20000):
    call = FUNCTIONS[fn].replace("20000", str(trials))
    return con.execute(f"SELECT {call} FROM {DEALS}",
                       [[float(a) for a in amount], [float(p) for p in prob]]).fetchone()[0]


def check_distribution(con, o, amount, prob):
    mass = np.array(o["mass"])
    assert np.isfinite([o["origin"], o["step"], o["rounding"]]).all()
    assert np.isfinite(mass).all() and (mass >= 0).all()
    assert abs(mass.sum() - 1.0) <= MASS_TOL
    mean, sd = con.execute(f"SELECT outcome_mean(?::{OUTCOME}), outcome_sd(?::{OUTCOME})",
                           [o, o]).fetchone()
    expected = float(np.dot(amount, prob))
    scale = float(np.sum(np.abs(amount) * prob)) + 1.0
    if o["trials"] == 0:
        assert mean == pytest.approx(expected, abs=1e-9 * scale)
    else:
        true_sd = math.sqrt(float(np.sum(np.square(amount) * prob * (1 - prob))))
        assert abs(mean - expected) <= 5 * true_sd / math.sqrt(o["trials"]) + 1e-9 * scale
    assert math.isfinite(sd) and sd >= 0
    # quantiles never decrease in the level; the probability below a cut never decreases
    qs = con.execute(f"SELECT outcome_quantiles(?::{OUTCOME}, ?::DOUBLE[])", [o, LEVELS]).fetchone()[0]
    assert np.isfinite(qs).all() and (np.diff(qs) >= 0).all()
    # from below the smallest total to beyond the largest one's bin (half a step on
    # an outcome read as bins)
    lo, hi = qs[0] - o["step"] - 1.0, qs[-1] + o["step"] + 1.0
    cuts = sorted(set(np.linspace(lo, hi, 41).tolist()) | set(qs))
    bands = con.execute(f"SELECT outcome_bands(?::{OUTCOME}, ?::DOUBLE[])", [o, cuts]).fetchone()[0]
    assert np.isfinite(bands).all() and min(bands) >= 0
    below = np.cumsum(bands)[:-1]
    assert (np.diff(below) >= -1e-15).all()
    assert below[0] == 0.0 and below[-1] == pytest.approx(1.0, abs=1e-12)


@pytest.mark.parametrize("fn", ["exact", "simulated"])
def test_hundred_thousand_deals_with_probabilities_from_1e_12_to_1_minus_1e_12(con, fn):
    amount, prob = tiny_and_sure(100_000, seed=900)
    o = outcome_of(con, fn, amount, prob, trials=2000)  # 2e8 draws: ~2 s
    check_distribution(con, o, amount, prob)


def test_correlated_group_with_probabilities_from_1e_12_to_1_minus_1e_12(con):
    amount, prob = tiny_and_sure(2_000, seed=901)
    check_distribution(con, outcome_of(con, "correlated", amount, prob), amount, prob)


@pytest.mark.parametrize("fn", list(FUNCTIONS))
def test_amounts_from_a_cent_to_a_trillion_in_one_group(con, fn):
    amount, prob = wide_amounts(3_000, seed=902)
    check_distribution(con, outcome_of(con, fn, amount, prob), amount, prob)


@pytest.mark.parametrize("fn", list(FUNCTIONS))
def test_every_deal_certain_is_one_point_at_the_sum(con, fn):
    amount = np.array([0.01, 1e12, 250_000.5, -75.25, 3.0])
    o = outcome_of(con, fn, amount, np.ones(len(amount)))
    assert len(o["mass"]) == 1 and o["mass"][0] == 1.0
    assert o["origin"] == pytest.approx(float(amount.sum()), rel=1e-15)
    check_distribution(con, o, amount, np.ones(len(amount)))


@pytest.mark.parametrize("fn", list(FUNCTIONS))
@pytest.mark.parametrize("amount, prob", [(1234.56, 0.3), (-99.99, 1e-12), (1e12, 1 - 1e-12)])
def test_a_single_deal_is_two_points(con, fn, amount, prob):
    o = outcome_of(con, fn, [amount], [prob])
    points = {o["origin"] + i * o["step"]: m for i, m in enumerate(o["mass"]) if m > 0}
    assert set(points) <= {0.0, amount}
    if fn != "simulated":
        assert points.get(amount, 0.0) == pytest.approx(prob, abs=1e-15)
    check_distribution(con, o, np.array([amount]), np.array([prob]))


@pytest.mark.parametrize("fn", list(FUNCTIONS))
def test_all_amounts_zero_is_the_point_zero(con, fn):
    prob = np.random.default_rng(903).uniform(0, 1, 500)
    o = outcome_of(con, fn, np.zeros(500), prob)
    assert o["mass"] == [1.0] and o["origin"] == 0.0
    bands = con.execute(f"SELECT outcome_bands(?::{OUTCOME}, [-0.01, 0.0, 0.01])", [o]).fetchone()[0]
    assert bands == [0.0, 0.0, 1.0, 0.0]  # reaching a cut puts the total in the upper band


def test_band_odds_and_quantiles_agree_with_the_stored_outcome_on_extreme_input(con):
    """The one-call aggregates read the same distribution as the stored outcome."""
    amount, prob = wide_amounts(2_000, seed=904)
    params = [[float(a) for a in amount], [float(p) for p in prob]]
    o = outcome_of(con, "exact", amount, prob)
    cuts = sorted({0.0, float(np.dot(amount, prob)), 1e12})
    direct = con.execute(f"SELECT band_odds(amount, prob, ?::DOUBLE[]), "
                         f"total_quantiles(amount, prob, ?::DOUBLE[]) FROM {DEALS}",
                         [cuts, LEVELS, *params]).fetchone()
    stored = con.execute(f"SELECT outcome_bands(?::{OUTCOME}, ?::DOUBLE[]), "
                         f"outcome_quantiles(?::{OUTCOME}, ?::DOUBLE[])",
                         [o, cuts, o, LEVELS]).fetchone()
    assert direct == stored
