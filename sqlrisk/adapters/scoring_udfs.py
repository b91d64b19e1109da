"""SQL adapters of the scores: a stored outcome or band odds against what happened.

``outcome_pit``, ``outcome_crps`` and ``outcome_interval`` read a stored outcome
(checked by ``arrow_io.read_outcomes``); ``band_of`` and ``band_rps`` work on
totals, cuts and band probabilities. The numerics are in ``kernels/scoring``.
NULL in, NULL out, row by row; a bad value is a one-line error.
"""

from __future__ import annotations

import numpy as np
import pyarrow as pa

from ..errors import ParameterError
from ..kernels import readout, scoring
from . import arrow_io, readers
from .sql_types import INTERVAL_FIELDS

#: Band probabilities must sum to 1 within this (band_odds' sums are within ulps of it).
BANDS_SUM_TOL = 1e-6


def _totals(fn: str, values, what: str, n: int | None = None):
    """A DOUBLE column of totals, checked finite where not NULL: values and NULL mask."""
    totals, nulls = arrow_io.floats(arrow_io.as_array(values))
    bad = ~nulls & ~np.isfinite(totals)
    if bad.any():
        raise ParameterError(f"{fn}: {what} {arrow_io.fmt(totals[bad][0])} is not a finite "
                             "total (give the won total, or NULL for a NULL answer)")
    return totals, nulls


def _on_outcomes(fn: str, o, actual, kernel) -> pa.Array:
    b = arrow_io.read_outcomes(fn, o)
    totals, nulls = _totals(fn, actual, "actual")
    keep = b.valid & ~nulls
    sub = readers.subset_batch(b, keep)
    out = np.full(len(b), np.nan)
    out[keep] = kernel(sub.origin, sub.step, sub.mass, sub.offsets, sub.rounding,
                       np.ascontiguousarray(totals[keep]))
    return arrow_io.doubles_to_arrow(out, keep)


def outcome_pit(o, actual):
    return _on_outcomes("outcome_pit", o, actual, scoring.pit_batch)


def outcome_crps(o, actual):
    return _on_outcomes("outcome_crps", o, actual, scoring.crps_batch)


def outcome_interval(o, level):
    fn = "outcome_interval"
    b = arrow_io.read_outcomes(fn, o)
    levels = arrow_io.param_column(level, 0.8, len(b))
    bad = b.valid & ~((levels > 0) & (levels < 1))
    if bad.any():
        value = levels[bad][0]
        hint = "were percentages given? divide by 100" if 1 < value <= 100 else \
            "0.8 gives the central 80% interval"
        raise ParameterError(f"{fn}: level {arrow_io.fmt(value)} is outside (0, 1); {hint}")
    keep = b.valid
    sub = readers.subset_batch(b, keep)
    lv = levels[keep]
    qs = np.ascontiguousarray(np.column_stack([(1 - lv) / 2, (1 + lv) / 2]).ravel())
    q_offsets = np.arange(0, len(qs) + 1, 2, dtype=np.int64)
    ends = readout.quantiles_batch(sub.origin, sub.step, sub.mass, sub.offsets, sub.rounding,
                                   qs, q_offsets)
    lo = np.full(len(b), np.nan)
    hi = np.full(len(b), np.nan)
    lo[keep], hi[keep] = ends[0::2], ends[1::2]
    return pa.StructArray.from_arrays([pa.array(lo), pa.array(hi)],
                                      names=list(INTERVAL_FIELDS), mask=pa.array(~keep))


def band_of(total, cuts):
    fn = "band_of"
    totals, nulls = _totals(fn, total, "total")
    flat, offsets, cut_nulls = readers.cuts_column(fn, cuts, len(totals))
    keep = ~nulls & ~cut_nulls
    flat, offsets = readers.ragged_subset(flat, offsets, keep)
    out = np.zeros(len(totals), dtype=np.int32)
    out[keep] = scoring.band_of(totals[keep], flat, offsets)
    return pa.array(out, mask=~keep)


def _check_bands(fn: str, flat: np.ndarray, offsets: np.ndarray) -> None:
    bad = ~((flat >= -1e-12) & (flat <= 1 + 1e-12))
    if bad.any():
        raise ParameterError(f"{fn}: band probability {arrow_io.fmt(flat[bad][0])} is outside "
                             "[0, 1]; pass band_odds' or outcome_bands' result")
    empty = np.diff(offsets) == 0
    if empty.any():
        raise ParameterError(f"{fn}: bands [] is empty; pass band_odds' or outcome_bands' "
                             "result (one band more than cuts)")
    sums = np.add.reduceat(flat, offsets[:-1]) if len(flat) else np.zeros(0)
    off = np.abs(sums - 1.0) > BANDS_SUM_TOL
    if off.any():
        g = np.flatnonzero(off)[0]
        row = flat[offsets[g]:offsets[g + 1]].tolist()
        raise ParameterError(f"{fn}: bands {row} sum to {float(sums[g]):.6g}, not 1; pass every "
                             "band of band_odds' result (a band whose cut is missing is "
                             "not a band)")


def band_rps(bands, landed):
    fn = "band_rps"
    landed_values, landed_nulls = arrow_io.floats(arrow_io.as_array(landed))
    flat, offsets, band_nulls = arrow_io.list_column(
        bands, len(landed_values), arrow_io.null_in(fn, "bands"))
    keep = ~band_nulls & ~landed_nulls
    flat, offsets = readers.ragged_subset(flat, offsets, keep)
    _check_bands(fn, flat, offsets)
    got = landed_values[keep]
    count = np.diff(offsets)
    bad = ~((got >= 1) & (got <= count) & (got == np.floor(got)))
    if bad.any():
        i = np.flatnonzero(bad)[0]
        raise ParameterError(f"{fn}: landed {arrow_io.fmt(got[i])} is not a band of "
                             f"{int(count[i])} (give 1 to {int(count[i])}, as band_of returns)")
    out = np.full(len(keep), np.nan)
    out[keep] = scoring.band_rps(flat, offsets, got.astype(np.int64))
    return arrow_io.doubles_to_arrow(out, keep)
