"""The sum of many leaf outcomes, level by level, with batched transforms.

A large group is computed as leaves of a few hundred deals each (see
``outcome._pooled``); this module adds the leaves up. Every leaf is cut to the
bins that matter (tails holding at most DROP of mass go, and so does anything
outside its Bernstein window, ``lattice.tail_window``, which ignores the transform
noise that mass sums would count) and moved onto one
common step, splitting each point's mass between its two neighbours so the
mean is kept. The leaves are then convolved pairwise in a balanced tree. A
tree level is one batch: its rows sit in a matrix and the products of
neighbouring rows come from one real FFT of the whole matrix (in slices of
rows to bound memory), not one transform per pair. After each level every
partial sum is cut the same way, so arrays stay about as wide as the spread of
the partial sums.

The common step is the leaves' common unit when they have one (exact), else
the coarsest leaf step, or coarser: moving a leaf adds at most ``h^2 / 4`` to
the variance, so ``h`` may grow until the leaves together add MOVE_VARIANCE of
the total's variance, keeping at least MIN_BINS bins across the total's window.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from .combine import common_step, nonzero_span
from .lattice import tail_window as window

#: Complex numbers one batched transform may hold (64 MiB).
FFT_BUDGET = 1 << 22
#: Largest share of the total's variance that moving the leaves may add.
MOVE_VARIANCE = 1e-3
#: Fewest bins across the total's window when the step is coarsened.
MIN_BINS = 4096
#: Mass each leaf and partial sum may drop from each tail (at most ~2e-12 over
#: a million deals' ~8,000 leaves and sums).
DROP = 1e-16


@njit(cache=True, nogil=True)
def _windows(origin, step, mean, var, largest, first, last):
    """Narrow each row's ``first..last`` to its Bernstein window (mass beyond below 1e-16 a side)."""
    for i in range(len(origin)):
        lo, hi = window(mean[i], var[i], largest[i], -np.inf, np.inf)
        first[i] = max(first[i], np.int64(math.floor((lo - origin[i]) / step[i])) - 1)
        last[i] = min(last[i], np.int64(math.ceil((hi - origin[i]) / step[i])) + 2)
        last[i] = max(last[i], first[i] + 1)


@njit(cache=True, nogil=True)
def _kept(mass, offsets):
    """First and last (exclusive) index of each row once tails of mass <= DROP are cut."""
    n = len(offsets) - 1
    first = np.zeros(n, np.int64)
    last = np.zeros(n, np.int64)
    for i in range(n):
        a = offsets[i]
        b = offsets[i + 1]
        lo = a
        acc = 0.0
        while lo < b - 1 and acc + mass[lo] <= DROP:
            acc += mass[lo]
            lo += 1
        hi = b
        acc = 0.0
        while hi - 1 > lo and acc + mass[hi - 1] <= DROP:
            acc += mass[hi - 1]
            hi -= 1
        first[i] = lo - a
        last[i] = hi - a
    return first, last


@njit(cache=True, nogil=True)
def _move_rows(origin, step, mass, offsets, first, last, h):
    """Rows ``first..last`` of every leaf moved onto step ``h``, as a zero-padded matrix.

    A leaf whose step is a whole multiple of ``h`` is placed exactly; any other
    leaf has each point split between its two neighbours on ``h`` (mean kept).
    Returns the matrix, the rows' origins and how many leaves were split.
    """
    n = len(origin)
    width = 1
    for i in range(n):
        ratio = step[i] / h
        width = max(width, np.int64(math.floor((last[i] - first[i] - 1) * ratio)) + 2)
    out = np.zeros((n, width))
    new_origin = np.empty(n)
    split = 0
    for i in range(n):
        ratio = step[i] / h
        whole = abs(ratio - round(ratio)) <= 1e-9 * max(1.0, ratio)
        if not whole and last[i] - first[i] > 1:
            split += 1
        base = offsets[i] + first[i]
        new_origin[i] = origin[i] + first[i] * step[i]
        for j in range(last[i] - first[i]):
            m = mass[base + j]
            if whole:
                out[i, np.int64(round(j * ratio))] += m
            else:
                pos = j * ratio
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


def merge_leaves(origin, step, mass, offsets, rounding, mean, var, largest, workers=1,
                 step_fixed=0.0):
    """Distribution of the sum of independent leaf outcomes.

    ``origin, step, rounding, mean, var, largest`` are per leaf (``mean`` and
    ``var`` of the leaf's true total, ``largest`` its largest ``|amount|``;
    they size the total's window, which sets the common step);
    ``mass``/``offsets`` hold the leaves' masses back to back.
    ``step_fixed > 0`` (every leaf on that step) keeps the sum on it.
    Returns ``(origin, step, mass, rounding)`` of the sum.
    """
    lengths = np.diff(offsets)
    spread = lengths > 1
    if not spread.any():  # every leaf is one certain total
        return float(origin.sum()), float(step.max()), np.ones(1), float(rounding.sum())
    total_lo, total_hi = window(mean.sum(), var.sum(), largest.max(), -np.inf, np.inf)
    width = total_hi - total_lo
    if step_fixed > 0:
        h, exact = step_fixed, True
    else:
        h, exact = common_step(list(np.unique(step[spread])), width)
    if not exact:
        coarse = math.sqrt(4.0 * MOVE_VARIANCE * var.sum() / spread.sum())
        h = max(h, min(coarse, width / MIN_BINS))
    steps = np.where(spread, step, h)
    first, last = _kept(mass, offsets)
    _windows(origin, steps, mean, var, largest, first, last)
    rows, row_origin, split = _move_rows(origin, steps, mass, offsets, first, last, h)
    total_rounding = float(rounding.sum()) + h * split
    if split and rounding.max() == 0:
        total_rounding += h / 2.0  # the sum is now read as bins
    while len(rows) > 1:
        rows, row_origin, mean, var, largest = _level(rows, row_origin, h, mean, var, largest,
                                                      workers)
    out = rows[0]
    lo, hi = nonzero_span(out)
    out = out[lo:hi]
    return float(row_origin[0] + lo * h), h, out / out.sum(), total_rounding


def _pairs(x, pairs):
    return x[0:2 * pairs:2], x[1:2 * pairs:2]


def _level(rows, origin, h, mean, var, largest, workers):
    """One tree level: rows ``2i`` and ``2i + 1`` convolved; an odd last row is carried."""
    from scipy import fft  # only large groups come here; scipy.fft takes ~0.4 s to import

    m, w = rows.shape
    pairs = m // 2
    n = 2 * w - 1
    size = fft.next_fast_len(n, real=True)
    per_slice = max(1, FFT_BUDGET // (size // 2 + 1) // 2)
    prod = np.empty((pairs, n))
    for s in range(0, pairs, per_slice):
        e = min(pairs, s + per_slice)
        spec = fft.rfft(rows[2 * s:2 * e], size, axis=1, workers=workers)
        prod[s:e] = fft.irfft(spec[0::2] * spec[1::2], size, axis=1, workers=workers)[:, :n]
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
