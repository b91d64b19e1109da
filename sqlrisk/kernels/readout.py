"""Reading probabilities, quantiles and moments off outcomes.

Two readings, chosen per outcome by its ``rounding`` and ``step``:

* **points** (``rounding < step``): the mass sits on the lattice points. That
  is an exact outcome (``rounding = 0``), or a small group whose scenario
  totals were each moved up to the next point, less than a step, without
  being split (``scenarios.snap_fill``): a total on a cut stays on the cut's
  upper side. ``P(S < c)`` adds the points below ``c``; a point within
  ``CUT_REL`` of a cut (relative to the size of the numbers involved, so float
  rounding in sums of amounts cannot put a total that equals a cut below it)
  counts as reaching it.
* **bins** (``rounding >= step``: amounts split between neighbouring points,
  outcomes moved onto a common step, simulated totals binned): the
  lattice total is only within ``rounding`` of the true one, so each interior
  point's mass is read as spread evenly over ``[x - step/2, x + step/2]`` and
  the CDF is linear inside a bin (kernel-notes: interpolating inside the bin
  that holds a cut is far more accurate than reading the points on an
  inexact lattice). The two extreme points stay point masses: they are real
  atoms of the total, such as "every deal lost". Outcomes stored before
  small groups were snapped have ``rounding`` 0 or at least a step, and read
  as they always did, but for one case no real pipeline produces: an
  inexact lattice on which no amount had to be split (``rounding`` exactly
  half a step), whose points are its totals and now read as such.

Quantiles invert the same CDF: the smallest total ``x`` with ``P(S <= x) >= q``
(the inverted-CDF definition, Hyndman & Fan 1996 type 1), with a tolerance of
``Q_TOL`` on ``q`` so that a CDF of 0.4999999999999999 counts as 0.5.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

#: A total within this relative distance of a cut counts as reaching it (~450 ulps:
#: sums of many amounts in floating point, far below a cent for totals up to 1e10).
CUT_REL = 1e-13
#: Most steps the cut tolerance may span (when steps are tiny next to the totals).
CUT_MAX_STEPS = 1e-3
Q_TOL = 1e-12


@njit(cache=True, nogil=True)
def cut_tolerance(x, lowest, highest, step):
    """How close (in steps) a lattice point must be to the cut ``x`` to count as reaching it.

    Relative to the largest number involved: the cut and the group's extreme totals
    ``lowest`` and ``highest``. A total near 0 may come out of a sum of large amounts
    that cancel (a certain 6,731.55 less a possible loss of 6,731.55), with an error of
    a few ulps of those amounts, not of 0; every partial sum of a group's amounts lies
    within about the span of its totals.
    """
    scale = max(1.0, abs(x), abs(lowest), abs(highest))
    return min(CUT_REL * scale / step, CUT_MAX_STEPS)


@njit(cache=True, nogil=True)
def is_smooth(step, rounding):
    """True when an outcome is read as bins, False when as points (see the module notes)."""
    return rounding > 0.0 and rounding >= step


@njit(cache=True, nogil=True)
def prob_below(origin, step, cum, rounding, x):
    """``P(S < x)`` for one outcome with cumulative mass ``cum``."""
    m = len(cum)
    if m == 1 or step == 0.0:
        return cum[m - 1] if origin < x - CUT_REL * max(1.0, abs(x), abs(origin)) else 0.0
    smooth = is_smooth(step, rounding)
    tol = cut_tolerance(x, origin, origin + (m - 1) * step, step)
    u = (x - origin) / step
    if not smooth or m == 2:
        c = math.ceil(u - tol)
        if c <= 0:
            return 0.0
        if c >= m:
            return cum[m - 1]
        return cum[c - 1]
    if u <= tol:
        return 0.0
    if u > m - 1 + tol:
        return cum[m - 1]
    if u >= m - 1.5:
        return cum[m - 2]
    if u < 0.5:
        return cum[0]
    j = int(math.floor(u + 0.5))
    frac = u - (j - 0.5)
    return cum[j - 1] + frac * (cum[j] - cum[j - 1])


@njit(cache=True, nogil=True)
def quantile(origin, step, mass, cum, rounding, q):
    """Smallest total ``x`` with ``P(S <= x) >= q`` for one outcome."""
    m = len(cum)
    if m == 1 or step == 0.0:
        return origin
    smooth = is_smooth(step, rounding)
    target = q - Q_TOL
    if target <= 0.0:
        for i in range(m):
            if mass[i] > 0.0:
                return origin + i * step if (not smooth or i == 0 or i == m - 1) else origin + (i - 0.5) * step
        return origin
    if not smooth or m == 2:
        i = np.searchsorted(cum, target)
        return origin + min(i, m - 1) * step
    if cum[0] >= target:
        return origin
    j = np.searchsorted(cum, target)
    if j >= m - 1:
        return origin + (m - 1) * step
    frac = (q - cum[j - 1]) / mass[j] if mass[j] > 0.0 else 1.0
    frac = min(max(frac, 0.0), 1.0)
    return origin + (j - 0.5 + frac) * step


@njit(cache=True, nogil=True)
def write_bands(below, total, out, pos):
    """Write the bands of one group at ``out[pos:]`` from ``P(S < c)`` at its cuts (kept
    non-decreasing and at most ``total``); returns the position after them."""
    prev = 0.0
    for b in below:
        b = min(b, total)
        out[pos] = max(b - prev, 0.0)
        prev = max(prev, b)
        pos += 1
    out[pos] = max(total - prev, 0.0)
    return pos + 1


@njit(cache=True, nogil=True)
def bands_batch(origin, step, mass, offsets, rounding, cuts, cut_offsets):
    """Band probabilities of each row: ``len(cuts_row) + 1`` values per row."""
    n = len(origin)
    out = np.empty(len(cuts) + n)
    pos = 0
    for g in range(n):
        cum = np.cumsum(mass[offsets[g]:offsets[g + 1]])
        below = np.empty(cut_offsets[g + 1] - cut_offsets[g])
        for c in range(len(below)):
            below[c] = prob_below(origin[g], step[g], cum, rounding[g], cuts[cut_offsets[g] + c])
        pos = write_bands(below, min(cum[-1], 1.0), out, pos)  # a mass may sum to 1 + ulps
    return out


@njit(cache=True, nogil=True)
def quantiles_batch(origin, step, mass, offsets, rounding, qs, q_offsets):
    out = np.empty(len(qs))
    for g in range(len(origin)):
        w = mass[offsets[g]:offsets[g + 1]]
        cum = np.cumsum(w)
        for i in range(q_offsets[g], q_offsets[g + 1]):
            out[i] = quantile(origin[g], step[g], w, cum, rounding[g], qs[i])
    return out


@njit(cache=True, nogil=True)
def moments_batch(origin, step, mass, offsets):
    """Mean and standard deviation of each row (from the lattice points)."""
    n = len(origin)
    mean = np.empty(n)
    sd = np.empty(n)
    for g in range(n):
        w = mass[offsets[g]:offsets[g + 1]]
        mu = 0.0
        for i in range(len(w)):
            mu += i * w[i]
        var = 0.0
        for i in range(len(w)):
            var += (i - mu) ** 2 * w[i]
        mean[g] = origin[g] + mu * step[g]
        sd[g] = math.sqrt(var) * abs(step[g])
    return mean, sd


@njit(cache=True, nogil=True)
def histogram_batch(origin, step, mass, offsets, rounding, bins):
    """``bins[g]`` equal-width bins over ``[Q(1e-9), Q(1 - 1e-9)]`` of each row.

    Returns flat ``lo, hi, prob`` arrays and their row offsets (row ``g`` has
    ``bins[g]`` entries, or one when the outcome is a single total). The first and last bins also
    hold the tails beyond that range (together below 2e-9), so the
    probabilities sum to 1.
    """
    total = 0
    for g in range(len(origin)):
        total += bins[g]
    lo_out = np.empty(total)
    hi_out = np.empty(total)
    p_out = np.empty(total)
    out_offsets = np.zeros(len(origin) + 1, np.int64)
    pos = 0
    for g in range(len(origin)):
        w = mass[offsets[g]:offsets[g + 1]]
        cum = np.cumsum(w)
        lo = quantile(origin[g], step[g], w, cum, rounding[g], 1e-9)
        hi = quantile(origin[g], step[g], w, cum, rounding[g], 1.0 - 1e-9)
        k = bins[g]
        if hi <= lo:
            lo_out[pos] = lo
            hi_out[pos] = hi
            p_out[pos] = 1.0
            pos += 1
            k = 0
        prev = 0.0
        for b in range(k):
            left = lo + (hi - lo) * b / k
            right = lo + (hi - lo) * (b + 1) / k
            below = cum[-1] if b == k - 1 else prob_below(origin[g], step[g], cum, rounding[g],
                                                          right)
            lo_out[pos] = left
            hi_out[pos] = right
            p_out[pos] = max(below - prev, 0.0)
            prev = max(prev, below)
            pos += 1
        out_offsets[g + 1] = pos
    return lo_out[:pos], hi_out[:pos], p_out[:pos], out_offsets
