"""SQL adapters of the Monte Carlo functions: ``outcome_sim`` and ``outcome_bands_ci``.

(The exact correlated outcome, ``outcome_dist(..., correlation := rho)``, is in
``deal_udfs``.)
"""

from __future__ import annotations

import numpy as np
import pyarrow as pa
from scipy.special import ndtri

from ..errors import InputDataError, ParameterError
from ..kernels.empirical import bin_totals
from ..kernels.intervals import wilson
from ..kernels.lattice import common_unit
from ..kernels.outcome import OutcomeBatch, concat
from ..kernels.simulate import MAX_TRIALS, group_keys, simulate_threads
from . import arrow_io, readers
from .sql_types import INTERVAL_FIELDS

#: Simulated totals held at once (x 8 bytes); groups are simulated in slices of this size.
TOTALS_PER_SLICE = 1 << 23


def _sim_deals(fn: str, groups: arrow_io.Groups):
    """Usable deals with their size ranges, in canonical order within each group."""
    (amount, prob), _, keep, offsets = arrow_io.usable_rows(groups, "amount", "prob")
    low, low_null = arrow_io.floats(groups.field("low"))
    high, high_null = arrow_io.floats(groups.field("high"))
    amount, prob = amount[keep], prob[keep]
    arrow_io.check_deals(fn, amount, prob, offsets)
    # A NULL low or high means the deal's size does not vary on that side.
    low = np.where(low_null[keep], amount, low[keep])
    high = np.where(high_null[keep], amount, high[keep])
    for name, values in (("low", low), ("high", high)):
        arrow_io.check_amounts(fn, values, name)
    if (low > amount).any():
        i = np.flatnonzero(low > amount)[0]
        raise InputDataError(f"{fn}: low {arrow_io.fmt(low[i])} is above the amount "
                             f"{arrow_io.fmt(amount[i])}; each deal needs low <= amount <= high")
    if (high < amount).any():
        i = np.flatnonzero(high < amount)[0]
        raise InputDataError(f"{fn}: high {arrow_io.fmt(high[i])} is below the amount "
                             f"{arrow_io.fmt(amount[i])}; each deal needs low <= amount <= high")
    group = np.repeat(np.arange(len(offsets) - 1), np.diff(offsets))
    order = np.lexsort((high, low, prob, amount, group))
    return amount[order], prob[order], low[order], high[order], offsets


def outcome_sim(rows, trials, seed, correlation, step):
    fn = "outcome_sim"
    groups = arrow_io.read_groups(rows)
    n = len(groups)
    n_trials = arrow_io.param_column(trials, 100_000, n)
    bad = ~((n_trials >= 1) & (n_trials <= MAX_TRIALS))
    if bad.any():
        raise ParameterError(f"{fn}: trials {n_trials[bad][0]:.0f} is outside "
                             f"[1, {MAX_TRIALS:,}]; 100,000 gives band odds to about +/-0.3%")
    seeds_f = arrow_io.as_array(seed)
    seeds = np.asarray(seeds_f.fill_null(0).to_numpy(zero_copy_only=False), dtype=np.int64)
    rho = arrow_io.param_column(correlation, 0.0, n)
    arrow_io.check_correlation(fn, rho)
    step_req = arrow_io.steps_requested(fn, step)
    amount, prob, low, high, offsets = _sim_deals(fn, groups)
    words = np.stack([amount, prob, low, high], axis=1).view(np.uint64).ravel()
    keys = group_keys(seeds.view(np.uint64), words, offsets * 4)
    inner = (prob > 0) & (prob < 1)
    threshold = np.zeros(len(prob))
    threshold[inner] = ndtri(prob[inner])
    units = np.zeros(n)
    for g in range(n):
        a0, a1 = offsets[g], offsets[g + 1]
        live = (prob[a0:a1] > 0) & (amount[a0:a1] != 0)
        if live.any() and not (high[a0:a1] > low[a0:a1])[live].any():
            units[g] = common_unit(amount[a0:a1][live])[0]
        elif not live.any():
            units[g] = 1.0
    valid = (np.diff(offsets) > 0) & ~groups.null_group
    parts = []
    start = 0
    while start < n:
        stop = start + 1
        total = n_trials[start] if valid[start] else 0
        while stop < n and total + (n_trials[stop] if valid[stop] else 0) <= TOTALS_PER_SLICE:
            total += n_trials[stop] if valid[stop] else 0
            stop += 1
        parts.append(_simulate_slice(amount, prob, low, high, threshold, offsets, rho, n_trials,
                                     keys, units, step_req, valid, start, stop))
        start = stop
    return arrow_io.outcomes_to_arrow(concat(parts))


def _simulate_slice(amount, prob, low, high, threshold, offsets, rho, n_trials, keys, units,
                    step_req, valid, start, stop):
    sel = np.arange(start, stop)
    live = sel[valid[sel]]
    trials = np.where(valid[sel], n_trials[sel], 0).astype(np.int64)
    a0, a1 = offsets[start], offsets[stop]
    local = offsets[start:stop + 1] - a0
    totals, t_offsets = simulate_threads(amount[a0:a1], prob[a0:a1], low[a0:a1], high[a0:a1],
                                       threshold[a0:a1], local, rho[sel], trials, keys[sel])
    t_live = np.concatenate([[0], np.cumsum(trials[valid[sel]])]).astype(np.int64)
    binned = bin_totals(totals, t_live, units[live], step_req[live])
    out = OutcomeBatch(np.zeros(len(sel)), np.zeros(len(sel)), binned.mass,
                       np.zeros(len(sel) + 1, np.int64), np.zeros(len(sel), np.int64),
                       np.zeros(len(sel)), valid[sel].copy())
    where = valid[sel]
    out.origin[where] = binned.origin
    out.step[where] = binned.step
    out.trials[where] = binned.trials
    out.rounding[where] = binned.rounding
    lengths = np.zeros(len(sel), np.int64)
    lengths[where] = np.diff(binned.offsets)
    out.offsets = np.concatenate([[0], np.cumsum(lengths)]).astype(np.int64)
    return out


def outcome_bands_ci(o, cuts, level):
    fn = "outcome_bands_ci"
    b = arrow_io.read_outcomes(fn, o)
    flat, offsets, nulls = readers.cuts_column(fn, cuts, len(b))
    levels = arrow_io.param_column(level, 0.95, len(b))
    bad = ~((levels > 0) & (levels < 1))
    if bad.any():
        raise ParameterError(f"{fn}: level {arrow_io.fmt(levels[bad][0])} is outside (0, 1); "
                             "0.95 gives 95% intervals")
    keep = b.valid & ~nulls
    bands = readers.read_bands(b, flat, offsets, keep)
    values = np.asarray(bands.values.to_numpy(zero_copy_only=False), dtype=np.float64)
    row_of = np.repeat(np.arange(len(b)), np.diff(np.asarray(bands.offsets)))
    trials = b.trials[row_of].astype(np.float64)
    lo, hi = values.copy(), values.copy()
    sim = trials > 0
    lo[sim], hi[sim] = wilson(values[sim], trials[sim], levels[row_of][sim])
    items = pa.StructArray.from_arrays([pa.array(lo), pa.array(hi)], names=list(INTERVAL_FIELDS))
    return pa.ListArray.from_arrays(bands.offsets, items, mask=pa.array(~keep))
