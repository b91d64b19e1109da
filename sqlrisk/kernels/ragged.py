"""Ragged lists (values back to back, delimited by offsets): index ranges, a subset of
groups, and the check that per-group lists agree."""

from __future__ import annotations

import numpy as np
from numba import njit


def ranges(starts: np.ndarray, counts: np.ndarray) -> np.ndarray:
    """Concatenation of ``arange(s, s + c)`` for every pair, vectorised."""
    total = int(counts.sum())
    if total == 0:
        return np.zeros(0, dtype=np.int64)
    ends = np.cumsum(counts)
    idx = np.arange(total, dtype=np.int64) - np.repeat(ends - counts, counts)
    return idx + np.repeat(starts, counts)


def group_deals(amount, prob, offsets, groups):
    """The deals of ``groups`` (indices, in order), back to back, and their offsets."""
    lengths = np.diff(offsets)[groups]
    rows = ranges(np.asarray(offsets)[:-1][groups], lengths)
    return amount[rows], prob[rows], np.concatenate([[0], np.cumsum(lengths)]).astype(np.int64)


@njit(cache=True, nogil=True)
def lists_agree(values, offsets, live, ref):
    """True when every live row's list equals the list of row ``ref[row]``.

    NaN equals NaN here, so that a NaN repeated on every row of a group is
    left for the value checks to report, rather than reported as disagreement.
    """
    for row in range(len(live)):
        if not live[row]:
            continue
        other = ref[row]
        if other == row:
            continue
        a0 = offsets[row]
        b0 = offsets[other]
        width = offsets[row + 1] - a0
        if offsets[other + 1] - b0 != width:
            return False
        for j in range(width):
            x = values[a0 + j]
            y = values[b0 + j]
            if x != y and not (x != x and y != y):
                return False
    return True
