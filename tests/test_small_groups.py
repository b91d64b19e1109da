"""Small and lumpy groups: every function against every win/loss scenario.

Brute force adds up all 2^n scenarios (n <= 16; ``tests/exact_reference.py``,
no sqlrisk code) with amounts in cents and in whole tens, credit notes, and
probabilities of 0 and 1; cuts sit on scenario totals and midway between them.
SciPy's ``poisson_binom`` gives the reference for equal amounts. The rule checked
(README "Accuracy: which answers are exact"): band_odds, reach_odds, total_quantiles and
deal_swing are exact (to 1e-12) for these groups, whatever the amounts' unit.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from tests import exact_reference as ref

TOL = 1e-12
DEALS = "(SELECT unnest(?::DOUBLE[]) AS amount, unnest(?::DOUBLE[]) AS prob)"
OUTCOME = "STRUCT(origin DOUBLE, step DOUBLE, mass DOUBLE[], trials BIGINT, rounding DOUBLE)"


def group(seed: int, n: int, unit: float):
    """``(units, probs)``: log-normal amounts around 13,000 in ``unit``, one in four a
    credit note, probabilities to two decimals with some 0 and 1."""
    rng = np.random.default_rng([seed, n, int(unit * 100)])
    units = np.maximum(np.round(np.exp(rng.normal(np.log(13_000), 1.0, n)) / unit), 1)
    units = units.astype(np.int64) * np.where(rng.uniform(size=n) < 0.25, -1, 1)
    probs = rng.uniform(0.02, 0.98, n).round(2)
    probs[rng.uniform(size=n) < 0.08] = 0.0
    probs[rng.uniform(size=n) < 0.08] = 1.0
    return units, probs


def cut_points(values: np.ndarray, rng, most: int = 40) -> np.ndarray:
    """Cuts (in units) on scenario totals and midway between neighbouring ones."""
    pick = np.sort(rng.choice(len(values), min(most, len(values)), replace=False))
    on = values[pick].astype(np.float64)
    nxt = values[np.minimum(pick + 1, len(values) - 1)]
    between = (on + nxt) / 2.0
    return np.unique(np.concatenate([on, between[nxt > on]]))


CASES = [(seed, n, unit) for unit in (0.01, 10.0) for n in (1, 2, 3, 5, 8, 12, 16)
         for seed in range(2)]


@pytest.mark.parametrize("seed, n, unit", CASES)
def test_aggregates_equal_every_scenario(con, seed, n, unit):
    units, probs = group(seed, n, unit)
    values, mass = ref.atoms(units, probs)
    rng = np.random.default_rng(seed)
    cuts = cut_points(values, rng)
    levels = level_points(mass)
    target = cuts[len(cuts) // 2]
    bands, reach, quants = con.execute(
        "SELECT band_odds(amount, prob, ?::DOUBLE[]), reach_odds(amount, prob, ?), "
        f"total_quantiles(amount, prob, ?::DOUBLE[]) FROM {DEALS}",
        [(cuts * unit).tolist(), float(target * unit), levels.tolist(),
         (units * unit).tolist(), probs.tolist()]).fetchone()
    # source: brute force over every scenario
    expected = np.diff(np.concatenate([[0.0], ref.below(values, mass, cuts), [1.0]]))
    assert bands == pytest.approx(expected.tolist(), abs=TOL)
    assert reach == pytest.approx(1.0 - ref.below(values, mass, [target])[0], abs=TOL)
    # source: brute force, inverted CDF (Hyndman & Fan type 1): smallest x with P(S <= x) >= q
    cum = np.cumsum(mass)
    for got, q in zip(quants, levels):
        want = values[min(np.searchsorted(cum, q - 1e-12), len(values) - 1)] * unit
        assert got == pytest.approx(want, abs=1e-9 * max(1.0, abs(want))), q


def level_points(mass: np.ndarray) -> np.ndarray:
    """Quantile levels on the CDF's steps (the hardest place) and between them."""
    cum = np.cumsum(mass)
    on = cum[:: max(1, len(cum) // 8)]
    return np.unique(np.clip(np.concatenate([[0.0, 0.5, 1.0], on, on - 1e-6]), 0.0, 1.0))


@pytest.mark.parametrize("seed, n, unit", [c for c in CASES if c[1] <= 12])
def test_deal_swing_equals_every_scenario(con, seed, n, unit):
    units, probs = group(seed, n, unit)
    values, mass = ref.atoms(units, probs)
    target = float(values[len(values) // 2]) * unit  # a target on a scenario total
    rows = con.execute(
        "SELECT unnest(deal_swing(i, amount, prob, ?)) FROM "
        "(SELECT unnest(range(?)) AS i, unnest(?::DOUBLE[]) AS amount, unnest(?::DOUBLE[]) AS prob)",
        [target, n, (units * unit).tolist(), probs.tolist()]).fetchall()
    assert len(rows) == n
    for (d,) in rows:
        i = d["deal_id"]
        others = np.delete(np.arange(n), i)
        v, m = ref.atoms(units[others], probs[others])
        t = target / unit
        # source: brute force over the other deals' scenarios
        assert d["reach_if_won"] == pytest.approx(1 - ref.below(v, m, [t - units[i]])[0], abs=TOL)
        assert d["reach_if_lost"] == pytest.approx(1 - ref.below(v, m, [t])[0], abs=TOL)


@pytest.mark.parametrize("seed, n, unit", CASES)
def test_stored_outcome_is_exact_or_keeps_totals_on_their_side_of_a_cut(con, seed, n, unit):
    """A stored outcome is exact, or (when the amounts' unit lattice is too wide) holds
    every scenario total moved up by less than ``rounding`` onto a point: then a cut on a
    total, or midway between two, is read exactly unless another total lies less than
    ``rounding`` below it."""
    units, probs = group(seed, n, unit)
    values, mass = ref.atoms(units, probs)
    o = con.execute(f"SELECT outcome_dist(amount, prob) FROM {DEALS}",
                    [(units * unit).tolist(), probs.tolist()]).fetchone()[0]
    cuts = cut_points(values, np.random.default_rng(seed), most=200)
    bands, error = con.execute(f"SELECT outcome_bands(?::{OUTCOME}, ?::DOUBLE[]), "
                               f"outcome_error(?::{OUTCOME})",
                               [o, (cuts * unit).tolist(), o]).fetchone()
    read = np.cumsum(bands)[:-1]
    exact = ref.below(values, mass, cuts)  # source: brute force
    if o["rounding"] == 0.0:
        assert error == 0.0  # within the exact budget: the outcome is the distribution
    else:
        assert o["rounding"] < o["step"] and error > 0.0  # snapped: read as points
    slack = o["rounding"] / unit
    for c, got, want in zip(cuts, read, exact):
        near = values[(values < c) & (values > c - slack)]
        if not len(near):
            assert got == pytest.approx(want, abs=TOL), c
    assert np.max(np.abs(read - exact)) <= error + TOL


@pytest.mark.parametrize("n, amount", [(6, 1234.56), (17, 0.01), (30, 250.0), (60, 99_999.99)])
def test_equal_amounts_match_scipy_poisson_binom(con, n, amount):
    rng = np.random.default_rng(n)
    probs = rng.uniform(0.01, 0.99, n).round(3)
    dist = stats.poisson_binom(probs)
    counts = np.arange(n + 1)
    cuts = np.concatenate([counts[1:-1:2], counts[2:-1:3] + 0.5]) * amount
    cuts = np.unique(cuts)
    bands, quants = con.execute(
        "SELECT band_odds(amount, prob, ?::DOUBLE[]), total_quantiles(amount, prob, ?::DOUBLE[]) "
        f"FROM {DEALS}", [cuts.tolist(), [0.1, 0.5, 0.9], [amount] * n, probs.tolist()]).fetchone()
    below = dist.cdf(np.ceil(cuts / amount - 1e-9) - 1)  # P(count < c / amount)
    # source: scipy.stats.poisson_binom (SciPy >= 1.15)
    assert bands == pytest.approx(np.diff(np.concatenate([[0.0], below, [1.0]])).tolist(), abs=TOL)
    for got, q in zip(quants, [0.1, 0.5, 0.9]):
        assert got == pytest.approx(dist.ppf(q) * amount, rel=1e-12)  # source: scipy ppf


def test_cuts_on_every_total_of_many_groups_with_likely_deals(con):
    """300 groups of 2 to 5 deals in cents that share an odd unit (7 cents, so the exact
    lattice is used), most deals likelier won than lost, and a cut on every scenario total
    (the lowest, 0, among them). A likely deal enters the lattice as its amount for certain
    less a possible loss, so the lowest total comes out of amounts that cancel; a cut there
    must still read it as reached (this case once read P(total < 0) as P(every deal lost))."""
    rng = np.random.default_rng(7)
    rows, expected = [], {}
    for g in range(300):
        n = int(rng.integers(2, 6))
        units = 7 * rng.integers(100, 800_000, n)
        probs = rng.uniform(0.3, 0.95, n).round(2)
        values, mass = ref.atoms(units, probs)
        # source: brute force over every scenario
        bands = np.diff(np.concatenate([[0.0], ref.below(values, mass, values), [1.0]]))
        expected[g] = (values * 0.01, bands)
        rows += [(g, float(u) * 0.01, float(p)) for u, p in zip(units, probs)]
    con.execute("CREATE TABLE d (g INT, amount DOUBLE, prob DOUBLE)")
    con.executemany("INSERT INTO d VALUES (?, ?, ?)", rows)
    con.execute("CREATE TABLE c (g INT, cuts DOUBLE[])")
    con.executemany("INSERT INTO c VALUES (?, ?)",
                    [(g, v.tolist()) for g, (v, _) in expected.items()])
    got = con.execute("SELECT g, band_odds(amount, prob, cuts), "
                      "outcome_bands(outcome_dist(amount, prob), any_value(cuts)) "
                      "FROM d JOIN c USING (g) GROUP BY g").fetchall()
    assert len(got) == 300
    for g, bands, stored in got:
        assert bands == pytest.approx(expected[g][1].tolist(), abs=TOL), g
        assert stored == pytest.approx(expected[g][1].tolist(), abs=TOL), g


def test_stored_outcomes_of_small_groups_stay_within_the_exact_size_limit(con):
    """README *The lattice*: an exact lattice holds at most 65,536 points (512 KB); a small
    group whose exact lattice would be wider is stored by its scenarios on 32,768 points.
    Groups of 2 to 8 deals in cents and hundreds, every third with one deal 1,000 times the
    others (its "won" and "lost" copies of the rest once took an exact lattice of up to a
    million points), and a three-deal group that once did too."""
    rng = np.random.default_rng(3)
    groups = [(np.array([124_886, 61_722, 1_356_346]), np.array([0.85, 0.17, 0.36]), 0.01)]
    for g in range(150):
        unit = (0.01, 100.0)[g % 2]
        n = int(rng.integers(2, 9))
        units = np.maximum(np.round(np.exp(rng.normal(np.log(13_000), 1.0, n)) / unit), 1)
        units = units.astype(np.int64)
        if g % 3 == 0:
            units[0] *= 1000
        groups.append((units, rng.uniform(0.02, 0.95, n).round(2), unit))
    for units, probs, unit in groups:
        values, mass = ref.atoms(units, probs)
        cuts = cut_points(values, rng, most=10)
        o, bands = con.execute(f"SELECT outcome_dist(amount, prob), band_odds(amount, prob, ?) "
                               f"FROM {DEALS}", [(cuts * unit).tolist(), (units * unit).tolist(),
                                                 probs.tolist()]).fetchone()
        assert len(o["mass"]) <= 65_536, (units, probs)
        # source: brute force over every scenario
        expected = np.diff(np.concatenate([[0.0], ref.below(values, mass, cuts), [1.0]]))
        assert bands == pytest.approx(expected.tolist(), abs=TOL)
