"""Checks on ragged lists (values back to back, delimited by offsets)."""

from __future__ import annotations

from numba import njit


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
