"""SQL adapters of the functions on stored outcomes: Arrow in, kernel call, Arrow out.

The scalars (``outcome_bands``, ``outcome_reach``, ``outcome_quantiles``,
``outcome_mean``, ``outcome_sd``, ``outcome_error``, ``outcome_shift``,
``outcome_add``, ``outcome_histogram``) take one outcome struct per row;
``outcome_merge`` is an aggregate (a TEMP macro over ``list(o)``). Outcomes are
checked by ``arrow_io.read_outcomes`` and read by ``readers``.
"""

from __future__ import annotations

import numpy as np
import pyarrow as pa

from ..errors import ParameterError
from ..kernels import accuracy, readout
from ..kernels.combine import Outcome, combine
from ..kernels.outcome import OutcomeBatch
from . import arrow_io, readers
from .sql_types import HISTOGRAM_FIELDS

#: Most bins ``outcome_histogram`` will draw.
MAX_HISTOGRAM_BINS = 10_000


def outcome_merge(outcomes):
    fn = "outcome_merge"
    arr = arrow_io.as_array(outcomes)
    offsets = np.asarray(arr.offsets, dtype=np.int64)
    inner = arrow_io.read_outcomes(fn, arr.values.slice(offsets[0], offsets[-1] - offsets[0]))
    offsets = offsets - offsets[0]
    group_null = np.asarray(arr.is_null(), dtype=bool)
    results = []
    for g in range(len(offsets) - 1):
        rows = [i for i in range(offsets[g], offsets[g + 1]) if inner.valid[i]]
        if group_null[g] or not rows:
            results.append(None)
        else:
            results.append(combine([_one(inner, i) for i in rows]))
    return arrow_io.outcomes_to_arrow(_pack(results))


# -- scalars on outcomes ------------------------------------------------------

def outcome_bands(o, cuts):
    fn = "outcome_bands"
    b = arrow_io.read_outcomes(fn, o)
    flat, offsets, nulls = readers.cuts_column(fn, cuts, len(b))
    return readers.read_bands(b, flat, offsets, b.valid & ~nulls)


def outcome_reach(o, target):
    fn = "outcome_reach"
    b = arrow_io.read_outcomes(fn, o)
    values, nulls = arrow_io.floats(arrow_io.as_array(target))
    keep = b.valid & ~nulls
    bad = keep & ~np.isfinite(values)
    if bad.any():
        raise ParameterError(f"{fn}: target {arrow_io.fmt(values[bad][0])} is not a finite "
                             "total (give a finite total, or NULL for a NULL answer)")
    return readers.read_reach(b, values, keep)


def outcome_quantiles(o, qs):
    fn = "outcome_quantiles"
    b = arrow_io.read_outcomes(fn, o)
    flat, offsets, nulls = readers.levels_column(fn, qs, len(b))
    return readers.read_quantiles(b, flat, offsets, b.valid & ~nulls)


def _moments(o, fn):
    b = arrow_io.read_outcomes(fn, o)
    sub = readers.subset_batch(b, b.valid)
    mean, sd = readout.moments_batch(sub.origin, sub.step, sub.mass, sub.offsets)
    return b.valid, mean, sd


def outcome_mean(o):
    keep, mean, _ = _moments(o, "outcome_mean")
    out = np.full(len(keep), np.nan)
    out[keep] = mean
    return arrow_io.doubles_to_arrow(out, keep)


def outcome_sd(o):
    keep, _, sd = _moments(o, "outcome_sd")
    out = np.full(len(keep), np.nan)
    out[keep] = sd
    return arrow_io.doubles_to_arrow(out, keep)


def outcome_error(o):
    b = arrow_io.read_outcomes("outcome_error", o)
    sub = readers.subset_batch(b, b.valid)
    out = np.full(len(b), np.nan)
    out[b.valid] = accuracy.error_batch(sub.origin, sub.step, sub.mass, sub.offsets,
                                        sub.rounding, sub.trials)
    return arrow_io.doubles_to_arrow(out, b.valid)


def outcome_shift(o, amount):
    fn = "outcome_shift"
    b = arrow_io.read_outcomes(fn, o)
    values, nulls = arrow_io.floats(arrow_io.as_array(amount))
    keep = b.valid & ~nulls
    arrow_io.check_amounts(fn, values[keep])
    b.origin = np.where(keep, b.origin + np.where(keep, values, 0.0), b.origin)
    b.valid = keep
    return arrow_io.outcomes_to_arrow(b)


def outcome_add(o1, o2):
    fn = "outcome_add"
    a = arrow_io.read_outcomes(fn, o1)
    b = arrow_io.read_outcomes(fn, o2)
    results = [combine([_one(a, g), _one(b, g)]) if a.valid[g] and b.valid[g] else None
               for g in range(len(a))]
    return arrow_io.outcomes_to_arrow(_pack(results))


def outcome_histogram(o, bins):
    fn = "outcome_histogram"
    b = arrow_io.read_outcomes(fn, o)
    counts, nulls = arrow_io.floats(arrow_io.as_array(bins))
    keep = b.valid & ~nulls
    bad = keep & ~((counts >= 1) & (counts <= MAX_HISTOGRAM_BINS))
    if bad.any():
        value = counts[bad][0]
        shown = str(int(value)) if float(value).is_integer() else arrow_io.fmt(value)
        raise ParameterError(f"{fn}: bins {shown} is outside "
                             f"[1, {MAX_HISTOGRAM_BINS:,}]; ask for 20 to 100 bins for a chart")
    sub = readers.subset_batch(b, keep)
    lo, hi, prob, offs = readout.histogram_batch(
        sub.origin, sub.step, sub.mass, sub.offsets, sub.rounding,
        counts[keep].astype(np.int64))
    lengths = np.zeros(len(keep), dtype=np.int64)
    lengths[keep] = np.diff(offs)
    full = np.concatenate([[0], np.cumsum(lengths)]).astype(np.int32)
    items = pa.StructArray.from_arrays([pa.array(lo), pa.array(hi), pa.array(prob)],
                                       names=list(HISTOGRAM_FIELDS))
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


