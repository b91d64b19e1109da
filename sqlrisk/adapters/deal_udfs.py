"""SQL adapters of the aggregates over a group's deals: Arrow in, kernel call, Arrow out.

``outcome_dist``, ``band_odds``, ``reach_odds``, ``total_quantiles``, ``odds_error``
and ``deal_swing`` arrive through TEMP macros (``catalog``) that pack a group's
rows into one ``LIST(STRUCT(...))``, so one UDF call covers up to 2,048 groups
and one kernel call. The answers are read by ``readers``.
"""

from __future__ import annotations

import numpy as np
import pyarrow as pa

from ..errors import ParameterError
from ..kernels import accuracy, heavy, scenarios
from ..kernels.copula import correlated_outcomes
from ..kernels.lattice import DEFAULT_BINS, MAX_BINS
from ..kernels.outcome import (SCENARIOS, TOO_MANY_BINS, OutcomeBatch, exact_outcomes,
                               put_rows)
from ..kernels.ragged import group_deals
from ..kernels.swing import swings
from . import arrow_io, readers
from .sql_types import SWING_FIELDS


# -- a group's outcome, and the small groups answered from their scenarios ----------

def _deal_outcomes(fn: str, groups: arrow_io.Groups, step_req=None,
                   correlation=None) -> OutcomeBatch:
    """Outcomes of the groups' deals (as stored by ``outcome_dist``)."""
    batch, _ = _group_outcomes(fn, groups, step_req, correlation)
    return batch


def _group_answers(fn: str, groups: arrow_io.Groups):
    """For the aggregates that read a group at known places: lattice outcomes, and the
    small groups whose lattice would not be exact, left to their scenarios."""
    return _group_outcomes(fn, groups, scenario_max=scenarios.MAX_DEALS)


def _group_outcomes(fn, groups, step_req=None, correlation=None, scenario_max=0):
    amount, prob, offsets = arrow_io.deals(fn, groups)
    if correlation is None:
        batch, status = exact_outcomes(amount, prob, offsets, step_req, scenario_max=scenario_max)
    else:
        batch, status = _correlated(fn, amount, prob, offsets, step_req, correlation,
                                    len(groups))
    if (status == TOO_MANY_BINS).any():
        g = int(np.flatnonzero(status == TOO_MANY_BINS)[0])
        raise ParameterError(
            f"{fn}: step {arrow_io.fmt(batch.step[g])} would need more than {MAX_BINS:,} bins "
            "for one group; use a larger step or leave step NULL for the automatic lattice")
    batch.valid &= ~groups.null_group
    lumpy = np.zeros(len(batch), dtype=bool)
    if scenario_max:
        inexact = batch.valid & (batch.rounding > 0) & (batch.rounding >= batch.step)
        lumpy[inexact] = heavy.lumpy_groups(prob, offsets)[inexact]
    by_scenario = (status == SCENARIOS) & ~groups.null_group
    small = readers.SmallGroups(amount, prob, offsets, by_scenario, lumpy)
    return batch, small


def _correlated(fn, amount, prob, offsets, step_req, correlation, n):
    """Exact outcomes; groups with ``correlation > 0`` use the one-factor copula."""
    rho = arrow_io.param_column(correlation, 0.0, n)
    arrow_io.check_correlation(fn, rho)
    try:
        return correlated_outcomes(amount, prob, offsets, rho, step_req)
    except ValueError as exc:
        raise ParameterError(f"{fn}: {exc}") from None


# -- aggregates (called through macros) --------------------------------------

def outcome_dist(rows, step, correlation):
    fn = "outcome_dist"
    groups = arrow_io.read_groups(rows)
    step_req = arrow_io.steps_requested(fn, step)
    return arrow_io.outcomes_to_arrow(_deal_outcomes(fn, groups, step_req, correlation))


def band_odds(rows):
    fn = "band_odds"
    groups = arrow_io.read_groups(rows)
    cuts, cut_offsets, missing = arrow_io.per_group_list(fn, groups, "cuts", "cuts")
    arrow_io.check_cuts(fn, cuts, cut_offsets)
    b, small = _group_answers(fn, groups)
    return readers.read_bands(b, cuts, cut_offsets, (b.valid | small.mask) & ~missing, small)


def reach_odds(rows):
    fn = "reach_odds"
    groups = arrow_io.read_groups(rows)
    target, missing = arrow_io.per_group_scalar(fn, groups, "target", "target")
    b, small = _group_answers(fn, groups)
    return readers.read_reach(b, target, (b.valid | small.mask) & ~missing, small)


def total_quantiles(rows):
    fn = "total_quantiles"
    groups = arrow_io.read_groups(rows)
    qs, q_offsets, missing = arrow_io.per_group_list(fn, groups, "qs", "quantile levels")
    arrow_io.check_levels(fn, qs)
    b, small = _group_answers(fn, groups)
    return readers.read_quantiles(b, qs, q_offsets, (b.valid | small.mask) & ~missing, small)


def outcomes_and_bands(rows, step=None, correlation=None):
    """Per group, ``outcome_dist(amount, prob, step, correlation)`` and band odds for the
    rows' cuts, from one outcome computation (the Spark DataFrame path).

    Without ``step`` and ``correlation`` the bands are ``band_odds(amount, prob, cuts)``,
    bit for bit: the groups it answers from their scenarios get their lattice afterwards,
    the others share it. With either, they are ``outcome_bands`` of the outcome.
    """
    fn = "band_odds"
    groups = arrow_io.read_groups(rows)
    cuts, cut_offsets, missing = arrow_io.per_group_list(fn, groups, "cuts", "cuts")
    arrow_io.check_cuts(fn, cuts, cut_offsets)
    if step is not None or correlation is not None:
        n = len(groups)
        step = step if step is not None else pa.nulls(n, pa.float64())
        rho = correlation if correlation is not None else pa.array(np.zeros(n))
        b = _deal_outcomes("outcome_dist", groups, arrow_io.steps_requested("outcome_dist", step),
                           rho)
        return arrow_io.outcomes_to_arrow(b), readers.read_bands(b, cuts, cut_offsets,
                                                                 b.valid & ~missing)
    b, small = _group_answers(fn, groups)
    bands = readers.read_bands(b, cuts, cut_offsets, (b.valid | small.mask) & ~missing, small)
    if small.mask.any():
        todo = np.flatnonzero(small.mask)
        part, _ = exact_outcomes(*group_deals(small.amount, small.prob, small.offsets, todo))
        b = put_rows(b, todo, part)
    b.valid &= ~groups.null_group
    return arrow_io.outcomes_to_arrow(b), bands


def odds_error(rows):
    """How far ``band_odds`` / ``reach_odds`` on the same deals can be from the true odds,
    for what they read: 0 for the groups answered from their scenarios and for exact
    lattices; for a lumpy group (heavy scenarios read exactly, ``kernels/heavy.py``) the
    estimate of its light part's reading; otherwise the ``outcome_error`` of the lattice
    read (the outcome ``outcome_dist`` stores for these deals)."""
    fn = "odds_error"
    groups = arrow_io.read_groups(rows)
    b, small = _group_answers(fn, groups)
    out = np.zeros(len(b))
    sub = readers.subset_batch(b, b.valid)
    out[b.valid] = accuracy.error_batch(sub.origin, sub.step, sub.mass, sub.offsets,
                                        sub.rounding, sub.trials)
    lumpy = np.flatnonzero(b.valid & small.lumpy & (np.diff(b.offsets) >= 3))
    if len(lumpy):
        out[lumpy] = heavy.error_heavy(small.amount, small.prob, small.offsets, lumpy, b.step,
                                       b.mass, b.offsets, b.rounding, DEFAULT_BINS)
    return arrow_io.doubles_to_arrow(out, b.valid | small.mask)


# -- which deals move the odds ------------------------------------------------

def _deal_ids(groups: arrow_io.Groups, usable: np.ndarray) -> pa.Array | None:
    """The usable rows' deal ids, for naming a bad row, when the macro passes them along."""
    if groups.fields.type.get_field_index("deal_id") < 0:
        return None
    ids = groups.field("deal_id")
    return ids if usable.all() else ids.filter(pa.array(usable))


def deal_swing(rows):
    """Per group: for each usable deal, its 1-based position in the group's list and
    the reach if won / if lost (the macro turns the position back into the deal id)."""
    fn = "deal_swing"
    groups = arrow_io.read_groups(rows)
    target, missing = arrow_io.per_group_scalar(fn, groups, "target", "target")
    (amount, prob), _, usable, usable_offsets = arrow_io.usable_rows(groups, "amount", "prob")
    arrow_io.check_deals(fn, amount[usable], prob[usable], usable_offsets,
                         _deal_ids(groups, usable))
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
