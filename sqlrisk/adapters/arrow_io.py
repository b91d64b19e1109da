"""Arrow <-> numpy for the SQL adapters, with the input checks.

DuckDB hands a vectorised UDF ``pyarrow.ChunkedArray`` arguments (one row per
group for the aggregates, whose deals arrive as ``LIST(STRUCT(...))``). This
module turns them into the flat arrays the kernels take, applies the NULL rule
(a row with a NULL amount or probability is skipped, as SQL aggregates skip
NULLs) and raises one-line errors for values no kernel should see.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pyarrow as pa

from ..errors import InputDataError, ParameterError
from ..kernels.outcome import OutcomeBatch
from ..kernels.ragged import lists_agree, ranges
from .sql_types import OUTCOME_FIELDS

MASS_TOL = 1e-9
#: Largest and smallest non-zero deal amount (in absolute value) the functions accept.
AMOUNT_MAX = 1e15
AMOUNT_MIN = 1e-9
#: Totals an outcome may hold (their squares stay far from overflow).
OUTCOME_MAX = 1e150
#: Smallest non-zero lattice step an outcome may have.
OUTCOME_MIN_STEP = 1e-150


def as_array(values) -> pa.Array:
    """One Arrow array from what DuckDB hands a UDF (a ChunkedArray or an Array)."""
    if isinstance(values, pa.ChunkedArray):
        return values.combine_chunks() if values.num_chunks != 1 else values.chunk(0)
    return values


def floats(arr: pa.Array) -> tuple[np.ndarray, np.ndarray]:
    """Values as float64 (NULL -> NaN) and the NULL mask."""
    nulls = np.asarray(arr.is_null(), dtype=bool)
    values = arr.to_numpy(zero_copy_only=False).astype(np.float64, copy=False)
    return values, nulls


def fmt(x: float) -> str:
    """A value as error messages quote it."""
    return repr(float(x))


@dataclass
class Groups:
    """Rows of ``n`` groups: ``field(name)`` is flat, ``offsets`` delimits groups."""

    offsets: np.ndarray
    fields: pa.StructArray
    null_group: np.ndarray

    def __len__(self) -> int:
        return len(self.offsets) - 1

    def field(self, name: str) -> pa.Array:
        return self.fields.field(name)


def read_groups(rows) -> Groups:
    """Split a ``LIST(STRUCT(...))`` column into flat fields plus offsets."""
    arr = as_array(rows)
    offsets = np.asarray(arr.offsets, dtype=np.int64)
    start = offsets[0]
    stop = offsets[-1]
    fields = arr.values.slice(start, stop - start)
    return Groups(offsets - start, fields, np.asarray(arr.is_null(), dtype=bool))


# -- input checks that point at the row ------------------------------------------
#
# A value error names the first offending row by its other fields (``where``: label ->
# values aligned with the checked ones, e.g. {"amount": amount}) and counts the checked
# rows sharing the problem (NULL-skipped rows are not checked). The count covers this
# UDF call: every row without GROUP BY; with one, DuckDB may split the groups over
# several calls (a partition per thread), so a call holding several groups names how
# many (``groups``). In a window each frame is a group: a row counts once per frame.

def _shown(value) -> str:
    """A row's field as an error message names it: numbers by ``fmt``, ids quoted."""
    if isinstance(value, pa.Scalar):
        value = value.as_py()
    if value is None:
        return "NULL"
    if isinstance(value, (float, int, np.floating, np.integer)) and not isinstance(value, bool):
        return fmt(value)
    return f"'{value}'"


def _in_groups(groups: int) -> str:
    return f" in {groups:,} groups" if groups > 1 else ""


def _at(where: dict | None, bad: np.ndarray) -> str:
    """`` at the row with amount 100.0`` (the first offending row, when there are several)."""
    if not where:
        return ""
    i = int(np.flatnonzero(bad)[0])
    fields = ", ".join(f"{label} {_shown(values[i])}" for label, values in where.items())
    lead = " at" if np.count_nonzero(bad) == 1 else ", the first at"
    return f"{lead} the row with {fields}"


def _row_error(fn: str, subject: str, bad: np.ndarray, fix: str, where, groups: int):
    """``fn: subject (k of n rows; fix) at the row with ...``, one line."""
    total = len(bad)
    share = f"{np.count_nonzero(bad):,} of {total:,} row{'' if total == 1 else 's'}"
    return InputDataError(f"{fn}: {subject} ({share}{_in_groups(groups)}; {fix})"
                          f"{_at(where, bad)}")


def _filter_out(bad: np.ndarray) -> str:
    return ("filter the row out or COALESCE it" if np.count_nonzero(bad) == 1
            else "filter the rows out or COALESCE them")


def _looks_like_percentages(prob: np.ndarray) -> bool:
    """Every finite value in [0, 100], none strictly between 0 and 1, and some above 1."""
    finite = prob[np.isfinite(prob)]
    return bool(len(finite) and finite.min() >= 0 and 1 < finite.max() <= 100
                and not ((finite > 0) & (finite < 1)).any())


def check_probabilities(fn: str, prob: np.ndarray, where: dict | None = None,
                        groups: int = 1) -> None:
    """Probabilities in [0, 1]. ``where`` and ``groups``: see the comment above."""
    outside = ~((prob >= 0.0) & (prob <= 1.0))
    if not outside.any():
        return
    value = prob[np.flatnonzero(outside)[0]]
    if np.isnan(value):
        bad = np.isnan(prob)
        raise _row_error(fn, "probability nan is not a number", bad, "from a failed join or a "
                         f"division by zero? {_filter_out(bad)}", where, groups)
    outside &= ~np.isnan(prob)
    subject = f"probability {fmt(value)} is outside [0, 1]"
    if np.isfinite(value) and _looks_like_percentages(prob):
        finite = int(np.isfinite(prob).sum())
        which = "probabilities" if finite == len(prob) else "finite probabilities"
        column = ("the one probability looks like a percentage" if finite == 1 else
                  f"all {finite:,} {which}{_in_groups(groups)} look like percentages (0-100)")
        raise InputDataError(f"{fn}: {subject} (were percentages given? divide by 100): "
                             f"{column}{_at(where, outside)}")
    if not np.isfinite(value):
        fix = f"from a division by zero? {_filter_out(outside)}"
    elif np.count_nonzero(outside) == 1 < len(prob):
        fix = "a typo?"
    else:
        fix = "use values in [0, 1]"
    raise _row_error(fn, subject, outside, fix, where, groups)


def check_amounts(fn: str, amount: np.ndarray, what: str = "amount",
                  where: dict | None = None, groups: int = 1) -> None:
    """Finite amounts of a size money can have: |a| <= AMOUNT_MAX, and 0 or |a| >= AMOUNT_MIN.

    The limits keep squares and sums of squares far from overflow and underflow
    (the lattice's window and step come from the variance). ``where`` and
    ``groups``: see the comment above.
    """
    size = np.abs(amount)
    infinite = ~np.isfinite(amount)
    problems = (
        (infinite, "is not a finite number",
         "filter it out or COALESCE it to a real amount" if np.count_nonzero(infinite) == 1
         else "filter them out or COALESCE them to real amounts"),
        (size > AMOUNT_MAX, f"is beyond +/-{AMOUNT_MAX:.0e}",
         "a unit mix-up? give amounts in a larger unit, such as thousands"),
        ((size > 0) & (size < AMOUNT_MIN), f"is smaller than {AMOUNT_MIN:.0e} but not 0",
         "round such residues to 0, or give amounts in a smaller unit"),
    )
    for bad, problem, fix in problems:
        if bad.any():
            value = amount[np.flatnonzero(bad)[0]]
            raise _row_error(fn, f"{what} {fmt(value)} {problem}", bad, fix, where, groups)


def check_deals(fn: str, amount: np.ndarray, prob: np.ndarray, offsets: np.ndarray,
                ids=None) -> None:
    """Usable deals' amounts, then probabilities (``offsets`` delimit their groups); an
    error names the row's deal id (if given) and its other field."""
    groups = int(np.count_nonzero(np.diff(offsets)))
    named = {} if ids is None else {"deal_id": ids}
    check_amounts(fn, amount, where={**named, "probability": prob}, groups=groups)
    check_probabilities(fn, prob, where={**named, "amount": amount}, groups=groups)


def usable_rows(groups: Groups, *names: str):
    """The NULL rule: a row with a NULL in any of the fields ``names`` is skipped.

    Returns the fields' values (float64) and NULL masks, the mask of usable rows
    and the groups' offsets into the usable rows.
    """
    values, null_masks = zip(*(floats(groups.field(name)) for name in names))
    keep = ~np.logical_or.reduce(null_masks)
    offsets = (groups.offsets if keep.all()
               else np.concatenate([[0], np.cumsum(keep)])[groups.offsets])
    return list(values), list(null_masks), keep, offsets


def deals(fn: str, groups: Groups) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Usable deals (NULL amount or probability skipped), checked, with new offsets."""
    (amount, prob), _, keep, offsets = usable_rows(groups, "amount", "prob")
    if not keep.all():
        amount, prob = amount[keep], prob[keep]
    check_deals(fn, amount, prob, offsets)
    return amount, prob, offsets


def check_cuts(fn: str, cuts: np.ndarray, offsets: np.ndarray, what: str = "cuts") -> None:
    if not np.isfinite(cuts).all():
        value = cuts[np.flatnonzero(~np.isfinite(cuts))[0]]
        raise ParameterError(f"{fn}: {what} contain {fmt(value)}; give finite totals")
    steps = np.diff(cuts)
    inner = np.ones(len(steps), dtype=bool)
    # Ignore the step from one row's last cut to the next row's first. An empty row's
    # boundary at 0 (or at the end) has no such step: -1 would wrap to the last one.
    boundaries = offsets[1:-1]
    boundaries = boundaries[(boundaries > 0) & (boundaries < len(cuts))]
    inner[boundaries - 1] = False
    bad = inner & (steps <= 0) if len(steps) else inner
    if bad.any():
        i = np.flatnonzero(bad)[0]
        g = np.searchsorted(offsets, i, side="right") - 1
        row = cuts[offsets[g]:offsets[g + 1]].tolist()
        raise ParameterError(
            f"{fn}: {what} {row} are not strictly increasing; sort them and drop duplicates")


def steps_requested(fn: str, values) -> np.ndarray:
    """A ``step`` column: NULL -> 0 (automatic lattice); anything not > 0 is an error."""
    step, nulls = floats(as_array(values))
    bad = ~nulls & ~(step > 0)
    if bad.any():
        raise ParameterError(f"{fn}: step {fmt(step[bad][0])} must be > 0 "
                             "(or NULL for the automatic lattice)")
    return np.where(nulls, 0.0, step)


def param_column(values, default: float, n: int) -> np.ndarray:
    """A per-group numeric parameter (trials, correlation, level): NULL takes ``default``."""
    vals, nulls = floats(as_array(values))
    if len(vals) != n:
        raise AssertionError("parameter column length mismatch")
    return np.where(nulls, default, vals)


def check_correlation(fn: str, rho: np.ndarray) -> None:
    bad = ~((rho >= 0) & (rho < 1))
    if bad.any():
        raise ParameterError(f"{fn}: correlation {fmt(rho[bad][0])} is outside [0, 1) "
                             "(0 = independent deals; 0.05 to 0.3 is typical)")


def check_levels(fn: str, qs: np.ndarray) -> None:
    bad = ~((qs >= 0.0) & (qs <= 1.0))
    if bad.any():
        value = qs[np.flatnonzero(bad)[0]]
        hint = ("were percentiles given? divide by 100" if 1 < value <= 100
                else "give levels such as 0.1, 0.5, 0.9")
        raise ParameterError(f"{fn}: quantile level {fmt(value)} is outside [0, 1] ({hint})")


def list_column(values, n: int, null_error: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """A ``DOUBLE[]`` column: flat values, offsets and the NULL-row mask.

    A NULL element inside a list raises ``null_error`` (a ParameterError, or an
    InputDataError when the text speaks of a malformed outcome).
    """
    arr = as_array(values)
    if len(arr) != n:
        raise AssertionError("list column length mismatch")
    offsets = np.asarray(arr.offsets, dtype=np.int64)
    flat = arr.values.slice(offsets[0], offsets[-1] - offsets[0])
    flat_values, nulls = floats(flat)
    if nulls.any():
        raise (InputDataError if "malformed" in null_error else ParameterError)(null_error)
    return flat_values, offsets - offsets[0], np.asarray(arr.is_null(), dtype=bool)


def null_in(fn: str, what: str) -> str:
    return f"{fn}: {what} contain a NULL; give a list of numbers (or NULL for the whole list)"


def per_group_list(fn: str, groups: Groups, name: str, what: str):
    """One list per group from a per-row list field (cuts, qs).

    The first non-NULL row's list is the group's; a group whose rows disagree
    is an error. Returns flat values, offsets, and a mask of groups without one.
    """
    values, offsets, nulls = list_column(groups.field(name), groups.offsets[-1], null_in(fn, what))
    first = _first_live_row(nulls, groups.offsets)
    missing = first < 0
    lengths = np.diff(offsets)
    row_group = np.repeat(np.arange(len(groups)), np.diff(groups.offsets))
    ref = first[row_group]
    live = ~nulls
    if live.any() and not lists_agree(values, offsets, live, ref):
        raise ParameterError(
            f"{fn}: {what} differ between rows of one group; give one set of {what} per group")
    pick = np.where(missing, 0, first)
    out_len = np.where(missing, 0, lengths[pick] if len(lengths) else 0)
    out_offsets = np.concatenate([[0], np.cumsum(out_len)]).astype(np.int64)
    idx = ranges(offsets[pick], out_len)
    return values[idx], out_offsets, missing


def _first_live_row(nulls: np.ndarray, offsets: np.ndarray) -> np.ndarray:
    """Index of each group's first non-NULL row, -1 where there is none."""
    n_rows = len(nulls)
    rows = np.where(nulls, n_rows, np.arange(n_rows))
    first = np.full(len(offsets) - 1, n_rows, dtype=np.int64)
    nonempty = np.diff(offsets) > 0
    if n_rows:
        first[nonempty] = np.minimum.reduceat(rows, offsets[:-1][nonempty])
    return np.where(first >= n_rows, -1, first)


def per_group_scalar(fn: str, groups: Groups, name: str, what: str):
    """One value per group from a per-row scalar field (target)."""
    values, nulls = floats(groups.field(name))
    first = _first_live_row(nulls, groups.offsets)
    missing = first < 0
    out = np.where(missing, np.nan, values[np.where(missing, 0, first)] if len(values) else np.nan)
    row_group = np.repeat(np.arange(len(groups)), np.diff(groups.offsets))
    live = np.flatnonzero(~nulls)
    ref = out[row_group[live]]
    differ = (values[live] != ref) & ~(np.isnan(values[live]) & np.isnan(ref))
    if differ.any():
        i = live[np.flatnonzero(differ)[0]]
        raise ParameterError(
            f"{fn}: {what} differs between rows of one group ({fmt(out[row_group[i]])} and "
            f"{fmt(values[i])}); give one {what} per group")
    bad = ~missing & ~np.isfinite(out)
    if bad.any():
        raise ParameterError(f"{fn}: {what} {fmt(out[np.flatnonzero(bad)[0]])} is not a finite "
                             f"total (give a finite {what}, or NULL for a NULL answer)")
    return out, missing


# -- outcomes ---------------------------------------------------------------

def read_outcomes(fn: str, values) -> OutcomeBatch:
    """A column of outcome structs, checked; NULL rows come back invalid."""
    arr = as_array(values)
    valid = ~np.asarray(arr.is_null(), dtype=bool)
    cols = {}
    for name in ("origin", "step", "rounding", "trials"):
        col = arr.field(name)
        vals, nulls = floats(col)
        if (nulls & valid).any():
            raise InputDataError(
                f"{fn}: an outcome has a NULL {name!r}; pass outcomes built by outcome_dist")
        cols[name] = vals
    mass_col = arr.field("mass")
    mass_nulls = np.asarray(mass_col.is_null(), dtype=bool)
    if (mass_nulls & valid).any():
        raise InputDataError(f"{fn}: an outcome has a NULL 'mass'; pass outcomes built by outcome_dist")
    mass, offsets, _ = list_column(mass_col, len(arr), f"{fn}: malformed outcome: mass contains "
                                   "a NULL; pass outcomes built by outcome_dist")
    trials = np.where(valid, np.nan_to_num(cols["trials"]), 0).astype(np.int64)
    batch = OutcomeBatch(cols["origin"], cols["step"], mass, offsets,
                         trials, cols["rounding"], valid)
    check_outcomes(fn, batch)
    return batch


def check_outcomes(fn: str, b: OutcomeBatch) -> None:
    v = b.valid
    lengths = np.diff(b.offsets)
    with np.errstate(over="ignore", invalid="ignore"):
        top = b.origin + b.step * np.maximum(lengths - 1, 0)
    problems = [
        (~np.isfinite(b.origin) & v, "origin {} is not finite"),
        ((~np.isfinite(b.step) | (b.step < 0)) & v, "step {} is not a finite value >= 0"),
        ((np.abs(b.origin) > OUTCOME_MAX) & v, f"origin {{}} is beyond +/-{OUTCOME_MAX:.0e}"),
        (~(np.abs(top) <= OUTCOME_MAX) & v, f"its largest total {{}} is beyond +/-{OUTCOME_MAX:.0e}"),
        ((b.step == 0) & (lengths > 1) & v, "step {} with more than one mass point"),
        # outcome_dist's steps are >= 1e-9 / 4,194,304 bins; below OUTCOME_MIN_STEP ratios
        # of steps overflow when outcomes are added
        ((b.step > 0) & (b.step < OUTCOME_MIN_STEP) & v,
         f"step {{}} is smaller than {OUTCOME_MIN_STEP:.0e}"),
        ((lengths == 0) & v, "mass is empty (length {})"),
        ((~np.isfinite(b.rounding) | (b.rounding < 0) | (b.rounding > OUTCOME_MAX)) & v,
         f"rounding {{}} is not in [0, {OUTCOME_MAX:.0e}]"),
        ((b.trials < 0) & v, "trials {} is negative"),
    ]
    fields = [b.origin, b.step, b.origin, top, b.step, b.step, lengths, b.rounding, b.trials]
    for (bad, text), field in zip(problems, fields):
        if bad.any():
            value = field[np.flatnonzero(bad)[0]]
            raise InputDataError(f"{fn}: malformed outcome: {text.format(value)}; "
                                 "pass outcomes built by outcome_dist")
    if len(b.mass) and not (b.mass >= 0).all():
        raise InputDataError(f"{fn}: malformed outcome: mass contains "
                             f"{fmt(b.mass[~(b.mass >= 0)][0])}; masses must be >= 0 (pass "
                             "outcomes built by outcome_dist)")
    running = np.concatenate([[0.0], np.cumsum(b.mass)])
    sums = np.where(lengths > 0, running[b.offsets[1:]] - running[b.offsets[:-1]], 1.0)
    bad = v & (np.abs(sums - 1.0) > MASS_TOL)
    if bad.any():
        raise InputDataError(f"{fn}: malformed outcome: mass sums to "
                             f"{fmt(sums[np.flatnonzero(bad)[0]])}, not 1; pass outcomes built "
                             "by outcome_dist")


def outcomes_to_arrow(b: OutcomeBatch) -> pa.StructArray:
    mass = pa.ListArray.from_arrays(pa.array(b.offsets.astype(np.int32)), pa.array(b.mass))
    arrays = [pa.array(b.origin), pa.array(b.step), mass,
              pa.array(np.asarray(b.trials, dtype=np.int64)), pa.array(b.rounding)]
    return pa.StructArray.from_arrays(arrays, names=list(OUTCOME_FIELDS),
                                      mask=pa.array(~np.asarray(b.valid, dtype=bool)))


def lists_to_arrow(values: np.ndarray, offsets: np.ndarray, valid: np.ndarray) -> pa.ListArray:
    return pa.ListArray.from_arrays(pa.array(offsets.astype(np.int32)), pa.array(values),
                                    mask=pa.array(~np.asarray(valid, dtype=bool)))


def doubles_to_arrow(values: np.ndarray, valid: np.ndarray) -> pa.Array:
    return pa.array(values, mask=~np.asarray(valid, dtype=bool))
