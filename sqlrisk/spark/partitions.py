"""The DataFrame fast path's work on one Spark partition: Arrow batches in, one row per group out.

``frames.outcomes`` hands each partition to ``group_outcomes``, its rows sorted by
the group keys, as Arrow record batches. Rows are gathered into chunks of whole
groups (a group that runs on into the next batch waits for it), and each chunk is
one call of the bodies DuckDB's ``outcome_dist`` and ``band_odds`` run, so the
numbers are theirs. Arrow only: this runs on Spark's Python workers.
"""

from __future__ import annotations

from collections.abc import Iterator

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from ..adapters.arrow_io import as_array
from . import conform as cf
from .udfs import named_as

FN = "sqlrisk.spark.outcomes"
#: Rows gathered before a chunk is computed (one kernel call covers many groups).
CHUNK_ROWS = 200_000
AMOUNT, PROB, CUTS, KEY = "__sqlrisk_amount", "__sqlrisk_prob", "__sqlrisk_cuts", "__sqlrisk_key"


def _changes(col: pa.Array) -> np.ndarray:
    """Where row i + 1 starts a new value of ``col`` (NULLs equal NULLs, NaN equals NaN,
    as Spark's GROUP BY has it)."""
    a, b = col.slice(1), col.slice(0, len(col) - 1)
    try:
        differ = pc.not_equal(a, b)
    except pa.ArrowNotImplementedError:  # nested keys: compared as Python values
        return np.array([x != y for x, y in zip(a.to_pylist(), b.to_pylist())], dtype=bool)
    out = np.asarray(differ.fill_null(False), dtype=bool)
    out |= np.asarray(a.is_null(), dtype=bool) != np.asarray(b.is_null(), dtype=bool)
    if pa.types.is_floating(col.type):
        out &= ~(np.asarray(pc.is_nan(a).fill_null(False), dtype=bool)
                 & np.asarray(pc.is_nan(b).fill_null(False), dtype=bool))
    return out


def group_starts(table: pa.Table, keys: list[str]) -> np.ndarray:
    """First row of each run of equal keys in ``table`` (sorted by them)."""
    n = table.num_rows
    if n == 0:
        return np.zeros(0, dtype=np.int64)
    change = np.zeros(n, dtype=bool)
    change[0] = True
    for k in keys:
        col = table.column(k).combine_chunks()
        if n > 1:
            change[1:] |= _changes(col)
    return np.flatnonzero(change)


def _compute(table: pa.Table, starts: np.ndarray, keys: list[str], cuts, step, correlation):
    """The chunk's groups; an error names ``outcomes``, the function the user called."""
    with named_as(FN, "outcome_dist", "band_odds"):
        return _compute_groups(table, starts, keys, cuts, step, correlation)


def _compute_groups(table, starts, keys, cuts, step, correlation) -> pa.RecordBatch:
    from ..adapters import deal_udfs  # numba's kernels load on the workers, not on import

    n = table.num_rows
    offsets = np.append(starts, n).astype(np.int64)
    lists = pa.array(offsets.astype(np.int32))
    columns = [cf.conform(FN, "amount", table.column(AMOUNT), "DOUBLE"),
               cf.conform(FN, "prob", table.column(PROB), "DOUBLE")]
    groups = len(starts)
    out = {k: as_array(table.column(k).take(pa.array(starts))) for k in keys}
    step_col = pa.array([step] * groups, pa.float64())
    rho_col = pa.array([float(correlation)] * groups, pa.float64())
    if cuts is None:
        pairs = pa.StructArray.from_arrays(columns, names=["amount", "prob"])
        out["outcome"] = deal_udfs.outcome_dist(pa.ListArray.from_arrays(lists, pairs),
                                                step_col, rho_col)
        return pa.RecordBatch.from_pydict(out)
    if isinstance(cuts, str):
        columns.append(cf.conform(FN, "cuts", table.column(CUTS), "DOUBLE[]"))
    else:
        per_group = pa.array([list(cuts)] * groups, pa.list_(pa.float64()))
        columns.append(cf.per_row(per_group, offsets))
    rows = pa.StructArray.from_arrays(columns, names=["amount", "prob", "cuts"])
    shared = step is None and not correlation  # band_odds' own reading, one lattice for both
    out["outcome"], out["band_odds"] = deal_udfs.outcomes_and_bands(
        pa.ListArray.from_arrays(lists, rows), *((None, None) if shared else (step_col, rho_col)))
    return pa.RecordBatch.from_pydict(out)


def _starts_new_group(previous: pa.RecordBatch, batch: pa.RecordBatch, keys: list[str]) -> bool:
    """Whether ``batch`` holds a group start: a key change within it or at its first row."""
    probe = pa.Table.from_batches([previous.slice(previous.num_rows - 1), batch])
    return len(group_starts(probe, keys)) > 1


def group_outcomes(batches: Iterator[pa.RecordBatch], keys: list[str], cuts=None, step=None,
                   correlation: float = 0.0) -> Iterator[pa.RecordBatch]:
    """One row per group of a partition sorted by ``keys``: the keys, ``outcome`` and (with
    ``cuts``: numbers, or the name of a per-row cuts column) ``band_odds``."""
    pending: list[pa.RecordBatch] = []
    rows = 0
    for batch in batches:
        if batch.num_rows == 0:
            continue
        fresh = not pending or _starts_new_group(pending[-1], batch, keys)
        pending.append(batch)
        rows += batch.num_rows
        if rows < CHUNK_ROWS or not fresh:
            continue  # few rows yet, or one group running on: wait for more
        table = pa.Table.from_batches(pending).combine_chunks()
        starts = group_starts(table, keys)
        last = int(starts[-1])
        if last == 0:  # the first batch, all one group
            pending = table.to_batches()
            continue
        yield _compute(table.slice(0, last), starts[:-1], keys, cuts, step, correlation)
        pending = table.slice(last).to_batches()
        rows = table.num_rows - last
    if rows:
        table = pa.Table.from_batches(pending).combine_chunks()
        yield _compute(table, group_starts(table, keys), keys, cuts, step, correlation)
