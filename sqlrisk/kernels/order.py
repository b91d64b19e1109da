"""The canonical order of a group's deals: by amount, then probability.

The recursion's floating-point result depends on the order the deals are added
in, and DuckDB's ``list()`` order is not deterministic under threads, so every
group is put in this order first. Deals that tie on both amount and
probability are interchangeable, so any sort that orders by the pair gives the
same sequence of deals, and the same numbers.

Small groups use a comparison sort; large ones (a company total of a million
deals with a few thousand distinct amounts) a least-significant-digit radix
sort on the bit patterns, 11 bits a pass, skipping passes whose digit is the
same for every deal: about 2x faster there than sorting each run of tied
amounts by probability.

``activate`` lists a group's uncertain deals in this order (every kernel that
builds a group's total starts there).
"""

from __future__ import annotations

import numpy as np
from numba import njit

#: Groups at least this large are radix sorted.
RADIX_MIN = 1 << 14
_SIGN = np.uint64(1) << np.uint64(63)
DIGIT_BITS = 11
_DIGIT = np.uint64((1 << DIGIT_BITS) - 1)


@njit(cache=True, nogil=True)
def canonical_order(amount, prob):
    """Indices that sort deals by amount, then probability."""
    if len(amount) >= RADIX_MIN:
        return _radix_order(amount, prob)
    order = np.argsort(amount)
    n = len(order)
    i = 0
    while i < n:
        j = i + 1
        while j < n and amount[order[j]] == amount[order[i]]:
            j += 1
        if j - i > 16:
            run = order[i:j].copy()
            order[i:j] = run[np.argsort(prob[run])]
        else:
            for m in range(i + 1, j):  # insertion sort of a short run
                r = order[m]
                x = prob[r]
                t = m - 1
                while t >= i and prob[order[t]] > x:
                    order[t + 1] = order[t]
                    t -= 1
                order[t + 1] = r
        i = j
    return order


@njit(cache=True, nogil=True)
def _sort_keys(x):
    """Unsigned integers in the order of the doubles ``x`` (-0.0 counts as 0.0)."""
    bits = (x + 0.0).view(np.uint64)
    out = np.empty(len(x), np.uint64)
    for i in range(len(x)):
        b = bits[i]
        out[i] = ~b if b & _SIGN else b | _SIGN
    return out


@njit(cache=True, nogil=True)
def _radix_pass(keys, order, shift, count, keys_out, order_out):
    """One stable counting pass on one digit; False (nothing moved) if the digit is constant."""
    count[:] = 0
    for i in range(len(keys)):
        count[np.int64((keys[i] >> shift) & _DIGIT) + 1] += 1
    if count.max() == len(keys):
        return False
    for d in range(1, len(count)):
        count[d] += count[d - 1]
    for i in range(len(keys)):
        d = np.int64((keys[i] >> shift) & _DIGIT)
        at = count[d]
        keys_out[at] = keys[i]
        order_out[at] = order[i]
        count[d] = at + 1
    return True


@njit(cache=True, nogil=True)
def _radix_by(keys, order):
    """``order`` stably sorted by ``keys`` (already in ``order``'s order)."""
    count = np.empty((1 << DIGIT_BITS) + 1, np.int64)
    keys_out = np.empty_like(keys)
    order_out = np.empty_like(order)
    for shift in range(0, 64, DIGIT_BITS):
        if _radix_pass(keys, order, np.uint64(shift), count, keys_out, order_out):
            keys, keys_out = keys_out, keys
            order, order_out = order_out, order
    return order


@njit(cache=True, nogil=True)
def _radix_order(amount, prob):
    order = _radix_by(_sort_keys(prob), np.arange(len(prob)))
    return _radix_by(_sort_keys(amount)[order], order)


@njit(cache=True, nogil=True)
def activate(amount, prob, flip, out_amount, out_prob):
    """Write a group's uncertain deals (0 < p < 1, a != 0), in canonical order, into
    ``out_amount``/``out_prob``; returns their count, the total of the certain deals
    (p = 1) and the total the flipped deals add for certain (0 without ``flip``).

    With ``flip``, a deal more likely won than lost enters as its amount for
    certain plus a loss of that amount with probability ``1 - p`` (exact in
    floating point for p in (0.5, 1)): the same total, but the likeliest
    scenario ("every deal goes its likelier way") is then a lattice point no
    split touches, and fewer split amounts blur the totals near it.
    """
    certain = 0.0
    flipped = 0.0
    m = 0
    for r in canonical_order(amount, prob):
        a = amount[r]
        p = prob[r]
        if p >= 1.0:
            certain += a
        elif p > 0.0 and a != 0.0:
            if flip and p > 0.5:
                flipped += a
                a = -a
                p = 1.0 - p
            out_amount[m] = a
            out_prob[m] = p
            m += 1
    return m, certain, flipped
