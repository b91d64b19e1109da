"""Reading outcomes: bands, reach and quantiles for every adapter.

The aggregates on deals (``deal_udfs``), the scalars on stored outcomes
(``outcome_udfs``) and the simulation adapters (``simulation_udfs``) all read
an ``OutcomeBatch`` here, so a band means the same thing wherever it is read.
Rows of small groups (``SmallGroups``: answered from their win/loss scenarios,
or lumpy ones with heavy scenarios read exactly) are interleaved with the rows
read off their lattices, in row order.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pyarrow as pa

from ..kernels import heavy, readout, scenarios
from ..kernels.lattice import DEFAULT_BINS
from ..kernels.outcome import OutcomeBatch, small_groups_threads
from . import arrow_io


def subset_batch(b: OutcomeBatch, keep: np.ndarray) -> OutcomeBatch:
    """The rows of ``b`` where ``keep`` is True."""
    if keep.all():
        return b
    lengths = np.diff(b.offsets)
    if not lengths[~keep].any():  # the rows left out hold no mass (scenario groups): no copy
        offsets = np.append(b.offsets[:-1][keep], b.offsets[-1]).astype(np.int64)
        return OutcomeBatch(b.origin[keep], b.step[keep], b.mass, offsets,
                            b.trials[keep], b.rounding[keep], b.valid[keep])
    lengths = lengths[keep]
    idx = arrow_io.ranges(b.offsets[:-1][keep], lengths)
    offsets = np.concatenate([[0], np.cumsum(lengths)]).astype(np.int64)
    return OutcomeBatch(b.origin[keep], b.step[keep], b.mass[idx], offsets,
                        b.trials[keep], b.rounding[keep], b.valid[keep])


def ragged_subset(values, offsets, keep):
    """The rows ``keep`` of a ragged column (flat ``values``, ``offsets``)."""
    if keep.all():
        return values, offsets
    lengths = np.diff(offsets)[keep]
    idx = arrow_io.ranges(offsets[:-1][keep], lengths)
    return values[idx], np.concatenate([[0], np.cumsum(lengths)]).astype(np.int64)


def scatter_lists(values, offsets, keep, per_row) -> pa.ListArray:
    """Lists for the rows in ``keep`` (the others NULL) as one Arrow column."""
    lengths = np.zeros(len(keep), dtype=np.int64)
    lengths[keep] = np.diff(offsets) if per_row is None else per_row
    full = np.concatenate([[0], np.cumsum(lengths)])
    return arrow_io.lists_to_arrow(values, full, keep)


@dataclass
class SmallGroups:
    """The usable deals of a batch and which groups are answered from their scenarios."""

    amount: np.ndarray
    prob: np.ndarray
    offsets: np.ndarray
    mask: np.ndarray
    #: groups on an inexact lattice whose likeliest scenarios are heavy (``kernels/heavy.py``)
    lumpy: np.ndarray


def _no_small(b: OutcomeBatch) -> SmallGroups:
    none = np.zeros(len(b), dtype=bool)
    return SmallGroups(np.zeros(0), np.zeros(0), np.zeros(len(b) + 1, np.int64), none, none)


def _read_rows(b: OutcomeBatch, small: SmallGroups, values, offsets, keep, lengths,
               on_lattice_fn, by_scenario_fn) -> np.ndarray:
    """Answers for the rows in ``keep``, back to back (``lengths`` per row): lattice rows
    read off their outcome by ``on_lattice_fn``, small groups from their scenarios by
    ``by_scenario_fn`` (both take flat ``values`` and ``offsets`` of their rows)."""
    on_lattice = keep & b.valid
    sub = subset_batch(b, on_lattice)
    vals, offs = ragged_subset(values, offsets, on_lattice)
    read = on_lattice_fn(sub.origin, sub.step, sub.mass, sub.offsets, sub.rounding, vals, offs)
    by_scenario = keep & small.mask
    if not by_scenario.any():
        return read
    vals, offs = ragged_subset(values, offsets, by_scenario)
    exact = small_groups_threads(by_scenario_fn, small.amount, small.prob, small.offsets,
                                 np.flatnonzero(by_scenario), vals, offs)
    return _interleave(keep, on_lattice, read, exact, lengths)


def _interleave(keep, first, values_first, values_other, lengths) -> np.ndarray:
    """Ragged rows of ``keep`` back to back, taken from ``values_first`` for the rows in
    ``first`` and from ``values_other`` for the others (each holds its rows in order)."""
    lengths = np.where(keep, lengths, 0)
    starts = np.concatenate([[0], np.cumsum(lengths)]).astype(np.int64)
    out = np.empty(starts[-1])
    for mask, values in ((first & keep, values_first), (~first & keep, values_other)):
        out[arrow_io.ranges(starts[:-1][mask], lengths[mask])] = values
    return out


def _band_values(b: OutcomeBatch, small: SmallGroups, cuts, cut_offsets, keep) -> np.ndarray:
    lengths = np.diff(cut_offsets) + 1
    out = _read_rows(b, small, cuts, cut_offsets, keep, lengths, readout.bands_batch,
                     scenarios.bands_small)
    lumpy = keep & small.lumpy
    if lumpy.any():
        vals, offs = ragged_subset(cuts, cut_offsets, lumpy)
        exact_heavy = heavy.bands_heavy(small.amount, small.prob, small.offsets,
                                        np.flatnonzero(lumpy), b.origin, b.step, b.mass,
                                        b.offsets, b.rounding, vals, offs, DEFAULT_BINS)
        kept = np.where(keep, lengths, 0)
        starts = np.concatenate([[0], np.cumsum(kept)])[:-1]
        out[arrow_io.ranges(starts[lumpy], lengths[lumpy])] = exact_heavy
    return out


def read_bands(b: OutcomeBatch, cuts, cut_offsets, keep, small=None) -> pa.ListArray:
    """Band probabilities of the rows ``keep`` (a NULL list elsewhere)."""
    small = small if small is not None else _no_small(b)
    out = _band_values(b, small, cuts, cut_offsets, keep)
    return scatter_lists(out, None, keep, np.diff(cut_offsets)[keep] + 1)


def read_quantiles(b: OutcomeBatch, qs, q_offsets, keep, small=None) -> pa.ListArray:
    """Quantiles of the rows ``keep`` at their levels (a NULL list elsewhere)."""
    small = small if small is not None else _no_small(b)
    out = _read_rows(b, small, qs, q_offsets, keep, np.diff(q_offsets),
                     readout.quantiles_batch, scenarios.quantiles_small)
    return scatter_lists(out, None, keep, np.diff(q_offsets)[keep])


def read_reach(b: OutcomeBatch, target, keep, small=None) -> pa.Array:
    """P(total >= target) of the rows ``keep`` (NULL elsewhere)."""
    small = small if small is not None else _no_small(b)
    cut_offs = np.arange(len(b) + 1, dtype=np.int64)
    out = _band_values(b, small, np.ascontiguousarray(np.where(keep, target, 0.0)), cut_offs,
                        keep)
    result = np.full(len(keep), np.nan)
    result[keep] = out[1::2]
    return arrow_io.doubles_to_arrow(result, keep)


def cuts_column(fn: str, values, n: int, what: str = "cuts"):
    """A column of cut lists, checked: flat values, offsets and the NULL-row mask."""
    flat, offsets, nulls = arrow_io.list_column(values, n, arrow_io.null_in(fn, what))
    arrow_io.check_cuts(fn, flat, offsets, what)
    return flat, offsets, nulls


def levels_column(fn: str, values, n: int):
    """A column of quantile-level lists, checked."""
    flat, offsets, nulls = arrow_io.list_column(values, n, arrow_io.null_in(fn, "quantile levels"))
    arrow_io.check_levels(fn, flat)
    return flat, offsets, nulls


