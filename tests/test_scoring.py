"""Scores of a forecast outcome against what happened: outcome_pit, outcome_crps,
outcome_interval, band_of and band_rps, checked against outside references.

References: brute-force enumeration of every win/loss scenario (tests/exact_reference.py);
the CRPS identity E|S - x| - 0.5 E|S - S'| (Gneiting & Raftery, JASA 2007, eq. 21); the
closed form of the CRPS of a normal distribution (Gneiting, Raftery, Westveld & Goldman,
Mon. Wea. Rev. 2005, eq. 5); SciPy's kstest for PIT uniformity; the RPS by hand.
"""

from __future__ import annotations

import math

import numpy as np
import pyarrow as pa
import pytest
from hypothesis import HealthCheck, given, settings, strategies as st
from scipy import stats

import exact_reference as ref
from conftest import one


def brute(amounts, probs, unit=1.0):
    """Distinct totals and their probabilities, every scenario enumerated."""
    units = np.round(np.asarray(amounts) / unit).astype(np.int64)
    values, mass = ref.atoms(units, probs)
    return values * unit, mass


def crps_identity(values, mass, x):
    """E|S - x| - 0.5 E|S - S'| over the atoms (Gneiting & Raftery 2007, eq. 21)."""
    spread = np.abs(values[:, None] - values[None, :])
    return float(mass @ np.abs(values - x) - 0.5 * mass @ spread @ mass)


def stored(con, amounts, probs, **kw):
    """The outcome of the deals, as outcome_dist stores it."""
    deals = pa.table({"amount": np.asarray(amounts, float), "prob": np.asarray(probs, float)})
    args = "".join(f", {k} := {v}" for k, v in kw.items())
    return con.execute(f"SELECT outcome_dist(amount, prob{args}) FROM deals").fetchall()[0][0]


def scores(con, o, x):
    return con.execute("SELECT outcome_pit($1::" + OUTCOME + ", $2), outcome_crps($1::"
                       + OUTCOME + ", $2)", [o, x]).fetchall()[0]


from sqlrisk import OUTCOME_SQL as OUTCOME  # noqa: E402


def small_groups(seed=11, count=40):
    """Groups of 1-12 deals in hundreds (stored exactly): dominant deals, credit notes,
    near-certain deals among them."""
    rng = np.random.default_rng(seed)
    for k in range(count):
        n = int(rng.integers(1, 13))
        amounts = np.round(rng.lognormal(np.log(30_000), 1.0, n), -2)
        if k % 5 == 1:
            amounts[0] = 2_000_000.0  # one dominant deal
        if k % 7 == 2:
            amounts[-1] = -12_300.0  # a credit note
        probs = rng.uniform(0.02, 0.98, n)
        if k % 6 == 3:
            probs[0] = 0.999
        yield amounts, probs


def test_crps_and_pit_equal_brute_force_on_every_scenario(con):
    checked = 0
    for amounts, probs in small_groups():
        o = stored(con, amounts, probs)
        assert o["rounding"] == 0.0  # an exact outcome: the identity holds exactly
        values, mass = brute(amounts, probs, unit=100.0)
        # actuals: on scenario totals, between them, below and above the support
        for x in [values[0], values[len(values) // 2], values[-1], values[0] - 5_000.0,
                  values[-1] + 7_500.0, float(np.mean(values)) + 50.0]:
            pit, crps = scores(con, o, float(x))
            assert crps == pytest.approx(crps_identity(values, mass, x), rel=1e-9, abs=1e-6)
            expect_pit = mass[values < x].sum() + 0.5 * mass[values == x].sum()
            assert pit == pytest.approx(expect_pit, abs=1e-12)
            checked += 1
    assert checked == 240


def test_an_actual_equal_to_a_scenario_total_built_from_float_sums(con):
    # 0.1 + 0.2 != 0.3 in floating point; a won total typed as 0.3 is still the scenario's
    o = stored(con, [0.1, 0.2], [0.5, 0.5])
    pit = one(con, f"SELECT outcome_pit($1::{OUTCOME}, 0.3)", [o])
    assert pit == pytest.approx(0.75 + 0.5 * 0.25)  # P(S < 0.3) = 0.75, P(S = 0.3) = 0.25


def test_inexact_outcomes_score_within_their_rounding(con):
    # Cents put these groups on an inexact lattice (rounding > 0, read as bins). Moving the
    # CDF by at most d in total (W1 distance) moves the CRPS by at most 2 d, because
    # |(F - H)^2 - (G - H)^2| <= 2 |F - G|; here d <= rounding + step / 2 (the lattice
    # total is within rounding of the true one, the bins spread each point over a step).
    rng = np.random.default_rng(5)
    for n in (6, 9, 12):
        amounts = np.round(rng.lognormal(np.log(20_000), 1.0, n), 2)
        probs = rng.uniform(0.05, 0.95, n)
        o = stored(con, amounts, probs)
        assert o["rounding"] > 0
        values, mass = brute(amounts, probs, unit=0.01)
        for x in (values[3], float(np.median(values)), values[-1] * 0.9):
            _, crps = scores(con, o, float(x))
            bound = 2 * (o["rounding"] + o["step"] / 2)
            assert abs(crps - crps_identity(values, mass, x)) <= bound


def test_crps_of_a_large_group_is_the_normal_closed_form_within_the_clt_bound(con):
    # 2,000 deals of 1,000 to 15,000 (whole thousands): an exact outcome (rounding 0, its
    # totals on a lattice of 1,000), and a total close to normal.
    rng = np.random.default_rng(8)
    n = 2000
    amounts = 1000.0 * rng.integers(1, 16, n)
    probs = rng.uniform(0.1, 0.9, n)
    o = stored(con, amounts, probs)
    assert o["rounding"] == 0.0
    mu = float(amounts @ probs)
    sigma = math.sqrt(float(np.sum(amounts ** 2 * probs * (1 - probs))))
    # E|X - EX|^3 of a deal a * Bernoulli(p): a^3 p q (p^2 + q^2)
    third = float(np.sum(amounts ** 3 * probs * (1 - probs) * (probs ** 2 + (1 - probs) ** 2)))
    # The Wasserstein-1 distance of a sum of independent terms to the normal of the same
    # mean and variance is at most sum E|X - EX|^3 / sigma^2 (Goldstein, Ann. Probab. 2010,
    # constant 1; from memory). The CRPS moves by at most twice the W1 distance, because
    # |(F - H)^2 - (G - H)^2| <= 2 |F - G|.
    bound = 2 * third / sigma ** 2
    worst = 0.0
    for z in (-2.0, -0.7, 0.0, 0.4, 1.5):
        x = mu + z * sigma
        _, crps = scores(con, o, x)
        # CRPS(N(mu, sigma^2), x) = sigma (z (2 Phi(z) - 1) + 2 phi(z) - 1 / sqrt(pi))
        # (Gneiting, Raftery, Westveld & Goldman 2005, eq. 5)
        normal = sigma * (z * (2 * stats.norm.cdf(z) - 1) + 2 * stats.norm.pdf(z)
                          - 1 / math.sqrt(math.pi))
        worst = max(worst, abs(crps - normal))
        assert abs(crps - normal) <= bound
    assert bound < 0.1 * sigma  # the bound itself says something at this size
    # measured: within 1e-4 sigma (the bound is 7.4% of sigma), steps of 1,000 included
    assert worst < 1e-3 * sigma


def groups_table(rng, count, inflate=1.0):
    """``count`` groups of 20-40 deals: their forecast probabilities (the stated ones times
    ``inflate``, capped) and a won total drawn from the stated ones."""
    rows, actual = [], []
    for g in range(count):
        n = int(rng.integers(20, 41))
        amounts = np.round(rng.lognormal(np.log(30_000), 1.0, n), -2)
        probs = rng.uniform(0.05, 0.9, n)
        won = rng.random(n) < probs
        actual.append(float(amounts[won].sum()))
        forecast = np.minimum(probs * inflate, 0.99)
        rows.append(pa.table({"g": np.full(n, g), "amount": amounts, "prob": forecast}))
    return pa.concat_tables(rows), pa.table({"g": np.arange(count), "actual": actual})


def pits(con, deals, actual):
    con.register("score_deals", deals)
    con.register("score_actual", actual)
    got = con.sql("""
        WITH f AS (SELECT g, outcome_dist(amount, prob) AS o FROM score_deals GROUP BY g)
        SELECT outcome_pit(f.o, a.actual) FROM f JOIN score_actual a USING (g) ORDER BY g
    """).fetchall()
    return np.array([r[0] for r in got])


def test_pit_is_uniform_when_actuals_come_from_the_forecast(con):
    deals, actual = groups_table(np.random.default_rng(2026), 2000)
    values = pits(con, deals, actual)
    assert len(values) == 2000 and ((values >= 0) & (values <= 1)).all()
    assert stats.kstest(values, "uniform").pvalue > 0.001  # SciPy's Kolmogorov-Smirnov test


def test_pit_is_not_uniform_when_the_probabilities_are_inflated(con):
    deals, actual = groups_table(np.random.default_rng(2026), 2000, inflate=1.25)
    values = pits(con, deals, actual)
    assert stats.kstest(values, "uniform").pvalue < 1e-6
    assert np.mean(values) < 0.4  # the actuals sit low in too optimistic forecasts


def test_band_rps_worked_example(con):
    # bands [0.2, 0.5, 0.3] (two cuts, k = 2); the total landed in band 2.
    # cumulative forecast: 0.2, 0.7; happened (landed <= j): 0, 1
    # (0.2 - 0)^2 = 0.04; (0.7 - 1)^2 = 0.09; mean over k = 2: (0.04 + 0.09) / 2 = 0.065
    assert one(con, "SELECT band_rps([0.2, 0.5, 0.3], 2)") == pytest.approx(0.065)
    # landed 3: (0.2)^2 + (0.7)^2 = 0.04 + 0.49 = 0.53, / 2 = 0.265
    assert one(con, "SELECT band_rps([0.2, 0.5, 0.3], 3)") == pytest.approx(0.265)
    # a sure forecast of the right band scores 0, of the farthest band 1
    assert one(con, "SELECT band_rps([0.0, 0.0, 1.0], 3)") == 0.0
    assert one(con, "SELECT band_rps([0.0, 0.0, 1.0], 1)") == pytest.approx(1.0)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.lists(st.floats(0.0, 1.0), min_size=1, max_size=6), st.data())
def test_band_rps_is_the_mean_squared_gap_of_the_cumulative_forecast(con, weights, data):
    w = np.array(weights) + 1e-3
    bands = (w / w.sum()).tolist()
    landed = data.draw(st.integers(1, len(bands)))
    got = one(con, "SELECT band_rps($1, $2)", [bands, landed])
    k = len(bands) - 1
    expect = 0.0 if k == 0 else sum((sum(bands[:j]) - (landed <= j)) ** 2
                                    for j in range(1, k + 1)) / k
    assert got == pytest.approx(expect, abs=1e-12) and 0.0 <= got <= 1.0


@settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.lists(st.integers(-50, 50), min_size=1, max_size=4, unique=True),
       st.integers(-60, 60), st.sampled_from([1.0, 0.01, 0.1, 1e6]))
def test_band_of_follows_the_band_rule_of_outcome_bands(con, cut_units, total_units, unit):
    # a total on a cut is in the upper band; the same total as a one-point outcome puts
    # all its mass in the band band_of names (cuts and total built by float products)
    cuts = [c * unit for c in sorted(cut_units)]
    total = total_units * unit
    band = one(con, "SELECT band_of($1, $2)", [total, cuts])
    point = {"origin": total, "step": 1.0, "mass": [1.0], "trials": 0, "rounding": 0.0}
    bands = one(con, f"SELECT outcome_bands($1::{OUTCOME}, $2)", [point, cuts])
    assert bands[band - 1] == 1.0
    assert band == 1 + sum(total_units >= c for c in sorted(cut_units))


def test_interval_ends_are_the_quantiles_and_cover_by_simulation(con):
    rng = np.random.default_rng(17)
    for n, level in ((8, 0.8), (30, 0.8), (400, 0.5), (400, 0.9)):
        amounts = np.round(rng.lognormal(np.log(25_000), 0.9, n), -2)
        probs = rng.uniform(0.05, 0.95, n)
        o = stored(con, amounts, probs)
        lo, hi = con.execute(f"SELECT outcome_interval($1::{OUTCOME}, level := $2).lo, "
                             f"outcome_interval($1::{OUTCOME}, level := $2).hi",
                             [o, level]).fetchall()[0]
        q = one(con, f"SELECT outcome_quantiles($1::{OUTCOME}, $2)",
                [o, [(1 - level) / 2, (1 + level) / 2]])
        assert (lo, hi) == (q[0], q[1])
        draws = 40_000
        totals = (rng.random((draws, n)) < probs) @ amounts
        covered = np.mean((totals >= lo - 1e-6) & (totals <= hi + 1e-6))
        se = math.sqrt(level * (1 - level) / draws)
        # a discrete total's central interval holds at least the level (up to the
        # lattice's accuracy on a large group), and not much more on a smooth one
        assert covered >= level - 4 * se - 0.002
        if n >= 400:
            assert covered <= level + 4 * se + 0.01


def test_interval_default_level_is_80_percent(con):
    o = {"origin": 0.0, "step": 1.0, "mass": [0.1] * 10, "trials": 0, "rounding": 0.0}
    assert one(con, f"SELECT outcome_interval($1::{OUTCOME})", [o]) == \
        one(con, f"SELECT outcome_interval($1::{OUTCOME}, level := 0.8)", [o]) == \
        {"lo": 0.0, "hi": 8.0}  # quantiles 0.1 and 0.9 of 0..9 by the inverted CDF


def test_scores_are_null_row_by_row(con):
    got = con.sql(f"""
        SELECT outcome_pit(o, a), outcome_crps(o, a), outcome_interval(o).lo, band_of(a, c),
               band_rps(b, l)
        FROM (VALUES (NULL::{OUTCOME}, 1.0, [1.0], [0.5, 0.5], 1),
                     ({{'origin': 0.0, 'step': 1.0, 'mass': [1.0], 'trials': 0,
                       'rounding': 0.0}}, NULL, NULL, NULL, NULL)) t(o, a, c, b, l)
    """).fetchall()
    assert got == [(None, None, None, 2, 0.25), (None, None, 0.0, None, None)]
