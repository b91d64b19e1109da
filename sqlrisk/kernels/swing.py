"""Which deals move the odds: the chance of reaching a target with each deal won, and lost.

For deal ``i`` of a group with total ``S``, ``S = S_-i + a_i B_i``, so

    reach_if_won  = P(S_-i >= t - a_i),    reach_if_lost = P(S_-i >= t),

and ``P(S >= t) = p_i reach_if_won + (1 - p_i) reach_if_lost``. ``S_-i`` is the
total of all the other deals. Removing one factor from the full distribution by
division is unstable (it divides by ``1 - p`` or ``p``, and by ``p f`` on a
split lattice), so every ``S_-i`` is built instead from products of the others,
shared by divide and conquer: for a block of deals, the product of every deal
outside it is passed down; the left half gets it times the right half's deals
and the other way round. Each deal is added about log2(n) times, so the cost
is O(n log n) lattice updates, all with non-negative numbers only.

Only a few totals are ever read: ``t`` and ``t - a_i``. A partial product
keeps just the indices from which the deals still to come can reach those
totals; mass that can only end below them is kept as one number (``below``),
mass that can only end above them is dropped. Arrays therefore stay about as
wide as the spread of the amounts, not of the total.

The lattice is the group's automatic lattice (``lattice.plan_group``, as for
``outcome_dist``) and totals are read the same way as there (points on an
exact lattice, bins on an inexact one). A small group whose lattice would not
be exact (at most ``scenarios.MAX_DEALS`` uncertain deals) is answered exactly
from its scenarios instead: each ``S_-i`` by meeting in the middle.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from . import scenarios
from .lattice import DEFAULT_BINS, OK, plan_group
from .order import canonical_order
from .readout import cut_tolerance
from .recursion import add_deals

#: Largest working array (bins) of one partial product.
MAX_SWING_BINS = 1 << 22
TOO_WIDE = -(1 << 62)  # a0 marking a working array that grew too wide


@njit(cache=True, nogil=True)
def _below(arr, a0, below, x, shift, step, smooth, g_lo, g_hi):
    """P(S < x) for totals ``shift + s * step``: ``below`` plus the mass of ``arr``
    (indices ``a0 ...``) under ``x``, read as points, or as bins on an inexact lattice
    (the extreme totals ``g_lo`` and ``g_hi`` stay points), with the readout's tolerance."""
    u = (x - shift) / step
    tol = cut_tolerance(x, shift + g_lo * step, shift + g_hi * step, step)
    total = below
    if not smooth or g_hi - g_lo <= 1:
        first_at_or_above = math.ceil(u - tol)
        for s in range(a0, min(first_at_or_above, a0 + len(arr))):
            total += arr[s - a0]
        return total
    for j in range(len(arr)):
        s = a0 + j
        m = arr[j]
        if m == 0.0:
            continue
        if s == g_lo or s == g_hi:
            if s < u - tol:
                total += m
        elif u >= s + 0.5:
            total += m
        elif u > s - 0.5:
            total += m * (u - (s - 0.5))
    return total


@njit(cache=True, nogil=True)
def _extend(arr, a0, below, k, f, p, start, stop, lo_add, hi_add, need_lo, need_hi):
    """``arr`` (indices from ``a0``, plus ``below``) times deals ``start..stop-1``,
    cut to ``need_lo..need_hi`` after every chunk of deals: mass that the deals still
    to come can only take below ``need_lo`` joins ``below``; mass they can only take
    above ``need_hi`` is dropped. Returns ``(arr, a0, below)``, or an empty array
    with ``a0 = TOO_WIDE`` when a working array would pass MAX_SWING_BINS."""
    rest_lo = 0
    rest_hi = 0
    for j in range(start, stop):
        rest_lo += lo_add[j]
        rest_hi += hi_add[j]
    j = start
    while j < stop and len(arr):
        # a chunk of deals whose spans add up to about the current width
        width = max(len(arr), 64)
        chunk_lo = 0
        chunk_hi = 0
        e = j
        while e < stop and (e == j or chunk_hi - chunk_lo + hi_add[e] - lo_add[e] <= width):
            chunk_lo += lo_add[e]
            chunk_hi += hi_add[e]
            e += 1
        new_lo = a0 + chunk_lo
        size = len(arr) + chunk_hi - chunk_lo
        if size > MAX_SWING_BINS:
            return np.zeros(0), TOO_WIDE, below
        buf = np.zeros(size)
        buf[-chunk_lo:-chunk_lo + len(arr)] = arr
        add_deals(buf, -chunk_lo, -chunk_lo + len(arr) - 1, k, f, p, j, e)
        rest_lo -= chunk_lo
        rest_hi -= chunk_hi
        keep_lo = need_lo - rest_hi - new_lo  # positions in buf
        keep_hi = need_hi - rest_lo - new_lo
        for s in range(0, min(max(keep_lo, 0), size)):
            below += buf[s]
        lo_cut = min(max(keep_lo, 0), size)
        hi_cut = max(min(keep_hi + 1, size), lo_cut)
        arr = buf[lo_cut:hi_cut].copy()
        a0 = new_lo + lo_cut
        j = e
    return arr, a0, below


@njit(cache=True, nogil=True)
def group_swings(k, f, p, x_won, x_lost, shift, step, smooth):
    """P(S_-i < x) at ``x = x_won[i]`` (column 0) and ``x = x_lost`` (column 1) for every deal.

    ``k, f, p``: the active deals' lattice offsets, split fractions and
    probabilities (canonical order); totals are ``shift + index * step``.
    Returns ``(below, ok)``.
    """
    m = len(k)
    out = np.zeros((m, 2))
    lo_add = np.empty(m, np.int64)
    hi_add = np.empty(m, np.int64)
    for i in range(m):
        lo_add[i] = min(0, k[i])
        hi_add[i] = max(0, k[i] + (1 if f[i] > 0.0 else 0))
    pre_lo = np.zeros(m + 1, np.int64)
    pre_hi = np.zeros(m + 1, np.int64)
    for i in range(m):
        pre_lo[i + 1] = pre_lo[i] + lo_add[i]
        pre_hi[i + 1] = pre_hi[i] + hi_add[i]
    u_lo = (min(x_won.min(), x_lost) - shift) / step
    u_hi = (max(x_won.max(), x_lost) - shift) / step
    w_lo = np.int64(math.floor(u_lo)) - 2
    w_hi = np.int64(math.ceil(u_hi)) + 2

    # depth-first over blocks [l, r), each with the product of every deal outside it
    depth = 2 * (int(math.log2(max(m, 1))) + 2)
    st_l = np.zeros(depth, np.int64)
    st_r = np.zeros(depth, np.int64)
    st_a0 = np.zeros(depth, np.int64)
    st_below = np.zeros(depth)
    st_arr = [np.ones(1) for _ in range(depth)]
    st_l[0], st_r[0], st_a0[0], st_below[0] = 0, m, 0, 0.0
    top = 1
    while top > 0:
        top -= 1
        l, r, a0, below, arr = st_l[top], st_r[top], st_a0[top], st_below[top], st_arr[top]
        if r - l == 1:
            g_lo = pre_lo[m] - lo_add[l]
            g_hi = pre_hi[m] - hi_add[l]
            out[l, 0] = _below(arr, a0, below, x_won[l], shift, step, smooth, g_lo, g_hi)
            out[l, 1] = _below(arr, a0, below, x_lost, shift, step, smooth, g_lo, g_hi)
            continue
        mid = (l + r) // 2
        for side in range(2):
            cl, cr = (l, mid) if side == 0 else (mid, r)
            al, ar = (mid, r) if side == 0 else (l, mid)
            need_lo = w_lo - (pre_hi[cr] - pre_hi[cl])
            need_hi = w_hi - (pre_lo[cr] - pre_lo[cl])
            child, c0, c_below = _extend(arr, a0, below, k, f, p, al, ar, lo_add, hi_add,
                                         need_lo, need_hi)
            if c0 == TOO_WIDE:
                return out, False
            st_l[top], st_r[top], st_a0[top], st_below[top] = cl, cr, c0, c_below
            st_arr[top] = child
            top += 1
    return out, True


def swings(amount: np.ndarray, prob: np.ndarray, target: float, bins: int = DEFAULT_BINS):
    """``(reach_if_won, reach_if_lost)`` for every deal of one group (input order).

    ``amount``/``prob``: the group's usable deals (no NULL, p in [0, 1]). Deals
    with p = 0 or 1 or amount 0 are read off the whole group's distribution at a
    shifted total; the others come from ``group_swings``. Returns None when a
    working array would pass MAX_SWING_BINS.
    """
    n = len(amount)
    active = (prob > 0.0) & (prob < 1.0) & (amount != 0.0)
    shift = float(amount[prob >= 1.0].sum())
    idx = np.flatnonzero(active)
    order = idx[canonical_order(amount[idx], prob[idx])]
    a, p = amount[order], prob[order]
    m = len(order)
    k = np.zeros(m, np.int64)
    f = np.zeros(m)
    step, smooth, by_scenario = 1.0, False, False
    if m:
        status, step, exact, _lo, _size, _linear, _rounding = plan_group(a, p, 0.0, bins, k, f)
        if status != OK:
            return None
        smooth = not exact
        by_scenario = smooth and m <= scenarios.MAX_DEALS
    won = np.empty(n)
    lost = np.empty(n)
    # inactive deals: the whole group's distribution read at a shifted total
    still = np.flatnonzero(~active)
    x_won = np.where(prob[still] >= 1.0, target, target - np.where(amount[still] != 0, amount[still], 0))
    x_lost = np.where((prob[still] >= 1.0) & (amount[still] != 0), target + amount[still], target)
    if len(still):
        at = np.concatenate([x_won, x_lost])
        cdf = (scenarios.below_many(a, p, shift, at) if by_scenario
               else _whole_group_cdf(k, f, p, at, shift, step, smooth))
        if cdf is None:
            return None
        won[still] = 1.0 - cdf[:len(still)]
        lost[still] = 1.0 - cdf[len(still):]
    if m:
        if by_scenario:
            below, ok = scenarios.swing_below(a, p, shift, target), True
        else:
            below, ok = group_swings(k, f, p, target - a, target, shift, step, smooth)
        if not ok:
            return None
        below = _same_for_twins(a, p, below)
        won[order] = 1.0 - below[:, 0]
        lost[order] = 1.0 - below[:, 1]
    return np.clip(won, 0.0, 1.0), np.clip(lost, 0.0, 1.0)


def _whole_group_cdf(k, f, p, x, shift, step, smooth):
    """P(S < x) for the whole group at each total in ``x``."""
    m = len(k)
    lo_add = np.minimum(k, 0)
    hi_add = np.maximum(k + (f > 0), 0)
    u = (x - shift) / step
    need_lo = int(math.floor(u.min())) - 2
    need_hi = int(math.ceil(u.max())) + 2
    arr, a0, below = _extend(np.ones(1), 0, 0.0, k, f, p, 0, m, lo_add, hi_add, need_lo, need_hi)
    if a0 == TOO_WIDE:
        return None
    g_lo, g_hi = int(lo_add.sum()), int(hi_add.sum())
    return np.array([_below(arr, a0, below, v, shift, step, smooth, g_lo, g_hi) for v in x])


def _same_for_twins(a, p, below):
    """Deals with the same amount and probability get the first one's numbers (they are
    equal in exact arithmetic; this keeps results independent of the input order)."""
    same = np.concatenate([[False], (a[1:] == a[:-1]) & (p[1:] == p[:-1])])
    if not same.any():
        return below
    first = np.maximum.accumulate(np.where(same, 0, np.arange(len(a))))
    return below[first]
