"""Calibration of stated win probabilities against closed deals.

Three numerical jobs, each on many groups at once (values of every group back
to back, ``offsets`` delimiting them):

* ``fit_maps``: a monotone map from stated probability to observed win rate,
  by isotonic regression (pool-adjacent-violators; Ayer et al., "An empirical
  distribution function for sampling with incomplete information", Ann. Math.
  Statist. 1955; Barlow et al., "Statistical Inference under Order
  Restrictions", 1972) through ``scipy.optimize.isotonic_regression``. Deals
  that share a stated probability are pooled first (weight = their count), so
  the fit does not depend on how ties are ordered.
* ``interpolate``: reading a map at a probability, linearly between its
  breakpoints and constant beyond the first and last.
* ``brier_scores`` and ``brier_parts``: the Brier score (Brier, "Verification of
  forecasts expressed in terms of probability", Mon. Wea. Rev. 1950) and
  Murphy's partition of it into reliability, resolution and uncertainty over
  equal-width probability bins (Murphy, "A new vector partition of the
  probability score", J. Appl. Meteor. 1973).

Rows are sorted within their group by (probability, outcome) before anything
is summed: DuckDB's ``list()`` order varies between runs, and sums taken in a
fixed order give the same last bits every time.
"""

from __future__ import annotations

import numpy as np


def group_of_rows(offsets: np.ndarray) -> np.ndarray:
    """The group index of every row."""
    return np.repeat(np.arange(len(offsets) - 1), np.diff(offsets))


def canonical(prob: np.ndarray, won: np.ndarray, offsets: np.ndarray):
    """``prob`` and ``won`` sorted by (probability, outcome) within each group."""
    order = np.lexsort((won, prob, group_of_rows(offsets)))
    return prob[order], won[order]


# -- isotonic maps -------------------------------------------------------------

def pool(prob: np.ndarray, won: np.ndarray, offsets: np.ndarray):
    """Deals pooled by stated probability within each group (rows sorted by ``canonical``).

    Returns the distinct probabilities, their deals and wins, and offsets
    delimiting each group's distinct probabilities.
    """
    row_group = group_of_rows(offsets)
    new = np.ones(len(prob), dtype=bool)
    new[1:] = (row_group[1:] != row_group[:-1]) | (prob[1:] != prob[:-1])
    starts = np.flatnonzero(new)
    deals = np.diff(np.append(starts, len(prob))).astype(np.float64)
    wins = np.add.reduceat(won, starts) if len(starts) else np.zeros(0)
    counts = np.bincount(row_group[starts], minlength=len(offsets) - 1)
    return prob[starts], deals, wins, np.concatenate([[0], np.cumsum(counts)])


def fit_maps(prob: np.ndarray, won: np.ndarray, offsets: np.ndarray):
    """Isotonic maps of many groups.

    Each group's fit is the non-decreasing function of the stated probability
    closest (least squares, weighted by deals) to the pooled win rates. Inside
    a run of equal fitted rates only the run's first and last stated
    probabilities are kept: reading the map by linear interpolation gives the
    same value at every pooled probability, and the map stays small (a few
    dozen points for a few thousand deals).

    Parameters
    ----------
    prob, won : float arrays
        Stated probabilities in [0, 1] and outcomes (0 or 1) of usable deals.
    offsets : int array
        Group ``g`` is ``prob[offsets[g]:offsets[g+1]]``.

    Returns
    -------
    breaks, rates : float arrays
        Breakpoints of every map back to back (strictly increasing within a map).
    map_offsets : int array
        Map ``g`` is ``breaks[map_offsets[g]:map_offsets[g+1]]``; empty for a
        group without deals.
    deals : int array
        Deals per group.

    Examples
    --------
    >>> b, r, _, n = fit_maps(np.array([0.2, 0.4, 0.6]), np.array([0., 1., 0.]), np.array([0, 3]))
    >>> b.tolist(), r.tolist(), n.tolist()
    ([0.2, 0.4, 0.6], [0.0, 0.5, 0.5], [3])
    """
    # imported here: scipy.optimize costs ~0.35 s, paid by every process that imports sqlrisk
    # (every dbt invocation) whether or not it fits a map
    from scipy.optimize import isotonic_regression

    distinct, deals, wins, run_offsets = pool(*canonical(prob, won, offsets), offsets)
    rate = np.zeros(len(distinct))
    for g in np.flatnonzero(np.diff(run_offsets) > 0):
        run = slice(run_offsets[g], run_offsets[g + 1])
        rate[run] = isotonic_regression(wins[run] / deals[run], weights=deals[run]).x
    rate = np.clip(rate, 0.0, 1.0)  # means of 0/1 outcomes; clips rounding only
    flat = np.zeros(len(rate) + 1, dtype=bool)  # flat[i]: rate[i - 1] == rate[i] in one group
    flat[1:-1] = rate[1:] == rate[:-1]
    flat[run_offsets] = False
    keep = ~(flat[:-1] & flat[1:])
    kept = np.concatenate([[0], np.cumsum(keep)])
    return distinct[keep], rate[keep], kept[run_offsets], np.diff(offsets).astype(np.int64)


def interpolate(breaks: np.ndarray, rates: np.ndarray, map_offsets: np.ndarray,
                query: np.ndarray) -> np.ndarray:
    """Map ``g`` read at ``query[g]``, for every g at once.

    Linear between breakpoints (the same arithmetic as ``numpy.interp``),
    constant beyond the first and last, clipped to [0, 1]. Every map must be
    non-empty with strictly increasing breakpoints.
    """
    start, stop = map_offsets[:-1], map_offsets[1:]
    # Vectorised bisection: ``hi`` ends at the first breakpoint > query.
    lo, hi = start.copy(), stop.copy()
    last = max(len(breaks) - 1, 0)
    while (active := lo < hi).any():
        mid = (lo + hi) // 2
        right = active & (breaks[np.minimum(mid, last)] <= query)
        lo = np.where(right, mid + 1, lo)
        hi = np.where(active & ~right, mid, hi)
    below = np.clip(hi - 1, start, stop - 1)
    above = np.clip(hi, start, stop - 1)
    x0, x1, y0, y1 = breaks[below], breaks[above], rates[below], rates[above]
    inside = (hi > start) & (hi < stop)
    with np.errstate(divide="ignore", invalid="ignore"):
        slope = np.where(inside, (y1 - y0) / np.where(inside, x1 - x0, 1.0), 0.0)
    value = np.where(hi <= start, rates[np.minimum(start, last)],
                     np.where(hi >= stop, rates[np.maximum(stop - 1, 0)],
                              slope * (query - x0) + y0))
    return np.clip(value, 0.0, 1.0)


# -- Brier score and its partition -------------------------------------------------

def brier_scores(prob: np.ndarray, won: np.ndarray, offsets: np.ndarray) -> np.ndarray:
    """Mean of (prob - won)^2 per group; NaN for a group without deals."""
    prob, won = canonical(prob, won, offsets)
    n = np.diff(offsets)
    total = np.bincount(group_of_rows(offsets), weights=(prob - won) ** 2, minlength=len(n))
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(n > 0, total / n, np.nan)


def bin_index(prob: np.ndarray, bins: np.ndarray) -> np.ndarray:
    """Equal-width bin of each probability: the largest k < bins with k/bins <= prob.

    The edges are the doubles ``k / bins``, so 0.29 is in bin 29 of 100
    (``floor(0.29 * 100)`` would say 28), and 1 is in the last bin.
    """
    k = np.floor(prob * bins)
    k += (k + 1 < bins) & ((k + 1) / bins <= prob)
    k -= (k > 0) & (k / bins > prob)
    return np.clip(k, 0, bins - 1).astype(np.int64)


def brier_parts(prob: np.ndarray, won: np.ndarray, offsets: np.ndarray, bins: np.ndarray):
    """Reliability, resolution and uncertainty per group (Murphy 1973).

    With ``n_k`` deals in bin k, mean stated probability ``f_k``, win rate
    ``o_k`` and overall win rate ``o`` over ``N`` deals::

        reliability = sum_k n_k (f_k - o_k)^2 / N
        resolution  = sum_k n_k (o_k - o)^2 / N
        uncertainty = o (1 - o)

    Brier = reliability - resolution + uncertainty exactly when all deals of a
    bin share one stated probability; otherwise the two differ by the within-bin
    variance of the forecasts minus twice their within-bin covariance with the
    outcomes, which may have either sign (Stephenson, Coelho and Jolliffe, "Two
    extra components in the Brier score decomposition", Wea. Forecasting 2008).

    ``bins[g]`` is group g's bin count (an integer >= 1). NaN for a group
    without deals.
    """
    prob, won = canonical(prob, won, offsets)
    n = np.diff(offsets)
    row_group = group_of_rows(offsets)
    bins = bins.astype(np.int64)
    first_bin = np.concatenate([[0], np.cumsum(bins)])
    key = first_bin[row_group] + bin_index(prob, bins[row_group])
    slots = int(first_bin[-1])
    count = np.bincount(key, minlength=slots).astype(np.float64)
    stated = np.bincount(key, weights=prob, minlength=slots)
    wins = np.bincount(key, weights=won, minlength=slots)
    slot_group = group_of_rows(first_bin)
    with np.errstate(invalid="ignore", divide="ignore"):
        base = np.bincount(row_group, weights=won, minlength=len(n)) / n
        used = count > 0
        f_k = np.where(used, stated / np.where(used, count, 1.0), 0.0)
        o_k = np.where(used, wins / np.where(used, count, 1.0), 0.0)
        rel = np.bincount(slot_group, weights=count * (f_k - o_k) ** 2, minlength=len(n)) / n
        res = np.bincount(slot_group, weights=np.where(used, count * (o_k - base[slot_group]) ** 2,
                                                       0.0), minlength=len(n)) / n
    unc = base * (1.0 - base)
    return rel, res, unc
