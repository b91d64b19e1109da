"""The calibration functions in SQL: Arrow in, checks, kernel call, Arrow out.

``calibration_map``, ``brier_score`` and ``brier_parts`` are aggregates (TEMP
macros from ``catalog`` packing a group's closed deals into one
``LIST(STRUCT(p DOUBLE, w DOUBLE))``); ``apply_calibration`` is a scalar.

A calibration map is ``STRUCT(prob DOUBLE[], rate DOUBLE[], deals BIGINT)``:
``prob`` holds strictly increasing stated-probability breakpoints, ``rate`` the
fitted win rate at each (non-decreasing, in [0, 1]), ``deals`` the closed deals
it was fitted on. Between breakpoints the map is read linearly; beyond the
first and last it is constant.
"""

from __future__ import annotations

import numpy as np
import pyarrow as pa

from ..errors import InputDataError, ParameterError
from ..kernels import calibration as kernel
from ..kernels.intervals import wilson
from . import arrow_io
from .readers import ragged_subset
from .sql_types import INTERVAL_FIELDS, MAP_FIELDS, MAP_SQL, PARTS_FIELDS

#: Largest count ``wilson_interval`` takes (beyond it a count is a unit mix-up).
MAX_COUNT = 1e15
#: Most stated-probability bins ``brier_parts`` takes.
MAX_BINS = 1000


def _number(x: float) -> str:
    """2 rather than 2.0 for a whole number; repr otherwise."""
    return str(int(x)) if np.isfinite(x) and x == np.floor(x) else arrow_io.fmt(x)


def _closed_deals(fn: str, rows):
    """Usable closed deals (NULL probability or outcome skipped), checked.

    Returns probabilities, outcomes (0.0/1.0), group offsets and the mask of
    groups that have at least one usable deal.
    """
    groups = arrow_io.read_groups(rows)
    (prob, won), _, keep, offsets = arrow_io.usable_rows(groups, "prob", "won")
    prob, won = prob[keep], won[keep]
    arrow_io.check_probabilities(fn, prob)
    bad = (won != 0.0) & (won != 1.0)
    if bad.any():
        raise InputDataError(f"{fn}: won {_number(won[bad][0])} is not 0/1 or true/false (give 1 "
                             "or true for a won deal, 0 or false for a lost one; leave open deals "
                             "out)")
    return prob, won, offsets, (np.diff(offsets) > 0) & ~groups.null_group


# -- aggregates (called through macros) --------------------------------------

def calibration_map(rows):
    fn = "calibration_map"
    prob, won, offsets, valid = _closed_deals(fn, rows)
    breaks, rates, map_offsets, deals = kernel.fit_maps(prob, won, offsets)
    arrays = [arrow_io.lists_to_arrow(breaks, map_offsets, valid),
              arrow_io.lists_to_arrow(rates, map_offsets, valid),
              pa.array(deals, type=pa.int64())]
    return pa.StructArray.from_arrays(arrays, names=list(MAP_FIELDS), mask=pa.array(~valid))


def brier_score(rows):
    prob, won, offsets, valid = _closed_deals("brier_score", rows)
    return arrow_io.doubles_to_arrow(kernel.brier_scores(prob, won, offsets), valid)


def brier_parts(rows, bins):
    fn = "brier_parts"
    prob, won, offsets, valid = _closed_deals(fn, rows)
    counts, nulls = arrow_io.floats(arrow_io.as_array(bins))
    bad = ~nulls & ~((counts >= 1) & (counts <= MAX_BINS) & (counts == np.floor(counts)))
    if bad.any():
        raise ParameterError(f"{fn}: bins {_number(counts[bad][0])} is not a whole number in "
                             f"[1, {MAX_BINS}] (10 equal-width bins is usual; fewer for a "
                             "few hundred deals)")
    valid &= ~nulls
    rel, res, unc = kernel.brier_parts(prob, won, offsets, np.where(nulls, 1, counts))
    arrays = [arrow_io.doubles_to_arrow(part, valid) for part in (rel, res, unc)]
    return pa.StructArray.from_arrays(arrays, names=list(PARTS_FIELDS), mask=pa.array(~valid))


# -- scalar ---------------------------------------------------------------------

def _malformed(fn: str, text: str) -> InputDataError:
    return InputDataError(f"{fn}: malformed map: {text}; pass a map built by calibration_map "
                          f"(a {MAP_SQL})")


def _shown(values: np.ndarray) -> str:
    items = [float(v) for v in values[:6]]
    return repr(items)[:-1] + (", ...]" if len(values) > 6 else "]")


def read_maps(fn: str, values):
    """A column of maps, checked: breakpoints, rates, their offsets and the valid rows."""
    arr = arrow_io.as_array(values)
    n = len(arr)
    valid = ~np.asarray(arr.is_null(), dtype=bool)
    cols = {}
    for name in ("prob", "rate"):
        child = arr.field(name)
        if (np.asarray(child.is_null(), dtype=bool) & valid).any():
            raise _malformed(fn, f"{name} is NULL")
        flat, offsets, _ = arrow_io.list_column(child, n, f"{fn}: malformed map: {name} contains a "
                                          "NULL; pass a map built by calibration_map")
        cols[name] = (flat, offsets)
    (breaks, offsets), (rates, rate_offsets) = cols["prob"], cols["rate"]
    lengths = np.diff(offsets)
    mismatch = valid & (lengths != np.diff(rate_offsets))
    if mismatch.any():
        g = np.flatnonzero(mismatch)[0]
        raise _malformed(fn, f"{lengths[g]} breakpoints but {np.diff(rate_offsets)[g]} rates")
    if (valid & (lengths == 0)).any():
        raise _malformed(fn, "it has no breakpoints")
    live = np.repeat(valid, lengths)
    for name, flat in (("breakpoint", breaks), ("rate", rates)):
        outside = live & ~((flat >= 0.0) & (flat <= 1.0))
        if outside.any():
            raise _malformed(fn, f"{name} {arrow_io.fmt(flat[np.flatnonzero(outside)[0]])} is outside "
                                 "[0, 1]")
    steps = (np.diff(breaks) <= 0) & live[1:]
    bounds = offsets[1:-1]
    steps[bounds[(bounds > 0) & (bounds < len(breaks))] - 1] = False  # from one row to the next
    if steps.any():
        g = np.searchsorted(offsets, np.flatnonzero(steps)[0], side="right") - 1
        raise _malformed(fn, f"breakpoints {_shown(breaks[offsets[g]:offsets[g + 1]])} are not "
                             "strictly increasing")
    return breaks, rates, offsets, valid


def apply_calibration(maps, prob):
    fn = "apply_calibration"
    breaks, rates, offsets, valid = read_maps(fn, maps)
    values, nulls = arrow_io.floats(arrow_io.as_array(prob))
    arrow_io.check_probabilities(fn, values[~nulls])
    keep = valid & ~nulls
    out = np.full(len(keep), np.nan)
    if keep.any():
        sub_breaks, sub_offsets = ragged_subset(breaks, offsets, keep)
        sub_rates, _ = ragged_subset(rates, offsets, keep)
        out[keep] = kernel.interpolate(sub_breaks, sub_rates, sub_offsets, values[keep])
    return arrow_io.doubles_to_arrow(out, keep)


# -- intervals -----------------------------------------------------------------------

def wilson_interval(successes, trials, level):
    """``STRUCT(lo, hi)``: the Wilson score interval of ``successes`` out of ``trials``.

    NULL in, NULL out; no trials (0) gives NULL, as a share of nothing has no interval.
    """
    fn = "wilson_interval"
    k, k_null = arrow_io.floats(arrow_io.as_array(successes))
    n, n_null = arrow_io.floats(arrow_io.as_array(trials))
    levels = arrow_io.param_column(level, 0.95, len(k))
    live = ~(k_null | n_null)
    bad = live & ~((levels > 0) & (levels < 1))
    if bad.any():
        raise ParameterError(f"{fn}: level {arrow_io.fmt(levels[bad][0])} is outside (0, 1); "
                             "0.95 gives 95% intervals")
    for name, values, what in (("trials", n, "the number of deals or draws"),
                               ("successes", k, "the number of won deals")):
        bad = live & ~((values >= 0) & (values <= MAX_COUNT) & (values == np.floor(values)))
        if bad.any():
            raise InputDataError(f"{fn}: {name} {_number(values[bad][0])} is not a whole count "
                                 f"in [0, {MAX_COUNT:.0e}] (give {what})")
    bad = live & (k > n)
    if bad.any():
        i = np.flatnonzero(bad)[0]
        raise InputDataError(f"{fn}: successes {_number(k[i])} is more than trials "
                             f"{_number(n[i])}; count successes out of the same trials")
    keep = live & (n > 0)
    lo = np.full(len(k), np.nan)
    hi = np.full(len(k), np.nan)
    if keep.any():
        lo[keep], hi[keep] = wilson(k[keep] / n[keep], n[keep], levels[keep])
    arrays = [arrow_io.doubles_to_arrow(v, keep) for v in (lo, hi)]
    return pa.StructArray.from_arrays(arrays, names=list(INTERVAL_FIELDS), mask=pa.array(~keep))
