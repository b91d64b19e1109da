"""A batch of outcomes as flat arrays, and building one from deals.

An outcome is the distribution of a total on a lattice:
``P(total = origin + i * step) = mass[i]``. ``trials`` is 0 for an exact
outcome and the number of simulated totals otherwise; ``rounding`` bounds
``|true total - lattice total|`` (0 when every amount sat on the lattice).
"""

from __future__ import annotations

import os
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

import numpy as np

from .lattice import DEFAULT_BINS, EMPTY, MAX_BINS, OK, SCENARIOS, TOO_MANY_BINS
from .lattice import tail_window as window
from .order import canonical_order
from .ragged import ranges
from .recursion import LatticeBatch, exact_batch, fill, new_plan, plan_batch
from .scenarios import SNAP_DEALS
from .spectral import fold_group
from .sums import sum_outcomes

#: Groups of at least this many deals are computed as pooled leaves (see ``_pooled``).
POOL_MIN_DEALS = 4096
#: Threads one batch of groups is split between, and the fewest deals worth it.
THREADS = min(2, os.cpu_count() or 1)
PARALLEL_MIN_DEALS = 20_000
#: Deals per leaf of the pooled computation.
LEAF_DEALS = 256

__all__ = ["OutcomeBatch", "concat", "exact_outcomes", "put_rows", "splice", "EMPTY", "OK",
           "SCENARIOS", "TOO_MANY_BINS"]


@dataclass
class OutcomeBatch:
    """Outcomes of many groups: row ``g`` has mass ``mass[offsets[g]:offsets[g+1]]``.

    ``valid[g]`` is False for a group with no usable deal (a NULL outcome).
    """

    origin: np.ndarray
    step: np.ndarray
    mass: np.ndarray
    offsets: np.ndarray
    trials: np.ndarray
    rounding: np.ndarray
    valid: np.ndarray

    def __len__(self) -> int:
        return len(self.origin)

    def row(self, g: int) -> np.ndarray:
        return self.mass[self.offsets[g]:self.offsets[g + 1]]



def concat(parts: list["OutcomeBatch"]) -> "OutcomeBatch":
    """Rows of several batches, in order, as one batch."""
    if len(parts) == 1:
        return parts[0]
    lengths = np.concatenate([np.diff(b.offsets) for b in parts])
    return OutcomeBatch(
        np.concatenate([b.origin for b in parts]),
        np.concatenate([b.step for b in parts]),
        np.concatenate([b.mass for b in parts]),
        np.concatenate([[0], np.cumsum(lengths)]).astype(np.int64),
        np.concatenate([b.trials for b in parts]),
        np.concatenate([b.rounding for b in parts]),
        np.concatenate([b.valid for b in parts]),
    )


def exact_outcomes(amount, prob, offsets, step_req=None, bins: int = DEFAULT_BINS,
                   scenario_max: int = 0, snap_max: int = SNAP_DEALS, snap_explicit=None,
                   flip: bool = True):
    """Exact outcome of every group of deals.

    Parameters
    ----------
    amount, prob : float64 arrays of the usable deals (no NULL, p in [0, 1]),
        groups back to back.
    offsets : int64 array, ``len(groups) + 1``.
    step_req : float64 array per group, ``<= 0`` or NaN for the automatic lattice.
    bins : the automatic lattice's bin budget.
    scenario_max : groups of at most this many uncertain deals whose lattice would
        not be exact get status SCENARIOS (and an invalid row): the caller answers
        them from their scenarios (``scenarios.py``).
    snap_max : groups of at most this many uncertain deals whose automatic lattice
        would not be exact have their scenario totals snapped to a fine lattice;
        on a requested step too for the groups where ``snap_explicit`` (a boolean
        array) is True (the correlated mixture's nodes, which must share their points).
    flip : deals more likely won than lost enter the lattice as a certain amount
        less a possible loss (``recursion.exact_batch``); off where outcomes
        computed with other probabilities must share their points (the
        correlated mixture).

    Returns
    -------
    (OutcomeBatch, status) with ``status[g]`` one of OK, EMPTY, TOO_MANY_BINS, SCENARIOS.

    Examples
    --------
    >>> import numpy as np
    >>> out, _ = exact_outcomes(np.array([100.0, 200.0]), np.array([0.5, 0.5]),
    ...                         np.array([0, 2]))
    >>> out.origin[0], out.step[0], out.row(0).tolist()
    (0.0, 100.0, [0.25, 0.25, 0.25, 0.25])
    """
    amount = np.ascontiguousarray(amount, dtype=np.float64)
    prob = np.ascontiguousarray(prob, dtype=np.float64)
    offsets = np.ascontiguousarray(offsets, dtype=np.int64)
    n_groups = len(offsets) - 1
    if step_req is None:
        step_req = np.zeros(n_groups)
    step_req = np.nan_to_num(np.asarray(step_req, dtype=np.float64), nan=0.0)
    counts = np.diff(offsets)
    pooled = np.flatnonzero(counts >= POOL_MIN_DEALS)
    snap_explicit = (np.zeros(n_groups, dtype=bool) if snap_explicit is None
                     else np.asarray(snap_explicit, dtype=bool))
    limits = (int(scenario_max), int(snap_max), snap_explicit, bool(flip))
    if not len(pooled):
        return _direct(amount, prob, offsets, step_req, bins, *limits)
    # Large groups skip the one-lattice plan: their rows go to _pooled.
    direct = np.ones(n_groups, dtype=bool)
    direct[pooled] = False
    rows = np.repeat(direct, counts)
    direct_offsets = np.concatenate([[0], np.cumsum(np.where(direct, counts, 0))]).astype(np.int64)
    batch, status = _direct(amount[rows], prob[rows], direct_offsets, step_req, bins, *limits)
    parts = _pooled_groups(amount, prob, offsets, pooled, bins, step_req)
    wide = np.array([part is None for part in parts], dtype=bool)
    batch = splice(batch, pooled, [(0.0, float(step_req[g]), np.ones(1), 0.0) if part is None
                                   else part for g, part in zip(pooled, parts)])
    status[pooled] = np.where(wide, TOO_MANY_BINS, OK)
    batch.valid[pooled] = ~wide
    return batch, status


def _pooled_groups(amount, prob, offsets, pooled, bins, step_req):
    """``_pooled`` of each group in ``pooled``, the groups shared between THREADS threads
    (each group is computed on its own, so the numbers do not depend on the split)."""
    def one(g):
        return _pooled(amount[offsets[g]:offsets[g + 1]], prob[offsets[g]:offsets[g + 1]], bins,
                       float(step_req[g]))
    if THREADS < 2 or len(pooled) < 2:
        return [one(g) for g in pooled]
    with ThreadPoolExecutor(THREADS) as pool:
        return list(pool.map(one, pooled))


def _direct(amount, prob, offsets, step_req, bins, scenario_max=0, snap_max=0,
            snap_explicit=None, flip=True):
    """Every group on its own lattice: the batched recursion, then the folded FFT
    path for the groups whose window cut their support."""
    n_groups = len(offsets) - 1
    if snap_explicit is None:
        snap_explicit = np.zeros(n_groups, dtype=bool)
    plan = _exact_batch_threads(amount, prob, offsets, step_req, int(bins), scenario_max,
                                snap_max, snap_explicit, flip)
    mass, mass_offsets = plan.mass, plan.mass_offsets
    for g in np.flatnonzero((plan.status == OK) & ~plan.linear):
        deals = slice(plan.act_start[g], plan.act_stop[g])
        mass[mass_offsets[g]:mass_offsets[g + 1]] = fold_group(
            plan.offset[deals], plan.frac[deals], plan.prob[deals], int(plan.lo[g]),
            int(mass_offsets[g + 1] - mass_offsets[g]))
    batch = OutcomeBatch(plan.origin, plan.step, mass, mass_offsets,
                         np.zeros(n_groups, np.int64), plan.rounding, plan.status == OK)
    return batch, plan.status


def _exact_batch_threads(amount, prob, offsets, step_req, bins, scenario_max, snap_max,
                         snap_explicit, flip) -> LatticeBatch:
    """``exact_batch`` with the groups split between THREADS threads.

    The kernels release the GIL, and every group is computed on its own, so the
    parts give the same numbers as one call would. The parts plan into slices of one
    set of arrays, then fill their groups' slices of one mass array: nothing is
    copied to put them back together.
    """
    n_groups = len(offsets) - 1
    if THREADS < 2 or n_groups < 2 * THREADS or offsets[-1] < PARALLEL_MIN_DEALS:
        return exact_batch(amount, prob, offsets, step_req, bins, scenario_max, snap_max,
                           snap_explicit, flip)
    cuts = np.searchsorted(offsets, np.linspace(0, offsets[-1], THREADS + 1)[1:-1])
    bounds = [0, *sorted(set(int(c) for c in cuts if 0 < c < n_groups)), n_groups]
    parts = [(g0, g1, int(offsets[g0]), int(offsets[g1]))
             for g0, g1 in zip(bounds[:-1], bounds[1:])]
    plan = new_plan(n_groups, len(amount))
    (status, origin, step, exact, rounding, linear, lo, size, act_amount, act_prob, act_offset,
     act_frac, act_start, act_stop, snapped, snap_origin) = plan

    def groups(g0, g1):
        return [x[g0:g1] for x in (status, origin, step, exact, rounding, linear, lo, size)]

    def deals(r0, r1):
        return [x[r0:r1] for x in (act_amount, act_prob, act_offset, act_frac)]

    def plan_part(part):
        g0, g1, r0, r1 = part
        plan_batch(amount[r0:r1], prob[r0:r1], offsets[g0:g1 + 1] - r0, step_req[g0:g1], bins,
                   scenario_max, snap_max, snap_explicit[g0:g1], flip, *groups(g0, g1),
                   *deals(r0, r1), act_start[g0:g1], act_stop[g0:g1], snapped[g0:g1],
                   snap_origin[g0:g1])

    mass_offsets = np.zeros(n_groups + 1, np.int64)

    def fill_part(part):
        g0, g1, r0, r1 = part
        fill(mass, mass_offsets[g0:g1 + 1], status[g0:g1], step[g0:g1], exact[g0:g1],
             rounding[g0:g1], linear[g0:g1], lo[g0:g1], snapped[g0:g1], snap_origin[g0:g1],
             act_amount[r0:r1], act_offset[r0:r1], act_frac[r0:r1], act_prob[r0:r1],
             act_start[g0:g1], act_stop[g0:g1])

    with ThreadPoolExecutor(len(parts)) as pool:
        list(pool.map(plan_part, parts))
        np.cumsum(size, out=mass_offsets[1:])
        mass = np.zeros(mass_offsets[-1])
        list(pool.map(fill_part, parts))
    for g0, g1, r0, _ in parts:  # each part counted its deals from its own first row
        act_start[g0:g1] += r0
        act_stop[g0:g1] += r0
    return LatticeBatch(status, origin, step, exact, rounding, linear, lo, mass_offsets, mass,
                        act_offset, act_frac, act_prob, act_start, act_stop)


#: Fewest small groups a reader splits between threads (each costs about a microsecond).
PARALLEL_MIN_GROUPS = 512


def small_groups_threads(kernel, amount, prob, offsets, groups, values, value_offsets):
    """``kernel(amount, prob, offsets, groups, values, value_offsets)`` (``scenarios``'
    ``bands_small`` or ``quantiles_small``: answers of each group back to back) with the
    groups split between THREADS threads; every group is answered on its own, so the
    parts give the same numbers as one call."""
    n = len(groups)
    if THREADS < 2 or n < PARALLEL_MIN_GROUPS:
        return kernel(amount, prob, offsets, groups, values, value_offsets)
    bounds = np.linspace(0, n, THREADS + 1).astype(np.int64)
    parts = [(amount, prob, offsets, groups[g0:g1],
              values[value_offsets[g0]:value_offsets[g1]],
              value_offsets[g0:g1 + 1] - value_offsets[g0])
             for g0, g1 in zip(bounds[:-1], bounds[1:])]
    with ThreadPoolExecutor(len(parts)) as pool:
        return np.concatenate(list(pool.map(lambda args: kernel(*args), parts)))


def _pooled(amount: np.ndarray, prob: np.ndarray, bins: int, step: float = 0.0):
    """A large group as the sum of leaves of LEAF_DEALS deals each.

    Putting every deal of a large group on one lattice fine enough for its
    small amounts would need a very wide lattice (the total's window is many
    times the amounts). Instead the deals, in canonical order, are dealt out
    round-robin into leaves, so every leaf has a similar mix of sizes and a
    similar step; each leaf gets its own automatic lattice (one batched kernel
    call), and ``sums.sum_outcomes`` adds the leaves up. With an explicit
    ``step`` every leaf, and the sum, use that step (the same lattice as one
    recursion over all the deals, without its cost). Returns
    ``(origin, step, mass, rounding)``, or None when an explicit step would need
    more than MAX_BINS bins.
    """
    order = canonical_order(amount, prob)
    leaves = max(1, len(order) // LEAF_DEALS)
    pick = _deal_out(order, leaves)
    counts = np.bincount(np.arange(len(order)) % leaves, minlength=leaves)
    leaf_offsets = np.concatenate([[0], np.cumsum(counts)]).astype(np.int64)
    a, p = amount[pick], prob[pick]
    starts = leaf_offsets[:-1]
    uncertain = (p > 0) & (p < 1)
    mean = np.add.reduceat(a * p, starts)
    var = np.add.reduceat(a * a * p * (1 - p), starts)
    largest = np.maximum.reduceat(np.where(uncertain, np.abs(a), 0.0), starts)
    if step > 0:
        lo, hi = window(float(mean.sum()), float(var.sum()), float(largest.max()), -np.inf, np.inf)
        if (hi - lo) / step + 3 > MAX_BINS:
            return None
    batch, status = _direct(a, p, leaf_offsets, np.full(leaves, max(step, 0.0)), bins)
    if (status == TOO_MANY_BINS).any():
        return None
    return sum_outcomes(batch.origin, batch.step, batch.mass, batch.offsets, batch.rounding,
                        mean, var, largest, workers=THREADS, step_fixed=max(step, 0.0),
                        coarsen=True)


def _deal_out(order: np.ndarray, leaves: int) -> np.ndarray:
    """Deal ``order`` round-robin into ``leaves`` leaves, each leaf's deals in order."""
    leaf_of = np.arange(len(order)) % leaves
    return order[np.argsort(leaf_of, kind="stable")]


def splice(base: OutcomeBatch, groups, rows) -> OutcomeBatch:
    """``base`` with the rows ``groups`` replaced by ``(origin, step, mass, rounding)`` tuples."""
    lengths = np.diff(base.offsets).copy()
    replaced = {int(g): r for g, r in zip(groups, rows)}
    for g, r in replaced.items():
        lengths[g] = len(r[2])
    offsets = np.concatenate([[0], np.cumsum(lengths)]).astype(np.int64)
    mass = np.empty(offsets[-1])
    origin = base.origin.copy()
    step = base.step.copy()
    rounding = base.rounding.copy()
    for g in range(len(base)):
        if g in replaced:
            origin[g], step[g], row, rounding[g] = replaced[g]
        else:
            row = base.row(g)
        mass[offsets[g]:offsets[g + 1]] = row
    return OutcomeBatch(origin, step, mass, offsets, base.trials, rounding, base.valid)


def put_rows(base: OutcomeBatch, groups: np.ndarray, part: OutcomeBatch) -> OutcomeBatch:
    """``base`` with its rows ``groups`` (increasing) replaced by the rows of ``part``, in
    order (``splice`` takes the new rows as tuples and keeps ``trials`` and ``valid``)."""
    lengths = np.diff(base.offsets)
    lengths_new = lengths.copy()
    lengths_new[groups] = np.diff(part.offsets)
    offsets = np.concatenate([[0], np.cumsum(lengths_new)]).astype(np.int64)
    kept = np.ones(len(base), dtype=bool)
    kept[groups] = False
    mass = np.empty(offsets[-1])
    mass[ranges(offsets[:-1][kept], lengths[kept])] = \
        base.mass[ranges(base.offsets[:-1][kept], lengths[kept])]
    mass[ranges(offsets[:-1][groups], lengths_new[groups])] = part.mass
    columns = []
    for name in ("origin", "step", "trials", "rounding", "valid"):
        column = getattr(base, name).copy()
        column[groups] = getattr(part, name)
        columns.append(column)
    origin, step, trials, rounding, valid = columns
    return OutcomeBatch(origin, step, mass, offsets, trials, rounding, valid)
