"""Simulated totals -> a lattice outcome (the empirical distribution).

Binning: when every amount is a multiple of a common unit and no deal size
varies, every simulated total is a multiple of that unit too; if the totals'
range fits the bin budget at that unit the empirical distribution sits on the
lattice exactly (``rounding = 0``). Otherwise each total goes to the nearest
point of a lattice of ``bins`` points over its range (or of the given step),
which moves it by at most ``step / 2``; as the outcome is then read as bins
(another ``step / 2``), ``rounding = step``.
"""

from __future__ import annotations

import numpy as np

from .lattice import DEFAULT_BINS, is_multiple
from .outcome import OutcomeBatch


def bin_totals(totals, offsets, units, step_req, bins: int = DEFAULT_BINS) -> OutcomeBatch:
    """One outcome per group from its simulated totals.

    ``units[g] > 0`` is the group's common unit of amounts when the totals are
    all multiples of it (no varying deal sizes), 0 otherwise; ``step_req[g] > 0``
    asks for a step.
    """
    n_groups = len(offsets) - 1
    origin = np.zeros(n_groups)
    step = np.zeros(n_groups)
    rounding = np.zeros(n_groups)
    rows = []
    for g in range(n_groups):
        t = totals[offsets[g]:offsets[g + 1]]
        lo, hi = float(t.min()), float(t.max())
        h = step_req[g]
        exact = False
        if h > 0:
            exact = units[g] > 0 and bool(is_multiple(np.array([units[g]]), h))
            base = lo if exact else np.floor(lo / h) * h
        elif units[g] > 0 and (hi - lo) / units[g] + 1 <= bins:
            h, base, exact = units[g], lo, True
        else:
            h, base = (hi - lo) / (bins - 1), lo
        if hi == lo or h <= 0:
            origin[g], step[g] = lo, max(h, 0.0)
            rows.append(np.ones(1))
            continue
        index = np.rint((t - base) / h).astype(np.int64)
        counts = np.bincount(index - index.min())
        origin[g] = base + index.min() * h
        step[g] = h
        rounding[g] = 0.0 if exact else h
        rows.append(counts / len(t))
    lengths = np.array([len(r) for r in rows], dtype=np.int64)
    mass_offsets = np.concatenate([[0], np.cumsum(lengths)]).astype(np.int64)
    mass = np.concatenate(rows) if rows else np.zeros(0)
    trials = np.diff(offsets).astype(np.int64)
    return OutcomeBatch(origin, step, mass, mass_offsets, trials, rounding,
                        np.ones(n_groups, dtype=bool))
