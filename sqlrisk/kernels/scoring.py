"""Scoring a forecast outcome against the total that happened.

The scores read an outcome with the CDF of ``readout`` (points or bins, by its
``rounding`` and ``step``), so a score agrees with every band and reach read
off the same outcome:

* **PIT** (probability integral transform), mid-distribution form:
  ``P(S < x) + 0.5 P(S = x)``. Over many periods of correct forecasts the
  values are uniform on [0, 1] (Dawid 1984); for a discrete total the
  mid-distribution form keeps the mean at 1/2 (Czado, Gneiting & Held,
  Biometrics 2009). On a bins reading the CDF is continuous except at the two
  extreme points, so it is F(x) there.
* **CRPS** (continuous ranked probability score), the integral over y of
  ``(F(y) - 1{y >= x})^2``, in currency, lower is better (Matheson & Winkler
  1976; Gneiting & Raftery, JASA 2007, eq. 20-21). F is piecewise linear
  between the lattice's knots (constant on a points reading, linear inside a
  bin on a bins reading), so the integral is summed exactly, piece by piece,
  in O(bins): the integral of a squared linear function over a piece of
  length L that runs from g0 to g1 is ``L (g0^2 + g0 g1 + g1^2) / 3``.
* **bands and RPS**: the band a realised total falls in, by the band rule of
  ``readout`` (reaching a cut, within ``CUT_REL``, puts it in the upper band),
  and the ranked probability score of band probabilities (Epstein 1969, the
  mean over the k cuts as Murphy 1971 normalised it).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from .readout import CUT_REL, cut_tolerance, is_smooth, prob_below


@njit(cache=True, nogil=True)
def prob_at_most(origin, step, cum, rounding, x):
    """``P(S <= x)`` for one outcome (a point within the cut tolerance of ``x`` counts)."""
    m = len(cum)
    total = cum[m - 1]
    if m == 1 or step == 0.0:
        return total if origin <= x + CUT_REL * max(1.0, abs(x), abs(origin)) else 0.0
    tol = cut_tolerance(x, origin, origin + (m - 1) * step, step)
    u = (x - origin) / step
    if not is_smooth(step, rounding) or m == 2:
        c = math.floor(u + tol)
        if c < 0:
            return 0.0
        return total if c >= m - 1 else cum[c]
    if u < -tol:
        return 0.0
    if u <= tol:
        return cum[0]  # the atom at the lowest total
    if u >= m - 1 - tol:
        return total
    return prob_below(origin, step, cum, rounding, x)  # continuous between the two atoms


@njit(cache=True, nogil=True)
def pit_batch(origin, step, mass, offsets, rounding, actual):
    """Mid-distribution PIT of each row's ``actual``."""
    out = np.empty(len(origin))
    for g in range(len(origin)):
        cum = np.cumsum(mass[offsets[g]:offsets[g + 1]])
        below = prob_below(origin[g], step[g], cum, rounding[g], actual[g])
        at_most = max(prob_at_most(origin[g], step[g], cum, rounding[g], actual[g]), below)
        out[g] = min(0.5 * (below + at_most), 1.0)
    return out


@njit(cache=True, nogil=True)
def _squared_piece(a, b, fa, fb, x):
    """Integral over [a, b) of (F(y) - 1{y >= x})^2 with F linear from ``fa`` to ``fb``."""
    length = b - a
    if length <= 0.0:
        return 0.0
    if x <= a:
        g0, g1 = fa - 1.0, fb - 1.0
        return length * (g0 * g0 + g0 * g1 + g1 * g1) / 3.0
    if x >= b:
        return length * (fa * fa + fa * fb + fb * fb) / 3.0
    fx = fa + (fb - fa) * (x - a) / length
    left = (x - a) * (fa * fa + fa * fx + fx * fx) / 3.0
    g0, g1 = fx - 1.0, fb - 1.0
    return left + (b - x) * (g0 * g0 + g0 * g1 + g1 * g1) / 3.0


@njit(cache=True, nogil=True)
def crps_one(origin, step, mass, rounding, x):
    """CRPS of one outcome at the realised total ``x`` (currency units)."""
    m = len(mass)
    cum = np.cumsum(mass)
    # Normalise a total mass of 1 +/- ulps, so the tail beyond the last point adds nothing.
    cum = cum / cum[m - 1]
    lowest = origin
    highest = origin + (m - 1) * step if m > 1 else origin
    score = max(lowest - x, 0.0) + max(x - highest, 0.0)  # F = 0 below, 1 above the support
    if m == 1 or step == 0.0:
        return score
    if not is_smooth(step, rounding) or m == 2:
        for i in range(m - 1):
            a = origin + i * step
            score += _squared_piece(a, a + step, cum[i], cum[i], x)
        return score
    half = 0.5 * step
    score += _squared_piece(origin, origin + half, cum[0], cum[0], x)
    for j in range(1, m - 1):
        a = origin + (j - 0.5) * step
        score += _squared_piece(a, a + step, cum[j - 1], cum[j], x)
    score += _squared_piece(highest - half, highest, cum[m - 2], cum[m - 2], x)
    return score


@njit(cache=True, nogil=True)
def crps_batch(origin, step, mass, offsets, rounding, actual):
    out = np.empty(len(origin))
    for g in range(len(origin)):
        out[g] = crps_one(origin[g], step[g], mass[offsets[g]:offsets[g + 1]], rounding[g],
                          actual[g])
    return out


def band_of(total: np.ndarray, cuts: np.ndarray, offsets: np.ndarray) -> np.ndarray:
    """The band (1 to len(cuts_row) + 1) each row's ``total`` falls in.

    A total within ``CUT_REL`` (relative to the larger of the total and the cut) of a cut
    reaches it, as on an outcome's points: a total equal to a cut in the upper band.
    """
    rows = np.repeat(np.arange(len(total)), np.diff(offsets))
    t = total[rows]
    tol = CUT_REL * np.maximum(1.0, np.maximum(np.abs(t), np.abs(cuts)))
    reached = (t >= cuts - tol).astype(np.int64)
    counts = np.zeros(len(total), dtype=np.int64)
    np.add.at(counts, rows, reached)
    return counts + 1


def band_rps(bands: np.ndarray, offsets: np.ndarray, landed: np.ndarray) -> np.ndarray:
    """Ranked probability score of each row's band probabilities given the band ``landed``.

    With k = len(bands_row) - 1 cuts: (1/k) sum_{j=1..k} (bands_1 + ... + bands_j -
    1{landed <= j})^2; 0 when k = 0.
    """
    out = np.zeros(len(landed))
    for g in range(len(landed)):
        row = bands[offsets[g]:offsets[g + 1]]
        k = len(row) - 1
        if k <= 0:
            continue
        forecast = np.cumsum(row)[:k]
        happened = (landed[g] <= np.arange(1, k + 1)).astype(float)
        out[g] = float(np.mean((forecast - happened) ** 2))
    return out
