"""Sums of independent outcomes: one common step, a tree of batched FFT products.

Every sum of independent totals sqlrisk computes comes here: the leaves of a
large group (``outcome._pooled``) and stored outcomes added by ``outcome_add``
and ``outcome_merge`` (``combine.combine``). Every outcome is cut to the bins
that matter (tails holding at most TAIL of mass go, and so does anything outside
its Bernstein window, ``lattice.tail_window``, which ignores the transform noise
that mass sums would count) and moved onto one common step, splitting each
point's mass between its two neighbours so the mean is kept. The outcomes are
then convolved pairwise in a balanced tree. A tree level is one batch: its rows
sit in a matrix and the products of neighbouring rows come from one real FFT of
the whole matrix (in slices of rows to bound memory), not one transform per
pair. After each level every partial sum is cut the same way, so arrays stay
about as wide as the spread of the partial sums.

The common step (``common_step``) is the outcomes' common unit when they have
one and the sum fits MERGE_MAX_BINS (exact: equal or whole-multiple steps only
gain zeros), else the coarsest step, or, for a large group's leaves, coarser: moving an outcome
adds at most ``h^2 / 4`` to the variance, so ``h`` may grow until the moves
together add MOVE_VARIANCE of the total's variance, keeping at least MIN_BINS
bins across the total's window.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from .lattice import TAIL, common_unit, is_whole
from .lattice import tail_window as window
from .readout import is_smooth

#: Complex numbers one batched transform may hold (64 MiB).
FFT_BUDGET = 1 << 22
#: Largest share of the total's variance that moving the leaves may add.
MOVE_VARIANCE = 1e-3
#: Fewest bins across the total's window when the step is coarsened.
MIN_BINS = 4096
#: Tree levels of at most this many products' bins use numpy's FFT (no import cost).
SMALL_BATCH = 1 << 20
#: Bins a sum may hold before the common step is coarsened.
MERGE_MAX_BINS = 1 << 18


def nonzero_span(mass: np.ndarray) -> tuple[int, int]:
    """``first, last`` such that ``mass[first:last]`` holds every non-zero bin."""
    nz = np.flatnonzero(mass)
    return (int(nz[0]), int(nz[-1]) + 1) if len(nz) else (0, 1)


def common_step(steps, spread: float) -> tuple[float, bool]:
    """The step all outcomes go onto, and whether that is exact (no splitting).

    Exact when every step is a whole multiple of one unit (the finest step, or
    their common unit such as 1 for steps 100 and 7) that keeps the sum within
    MERGE_MAX_BINS; otherwise the coarsest step, or coarser if the sum needs it.
    """
    fine = min(steps)
    unit = fine if all(is_whole(s / fine) for s in steps) else common_unit(np.array(steps))[0]
    if unit > 0 and spread / unit <= MERGE_MAX_BINS:
        return unit, True
    step = max(steps)
    if spread / step > MERGE_MAX_BINS:
        return spread / MERGE_MAX_BINS, False
    return step, False


@njit(cache=True, nogil=True)
def _windows(origin, step, mean, var, largest, first, last):
    """Narrow each row's ``first..last`` to its Bernstein window (mass beyond below TAIL a side)."""
    for i in range(len(origin)):
        lo, hi = window(mean[i], var[i], largest[i], -np.inf, np.inf)
        first[i] = max(first[i], np.int64(math.floor((lo - origin[i]) / step[i])) - 1)
        last[i] = min(last[i], np.int64(math.ceil((hi - origin[i]) / step[i])) + 2)
        last[i] = max(last[i], first[i] + 1)


@njit(cache=True, nogil=True)
def _kept(mass, offsets):
    """First and last (exclusive) index of each row once tails of mass <= TAIL are cut."""
    n = len(offsets) - 1
    first = np.zeros(n, np.int64)
    last = np.zeros(n, np.int64)
    for i in range(n):
        a = offsets[i]
        b = offsets[i + 1]
        lo = a
        acc = 0.0
        while lo < b - 1 and acc + mass[lo] <= TAIL:
            acc += mass[lo]
            lo += 1
        hi = b
        acc = 0.0
        while hi - 1 > lo and acc + mass[hi - 1] <= TAIL:
            acc += mass[hi - 1]
            hi -= 1
        first[i] = lo - a
        last[i] = hi - a
    return first, last


@njit(cache=True, nogil=True)
def _move_rows(origin, step, mass, offsets, first, last, h):
    """Rows ``first..last`` of every outcome moved onto step ``h``, as a zero-padded matrix.

    An outcome whose step is a whole multiple of ``h`` is placed exactly; any other
    has each point split between its two neighbours on ``h`` (mean kept), the
    neighbours counted from the outcome's own origin, so where its points fall
    does not depend on how much of its tail was cut. Returns the matrix, the
    rows' origins and how many outcomes were split.
    """
    n = len(origin)
    width = 1
    for i in range(n):
        ratio = step[i] / h
        skip = math.floor(first[i] * ratio)
        width = max(width, np.int64(math.floor((last[i] - 1) * ratio - skip)) + 2)
    out = np.zeros((n, width))
    new_origin = np.empty(n)
    split = 0
    for i in range(n):
        ratio = step[i] / h
        whole = is_whole(ratio)
        if not whole and last[i] - first[i] > 1:
            split += 1
        base = offsets[i] + first[i]
        if whole:
            new_origin[i] = origin[i] + first[i] * step[i]
        else:
            skip = math.floor(first[i] * ratio)
            new_origin[i] = origin[i] + skip * h
        for j in range(last[i] - first[i]):
            m = mass[base + j]
            if whole:
                out[i, np.int64(round(j * ratio))] += m
            else:
                pos = (first[i] + j) * ratio - skip
                k = np.int64(math.floor(pos))
                f = pos - k
                out[i, k] += m * (1.0 - f)
                out[i, k + 1] += m * f
    return out, new_origin, split


@njit(cache=True, nogil=True)
def _cut_rows(prod, first, last, width):
    """``prod[i, first[i]:last[i]]`` for every row, as a zero-padded matrix ``width`` wide."""
    out = np.zeros((prod.shape[0], width))
    for i in range(prod.shape[0]):
        for j in range(last[i] - first[i]):
            out[i, j] = prod[i, first[i] + j]
    return out


def sum_outcomes(origin, step, mass, offsets, rounding, mean, var, largest, workers=1,
                 step_fixed=0.0, coarsen=False):
    """Distribution of the sum of independent outcomes (at least one).

    ``origin, step, rounding, mean, var, largest`` are per outcome (``mean`` and
    ``var`` of its total, ``largest`` a bound on how far one summand of it can
    move the total: a leaf's largest ``|amount|``, or a stored outcome's range;
    they size the windows, and the total's window sets the common step);
    ``mass``/``offsets`` hold the masses back to back.
    ``step_fixed > 0`` (every outcome on that step) keeps the sum on it. ``coarsen``
    lets an inexact common step grow (MOVE_VARIANCE, MIN_BINS): a large group's
    leaves, where the sum's resolution is far finer than its spread needs; stored
    outcomes keep the coarsest of their steps, which their charts and quantiles
    were read at.
    Returns ``(origin, step, mass, rounding)`` of the sum.

    ``rounding`` adds up, plus one step for every outcome whose points had to be
    split; a sum read as bins (``readout.is_smooth``) whose inputs were all read
    as points gains half a step (the bin reading), and a small group's totals
    that were moved up onto its points (``0 < rounding < step``) are centred
    first (moved down by half their rounding), so the moves blur the sum like a
    split instead of shifting it.
    """
    lengths = np.diff(offsets)
    spread = lengths > 1
    if not spread.any():  # every outcome is one certain total
        return float(origin.sum()), float(step.max()), np.ones(1), float(rounding.sum())
    support_lo = float(origin.sum())
    support_hi = float((origin + step * np.maximum(lengths - 1, 0)).sum())
    if support_hi - support_lo <= 4.0 * np.finfo(float).eps * max(abs(support_lo), abs(support_hi)):
        # steps so fine beside the totals that every total of the sum is the same double
        # (a stored outcome with step 1e-131 at origin 3): one point, moved by its span
        span = float((step * np.maximum(lengths - 1, 0)).sum())
        return support_lo, float(step.max()), np.ones(1), float(rounding.sum()) + span
    total_lo, total_hi = window(mean.sum(), var.sum(), largest.max(), support_lo, support_hi)
    width = total_hi - total_lo
    if step_fixed > 0:
        h, exact = step_fixed, True
    else:
        h, exact = common_step(list(np.unique(step[spread])), width)
    if coarsen and not exact:
        coarse = math.sqrt(4.0 * MOVE_VARIANCE * var.sum() / spread.sum())
        h = max(h, min(coarse, width / MIN_BINS))
    steps = np.where(spread, step, h)
    first, last = _kept(mass, offsets)
    _windows(origin, steps, mean, var, largest, first, last)
    rows, row_origin, split = _move_rows(origin, steps, mass, offsets, first, last, h)
    total_rounding = float(rounding.sum()) + h * split
    shift = 0.0
    if is_smooth(h, total_rounding):
        if not any(is_smooth(step[i], rounding[i]) for i in np.flatnonzero(spread)):
            total_rounding += h / 2.0  # the sum is now read as bins
        snapped = spread & (rounding > 0) & (rounding < step)
        shift = -float(rounding[snapped].sum()) / 2.0
        total_rounding += shift
    while len(rows) > 1:
        rows, row_origin, mean, var, largest = _level(rows, row_origin, h, mean, var, largest,
                                                      workers)
    out = rows[0]
    lo, hi = nonzero_span(out)
    out = out[lo:hi]
    return float(row_origin[0] + lo * h) + shift, h, out / out.sum(), total_rounding


def _pairs(x, pairs):
    return x[0:2 * pairs:2], x[1:2 * pairs:2]


def _level(rows, origin, h, mean, var, largest, workers):
    """One tree level: rows ``2i`` and ``2i + 1`` convolved; an odd last row is carried."""
    m, w = rows.shape
    pairs = m // 2
    n = 2 * w - 1
    if m * n <= SMALL_BATCH:
        fft, size, extra = np.fft, 1 << (n - 1).bit_length(), {}
    else:  # scipy.fft, for its fast lengths and threads; it takes ~0.4 s to import
        from scipy import fft
        size, extra = fft.next_fast_len(n, real=True), {"workers": workers}
    per_slice = max(1, FFT_BUDGET // (size // 2 + 1) // 2)
    prod = np.empty((pairs, n))
    for s in range(0, pairs, per_slice):
        e = min(pairs, s + per_slice)
        spec = fft.rfft(rows[2 * s:2 * e], size, axis=1, **extra)
        prod[s:e] = fft.irfft(spec[0::2] * spec[1::2], size, axis=1, **extra)[:, :n]
    np.maximum(prod, 0.0, out=prod)  # transform noise (~1e-17) below zero
    p_origin = np.add(*_pairs(origin, pairs))
    p_mean = np.add(*_pairs(mean, pairs))
    p_var = np.add(*_pairs(var, pairs))
    p_largest = np.maximum(*_pairs(largest, pairs))
    first, last = _kept(prod.ravel(), np.arange(pairs + 1) * n)
    _windows(p_origin, np.full(pairs, h), p_mean, p_var, p_largest, first, last)
    new_w = int((last - first).max())
    if m % 2:
        new_w = max(new_w, w)
    out = _cut_rows(prod, first, last, new_w)
    p_origin = p_origin + first * h
    if m % 2:
        out = np.vstack([out, np.pad(rows[-1], (0, new_w - w))])
        p_origin = np.append(p_origin, origin[-1])
        p_mean = np.append(p_mean, mean[-1])
        p_var = np.append(p_var, var[-1])
        p_largest = np.append(p_largest, largest[-1])
    return out, p_origin, p_mean, p_var, p_largest
