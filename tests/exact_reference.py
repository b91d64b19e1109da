"""Exact distributions of a group's won total, written for the tests (no sqlrisk code).

Amounts are given as whole multiples of a unit (``units``, int64: 1,234,567 for
12,345.67 in cents), so every scenario total is an integer and comparisons with
cuts are exact. Three methods, each the textbook one:

* ``atoms``: every one of the 2^n win/loss scenarios added up (n <= 22);
* ``below_halves``: meet in the middle (Horowitz & Sahni, J. ACM 21, 1974): the
  scenarios of each half are enumerated and sorted, and
  P(S < c) = sum over left totals x of P(x) * P(right < c - x) (n <= 44);
* ``lattice``: the probability of every total on the unit lattice, as the
  product of the deals' two-point distributions, multiplied pairwise by FFT
  (numpy.fft; error about 1e-15 per value).
"""

from __future__ import annotations

import numpy as np


def scenario_totals(units: np.ndarray, probs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Total (integer units) and probability of every scenario, unsorted."""
    totals = np.zeros(1, dtype=np.int64)
    chance = np.ones(1)
    for a, p in zip(np.asarray(units, dtype=np.int64), np.asarray(probs, dtype=np.float64)):
        totals = np.concatenate([totals, totals + a])
        chance = np.concatenate([chance * (1.0 - p), chance * p])
    return totals, chance


def atoms(units, probs) -> tuple[np.ndarray, np.ndarray]:
    """Distinct totals (sorted, integer units) and their probabilities; zero masses dropped."""
    if len(units) > 22:
        raise ValueError("atoms: at most 22 deals (2^22 scenarios)")
    totals, chance = scenario_totals(units, probs)
    values, index = np.unique(totals, return_inverse=True)
    mass = np.bincount(index, weights=chance, minlength=len(values))
    keep = mass > 0
    return values[keep], mass[keep]


def below(values: np.ndarray, mass: np.ndarray, cuts_units) -> np.ndarray:
    """P(S < c) for each cut (in units, may be fractional) from sorted atoms."""
    cum = np.concatenate([[0.0], np.cumsum(mass)])
    return cum[np.searchsorted(values, np.asarray(cuts_units, dtype=np.float64), side="left")]


def below_halves(units, probs, cuts_units) -> np.ndarray:
    """P(S < c) for each cut by meet in the middle (n <= 44)."""
    units = np.asarray(units, dtype=np.int64)
    probs = np.asarray(probs, dtype=np.float64)
    if len(units) > 44:
        raise ValueError("below_halves: at most 44 deals")
    half = len(units) // 2
    left, p_left = scenario_totals(units[:half], probs[:half])
    right, p_right = scenario_totals(units[half:], probs[half:])
    order = np.argsort(right, kind="stable")
    right, cum = right[order], np.concatenate([[0.0], np.cumsum(p_right[order])])
    out = []
    for c in np.asarray(cuts_units, dtype=np.float64):
        out.append(float(np.dot(p_left, cum[np.searchsorted(right, c - left, side="left")])))
    return np.array(out)


def lattice(units, probs) -> tuple[int, np.ndarray]:
    """``(first, pmf)``: P(S = (first + i) units) for every total, by FFT products; deals far
    larger than the others are added last by shifting (f'(s) = (1 - p) f(s) + p f(s - a))."""
    units = np.asarray(units, dtype=np.int64)
    probs = np.asarray(probs, dtype=np.float64)
    first = int(units[units < 0].sum())
    big = np.abs(units) > 64 * max(1, int(np.median(np.abs(units))))
    pmf = _product(units[~big], probs[~big])
    for a, p in zip(units[big], probs[big]):
        grown = np.zeros(len(pmf) + abs(int(a)))
        if a > 0:
            grown[:len(pmf)] += (1.0 - p) * pmf
            grown[a:] += p * pmf
        else:
            grown[-a:] += (1.0 - p) * pmf
            grown[:len(pmf)] += p * pmf
        pmf = grown
    return first, pmf / pmf.sum()


def _product(units, probs) -> np.ndarray:
    """P(S = lowest + i) for the deals given, as a product of their two-point distributions."""
    parts = [np.ones(1)]
    for a, p in zip(units, probs):
        row = np.zeros(abs(int(a)) + 1)
        if a >= 0:
            row[0], row[a] = 1.0 - p, p
        else:
            row[0], row[-a] = p, 1.0 - p
        parts.append(row)
    parts.sort(key=len)
    while len(parts) > 1:
        nxt = [_convolve(parts[i], parts[i + 1]) for i in range(0, len(parts) - 1, 2)]
        if len(parts) % 2:
            nxt.append(parts[-1])
        parts = nxt
    return np.maximum(parts[0], 0.0)


def _convolve(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    n = len(x) + len(y) - 1
    if len(x) * len(y) < 50_000:
        return np.convolve(x, y)
    size = 1 << (n - 1).bit_length()
    return np.fft.irfft(np.fft.rfft(x, size) * np.fft.rfft(y, size), size)[:n]
