"""Monte Carlo totals of groups of deals: independent or one-factor correlated,
with optional triangular deal sizes.

Random numbers come from a counter-based stream: uniform number ``c`` of a
group is ``splitmix64(key + c * GAMMA)`` (Steele, Lea & Flood, "Fast
splittable pseudorandom number generators", OOPSLA 2014), where ``key`` hashes
the seed and the group's deals in canonical order. The draw for (trial ``t``,
deal ``i``) is therefore fixed by the data and the seed alone: row order, DuckDB
threads and UDF batch boundaries cannot change a result, and no trials x deals
matrix is ever held (each trial is summed as it is drawn).

Correlation is the one-factor Gaussian copula: deal ``i`` is won when
``sqrt(rho) Z + sqrt(1 - rho) eps_i < Phi^-1(p_i)`` with ``Z`` shared by the
trial, i.e. when ``U_i < Phi((Phi^-1(p_i) - sqrt(rho) Z) / sqrt(1 - rho))``;
each deal keeps its marginal probability ``p_i`` (Vasicek, "Loan portfolio
value", Risk 2002).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

GAMMA = np.uint64(0x9E3779B97F4A7C15)
_M1 = np.uint64(0xBF58476D1CE4E5B9)
_M2 = np.uint64(0x94D049BB133111EB)
_S30 = np.uint64(30)
_S27 = np.uint64(27)
_S31 = np.uint64(31)
_S11 = np.uint64(11)
_TO_UNIT = 1.0 / 9007199254740992.0  # 2**-53
#: Most trials one call may ask for.
MAX_TRIALS = 100_000_000


@njit(cache=True, nogil=True)
def mix64(z):
    """The splitmix64 finaliser: a bijection of 64-bit words with strong avalanche."""
    z = (z ^ (z >> _S30)) * _M1
    z = (z ^ (z >> _S27)) * _M2
    return z ^ (z >> _S31)


@njit(cache=True, nogil=True)
def uniform(key, counter):
    """The ``counter``-th uniform number in [0, 1) of stream ``key``."""
    return np.float64(mix64(key + np.uint64(counter) * GAMMA) >> _S11) * _TO_UNIT


@njit(cache=True, nogil=True)
def group_key(seed, words):
    """Hash the seed (a uint64) and the group's deals (their float64 bit patterns) into a key."""
    key = mix64(seed ^ GAMMA)
    for w in words:
        key = mix64(key ^ w) + GAMMA
    return key


@njit(cache=True, nogil=True)
def _phi(x):
    return 0.5 * math.erfc(-x / math.sqrt(2.0))


@njit(cache=True, nogil=True)
def triangular(low, mode, high, u):
    """Inverse CDF of the triangular distribution (low, mode, high) at ``u``."""
    width = high - low
    if width <= 0.0:
        return mode
    cut = (mode - low) / width
    if u < cut:
        return low + math.sqrt(u * width * (mode - low))
    return high - math.sqrt((1.0 - u) * width * (high - mode))


@njit(cache=True, nogil=True)
def simulate_group(amount, prob, low, high, threshold, rho, trials, key, totals):
    """Fill ``totals[t]`` with the won total of trial ``t``.

    ``threshold`` holds ``Phi^-1(p_i)`` (used when ``rho > 0``); ``low``/``high``
    equal to the amount mean a fixed deal size. Counter layout per trial:
    two numbers for the shared factor, then two per deal (win, size).
    """
    n = len(amount)
    stride = 2 * n + 2
    load = math.sqrt(rho)
    rest = math.sqrt(1.0 - rho)
    for t in range(trials):
        base = t * stride
        z = 0.0
        if rho > 0.0:
            u1 = uniform(key, base)
            u2 = uniform(key, base + 1)
            z = math.sqrt(-2.0 * math.log(1.0 - u1)) * math.cos(2.0 * math.pi * u2)
        total = 0.0
        for i in range(n):
            p = prob[i]
            if rho > 0.0 and 0.0 < p < 1.0:
                p = _phi((threshold[i] - load * z) / rest)
            won = uniform(key, base + 2 + 2 * i) < p
            if high[i] > low[i]:
                if won:
                    total += triangular(low[i], amount[i], high[i],
                                        uniform(key, base + 3 + 2 * i))
            else:
                # A select, not a branch: wins are random, so a branch would be
                # mispredicted about half the time.
                total += amount[i] if won else 0.0
        totals[t] = total


@njit(cache=True, nogil=True)
def simulate_batch(amount, prob, low, high, threshold, offsets, rho, trials, keys):
    """Totals of every group: ``trials[g]`` values per group, back to back."""
    n_groups = len(offsets) - 1
    out_offsets = np.zeros(n_groups + 1, np.int64)
    for g in range(n_groups):
        out_offsets[g + 1] = out_offsets[g] + trials[g]
    totals = np.empty(out_offsets[-1])
    for g in range(n_groups):
        a0 = offsets[g]
        a1 = offsets[g + 1]
        simulate_group(amount[a0:a1], prob[a0:a1], low[a0:a1], high[a0:a1],
                       threshold[a0:a1], rho[g], trials[g], keys[g],
                       totals[out_offsets[g]:out_offsets[g + 1]])
    return totals, out_offsets


@njit(cache=True, nogil=True)
def group_keys(seeds, words, word_offsets):
    """``group_key`` of every group: ``words[word_offsets[g]:word_offsets[g+1]]``."""
    n = len(word_offsets) - 1
    keys = np.empty(n, np.uint64)
    for g in range(n):
        keys[g] = group_key(seeds[g], words[word_offsets[g]:word_offsets[g + 1]])
    return keys


def simulate_threads(amount, prob, low, high, threshold, offsets, rho, trials, keys, threads=2):
    """``simulate_batch`` with the groups split between ``threads`` threads.

    Each group's draws depend only on its key and counters, so the split
    cannot change a number; the kernel releases the GIL.
    """
    from concurrent.futures import ThreadPoolExecutor

    n_groups = len(offsets) - 1
    work = np.concatenate([[0], np.cumsum(trials * np.diff(offsets))])
    if threads < 2 or n_groups < 2 or work[-1] < 1_000_000:
        return simulate_batch(amount, prob, low, high, threshold, offsets, rho, trials, keys)
    cuts = np.searchsorted(work, np.linspace(0, work[-1], threads + 1)[1:-1])
    bounds = [0, *sorted({int(c) for c in cuts if 0 < c < n_groups}), n_groups]
    jobs = []
    for g0, g1 in zip(bounds[:-1], bounds[1:]):
        r0, r1 = offsets[g0], offsets[g1]
        jobs.append((amount[r0:r1], prob[r0:r1], low[r0:r1], high[r0:r1], threshold[r0:r1],
                     offsets[g0:g1 + 1] - r0, rho[g0:g1], trials[g0:g1], keys[g0:g1]))
    with ThreadPoolExecutor(len(jobs)) as pool:
        results = list(pool.map(lambda job: simulate_batch(*job), jobs))
    totals = np.concatenate([r[0] for r in results])
    return totals, np.concatenate([[0], np.cumsum(trials)]).astype(np.int64)
