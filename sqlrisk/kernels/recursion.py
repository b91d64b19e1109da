"""The lattice recursion, batched over many groups in one compiled call.

Adding deal ``j`` (lattice offset ``k``, split fraction ``f``, probability
``p``) to a distribution ``g`` on integer totals gives

    g'(s) = (1 - p) g(s) + p (1 - f) g(s - k) + p f g(s - k - 1)

(the two-point recursion of the weighted Poisson-binomial distribution, with
the amount split between two neighbouring lattice points when it is not a
multiple of the step). Each update maps the current support into a second
buffer, in a loop LLVM vectorises. Cost: one pass over the current support per deal;
deals are added in ascending amount so the support stays narrow for long.

When the window had to cut the support (``linear`` False in the plan), the
deals are added in *chunks* whose own supports stay narrow, each chunk is
folded modulo the window size, and ``spectral.py`` multiplies the chunks'
discrete Fourier transforms (Biscarri, Zhao & Brunner, "A simple and fast
method for computing the Poisson binomial distribution function", CSDA 122,
2018, use the same product-of-transforms idea for counts).
"""

from __future__ import annotations

import math
from collections import namedtuple

import numpy as np
from numba import njit

from .lattice import EMPTY, MAX_BINS, OK, SCENARIOS, TOO_MANY_BINS, exact_budget, plan_group
from .order import activate
from .scenarios import SNAP_BINS, snap_fill
from .sparse import prefers_sparse


@njit(cache=True, nogil=True)
def _step(src, dst, lo, hi, k, q0, q1, q2):
    """``dst[s] = q0 src[s] + q1 src[s - k] + q2 src[s - k - 1]`` for ``s`` in ``lo..hi``.

    Written over three aligned views with a forward index so that LLVM turns
    the loop into vector instructions (an in-place update cannot be, since its
    reads and writes overlap); about 5x faster than the in-place loop here.
    """
    n = hi - lo + 1
    x = src[lo:hi + 1]
    y = src[lo - k:hi - k + 1]
    out = dst[lo:hi + 1]
    if q2 != 0.0:
        z = src[lo - k - 1:hi - k]
        for j in range(n):
            out[j] = q0 * x[j] + q1 * y[j] + q2 * z[j]
    else:
        for j in range(n):
            out[j] = q0 * x[j] + q1 * y[j]


@njit(cache=True, nogil=True)
def add_deals(buf, cur_lo, cur_hi, offset, frac, prob, start, stop):
    """Add deals ``start..stop-1`` to the distribution in ``buf[cur_lo..cur_hi]``.

    ``buf`` must be zero outside the current support and large enough for the
    final support. Returns the new ``(cur_lo, cur_hi)``.

    Each deal maps one buffer into another (ping-pong), both padded by the
    largest offset so that every read of a total outside the support reads a
    zero. A buffer only ever held supports inside the current one, so
    everything outside the current support is still zero.
    """
    pad = 1
    for i in range(start, stop):
        pad = max(pad, abs(offset[i]) + 1)
    size = len(buf) + 2 * pad
    src = np.zeros(size)
    dst = np.zeros(size)
    lo = cur_lo + pad
    hi = cur_hi + pad
    src[lo:hi + 1] = buf[cur_lo:cur_hi + 1]
    for i in range(start, stop):
        k = offset[i]
        f = frac[i]
        p = prob[i]
        up = 1 if f > 0.0 else 0
        new_lo = lo + min(k, 0)
        new_hi = hi + max(k + up, 0)
        _step(src, dst, new_lo, new_hi, k, 1.0 - p, p * (1.0 - f), p * f)
        src, dst = dst, src
        lo = new_lo
        hi = new_hi
    buf[lo - pad:hi - pad + 1] = src[lo:hi + 1]
    return lo - pad, hi - pad


@njit(cache=True, nogil=True)
def _span(k, f):
    return max(0, k + (1 if f > 0.0 else 0)) - min(0, k)


@njit(cache=True, nogil=True)
def fill_chunks(offset, frac, prob, start, size, width, rows):
    """Fold chunks of deals, from deal ``start`` on, into the rows of ``rows``.

    Each row gets one chunk: consecutive deals whose summed spans stay within
    ``width`` (a wider single deal is placed as its three atoms), computed by
    ``add_deals`` and folded modulo ``size`` (absolute index ``s`` at position
    ``s mod size``). Returns ``(next_deal, rows_used)``.
    """
    n = len(offset)
    used = 0
    i = start
    while i < n and used < rows.shape[0]:
        row = rows[used]
        span = _span(offset[i], frac[i])
        if span > width:
            k = offset[i]
            p = prob[i]
            row[0] += 1.0 - p
            row[k % size] += p * (1.0 - frac[i])
            if frac[i] > 0.0:
                row[(k + 1) % size] += p * frac[i]
            i += 1
            used += 1
            continue
        stop = i
        total = 0
        base = 0
        while stop < n:
            s = _span(offset[stop], frac[stop])
            if stop > i and total + s > width:
                break
            total += s
            base += min(0, offset[stop])
            stop += 1
        buf = np.zeros(total + 1)
        buf[-base] = 1.0
        add_deals(buf, -base, -base, offset, frac, prob, i, stop)
        for j in range(total + 1):
            row[(base + j) % size] += buf[j]
        i = stop
        used += 1
    return i, used


@njit(cache=True, nogil=True)
def _snap_plan(a, step_req):
    """``(status, origin, step, size)`` of the lattice a small group's totals are snapped to:
    the multiples of the given step, or of a step that puts about SNAP_BINS points
    across every total."""
    lo_sum = 0.0
    hi_sum = 0.0
    for x in a:
        if x < 0:
            lo_sum += x
        else:
            hi_sum += x
    step = step_req if step_req > 0 else (hi_sum - lo_sum) / (SNAP_BINS - 3)
    first = math.floor(lo_sum / step)
    size = np.int64(math.ceil(hi_sum / step) - first) + 1
    return (TOO_MANY_BINS if size > MAX_BINS else OK), first * step, step, size


#: What ``exact_batch`` returns. Per group: ``status`` (OK, EMPTY, TOO_MANY_BINS,
#: SCENARIOS), ``origin``, ``step``, ``exact``, ``rounding``, ``linear`` (the lattice
#: holds every reachable total; otherwise ``spectral.fold_group`` fills it), ``lo``
#: (its first index) and ``mass_offsets`` into the flat ``mass``. Per deal, in
#: canonical order: ``offset`` and ``frac`` (lattice offset and split fraction),
#: ``prob``; ``act_start``/``act_stop`` delimit each group's deals.
LatticeBatch = namedtuple("LatticeBatch", [
    "status", "origin", "step", "exact", "rounding", "linear", "lo", "mass_offsets", "mass",
    "offset", "frac", "prob", "act_start", "act_stop"])


@njit(cache=True, nogil=True)
def exact_batch(amount, prob, offsets, step_req, bins, scenario_max, snap_max, snap_explicit,
                flip):
    """Plan every group of a batch and compute those whose support fits.

    ``amount``/``prob`` hold the usable rows of all groups back to back
    (``offsets`` delimits them); ``step_req[g] > 0`` asks for that step.
    A group of at most ``scenario_max`` uncertain deals whose lattice would not
    be exact gets status SCENARIOS and no mass (its caller answers from the
    scenarios); one of at most ``snap_max`` has its scenario totals snapped to
    a lattice (``scenarios.snap_fill``) instead of splitting amounts, on the
    automatic lattice (and on a requested step too where ``snap_explicit[g]``).
    ``flip`` is passed to ``activate``.
    Returns a ``LatticeBatch`` (linear groups' mass filled, the others left for
    ``spectral.fold_group``).
    """
    n_groups = len(offsets) - 1
    plan = new_plan(n_groups, len(amount))
    plan_batch(amount, prob, offsets, step_req, bins, scenario_max, snap_max, snap_explicit, flip,
               *plan)
    status, origin, step, exact, rounding, linear, lo, size = plan[:8]
    act_amount, act_prob, act_offset, act_frac, act_start, act_stop, snapped, snap_origin = plan[8:]
    mass_offsets = np.zeros(n_groups + 1, np.int64)
    for g in range(n_groups):
        mass_offsets[g + 1] = mass_offsets[g] + size[g]
    mass = np.zeros(mass_offsets[-1])
    fill(mass, mass_offsets, status, step, exact, rounding, linear, lo, snapped, snap_origin,
         act_amount, act_offset, act_frac, act_prob, act_start, act_stop)
    return LatticeBatch(status, origin, step, exact, rounding, linear, lo, mass_offsets, mass,
                        act_offset, act_frac, act_prob, act_start, act_stop)


@njit(cache=True, nogil=True)
def new_plan(n_groups, n_rows):
    """Empty arrays for ``plan_batch``: per group ``status, origin, step, exact, rounding,
    linear, lo, size``; per deal ``act_amount, act_prob, act_offset, act_frac``; per group
    ``act_start, act_stop`` (set by ``plan_batch``), ``snapped, snap_origin``."""
    return (np.zeros(n_groups, np.int64), np.zeros(n_groups), np.zeros(n_groups),
            np.zeros(n_groups, np.bool_), np.zeros(n_groups), np.zeros(n_groups, np.bool_),
            np.zeros(n_groups, np.int64), np.zeros(n_groups, np.int64),
            np.empty(n_rows), np.empty(n_rows), np.zeros(n_rows, np.int64), np.zeros(n_rows),
            np.zeros(n_groups, np.int64), np.zeros(n_groups, np.int64),
            np.zeros(n_groups, np.bool_), np.zeros(n_groups))


@njit(cache=True, nogil=True)
def plan_batch(amount, prob, offsets, step_req, bins, scenario_max, snap_max, snap_explicit,
               flip, status, origin, step, exact, rounding, linear, lo, size, act_amount,
               act_prob, act_offset, act_frac, act_start, act_stop, snapped, snap_origin):
    """The planning pass of ``exact_batch``, written into the arrays of ``new_plan`` (or
    slices of larger ones: ``outcome`` plans parts of a batch in threads into one set)."""
    n_groups = len(offsets) - 1
    for g in range(n_groups):
        a0 = offsets[g]
        a1 = offsets[g + 1]
        act_start[g] = a0  # rows counted from this call's first row
        act_stop[g] = a0
        if a1 == a0:
            status[g] = EMPTY
            continue
        m, certain, flipped = activate(amount[a0:a1], prob[a0:a1], flip, act_amount[a0:a1],
                                       act_prob[a0:a1])
        shift = certain + flipped
        m += a0
        act_stop[g] = m
        if m == a0:
            origin[g] = shift
            step[g] = max(step_req[g], 0.0)
            exact[g] = True
            linear[g] = True
            size[g] = 1
            continue
        st, h, ex, first, count, lin, rnd = plan_group(
            act_amount[a0:m], act_prob[a0:m], step_req[g], bins,
            act_offset[a0:m], act_frac[a0:m],
        )
        # a small group is exact on a lattice only within the exact budget: a wider exact
        # lattice (the automatic step may take the unit for up to AUTO_MAX_BINS bins) costs
        # more than its scenarios, and a stored outcome of megabytes
        cheap = ex and (step_req[g] > 0 or count <= exact_budget(m - a0, bins))
        # a reader's small group whose exact lattice is mostly unreachable points (ten
        # deals in hundreds: at most 1,024 totals, not 4,096 bins) is computed on its
        # reachable totals by the small-group kernels (``sparse.py``, the same numbers)
        few = cheap and lin and prefers_sparse(m - a0, count)
        if st == OK and (not cheap or few) and m - a0 <= scenario_max:
            status[g] = SCENARIOS
            continue
        automatic = step_req[g] <= 0 or snap_explicit[g]
        if st == OK and not cheap and m - a0 <= snap_max and automatic:
            st, snap_origin[g], h, count = _snap_plan(act_amount[a0:m], step_req[g])
            snapped[g] = True
            status[g] = st
            step[g] = h
            linear[g] = True
            size[g] = count if st == OK else 0
            origin[g] = shift + snap_origin[g]
            continue
        status[g] = st
        step[g] = h
        exact[g] = ex
        rounding[g] = rnd
        linear[g] = lin
        lo[g] = first
        size[g] = count if st == OK else 0
        if ex:
            # every flipped amount is a whole number of steps: add them up as steps, so
            # "won for certain, less a possible loss" does not leave float noise where
            # the true lowest total is (0 less a few ulps of the amounts)
            origin[g] = certain + (first + math.floor(flipped / h + 0.5)) * h
        else:
            origin[g] = shift + first * h


@njit(cache=True, nogil=True)
def fill(mass, mass_offsets, status, step, exact, rounding, linear, lo, snapped, snap_origin,
         act_amount, act_offset, act_frac, act_prob, act_start, act_stop):
    """Each planned linear group's mass: its snapped scenario totals, or the recursion over
    its deals (a snapped group's ``rounding`` and ``exact`` are known only once filled)."""
    for g in range(len(status)):
        if status[g] != OK or not linear[g]:
            continue
        out = mass[mass_offsets[g]:mass_offsets[g + 1]]
        if len(out) == 1:
            out[0] = 1.0
            continue
        if snapped[g]:
            a0 = act_start[g]
            a1 = act_stop[g]
            moved = snap_fill(act_amount[a0:a1], act_prob[a0:a1], snap_origin[g], step[g], out)
            # a move within float noise of the totals is none: the lattice is exact
            rounding[g] = moved if moved > 1e-9 * step[g] else 0.0
            exact[g] = rounding[g] == 0.0
            continue
        at = -lo[g]
        out[at] = 1.0
        add_deals(out, at, at, act_offset, act_frac, act_prob, act_start[g], act_stop[g])
        total = out.sum()
        for j in range(len(out)):
            out[j] = max(out[j], 0.0) / total
