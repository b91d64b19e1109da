"""The bodies of the SQL functions: Arrow in, kernel call, Arrow out.

Every function here is registered by ``registry.register`` as a vectorised
(``type='arrow'``) DuckDB UDF. The aggregates arrive through SQL macros that
pack a group's rows into one ``LIST(STRUCT(...))`` (a single aggregate, so the
macros also work as window functions), which makes one UDF call cover up to
2,048 groups and one kernel call.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pyarrow as pa

from . import arrowio as io
from .errors import ParameterError
from .kernels import accuracy, heavy, readout, scenarios
from .kernels.combine import Outcome, combine
from .kernels.lattice import DEFAULT_BINS, MAX_BINS
from .kernels.outcome import SCENARIOS, TOO_MANY_BINS, OutcomeBatch, exact_outcomes

#: Most bins ``outcome_histogram`` will draw.
MAX_HISTOGRAM_BINS = 10_000


# -- helpers ----------------------------------------------------------------

def _subset(b: OutcomeBatch, keep: np.ndarray) -> OutcomeBatch:
    if keep.all():
        return b
    lengths = np.diff(b.offsets)[keep]
    idx = io._ranges(b.offsets[:-1][keep], lengths)
    offsets = np.concatenate([[0], np.cumsum(lengths)]).astype(np.int64)
    return OutcomeBatch(b.origin[keep], b.step[keep], b.mass[idx], offsets,
                        b.trials[keep], b.rounding[keep], b.valid[keep])


def _ragged_subset(values, offsets, keep):
    if keep.all():
        return values, offsets
    lengths = np.diff(offsets)[keep]
    idx = io._ranges(offsets[:-1][keep], lengths)
    return values[idx], np.concatenate([[0], np.cumsum(lengths)]).astype(np.int64)


def _scatter_lists(values, offsets, keep, per_row) -> pa.ListArray:
    """Lists for the rows in ``keep`` (the others NULL) as one Arrow column."""
    lengths = np.zeros(len(keep), dtype=np.int64)
    lengths[keep] = np.diff(offsets) if per_row is None else per_row
    full = np.concatenate([[0], np.cumsum(lengths)])
    return io.lists_to_arrow(values, full, keep)


@dataclass
class SmallGroups:
    """The usable deals of a batch and which groups are answered from their scenarios."""

    amount: np.ndarray
    prob: np.ndarray
    offsets: np.ndarray
    mask: np.ndarray
    #: groups on an inexact lattice whose likeliest scenarios are heavy (``kernels/heavy.py``)
    lumpy: np.ndarray


def _deal_outcomes(fn: str, groups: io.Groups, step_req=None, correlation=None) -> OutcomeBatch:
    """Outcomes of the groups' deals (as stored by ``outcome_dist``)."""
    batch, _ = _group_outcomes(fn, groups, step_req, correlation)
    return batch


def _group_answers(fn: str, groups: io.Groups):
    """For the aggregates that read a group at known places: lattice outcomes, and the
    small groups whose lattice would not be exact, left to their scenarios."""
    return _group_outcomes(fn, groups, scenario_max=scenarios.MAX_DEALS)


def _group_outcomes(fn, groups, step_req=None, correlation=None, scenario_max=0):
    amount, prob, offsets = io.deals(fn, groups)
    if correlation is None:
        batch, status = exact_outcomes(amount, prob, offsets, step_req, scenario_max=scenario_max)
    else:
        from .simulation import correlated_dist
        batch, status = correlated_dist(fn, amount, prob, offsets, step_req, correlation,
                                        len(groups))
    if (status == TOO_MANY_BINS).any():
        g = int(np.flatnonzero(status == TOO_MANY_BINS)[0])
        raise ParameterError(
            f"{fn}: step {io._fmt(batch.step[g])} would need more than {MAX_BINS:,} bins for one "
            "group; use a larger step or leave step NULL for the automatic lattice")
    batch.valid &= ~groups.null_group
    lumpy = np.zeros(len(batch), dtype=bool)
    if scenario_max:
        inexact = batch.valid & (batch.rounding > 0) & (batch.rounding >= batch.step)
        lumpy[inexact] = heavy.lumpy_groups(prob, offsets)[inexact]
    small = SmallGroups(amount, prob, offsets, (status == SCENARIOS) & ~groups.null_group, lumpy)
    return batch, small


def _no_small(b: OutcomeBatch) -> SmallGroups:
    none = np.zeros(len(b), dtype=bool)
    return SmallGroups(np.zeros(0), np.zeros(0), np.zeros(len(b) + 1, np.int64), none, none)


def _read_rows(b: OutcomeBatch, small: SmallGroups, values, offsets, keep, lengths,
               on_lattice_fn, by_scenario_fn) -> np.ndarray:
    """Answers for the rows in ``keep``, back to back (``lengths`` per row): lattice rows
    read off their outcome by ``on_lattice_fn``, small groups from their scenarios by
    ``by_scenario_fn`` (both take flat ``values`` and ``offsets`` of their rows)."""
    on_lattice = keep & b.valid
    sub = _subset(b, on_lattice)
    vals, offs = _ragged_subset(values, offsets, on_lattice)
    read = on_lattice_fn(sub.origin, sub.step, sub.mass, sub.offsets, sub.rounding, vals, offs)
    by_scenario = keep & small.mask
    if not by_scenario.any():
        return read
    vals, offs = _ragged_subset(values, offsets, by_scenario)
    exact = by_scenario_fn(small.amount, small.prob, small.offsets,
                           np.flatnonzero(by_scenario), vals, offs)
    return _interleave(keep, on_lattice, read, exact, lengths)


def _interleave(keep, first, values_first, values_other, lengths) -> np.ndarray:
    """Ragged rows of ``keep`` back to back, taken from ``values_first`` for the rows in
    ``first`` and from ``values_other`` for the others (each holds its rows in order)."""
    lengths = np.where(keep, lengths, 0)
    starts = np.concatenate([[0], np.cumsum(lengths)]).astype(np.int64)
    out = np.empty(starts[-1])
    for mask, values in ((first & keep, values_first), (~first & keep, values_other)):
        out[io._ranges(starts[:-1][mask], lengths[mask])] = values
    return out


def _bands_values(b: OutcomeBatch, small: SmallGroups, cuts, cut_offsets, keep) -> np.ndarray:
    lengths = np.diff(cut_offsets) + 1
    out = _read_rows(b, small, cuts, cut_offsets, keep, lengths, readout.bands_batch,
                     scenarios.bands_small)
    lumpy = keep & small.lumpy
    if lumpy.any():
        vals, offs = _ragged_subset(cuts, cut_offsets, lumpy)
        exact_heavy = heavy.bands_heavy(small.amount, small.prob, small.offsets,
                                        np.flatnonzero(lumpy), b.origin, b.step, b.mass,
                                        b.offsets, b.rounding, vals, offs, DEFAULT_BINS)
        kept = np.where(keep, lengths, 0)
        starts = np.concatenate([[0], np.cumsum(kept)])[:-1]
        out[io._ranges(starts[lumpy], lengths[lumpy])] = exact_heavy
    return out


def _bands(b: OutcomeBatch, cuts, cut_offsets, keep, small=None) -> pa.ListArray:
    small = small if small is not None else _no_small(b)
    out = _bands_values(b, small, cuts, cut_offsets, keep)
    return _scatter_lists(out, None, keep, np.diff(cut_offsets)[keep] + 1)


def _quantiles(b: OutcomeBatch, qs, q_offsets, keep, small=None) -> pa.ListArray:
    small = small if small is not None else _no_small(b)
    out = _read_rows(b, small, qs, q_offsets, keep, np.diff(q_offsets),
                     readout.quantiles_batch, scenarios.quantiles_small)
    return _scatter_lists(out, None, keep, np.diff(q_offsets)[keep])


def _reach(b: OutcomeBatch, target, keep, small=None) -> pa.Array:
    small = small if small is not None else _no_small(b)
    cut_offs = np.arange(len(b) + 1, dtype=np.int64)
    out = _bands_values(b, small, np.ascontiguousarray(np.where(keep, target, 0.0)), cut_offs,
                        keep)
    result = np.full(len(keep), np.nan)
    result[keep] = out[1::2]
    return io.doubles_to_arrow(result, keep)


def _cuts_column(fn: str, values, n: int, what: str = "cuts"):
    flat, offsets, nulls = io.list_column(values, n, io.null_in(fn, what))
    io.check_cuts(fn, flat, offsets, what)
    return flat, offsets, nulls


def _levels_column(fn: str, values, n: int):
    flat, offsets, nulls = io.list_column(values, n, io.null_in(fn, "quantile levels"))
    io.check_levels(fn, flat)
    return flat, offsets, nulls


# -- aggregates (called through macros) --------------------------------------

def outcome_dist(rows, step, correlation):
    fn = "outcome_dist"
    groups = io.read_groups(rows)
    step_req = io.steps_requested(fn, step)
    return io.outcomes_to_arrow(_deal_outcomes(fn, groups, step_req, correlation))


def band_odds(rows):
    fn = "band_odds"
    groups = io.read_groups(rows)
    cuts, cut_offsets, missing = io.per_group_list(fn, groups, "c", "cuts")
    io.check_cuts(fn, cuts, cut_offsets)
    b, small = _group_answers(fn, groups)
    return _bands(b, cuts, cut_offsets, (b.valid | small.mask) & ~missing, small)


def reach_odds(rows):
    fn = "reach_odds"
    groups = io.read_groups(rows)
    target, missing = io.per_group_scalar(fn, groups, "t", "target")
    b, small = _group_answers(fn, groups)
    return _reach(b, target, (b.valid | small.mask) & ~missing, small)


def total_quantiles(rows):
    fn = "total_quantiles"
    groups = io.read_groups(rows)
    qs, q_offsets, missing = io.per_group_list(fn, groups, "q", "quantile levels")
    io.check_levels(fn, qs)
    b, small = _group_answers(fn, groups)
    return _quantiles(b, qs, q_offsets, (b.valid | small.mask) & ~missing, small)


def outcome_merge(outcomes):
    fn = "outcome_merge"
    arr = io._array(outcomes)
    offsets = np.asarray(arr.offsets, dtype=np.int64)
    inner = io.read_outcomes(fn, arr.values.slice(offsets[0], offsets[-1] - offsets[0]))
    offsets = offsets - offsets[0]
    group_null = np.asarray(arr.is_null(), dtype=bool)
    results = []
    for g in range(len(offsets) - 1):
        rows = [i for i in range(offsets[g], offsets[g + 1]) if inner.valid[i]]
        if group_null[g] or not rows:
            results.append(None)
        else:
            results.append(combine([_one(inner, i) for i in rows]))
    return io.outcomes_to_arrow(_pack(results))


# -- scalars on outcomes ------------------------------------------------------

def outcome_bands(o, cuts):
    fn = "outcome_bands"
    b = io.read_outcomes(fn, o)
    flat, offsets, nulls = _cuts_column(fn, cuts, len(b))
    return _bands(b, flat, offsets, b.valid & ~nulls)


def outcome_reach(o, target):
    fn = "outcome_reach"
    b = io.read_outcomes(fn, o)
    values, nulls = io._floats(io._array(target))
    keep = b.valid & ~nulls
    if not np.isfinite(values[keep]).all():
        raise ParameterError(f"{fn}: target {io._fmt(values[keep][~np.isfinite(values[keep])][0])} "
                             "is not a finite total (give a finite total, or NULL for a NULL "
                             "answer)")
    return _reach(b, values, keep)


def outcome_quantiles(o, qs):
    fn = "outcome_quantiles"
    b = io.read_outcomes(fn, o)
    flat, offsets, nulls = _levels_column(fn, qs, len(b))
    return _quantiles(b, flat, offsets, b.valid & ~nulls)


def _moments(o, fn):
    b = io.read_outcomes(fn, o)
    sub = _subset(b, b.valid)
    mean, sd = readout.moments_batch(sub.origin, sub.step, sub.mass, sub.offsets)
    return b.valid, mean, sd


def outcome_mean(o):
    keep, mean, _ = _moments(o, "outcome_mean")
    out = np.full(len(keep), np.nan)
    out[keep] = mean
    return io.doubles_to_arrow(out, keep)


def outcome_sd(o):
    keep, _, sd = _moments(o, "outcome_sd")
    out = np.full(len(keep), np.nan)
    out[keep] = sd
    return io.doubles_to_arrow(out, keep)


def outcome_error(o):
    b = io.read_outcomes("outcome_error", o)
    sub = _subset(b, b.valid)
    out = np.full(len(b), np.nan)
    out[b.valid] = accuracy.error_batch(sub.origin, sub.step, sub.mass, sub.offsets,
                                        sub.rounding, sub.trials)
    return io.doubles_to_arrow(out, b.valid)


def outcome_shift(o, amount):
    fn = "outcome_shift"
    b = io.read_outcomes(fn, o)
    values, nulls = io._floats(io._array(amount))
    keep = b.valid & ~nulls
    io.check_amounts(fn, values[keep])
    b.origin = np.where(keep, b.origin + np.where(keep, values, 0.0), b.origin)
    b.valid = keep
    return io.outcomes_to_arrow(b)


def outcome_add(o1, o2):
    fn = "outcome_add"
    a = io.read_outcomes(fn, o1)
    b = io.read_outcomes(fn, o2)
    results = [combine([_one(a, g), _one(b, g)]) if a.valid[g] and b.valid[g] else None
               for g in range(len(a))]
    return io.outcomes_to_arrow(_pack(results))


def outcome_histogram(o, bins):
    fn = "outcome_histogram"
    b = io.read_outcomes(fn, o)
    counts, nulls = io._floats(io._array(bins))
    keep = b.valid & ~nulls
    bad = keep & ~((counts >= 1) & (counts <= MAX_HISTOGRAM_BINS))
    if bad.any():
        value = counts[bad][0]
        shown = str(int(value)) if float(value).is_integer() else io._fmt(value)
        raise ParameterError(f"{fn}: bins {shown} is outside "
                             f"[1, {MAX_HISTOGRAM_BINS:,}]; ask for 20 to 100 bins for a chart")
    sub = _subset(b, keep)
    lo, hi, prob, offs = readout.histogram_batch(
        sub.origin, sub.step, sub.mass, sub.offsets, sub.rounding,
        counts[keep].astype(np.int64))
    lengths = np.zeros(len(keep), dtype=np.int64)
    lengths[keep] = np.diff(offs)
    full = np.concatenate([[0], np.cumsum(lengths)]).astype(np.int32)
    items = pa.StructArray.from_arrays([pa.array(lo), pa.array(hi), pa.array(prob)],
                                       names=["lo", "hi", "prob"])
    return pa.ListArray.from_arrays(pa.array(full), items, mask=pa.array(~keep))


# -- one outcome <-> batch ------------------------------------------------------

def _one(b: OutcomeBatch, g: int) -> Outcome:
    return Outcome(float(b.origin[g]), float(b.step[g]), b.row(g),
                   int(b.trials[g]), float(b.rounding[g]))


def _pack(results: list[Outcome | None]) -> OutcomeBatch:
    n = len(results)
    lengths = np.array([len(r.mass) if r else 0 for r in results], dtype=np.int64)
    mass = np.concatenate([r.mass for r in results if r] or [np.zeros(0)])

    def col(attr, dtype=float):
        return np.array([getattr(r, attr) if r else 0 for r in results], dtype=dtype)

    return OutcomeBatch(col("origin"), col("step"), mass,
                        np.concatenate([[0], np.cumsum(lengths)]).astype(np.int64),
                        col("trials", np.int64), col("rounding"),
                        np.array([r is not None for r in results], dtype=bool)) if n else \
        OutcomeBatch(*(np.zeros(0) for _ in range(3)), np.zeros(1, np.int64),
                     np.zeros(0, np.int64), np.zeros(0), np.zeros(0, bool))


# -- which deals move the odds ------------------------------------------------

SWING_FIELDS = ("i", "reach_if_won", "reach_if_lost", "swing")


def deal_swing(rows):
    """Per group: for each usable deal, its 1-based position in the group's list and
    the reach if won / if lost (the macro turns the position back into the deal id)."""
    from .kernels.swing import swings

    fn = "deal_swing"
    groups = io.read_groups(rows)
    target, missing = io.per_group_scalar(fn, groups, "t", "target")
    amount, a_null = io._floats(groups.field("a"))
    prob, p_null = io._floats(groups.field("p"))
    usable = ~(a_null | p_null)
    io.check_amounts(fn, amount[usable])
    io.check_probabilities(fn, prob[usable])
    parts, lengths, keep = [], np.zeros(len(groups), np.int64), np.zeros(len(groups), bool)
    for g in range(len(groups)):
        start, stop = groups.offsets[g], groups.offsets[g + 1]
        live = np.flatnonzero(usable[start:stop])
        if missing[g] or groups.null_group[g] or not len(live):
            continue
        result = swings(amount[start + live], prob[start + live], float(target[g]))
        if result is None:
            raise ParameterError(
                f"{fn}: a group of {len(live):,} deals spreads too wide for exact swings; "
                "compute swings per owner or per region")
        won, lost = result
        parts.append(np.column_stack([live + 1.0, won, lost, won - lost]))
        lengths[g], keep[g] = len(live), True
    table = np.concatenate(parts) if parts else np.zeros((0, 4))
    offsets = np.concatenate([[0], np.cumsum(lengths)]).astype(np.int32)
    items = pa.StructArray.from_arrays(
        [pa.array(table[:, 0].astype(np.int64)), *(pa.array(table[:, c]) for c in (1, 2, 3))],
        names=list(SWING_FIELDS))
    return pa.ListArray.from_arrays(pa.array(offsets), items, mask=pa.array(~keep))
