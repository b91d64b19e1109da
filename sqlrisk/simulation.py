"""SQL adapters for simulation and correlation: ``outcome_sim``, ``outcome_bands_ci``
and the ``correlation`` parameter of ``outcome_dist``.
"""

from __future__ import annotations

import numpy as np
import pyarrow as pa
from scipy.special import ndtri

from . import arrowio as io
from .errors import InputDataError, ParameterError
from .kernels.copula import correlated_outcomes
from .kernels.empirical import bin_totals, wilson
from .kernels.lattice import common_unit
from .kernels.outcome import OutcomeBatch, concat
from .kernels.simulate import MAX_TRIALS, group_keys, simulate_threads

#: Simulated totals held at once (x 8 bytes); groups are simulated in slices of this size.
TOTALS_PER_SLICE = 1 << 23


def _per_group(fn, values, name, default, n):
    vals, nulls = io._floats(io._array(values))
    if len(vals) != n:
        raise AssertionError("parameter column length mismatch")
    return np.where(nulls, default, vals)


def check_correlation(fn: str, rho: np.ndarray) -> None:
    bad = ~((rho >= 0) & (rho < 1))
    if bad.any():
        raise ParameterError(f"{fn}: correlation {io._fmt(rho[bad][0])} is outside [0, 1) "
                             "(0 = independent deals; 0.05 to 0.3 is typical)")


def _sim_deals(fn: str, groups: io.Groups):
    """Usable deals with their size ranges, in canonical order within each group."""
    amount, a_null = io._floats(groups.field("a"))
    prob, p_null = io._floats(groups.field("p"))
    low, low_null = io._floats(groups.field("lo"))
    high, high_null = io._floats(groups.field("hi"))
    keep = ~(a_null | p_null)
    kept = np.concatenate([[0], np.cumsum(keep)])
    offsets = kept[groups.offsets]
    amount, prob = amount[keep], prob[keep]
    io.check_amounts(fn, amount)
    io.check_probabilities(fn, prob)
    # A NULL low or high means the deal's size does not vary on that side.
    low = np.where(low_null[keep], amount, low[keep])
    high = np.where(high_null[keep], amount, high[keep])
    for name, values in (("low", low), ("high", high)):
        io.check_amounts(fn, values, name)
    if (low > amount).any():
        i = np.flatnonzero(low > amount)[0]
        raise InputDataError(f"{fn}: low {io._fmt(low[i])} is above the amount "
                             f"{io._fmt(amount[i])}; each deal needs low <= amount <= high")
    if (high < amount).any():
        i = np.flatnonzero(high < amount)[0]
        raise InputDataError(f"{fn}: high {io._fmt(high[i])} is below the amount "
                             f"{io._fmt(amount[i])}; each deal needs low <= amount <= high")
    group = np.repeat(np.arange(len(offsets) - 1), np.diff(offsets))
    order = np.lexsort((high, low, prob, amount, group))
    return amount[order], prob[order], low[order], high[order], offsets


def outcome_sim(rows, trials, seed, correlation, step):
    fn = "outcome_sim"
    groups = io.read_groups(rows)
    n = len(groups)
    n_trials = _per_group(fn, trials, "trials", 100_000, n)
    bad = ~((n_trials >= 1) & (n_trials <= MAX_TRIALS))
    if bad.any():
        raise ParameterError(f"{fn}: trials {n_trials[bad][0]:.0f} is outside "
                             f"[1, {MAX_TRIALS:,}]; 100,000 gives band odds to about +/-0.3%")
    seeds_f = io._array(seed)
    seeds = np.asarray(seeds_f.fill_null(0).to_numpy(zero_copy_only=False), dtype=np.int64)
    rho = _per_group(fn, correlation, "correlation", 0.0, n)
    check_correlation(fn, rho)
    step_req = io.steps_requested(fn, step)
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
    return io.outcomes_to_arrow(concat(parts))


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


def correlated_dist(fn, amount, prob, offsets, step_req, correlation, n):
    """Exact outcomes; groups with ``correlation > 0`` use the one-factor copula."""
    rho = _per_group(fn, correlation, "correlation", 0.0, n)
    check_correlation(fn, rho)
    try:
        return correlated_outcomes(amount, prob, offsets, rho, step_req)
    except ValueError as exc:
        raise ParameterError(f"{fn}: {exc}") from None


def outcome_bands_ci(o, cuts, level):
    fn = "outcome_bands_ci"
    from .functions import _bands, _cuts_column  # shared band reading

    b = io.read_outcomes(fn, o)
    flat, offsets, nulls = _cuts_column(fn, cuts, len(b))
    levels = _per_group(fn, level, "level", 0.95, len(b))
    bad = ~((levels > 0) & (levels < 1))
    if bad.any():
        raise ParameterError(f"{fn}: level {io._fmt(levels[bad][0])} is outside (0, 1); "
                             "0.95 gives 95% intervals")
    keep = b.valid & ~nulls
    bands = _bands(b, flat, offsets, keep)
    values = np.asarray(bands.values.to_numpy(zero_copy_only=False), dtype=np.float64)
    row_of = np.repeat(np.arange(len(b)), np.diff(np.asarray(bands.offsets)))
    trials = b.trials[row_of].astype(np.float64)
    lo, hi = values.copy(), values.copy()
    sim = trials > 0
    lo[sim], hi[sim] = wilson(values[sim], trials[sim], levels[row_of][sim])
    items = pa.StructArray.from_arrays([pa.array(lo), pa.array(hi)], names=["lo", "hi"])
    return pa.ListArray.from_arrays(bands.offsets, items, mask=pa.array(~keep))
