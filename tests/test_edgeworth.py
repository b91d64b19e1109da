"""The Edgeworth route for large correlated groups (``kernels/edgeworth.py``).

References: SciPy's binomial skewness and kurtosis for the cumulants; for the
outcomes, the same copula mixture computed on the exact unit lattice of the
amounts (``step := 100``, every amount a whole number of steps, nothing split),
whose quadrature ``tests/test_correlation.py`` checks against SciPy's adaptive
quadrature.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from sqlrisk.kernels import copula, edgeworth
from sqlrisk.kernels.readout import prob_below


def _deals(n, seed, median=4_000.0):
    """Log-normal amounts in hundreds and stage-like probabilities (invented)."""
    rng = np.random.default_rng(seed)
    amount = np.maximum(np.round(np.exp(rng.normal(np.log(median), 1.0, n)) / 100) * 100, 100)
    prob = np.clip(rng.choice([0.05, 0.15, 0.35, 0.6, 0.85], n) + rng.normal(0, 0.05, n),
                   0.02, 0.95).round(3)
    return amount, prob


def _cdf(origin, step, mass, rounding, xs):
    cum = np.cumsum(mass)
    return np.array([prob_below(origin, step, cum, rounding, x) for x in xs])


@pytest.mark.parametrize("n,p", [(40, 0.3), (500, 0.02), (7, 0.9)])
def test_cumulants_are_the_binomials(n, p):
    amount = np.full(n, 250.0)
    k = edgeworth.cumulants(amount, np.full(n, stats.norm.ppf(p)), 0.0, np.zeros(1))[:, 0]
    mean, var, skew, kurt = stats.binom.stats(n, p, moments="mvsk")
    # Source: scipy.stats.binom (a sum of n equal deals is 250 x Binomial(n, p)).
    assert k[0] == pytest.approx(250.0 * mean, rel=1e-12)
    assert k[1] == pytest.approx(250.0**2 * var, rel=1e-12)
    assert k[2] / k[1] ** 1.5 == pytest.approx(skew, rel=1e-9)
    assert k[3] / k[1] ** 2 == pytest.approx(kurt, rel=1e-9)  # excess kurtosis
    # The fifth from the central moments of one deal, mu_k = p q^k + q (-p)^k, and the
    # moment-cumulant relation k5 = mu5 - 10 mu3 mu2 (Kendall & Stuart, vol. 1, 3.14;
    # from memory).
    q = 1.0 - p
    mu = {j: p * q**j + q * (-p) ** j for j in (2, 3, 5)}
    assert k[4] == pytest.approx(n * 250.0**5 * (mu[5] - 10 * mu[3] * mu[2]), rel=1e-9)


@pytest.mark.parametrize("n,rho,seed,measured", [(1000, 0.05, 8, 1.7e-6), (600, 0.2, 4, 5.7e-7)])
def test_large_group_matches_the_unit_lattice_mixture(n, rho, seed, measured):
    amount, prob = _deals(n, seed)
    offsets = np.array([0, n], dtype=np.int64)
    rhos = np.array([rho])
    smooth, _ = copula.correlated_outcomes(amount, prob, offsets, rhos)
    exact, _ = copula.correlated_outcomes(amount, prob, offsets, rhos, step_req=np.array([100.0]))
    assert exact.rounding[0] == 0.0  # the reference is on the amounts' own lattice
    # the Edgeworth route was taken: its own lattice, read as bins
    assert len(smooth.row(0)) == edgeworth.POINTS_PER_BIN * copula.DEFAULT_BINS
    assert smooth.rounding[0] == smooth.step[0]
    lo = smooth.origin[0]
    hi = lo + smooth.step[0] * (len(smooth.row(0)) - 1)
    # between the reference's points (every total a multiple of 100): a smooth reading
    # cannot have the steps of the true CDF at the points themselves
    xs = np.round(np.linspace(lo, hi, 601) / 100) * 100 + 50
    ours = _cdf(smooth.origin[0], smooth.step[0], smooth.row(0), smooth.rounding[0], xs)
    ref = _cdf(exact.origin[0], exact.step[0], exact.row(0), 0.0, xs)
    gap = np.abs(ours - ref).max()
    # measured 1.7e-6 and 5.7e-7 on 3,001 points (2026-12-04); the bound is the measured
    # value with a margin of 3, and never above SMOOTH_TOL, the gate on the third-order terms
    assert gap <= min(3 * measured, edgeworth.SMOOTH_TOL)
    assert smooth.mass.sum() == pytest.approx(1.0, abs=1e-12)
    mean = float((amount * prob).sum())  # common practice: the copula keeps every p_i
    grid = smooth.origin[0] + smooth.step[0] * np.arange(len(smooth.row(0)))
    assert float(grid @ smooth.row(0)) == pytest.approx(mean, rel=1e-6)


def test_a_dominant_deal_keeps_the_lattice_route(monkeypatch):
    amount, prob = _deals(600, 5)
    amount[0], prob[0] = 5e7, 0.5  # one deal worth most of the total: far from normal
    offsets = np.array([0, len(amount)], dtype=np.int64)
    routed, _ = copula.correlated_outcomes(amount, prob, offsets, np.array([0.1]))
    monkeypatch.setattr(edgeworth, "SMOOTH_TOL", -1.0)  # no group qualifies
    lattice, _ = copula.correlated_outcomes(amount, prob, offsets, np.array([0.1]))
    np.testing.assert_array_equal(routed.mass, lattice.mass)
    assert routed.origin[0] == lattice.origin[0] and routed.step[0] == lattice.step[0]


def test_small_groups_and_requested_steps_keep_the_lattice_route(monkeypatch):
    small_a, small_p = _deals(150, 6)
    big_a, big_p = _deals(700, 7)
    amount = np.concatenate([small_a, big_a])
    prob = np.concatenate([small_p, big_p])
    offsets = np.array([0, 150, 850], dtype=np.int64)
    rhos = np.array([0.15, 0.15])
    steps = np.array([0.0, 500.0])  # the large group asks for its step
    routed, _ = copula.correlated_outcomes(amount, prob, offsets, rhos, step_req=steps)
    monkeypatch.setattr(edgeworth, "SMOOTH_TOL", -1.0)
    lattice, _ = copula.correlated_outcomes(amount, prob, offsets, rhos, step_req=steps)
    np.testing.assert_array_equal(routed.mass, lattice.mass)
    np.testing.assert_array_equal(routed.offsets, lattice.offsets)


def test_smooth_outcome_error_covers_its_gap(con):
    amount, prob = _deals(1000, 8)
    offsets = np.array([0, 1000], dtype=np.int64)
    exact, _ = copula.correlated_outcomes(amount, prob, offsets, np.array([0.05]),
                                          step_req=np.array([100.0]))
    con.execute("CREATE TABLE big AS SELECT unnest(?::DOUBLE[]) a, unnest(?::DOUBLE[]) p",
                [amount.tolist(), prob.tolist()])
    o, err = con.execute("SELECT o, outcome_error(o) FROM (SELECT outcome_dist(a, p, "
                         "correlation := 0.05) o FROM big)").fetchall()[0]
    # between the amounts' points, as above: at a multiple of 100 itself the true CDF
    # steps by a whole point's mass (about 1e-4 here, amounts of a few thousand in
    # hundreds), which no reading of a lattice coarser than the amounts' unit resolves
    xs = np.round(np.linspace(o["origin"], o["origin"] + o["step"] * (len(o["mass"]) - 1),
                              601) / 100) * 100 + 50
    gap = np.abs(_cdf(o["origin"], o["step"], np.array(o["mass"]), o["rounding"], xs)
                 - _cdf(exact.origin[0], exact.step[0], exact.row(0), 0.0, xs)).max()
    # outcome_error's promise (README "outcome_error"): no CDF reading further than it
    assert gap <= err
