"""Small groups by their win/loss scenarios: exact answers at any unit of the amounts.

A group of ``m`` uncertain deals has at most ``2^m`` scenario totals. When
those totals do not fit an exact lattice (amounts in cents, say, where three
deals of 13,000 span four million cents), the answers that read the total at a
few places (band odds at known cuts, reach at a target, quantiles, deal swing)
are computed from the scenarios themselves, by meeting in the middle
(Horowitz & Sahni, "Computing partitions with applications to the knapsack
problem", J. ACM 21, 1974): the deals are dealt into two halves, each half's
``2^(m/2)`` totals are listed with their probabilities and sorted, and

    P(S < c) = sum over left totals x of P(x) * P(right total < c - x),

one sweep over both sorted lists per cut (the right-hand pointer only moves
down as ``x`` grows). Quantiles bisect on the total with that sweep, then
return the scenario total found. Every answer is exact up to floating-point
rounding of sums (about 1e-15).

Stored outcomes of small groups cannot keep every scenario total where it is
when the lattice of the amounts' unit is too wide; ``snap_fill`` then moves
each scenario total up to the next point of a fine lattice without splitting
it (``rounding`` = the largest move, below one step), so a heavy total stays
one point, on the right side of every cut except those less than ``rounding``
above it.

Totals count as reaching a cut within ``readout.cut_tolerance``, as on lattices.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from . import sparse
from .order import activate
from .readout import CUT_REL, Q_TOL, write_bands

#: Most uncertain deals a group may have to be answered from its scenarios
#: (two lists of 2^12 totals; about 1 ms a group for three cuts).
MAX_DEALS = 24
#: Most uncertain deals a stored outcome is snapped for (2^20 scenario totals).
SNAP_DEALS = 20
#: Points of the lattice a small group's totals are snapped to (256 KB).
SNAP_BINS = 1 << 15


@njit(cache=True, nogil=True)
def active_deals(amount, prob):
    """The uncertain deals (0 < p < 1, a != 0) in canonical order, and the certain total."""
    a = np.empty(len(amount))
    p = np.empty(len(amount))
    m, shift, _flipped = activate(amount, prob, False, a, p)
    return a[:m], p[:m], shift


@njit(cache=True, nogil=True)
def scenario_totals(a, p):
    """Total and probability of each of the ``2^len(a)`` scenarios (unsorted)."""
    size = 1 << len(a)
    total = np.zeros(size)
    chance = np.ones(size)
    filled = 1
    for i in range(len(a)):
        for s in range(filled):
            total[filled + s] = total[s] + a[i]
            chance[filled + s] = chance[s] * p[i]
            chance[s] = chance[s] * (1.0 - p[i])
        filled *= 2
    return total, chance


@njit(cache=True, nogil=True)
def _sorted_half(a, p, first, tot, pr, tmp_t, tmp_p):
    """The totals of the deals ``first, first + 2, ...`` in ascending order, with their
    probabilities: the totals without a deal and those with it are each sorted, so adding
    a deal is one merge of the two lists (Horowitz & Sahni 1974), ``2^k`` steps in all.
    Fills two of the four buffers and returns them with the count."""
    tot[0] = 0.0
    pr[0] = 1.0
    filled = 1
    for i in range(first, len(a), 2):
        add = a[i]
        win = p[i]
        lose = 1.0 - win
        lo = 0
        up = 0
        k = 0
        while lo < filled and up < filled:
            if tot[lo] <= tot[up] + add:
                tmp_t[k] = tot[lo]
                tmp_p[k] = pr[lo] * lose
                lo += 1
            else:
                tmp_t[k] = tot[up] + add
                tmp_p[k] = pr[up] * win
                up += 1
            k += 1
        while lo < filled:
            tmp_t[k] = tot[lo]
            tmp_p[k] = pr[lo] * lose
            lo += 1
            k += 1
        while up < filled:
            tmp_t[k] = tot[up] + add
            tmp_p[k] = pr[up] * win
            up += 1
            k += 1
        filled *= 2
        tot, tmp_t = tmp_t, tot
        pr, tmp_p = tmp_p, pr
    return tot, pr, filled


@njit(cache=True, nogil=True)
def half_buffers(deals):
    """Work space for ``halves_into`` on groups of up to ``deals`` uncertain deals."""
    size = 1 << ((deals + 1) // 2)
    return np.empty((9, size + 1))


@njit(cache=True, nogil=True)
def halves_into(a, p, work):
    """``halves`` in the rows of ``work`` (from ``half_buffers``): no allocation, so a
    batch of ten-deal groups costs well under a microsecond each."""
    x, px, nx = _sorted_half(a, p, 0, work[0], work[1], work[2], work[3])
    y, py, ny = _sorted_half(a, p, 1, work[4], work[5], work[6], work[7])
    cy = work[8]
    cy[0] = 0.0
    for j in range(ny):
        cy[j + 1] = cy[j] + py[j]
    return x[:nx], px[:nx], y[:ny], py[:ny], cy[:ny + 1]


@njit(cache=True, nogil=True)
def halves(a, p):
    """Sorted totals of the two halves (deals dealt alternately) and their probabilities,
    ``x, px, y, py, cy``, with ``cy[j]`` the probability of the ``j`` smallest right-hand
    totals."""
    return halves_into(a, p, half_buffers(len(a)))


@njit(cache=True, nogil=True)
def _halves_in(a, p, work):
    """``halves`` in ``work`` when it is large enough for ``len(a)`` deals."""
    if len(work[0]) - 1 < (1 << ((len(a) + 1) // 2)):
        return halves(a, p)
    return halves_into(a, p, work)


@njit(cache=True, nogil=True)
def _mass_under(x, px, y, cy, edge, inclusive):
    """P(left + right < edge), or ``<= edge`` when ``inclusive``: one sweep, the right-hand
    pointer moving down as the left-hand total grows."""
    j = len(y)
    total = 0.0
    for i in range(len(x)):
        limit = edge - x[i]
        while j > 0 and (y[j - 1] > limit if inclusive else y[j - 1] >= limit):
            j -= 1
        if j == 0:
            break
        total += px[i] * cy[j]
    return total


@njit(cache=True, nogil=True)
def below(x, px, y, cy, c, shift, tol):
    """P(S < c) for ``S = shift + left + right``; totals within ``tol`` of ``c`` reach it."""
    return _mass_under(x, px, y, cy, c - tol - shift, False)


@njit(cache=True, nogil=True)
def at_most(x, px, y, cy, v, shift, tol):
    """P(S <= v), totals within ``tol`` above ``v`` included."""
    return _mass_under(x, px, y, cy, v + tol - shift, True)


@njit(cache=True, nogil=True)
def _smallest_above(x, y, v):
    """The smallest scenario total ``x_i + y_j`` above ``v`` (``inf`` if none)."""
    best = np.inf
    j = len(y)
    for i in range(len(x)):
        while j > 0 and y[j - 1] > v - x[i]:
            j -= 1
        if j < len(y):
            best = min(best, x[i] + y[j])
    return best


@njit(cache=True, nogil=True)
def tolerance(c, lowest, highest):
    """``readout.cut_tolerance`` in money: a total this close to ``c`` counts as reaching it
    (relative to the cut and the group's extreme totals ``lowest`` and ``highest``)."""
    return CUT_REL * max(1.0, abs(c), abs(lowest), abs(highest))


@njit(cache=True, nogil=True)
def quantile(x, px, y, cy, shift, q):
    """Smallest scenario total ``t`` with ``P(S <= t) >= q`` (the readout's definition).
    Every scenario of uncertain deals has a positive probability, so a level of (about) 0
    gives the smallest total, even when its probability is too small for a double."""
    lo = x[0] + y[0]
    hi = x[-1] + y[-1]
    tol = tolerance(shift + hi, shift + lo, shift + hi)
    target = q - Q_TOL
    if target <= 0.0 or at_most(x, px, y, cy, shift + lo, shift, tol) >= target:
        return shift + lo
    # invariant: P(S <= lo) < target <= P(S <= hi)
    while hi - lo > tol:
        mid = 0.5 * (lo + hi)
        if mid <= lo or mid >= hi:
            break
        if at_most(x, px, y, cy, shift + mid, shift, tol) >= target:
            hi = mid
        else:
            lo = mid
    found = _smallest_above(x, y, lo + tol)
    return shift + (found if found < np.inf else hi)


@njit(cache=True, nogil=True)
def _work_space(amount, offsets, groups):
    """Buffers for the groups ``groups``: their deals, and ``halves_into``'s work space."""
    longest = 1
    for g in groups:
        longest = max(longest, offsets[g + 1] - offsets[g])
    return np.empty(longest), np.empty(longest), half_buffers(min(longest, MAX_DEALS))


@njit(cache=True, nogil=True)
def bands_small(amount, prob, offsets, groups, cuts, cut_offsets):
    """Band probabilities of the groups ``groups`` (``len(cuts_g) + 1`` values each).
    Buffers are allocated once per call, not per group."""
    out = np.empty(len(cuts) + len(groups))
    a_buf, p_buf, work = _work_space(amount, offsets, groups)
    bufs = sparse.buffers(len(a_buf))
    at_buf = np.empty(max(1, len(cuts)))
    pos = 0
    for n, g in enumerate(groups):
        at = at_buf[:cut_offsets[n + 1] - cut_offsets[n]]
        use, origin, step, size, k, idx, val, cum = sparse.read_group(
            amount[offsets[g]:offsets[g + 1]], prob[offsets[g]:offsets[g + 1]], bufs)
        if use:  # an exact lattice's numbers, on its reachable points
            for c in range(len(at)):
                at[c] = sparse.below(origin, step, size, idx, cum, k, cuts[cut_offsets[n] + c])
            pos = write_bands(at, min(cum[k - 1], 1.0), out, pos)
            continue
        m, shift, _flipped = activate(amount[offsets[g]:offsets[g + 1]],
                                      prob[offsets[g]:offsets[g + 1]], False, a_buf, p_buf)
        x, px, y, py, cy = _halves_in(a_buf[:m], p_buf[:m], work)
        lowest = shift + x[0] + y[0]
        highest = shift + x[-1] + y[-1]
        for c in range(len(at)):
            cut = cuts[cut_offsets[n] + c]
            at[c] = below(x, px, y, cy, cut, shift, tolerance(cut, lowest, highest))
        pos = write_bands(at, 1.0, out, pos)
    return out


@njit(cache=True, nogil=True)
def quantiles_small(amount, prob, offsets, groups, qs, q_offsets):
    """Quantiles of the groups ``groups`` at their levels."""
    out = np.empty(len(qs))
    a_buf, p_buf, work = _work_space(amount, offsets, groups)
    bufs = sparse.buffers(len(a_buf))
    for n, g in enumerate(groups):
        use, origin, step, size, k, idx, val, cum = sparse.read_group(
            amount[offsets[g]:offsets[g + 1]], prob[offsets[g]:offsets[g + 1]], bufs)
        if use:
            for i in range(q_offsets[n], q_offsets[n + 1]):
                out[i] = sparse.quantile(origin, step, size, idx, val, cum, k, qs[i])
            continue
        m, shift, _flipped = activate(amount[offsets[g]:offsets[g + 1]],
                                      prob[offsets[g]:offsets[g + 1]], False, a_buf, p_buf)
        x, px, y, py, cy = _halves_in(a_buf[:m], p_buf[:m], work)
        for i in range(q_offsets[n], q_offsets[n + 1]):
            out[i] = quantile(x, px, y, cy, shift, qs[i])
    return out


@njit(cache=True, nogil=True)
def below_many(a, p, shift, values):
    """P(S < v) for each ``v`` (a group's uncertain deals ``a, p`` and certain total ``shift``)."""
    x, px, y, py, cy = halves(a, p)
    lowest = shift + x[0] + y[0]
    highest = shift + x[-1] + y[-1]
    out = np.empty(len(values))
    for i in range(len(values)):
        tol = tolerance(values[i], lowest, highest)
        out[i] = min(below(x, px, y, cy, values[i], shift, tol), 1.0)
    return out


@njit(cache=True, nogil=True)
def swing_below(a, p, shift, target):
    """For each uncertain deal ``i``: P(S_-i < target - a_i) and P(S_-i < target), where
    ``S_-i`` is the total of every other deal (its own halves, so no division)."""
    m = len(a)
    out = np.zeros((m, 2))
    keep = np.empty(m - 1, np.int64) if m > 0 else np.empty(0, np.int64)
    for i in range(m):
        k = 0
        for j in range(m):
            if j != i:
                keep[k] = j
                k += 1
        x, px, y, py, cy = halves(a[keep], p[keep])
        lowest = shift + x[0] + y[0]
        highest = shift + x[-1] + y[-1]
        for col in range(2):
            v = target - a[i] if col == 0 else target
            out[i, col] = min(below(x, px, y, cy, v, shift, tolerance(v, lowest, highest)), 1.0)
    return out


# -- stored outcomes of small groups: scenario totals snapped to a fine lattice ----------

#: A total this close to a lattice point (in steps) is on it, not above it.
ON_POINT = 1e-9


@njit(cache=True, nogil=True)
def snap_fill(a, p, origin, step, out):
    """Add each scenario's probability at the first lattice point at or above its total.

    Point ``i`` of ``out`` is the total ``origin + i * step`` (without the certain
    deals). Moving every total up, never down, keeps a total that sits on a cut
    on the cut's upper side, where the band rule puts it. Returns the largest
    distance between a total and its point (below one step).
    """
    total, chance = scenario_totals(a, p)
    moved = 0.0
    size = len(out)
    for s in range(len(total)):
        i = np.int64(math.ceil((total[s] - origin) / step - ON_POINT))
        i = min(max(i, 0), size - 1)
        moved = max(moved, abs(origin + i * step - total[s]))
        out[i] += chance[s]
    return moved
