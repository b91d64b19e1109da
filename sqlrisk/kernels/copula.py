"""Exact outcomes under the one-factor Gaussian copula.

Conditional on the shared factor ``Z = z`` the deals are independent with
``p_i(z) = Phi((Phi^-1(p_i) - sqrt(rho) z) / sqrt(1 - rho))``, so the outcome
is the mixture ``sum_j w_j f(. | z_j)`` of conditional lattice distributions
over Gauss-Hermite nodes ``z_j`` (Andersen, Sidenius & Basu, "All your hedges
in one basket", Risk 2003). Every node is computed on one lattice (same step,
same shift), so the mixture is a weighted sum of aligned arrays.

Two scales decide the quadrature. The conditional probabilities change with
``z`` on a scale of ``s = sqrt((1 - rho) / rho)``, and a group's conditional
outcome moves by one standard deviation when ``z`` moves by ``r`` (the
"resolution", ``factor_resolution``), which shrinks like ``1 / sqrt(n)`` for
``n`` deals. While ``rho <= GH_MAX_RHO`` and ``r >= GH_RESOLUTION``, ``NODES``
= 64 Gauss-Hermite nodes (probabilists' weight ``exp(-z^2/2)``) integrate the
mixture to about 1e-10 or better; below ``GH_WIDE`` twice as many do (with 64, a
60-deal group at p = 0.5, rho = 0.2, r = 0.32 was 3e-7 from the adaptive reference;
with 128, 2e-12). Otherwise the factor is integrated by
composite Gauss-Legendre: panels of width ``min(2 min(1, s), 4 r)`` over
``[-Z_MAX, Z_MAX]``, ``PANEL_POINTS`` = 16 points each (about 1e-11 at
rho = 0.5, 1e-16 at rho = 0.8 for small groups, and 1e-8 or better for groups
of a thousand deals). The node count, and the cost, grow like ``1 / s`` and
like ``sqrt(n)``; past ``MAX_NODES`` the function refuses and points to
``outcome_sim``. Each group gets the rule its own resolution asks for
(``rule_key``), so its outcome does not depend on the other groups of a query.
Nodes whose weight is below ``MIN_WEIGHT`` carry no visible mass and are skipped.
``tests/test_correlation.py`` measures the accuracy against SciPy's adaptive quadrature.

Large groups on the automatic lattice (at least ``edgeworth.SMOOTH_MIN_DEALS``
uncertain deals, an independent outcome already read as bins) skip the lattice
per node: each node's conditional total is taken from its cumulants by a
third-order Edgeworth expansion (``edgeworth.py``), used only where the
expansion's own third-order terms stay below ``edgeworth.SMOOTH_TOL`` in
probability; groups with a dominant deal, exact lattices and requested steps
keep the route above (``tests/test_edgeworth.py``).
"""

from __future__ import annotations

import math

import numpy as np
from numpy.polynomial.hermite_e import hermegauss
from numpy.polynomial.legendre import leggauss
from scipy.special import ndtr, ndtri

from . import edgeworth
from .lattice import DEFAULT_BINS, automatic_step, common_unit, group_moments
from .outcome import OK, exact_outcomes, splice
from .ragged import group_deals
from .readout import is_smooth

NODES = 64
GH_MAX_RHO = 0.25
#: Gauss-Hermite is used only while conditional outcomes are wider than this in z.
GH_RESOLUTION = 0.3
#: Below this resolution Gauss-Hermite uses 2 * NODES nodes.
GH_WIDE = 0.45
#: Most quadrature nodes (each costs one lattice computation of the group).
MAX_NODES = 8192
PANEL_POINTS = 16
Z_MAX = 8.5
MIN_WEIGHT = 1e-20
#: Conditional probabilities are kept inside (0, 1) so a deal never changes
#: from uncertain to certain between nodes (which would move the lattice).
P_FLOOR = 1e-300
P_CEIL = 1.0 - 2.0**-53


def nodes(rho: float, resolution: float = math.inf) -> tuple[np.ndarray, np.ndarray]:
    """Quadrature nodes and weights for E[g(Z)], Z standard normal, at correlation rho.

    ``resolution`` is the factor step over which the conditional outcome moves
    by about one standard deviation (``group_resolutions``); panels are kept
    to four such steps so a large group's narrow conditional outcomes are
    integrated, not sampled at a few points.
    """
    panels = rule_key(rho, resolution)
    if panels <= 0:
        z, w = hermegauss(NODES if panels == 0 else 2 * NODES)
        w = w / math.sqrt(2.0 * math.pi)
    else:
        if panels * PANEL_POINTS > MAX_NODES:
            raise ValueError(
                f"correlation {rho:g} on a group this large needs {panels * PANEL_POINTS:,} "
                f"quadrature nodes (limit {MAX_NODES:,}); use outcome_sim for it")
        edges = np.linspace(-Z_MAX, Z_MAX, panels + 1)
        x, v = leggauss(PANEL_POINTS)
        half = (edges[1:] - edges[:-1])[:, None] / 2.0
        z = (half * x + (edges[1:] + edges[:-1])[:, None] / 2.0).ravel()
        w = (half * v).ravel() * np.exp(-0.5 * z * z) / math.sqrt(2.0 * math.pi)
    keep = w > MIN_WEIGHT
    return z[keep], w[keep]


def group_resolutions(amount, prob, offsets, rho: float) -> np.ndarray:
    """Per group, the smallest factor step over which its conditional mean moves by one
    conditional standard deviation: sd(z) / |d mean / dz| over z in [-6, 6] (inf for a
    group that does not move)."""
    grid = np.linspace(-6.0, 6.0, 49)
    inner = (prob > 0) & (prob < 1)
    threshold = np.zeros(len(prob))
    threshold[inner] = ndtri(prob[inner])
    load, rest = math.sqrt(rho), math.sqrt(1.0 - rho)
    best = np.full(len(offsets) - 1, math.inf)
    for z in grid:
        arg = (threshold - load * z) / rest
        p = np.where(inner, ndtr(arg), prob)
        slope = np.where(inner, amount * load / rest * np.exp(-0.5 * arg * arg) /
                         math.sqrt(2.0 * math.pi), 0.0)
        var = np.add.reduceat(amount * amount * p * (1.0 - p), offsets[:-1])
        move = np.abs(np.add.reduceat(slope, offsets[:-1]))
        ok = (move > 0) & (var > 0)
        best[ok] = np.minimum(best[ok], np.sqrt(var[ok]) / move[ok])
    return best


def factor_resolution(amount, prob, offsets, rho: float) -> float:
    """The smallest of ``group_resolutions``: the finest rule any of the groups needs."""
    return float(np.min(group_resolutions(amount, prob, offsets, rho), initial=math.inf))


def rule_key(rho: float, resolution: float) -> int:
    """Which quadrature rule ``nodes`` gives: 0 for NODES Gauss-Hermite nodes, -1 for twice
    as many, else the panel count. Groups with one key share their nodes exactly."""
    if rho <= GH_MAX_RHO and resolution >= GH_RESOLUTION:
        return 0 if resolution >= GH_WIDE else -1
    width = min(2.0 * min(1.0, math.sqrt((1.0 - rho) / rho)), 4.0 * resolution)
    return int(math.ceil(2.0 * Z_MAX / width))


def conditional(prob: np.ndarray, rho: np.ndarray, z: float) -> np.ndarray:
    """Win probabilities given the factor value ``z`` (``rho`` per deal)."""
    inner = (prob > 0) & (prob < 1) & (rho > 0)
    out = prob.copy()
    threshold = ndtri(prob[inner])
    r = rho[inner]
    out[inner] = np.clip(ndtr((threshold - np.sqrt(r) * z) / np.sqrt(1.0 - r)), P_FLOOR, P_CEIL)
    return out


def correlated_outcomes(amount, prob, offsets, rho, step_req=None, bins: int = DEFAULT_BINS):
    """Exact outcomes of groups of deals under the one-factor Gaussian copula.

    ``rho[g]`` is the group's correlation in [0, 1); groups with ``rho = 0``
    get exactly the independent outcome. Returns ``(OutcomeBatch, status)``.
    """
    amount = np.ascontiguousarray(amount, dtype=np.float64)
    prob = np.ascontiguousarray(prob, dtype=np.float64)
    offsets = np.ascontiguousarray(offsets, dtype=np.int64)
    n_groups = len(offsets) - 1
    step_req = np.zeros(n_groups) if step_req is None else np.nan_to_num(
        np.asarray(step_req, dtype=np.float64), nan=0.0)
    rho = np.asarray(rho, dtype=np.float64)
    base, status = exact_outcomes(amount, prob, offsets, step_req, bins)
    todo = (rho > 0) & (status == OK) & (np.diff(base.offsets) > 1)
    base, smooth = _smooth_groups(amount, prob, offsets, rho, step_req, bins, base, todo)
    todo &= ~smooth
    for value, resolution, groups in _rule_sets(amount, prob, offsets, rho, todo):
        a, p, sub_offsets = group_deals(amount, prob, offsets, groups)
        rho_rows = np.full(len(a), value)
        z, w = nodes(value, resolution)
        covers = (np.diff(base.offsets)[groups] - 1) * base.step[groups]
        steps = _steps_for_mixture(a, p, rho_rows, sub_offsets, step_req[groups], bins, z,
                                   base.step[groups], covers)
        automatic = step_req[groups] <= 0  # the nodes of these snap where the base did
        base = splice(base, groups, _mix(a, p, rho_rows, sub_offsets, steps, z, w, automatic))
    return base, status


def _rule_sets(amount, prob, offsets, rho, todo):
    """``(rho, resolution, groups)`` for each set of the groups in ``todo`` that share a rho
    and a quadrature rule: each group gets the rule its own deals need, whatever other
    groups are in the batch (so its outcome does not depend on them)."""
    sets = []
    for value in np.unique(rho[todo]):
        groups = np.flatnonzero(todo & (rho == value))
        res = group_resolutions(*group_deals(amount, prob, offsets, groups), float(value))
        keys = np.array([rule_key(float(value), r) for r in res])
        for key in np.unique(keys):
            pick = keys == key
            sets.append((float(value), float(res[pick].min()), groups[pick]))
    return sets


def _smooth_groups(amount, prob, offsets, rho, step_req, bins, base, todo):
    """``base`` with the large groups the Edgeworth route (``edgeworth.py``) computes
    within ``SMOOTH_TOL`` replaced, and a mask of them. Only groups on the automatic
    lattice whose independent outcome is already read as bins (amounts split between
    points) qualify: an exact lattice stays exact."""
    done = np.zeros(len(todo), dtype=bool)
    rows = []
    for g in np.flatnonzero(todo & (step_req <= 0)):
        a, p = amount[offsets[g]:offsets[g + 1]], prob[offsets[g]:offsets[g + 1]]
        uncertain = np.count_nonzero((a != 0) & (p > 0) & (p < 1))
        if not is_smooth(base.step[g], base.rounding[g]) or uncertain < edgeworth.SMOOTH_MIN_DEALS:
            continue
        group = np.array([0, len(a)], dtype=np.int64)
        z, w = nodes(float(rho[g]), factor_resolution(a, p, group, float(rho[g])))
        found = edgeworth.smooth_outcome(a, p, float(rho[g]), z, w, bins)
        if found is not None and found[4] <= edgeworth.SMOOTH_TOL:
            done[g] = True
            rows.append(found[:4])
    if not done.any():
        return base, done
    return splice(base, np.flatnonzero(done), rows), done


def _steps_for_mixture(a, p, rho_rows, offsets, step_req, bins, z, base_step, base_span):
    """A step per group that holds the conditional outcomes at the extreme nodes.

    When the independent outcome's lattice already spans every reachable total
    (small groups), its step is kept, so the correlated outcome tends to the
    independent one as rho goes to 0.
    """
    steps = step_req.copy()
    todo = []
    for g in range(len(steps)):
        if steps[g] > 0:
            continue
        chunk = a[offsets[g]:offsets[g + 1]]
        live = (chunk != 0) & (p[offsets[g]:offsets[g + 1]] > 0) & (p[offsets[g]:offsets[g + 1]] < 1)
        reach = float(np.abs(chunk[live]).sum())
        if base_step[g] > 0 and base_span[g] >= reach - base_step[g] * (live.sum() + 2):
            steps[g] = base_step[g]
        else:
            todo.append(g)
    if not todo:
        return steps  # the extreme nodes are only needed to size a new lattice
    lo_end, _ = exact_outcomes(a, conditional(p, rho_rows, z[-1]), offsets, step_req, bins,
                               flip=False)
    hi_end, _ = exact_outcomes(a, conditional(p, rho_rows, z[0]), offsets, step_req, bins,
                               flip=False)
    for g in todo:
        low = min(lo_end.origin[g], hi_end.origin[g])
        high = max(lo_end.origin[g] + lo_end.step[g] * (len(lo_end.row(g)) - 1),
                   hi_end.origin[g] + hi_end.step[g] * (len(hi_end.row(g)) - 1))
        width = max(high - low, 0.0)
        chunk = a[offsets[g]:offsets[g + 1]]
        chance = p[offsets[g]:offsets[g + 1]]
        live = (chunk != 0) & (chance > 0) & (chance < 1)
        unit = common_unit(chunk[live])[0] if live.any() else 0.0
        _, var, wins, _, _, _, rest = group_moments(chunk[live], chance[live])
        steps[g] = automatic_step(width, int(live.sum()), var, rest, wins, unit, bins)[0]
    return steps


def _mix(a, p, rho_rows, offsets, steps, z, w, automatic):
    """Weighted sum over nodes of the conditional outcomes, all on ``steps``.

    Every node shares the step and the certain deals, so node origins differ by
    whole steps; each is placed at its offset from the first node's origin.
    """
    n = len(offsets) - 1
    acc: list[np.ndarray | None] = [None] * n
    ref = np.zeros(n)
    first = np.zeros(n, dtype=np.int64)
    batch = None
    for zz, ww in zip(z, w):
        batch, status = exact_outcomes(a, conditional(p, rho_rows, zz), offsets, steps,
                                       snap_explicit=automatic, flip=False)
        if (status != OK).any():
            raise ValueError("correlated outcome: a conditional lattice failed")
        for g in range(n):
            mass = batch.row(g) * ww
            if acc[g] is None:
                acc[g] = mass.copy()
                ref[g] = batch.origin[g]
                continue
            index = int(round((batch.origin[g] - ref[g]) / batch.step[g]))
            lo = min(first[g], index)
            hi = max(first[g] + len(acc[g]), index + len(mass))
            if lo != first[g] or hi != first[g] + len(acc[g]):
                grown = np.zeros(hi - lo)
                grown[first[g] - lo:first[g] - lo + len(acc[g])] = acc[g]
                acc[g] = grown
                first[g] = lo
            start = index - first[g]
            acc[g][start:start + len(mass)] += mass
    return [(ref[g] + first[g] * batch.step[g], batch.step[g], acc[g] / acc[g].sum(),
             batch.rounding[g]) for g in range(n)]
