"""A small group's exact lattice computed on its reachable totals only.

Ten deals of a few thousand each, counted in hundreds, have an exact lattice
of thousands of points of which at most ``2^10`` can be reached. The
recursion of ``recursion.py`` touches every point for every deal and a
reader then sums them all; here the same recursion runs on the list of
reachable points, sorted: adding deal ``(k, p)`` merges the list, scaled by
``1 - p``, with itself moved by ``k`` and scaled by ``p``.

The numbers are the lattice's to the last bit. Where a point is reached both
ways the value is ``(1 - p) x + p y``, as on the lattice; where one way only,
the lattice adds an exact zero (``(1 - p) x + p * 0``), which changes nothing.
The normalising total and the cumulative sums add the same values in the
same order, zeros aside. So a reader's answer from this list equals the one
read off the stored outcome of the same deals (README "Bands": on an exact
outcome the stored readers give the aggregates' numbers).

``prefers_sparse`` says when this is the cheaper route; ``recursion.exact_batch``
routes those groups of the readers to the small-group kernels, which replan them
with ``plan`` and read them here.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from .lattice import DEFAULT_BINS, EXACT_MAX_BINS, OK, exact_budget, plan_group
from .order import activate
from .readout import Q_TOL, cut_tolerance

#: A merge step costs about this many vectorised lattice updates (measured by
#: ``tests/benchmarks/round2.py`` case H, groups of 10).
SPARSE_COST = 4
#: The readers' lattice budget (``deal_udfs._group_answers`` plans with the default).
READER_BINS = DEFAULT_BINS


@njit(cache=True, nogil=True)
def prefers_sparse(m, count):
    """True when ``m`` uncertain deals on an exact lattice of ``count`` points are cheaper
    on their reachable totals: at most ``min(2^i, count)`` after deal ``i``, against about
    ``count / 2`` points a deal on the lattice."""
    if m > 30:
        return False
    work = 0
    reach = 1
    for _ in range(m):
        reach = min(2 * reach, count)
        work += reach
    return work * SPARSE_COST <= m * count // 2


@njit(cache=True, nogil=True)
def plan(amount, prob, a_buf, p_buf, off_buf, frac_buf):
    """The readers' plan of one group (as ``recursion.exact_batch`` makes it, flipping
    likely deals): ``(use, m, origin, step, size, at)``. ``use`` is True when the group's
    lattice is exact, holds every total, fits the exact budget and ``prefers_sparse``;
    the deals' lattice offsets are then in ``off_buf[:m]``, their probabilities in
    ``p_buf[:m]``, and the mass starts at index ``at`` of ``size`` points."""
    m, certain, flipped = activate(amount, prob, True, a_buf, p_buf)
    if m == 0:
        return False, 0, 0.0, 0.0, 0, 0
    st, h, ex, first, count, lin, _rnd = plan_group(
        a_buf[:m], p_buf[:m], 0.0, READER_BINS, off_buf[:m], frac_buf[:m])
    use = (st == OK and ex and lin and count <= exact_budget(m, READER_BINS)
           and prefers_sparse(m, count))
    if not use:
        return False, m, 0.0, 0.0, 0, 0
    for i in range(m):
        if frac_buf[i] != 0.0:
            return False, m, 0.0, 0.0, 0, 0
    origin = certain + (first + math.floor(flipped / h + 0.5)) * h
    return True, m, origin, h, count, -first


@njit(cache=True, nogil=True)
def buffers(longest):
    """Work space for groups of up to ``longest`` deals: deal buffers, two point lists
    and the cumulative sums (an exact lattice has at most EXACT_MAX_BINS points)."""
    points = min(1 << min(longest, 24), EXACT_MAX_BINS)
    return (np.empty(longest), np.empty(longest), np.zeros(longest, np.int64),
            np.zeros(longest), np.empty(points, np.int64), np.empty(points),
            np.empty(points, np.int64), np.empty(points), np.empty(points))


@njit(cache=True, nogil=True)
def read_group(amount, prob, bufs):
    """Plan one group and, when it takes this route, its reachable points:
    ``(use, origin, step, size, n, idx, val, cum)``."""
    a_buf, p_buf, off_buf, frac_buf, i1, v1, i2, v2, cum = bufs
    use, m, origin, step, size, at = plan(amount, prob, a_buf, p_buf, off_buf, frac_buf)
    if not use:
        return False, origin, step, size, 0, i1, v1, cum
    n, idx, val = reachable_mass(off_buf[:m], p_buf[:m], at, i1, v1, i2, v2)
    run = 0.0
    for i in range(n):
        run += val[i]
        cum[i] = run
    return True, origin, step, size, n, idx, val, cum


@njit(cache=True, nogil=True)
def reachable_mass(offset, prob, at, idx, val, idx2, val2):
    """Run the recursion from mass 1 at ``at`` over the deals, on the reachable points;
    normalise as the lattice does. Returns ``(n, idx, val)`` (the buffers holding the
    result, which may be either pair passed in)."""
    n = 1
    idx[0] = at
    val[0] = 1.0
    for d in range(len(offset)):
        k = offset[d]
        p = prob[d]
        q0 = 1.0 - p
        q1 = p  # the lattice's p * (1 - frac), with frac = 0 on an exact lattice
        i = 0
        j = 0
        out = 0
        while i < n or j < n:
            if j >= n or (i < n and idx[i] < idx[j] + k):
                idx2[out] = idx[i]
                val2[out] = q0 * val[i]
                i += 1
            elif i >= n or idx[j] + k < idx[i]:
                idx2[out] = idx[j] + k
                val2[out] = q1 * val[j]
                j += 1
            else:
                idx2[out] = idx[i]
                val2[out] = q0 * val[i] + q1 * val[j]
                i += 1
                j += 1
            out += 1
        n = out
        idx, idx2 = idx2, idx
        val, val2 = val2, val
    total = 0.0
    for i in range(n):
        total += val[i]
    for i in range(n):
        val[i] = max(val[i], 0.0) / total
    return n, idx, val


@njit(cache=True, nogil=True)
def below(origin, step, size, idx, cum, n, x):
    """``P(S < x)`` as ``readout.prob_below`` reads an exact lattice of ``size`` points."""
    tol = cut_tolerance(x, origin, origin + (size - 1) * step, step)
    c = math.ceil((x - origin) / step - tol)
    if c <= 0:
        return 0.0
    if c >= size:
        return cum[n - 1]
    j = np.searchsorted(idx[:n], c)  # the first point at or above c
    return cum[j - 1] if j > 0 else 0.0


@njit(cache=True, nogil=True)
def quantile(origin, step, size, idx, val, cum, n, q):
    """The smallest total with ``P(S <= x) >= q``, as ``readout.quantile`` reads it."""
    target = q - Q_TOL
    if target <= 0.0:
        for i in range(n):
            if val[i] > 0.0:
                return origin + idx[i] * step
        return origin
    j = np.searchsorted(cum[:n], target)
    return origin + (idx[j] if j < n else size - 1) * step
