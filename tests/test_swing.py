"""deal_swing: the chance of reaching a target with each deal won, and with it lost.

References: brute force over every win/loss scenario of the other deals (no sqlrisk
code), and the law of total probability, P(S >= t) = p_i P(S >= t | won) +
(1 - p_i) P(S >= t | lost) for every deal i (common practice).
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest

TOL = 1e-12
DEALS = ("(SELECT unnest(?::VARCHAR[]) AS deal_id, unnest(?::DOUBLE[]) AS amount, "
         "unnest(?::DOUBLE[]) AS prob)")


def brute_reach(amounts, probs, skip, extra, target):
    """P(sum of the other deals + extra >= target), adding up all their scenarios."""
    others = [j for j in range(len(amounts)) if j != skip]
    total = 0.0
    for won in itertools.product((False, True), repeat=len(others)):
        chance = math.prod(probs[j] if w else 1.0 - probs[j] for j, w in zip(others, won))
        if sum(amounts[j] for j, w in zip(others, won) if w) + extra >= target:
            total += chance
    return total


def swing_rows(con, ids, amounts, probs, target):
    rows = con.execute(
        f"SELECT s.deal_id, s.reach_if_won, s.reach_if_lost, s.swing "
        f"FROM (SELECT unnest(deal_swing(deal_id, amount, prob, ?::DOUBLE)) AS s FROM {DEALS})",
        [target, ids, [float(a) for a in amounts], [float(p) for p in probs]]).fetchall()
    return {r[0]: r[1:] for r in rows}


def random_group(rng, n):
    amounts = rng.integers(-60, 250, n).astype(float)
    probs = rng.uniform(0.0, 1.0, n).round(3)
    probs[rng.random(n) < 0.15] = 1.0
    probs[rng.random(n) < 0.1] = 0.0
    return amounts, probs


@pytest.mark.parametrize("seed", range(12))
def test_against_brute_force_with_negative_amounts(con, seed):
    rng = np.random.default_rng(700 + seed)
    n = int(rng.integers(1, 11))
    amounts, probs = random_group(rng, n)
    target = float(rng.integers(-60, 700))
    ids = [f"d{i}" for i in range(n)]
    got = swing_rows(con, ids, amounts, probs, target)
    assert set(got) == set(ids)
    for i, deal in enumerate(ids):
        won, lost, swing = got[deal]
        # source: brute force over the other deals' 2^(n-1) scenarios
        assert won == pytest.approx(brute_reach(amounts, probs, i, amounts[i], target), abs=TOL)
        assert lost == pytest.approx(brute_reach(amounts, probs, i, 0.0, target), abs=TOL)
        assert swing == won - lost


@pytest.mark.parametrize("seed", range(6))
def test_total_probability_identity_for_every_deal(con, seed):
    rng = np.random.default_rng(800 + seed)
    n = int(rng.integers(20, 300))
    amounts = rng.integers(-5, 40, n).astype(float) * 100  # whole hundreds: an exact lattice
    probs = rng.uniform(0.01, 0.99, n).round(2)
    target = float(np.dot(amounts, probs)) + float(rng.normal(0, 500))
    params = [[f"d{i}" for i in range(n)], amounts.tolist(), probs.tolist()]
    reach = con.execute(f"SELECT reach_odds(amount, prob, ?::DOUBLE) FROM {DEALS}",
                        [target, *params]).fetchone()[0]
    got = swing_rows(con, *params, target)
    for i in range(n):
        won, lost, _ = got[f"d{i}"]
        # source: law of total probability (common practice)
        assert probs[i] * won + (1 - probs[i]) * lost == pytest.approx(reach, abs=1e-12)
        # winning a positive deal can only help; winning a credit note can only hurt
        assert (won >= lost) if amounts[i] >= 0 else (won <= lost)


def test_identity_within_the_lattice_error_on_an_inexact_lattice(con):
    """Log-normal amounts in cents: the lattice is inexact, so the identity holds to the
    lattice's accuracy (bands within 1e-3 is the benchmark's figure; here far closer)."""
    rng = np.random.default_rng(901)
    amounts = np.round(rng.lognormal(np.log(30_000), 1.0, 400), 2)
    probs = rng.uniform(0.05, 0.9, 400).round(3)
    target = float(np.dot(amounts, probs))
    params = [[f"d{i}" for i in range(400)], amounts.tolist(), probs.tolist()]
    o = con.execute(f"SELECT outcome_dist(amount, prob) FROM {DEALS}", params).fetchone()[0]
    assert o["rounding"] > 0
    reach = con.execute(f"SELECT reach_odds(amount, prob, ?::DOUBLE) FROM {DEALS}",
                        [target, *params]).fetchone()[0]
    got = swing_rows(con, *params, target)
    mixed = [probs[i] * got[f"d{i}"][0] + (1 - probs[i]) * got[f"d{i}"][1] for i in range(400)]
    assert max(abs(m - reach) for m in mixed) < 1e-4


def test_deal_ids_keep_their_type_and_join_back(con):
    con.execute("CREATE OR REPLACE TEMP TABLE sw_deals AS SELECT * FROM (VALUES "
                "(101, 'own_a', 500.0, 0.5), (102, 'own_a', 300.0, 0.2), (103, 'own_a', 200.0, 0.9), "
                "(201, 'own_b', 800.0, 0.4), (202, 'own_b', 100.0, NULL)) t(deal_id, owner, amount, prob)")
    rows = con.execute("""
        WITH s AS (SELECT owner, unnest(deal_swing(deal_id, amount, prob, 600.0)) AS x
                   FROM sw_deals GROUP BY owner)
        SELECT d.deal_id, typeof(s.x.deal_id), s.x.swing
        FROM s JOIN sw_deals AS d ON d.deal_id = s.x.deal_id ORDER BY d.deal_id""").fetchall()
    assert [r[0] for r in rows] == [101, 102, 103, 201]  # the NULL-probability deal is skipped
    assert {r[1] for r in rows} == {"INTEGER"}
    # own_b: one usable deal of 800 against 600: won reaches for sure, lost never
    assert rows[-1][2] == 1.0


def test_null_target_and_groups_without_usable_rows_give_null(con):
    assert con.execute(f"SELECT deal_swing(deal_id, amount, prob, NULL::DOUBLE) FROM {DEALS}",
                       [["a"], [100.0], [0.5]]).fetchone()[0] is None
    assert con.execute(f"SELECT deal_swing(deal_id, amount, prob, 50.0) FROM {DEALS}",
                       [["a"], [None], [0.5]]).fetchone()[0] is None


def test_results_do_not_depend_on_row_order(con):
    rng = np.random.default_rng(902)
    amounts, probs = random_group(rng, 60)
    amounts = np.round(amounts * 13.7, 2)
    ids = [f"d{i}" for i in range(60)]
    first = swing_rows(con, ids, amounts, probs, 1500.0)
    order = rng.permutation(60)
    again = swing_rows(con, [ids[i] for i in order], amounts[order], probs[order], 1500.0)
    assert first == again  # bit-identical


def test_bad_input_names_the_function(con):
    with pytest.raises(Exception, match=r"deal_swing: probability 40\.0 is outside \[0, 1\]"):
        con.execute(f"SELECT deal_swing(deal_id, amount, prob, 50.0) FROM {DEALS}",
                    [["a", "b"], [100.0, 20.0], [40.0, 0.5]]).fetchall()
    with pytest.raises(Exception, match=r"deal_swing: target inf is not a finite total"):
        con.execute(f"SELECT deal_swing(deal_id, amount, prob, 'inf'::DOUBLE) FROM {DEALS}",
                    [["a"], [100.0], [0.5]]).fetchall()
