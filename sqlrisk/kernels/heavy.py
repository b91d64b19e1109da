"""Band odds of groups whose likeliest scenarios carry much of the probability.

A group of many deals stated at 0.95 or 0.05 is lumpy however many deals it has:
"every deal goes its likelier way" may carry a third of the probability, and
each "all but one" scenario a percent. An inexact lattice spreads every such
total over a bin, so a cut on it is read half its mass wrong. For the
aggregates, which read a group at known cuts, those scenarios are taken out of
the lattice and read exactly:

    P(S < c) = sum over heavy scenarios F of P(F) 1{total(F) < c}
               + P_lattice(S < c) with the heavy scenarios' lattice images removed.

In the lattice's own terms (``order.activate`` with ``flip``) every uncertain
deal has ``p <= 1/2``; a scenario is the set ``F`` of deals that go their less
likely way, ``P(F) = P(no deal does) * prod over F of p / (1 - p)``, so the
scenarios at least HEAVY_MASS likely are found depth first, deals in falling
order of ``p / (1 - p)``, pruning a branch once it falls below (at most
1 / HEAVY_MASS of them). On the lattice, deal ``i`` sits at ``k_i`` or
``k_i + 1`` (split fraction ``f_i``), so scenario ``F``'s image is the sum of
``k_i`` plus a Poisson-binomial count with the ``f_i`` of ``F``: removing it is
exact, not an approximation. What is left is light: every remaining scenario
below HEAVY_MASS.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from .accuracy import blur_error, lattice_noise
from .lattice import OK, plan_group
from .order import activate
from .readout import prob_below, write_bands
from .scenarios import tolerance

#: Scenarios at least this likely are read exactly.
HEAVY_MASS = 1e-4
#: Groups whose likeliest scenario is at least this likely (so has heavy scenarios) are read this way.
LUMPY_MASS = HEAVY_MASS


@njit(cache=True, nogil=True)
def likeliest_mass(prob):
    """Probability of the likeliest scenario: every deal goes its likelier way."""
    out = 1.0
    for p in prob:
        out *= max(p, 1.0 - p)
    return out


@njit(cache=True, nogil=True)
def lumpy_groups(prob, offsets):
    """Groups whose likeliest scenario carries at least LUMPY_MASS."""
    n = len(offsets) - 1
    out = np.zeros(n, np.bool_)
    for g in range(n):
        out[g] = likeliest_mass(prob[offsets[g]:offsets[g + 1]]) >= LUMPY_MASS
    return out


@njit(cache=True, nogil=True)
def _count_image(f, path, depth):
    """Distribution of the number of deals of ``path`` placed one point up (split fractions f)."""
    out = np.zeros(depth + 1)
    out[0] = 1.0
    for d in range(depth):
        q = f[path[d]]
        for j in range(d + 1, 0, -1):
            out[j] = out[j] * (1.0 - q) + out[j - 1] * q
        out[0] *= 1.0 - q
    return out


@njit(cache=True, nogil=True)
def split_heavy(a, k, f, p, light, first):
    """Remove every heavy scenario's image from ``light`` (the lattice's mass, point ``i`` at
    index ``first + i``); returns the heavy scenarios' totals (sorted) and cumulative mass."""
    m = len(p)
    ratio = p / (1.0 - p)
    order = np.argsort(-ratio)
    base = 1.0
    for q in p:
        base *= 1.0 - q
    cap = int(1.0 / HEAVY_MASS) + 2
    totals = np.empty(cap)
    chance = np.empty(cap)
    count = 0
    path = np.empty(m + 1, np.int64)
    nxt = np.zeros(m + 2, np.int64)
    prob = np.zeros(m + 2)
    total = np.zeros(m + 2)
    index = np.zeros(m + 2, np.int64)
    depth = 0
    prob[0] = base
    if base >= HEAVY_MASS:
        totals[0] = 0.0
        chance[0] = base
        count = 1
        light[-first] -= base
    while depth >= 0 and base >= HEAVY_MASS:
        idx = nxt[depth]
        if idx >= m:
            depth -= 1
            continue
        i = order[idx]
        nxt[depth] = idx + 1
        child = prob[depth] * ratio[i]
        if child < HEAVY_MASS or count >= cap:
            nxt[depth] = m  # later deals have smaller ratios: none of them qualifies either
            continue
        path[depth] = i
        depth += 1
        nxt[depth] = idx + 1
        prob[depth] = child
        total[depth] = total[depth - 1] + a[i]
        index[depth] = index[depth - 1] + k[i]
        totals[count] = total[depth]
        chance[count] = child
        count += 1
        image = _count_image(f, path, depth)
        for j in range(depth + 1):
            light[index[depth] + j - first] -= child * image[j]
    for j in range(len(light)):
        light[j] = max(light[j], 0.0)
    sort = np.argsort(totals[:count])
    cum = np.zeros(count + 1)
    for j in range(count):
        cum[j + 1] = cum[j] + chance[sort[j]]
    return totals[:count][sort], cum


@njit(cache=True, nogil=True)
def _light_part(amount, prob, lo, hi, light, bins):
    """The deals ``amount[lo:hi]``'s heavy scenarios taken out of ``light`` (a copy of
    their lattice's mass, changed in place) when their lattice is the one ``plan_group``
    plans; returns the heavy totals (sorted), their cumulative mass and the certain shift
    (none when the lattice is another one: ``light`` is then left whole)."""
    a = np.empty(hi - lo)
    p = np.empty(hi - lo)
    m, certain, flipped = activate(amount[lo:hi], prob[lo:hi], True, a, p)
    a, p = a[:m], p[:m]
    k = np.zeros(m, np.int64)
    f = np.zeros(m)
    st, h, _ex, first, size, linear, _rnd = plan_group(a, p, 0.0, bins, k, f)
    if st == OK and linear and size == len(light):
        totals, cum = split_heavy(a, k, f, p, light, first)
        return totals, cum, certain + flipped
    return np.zeros(0), np.zeros(1), certain + flipped


@njit(cache=True, nogil=True)
def bands_heavy(amount, prob, offsets, groups, origin, step, mass, mass_offsets, rounding,
                cuts, cut_offsets, bins):
    """Band probabilities of the lumpy groups ``groups`` (rows of a lattice batch whose
    deals are ``amount[offsets[g]:offsets[g + 1]]``), heavy scenarios read exactly."""
    out = np.empty(len(cuts) + len(groups))
    pos = 0
    for n, g in enumerate(groups):
        light = mass[mass_offsets[g]:mass_offsets[g + 1]].copy()
        heavy_totals, heavy_cum, shift = _light_part(amount, prob, offsets[g], offsets[g + 1],
                                                     light, bins)
        cum = np.cumsum(light)
        top = origin[g] + (len(cum) - 1) * step[g]
        below = np.empty(cut_offsets[n + 1] - cut_offsets[n])
        for c in range(len(below)):
            x = cuts[cut_offsets[n] + c]
            edge = x - tolerance(x, origin[g], top) - shift
            below[c] = heavy_cum[np.searchsorted(heavy_totals, edge)]
            below[c] += prob_below(origin[g], step[g], cum, rounding[g], x)
        pos = write_bands(below, 1.0, out, pos)
    return out


@njit(cache=True, nogil=True)
def error_heavy(amount, prob, offsets, groups, step, mass, mass_offsets, rounding, bins):
    """How far ``bands_heavy``'s probabilities of the lumpy groups ``groups`` can be from the
    true ones (``odds_error``).

    The heavy scenarios are read exactly, so only the light part's reading errs: the
    lattice image of every light scenario is the scenario's total plus the same mean-zero
    split noise as the whole outcome's, so ``accuracy.blur_error`` bounds it as it bounds a
    whole outcome, on the light mass (its slope, and the blurred lumps it still holds:
    light scenarios each below HEAVY_MASS, but many may sit together) with the whole
    outcome's noise bound. Without the heavy totals this is the whole outcome's
    ``outcome_error``, which counts each heavy total as blurred: the light estimate is
    smaller by about their mass, never by more than the heavy reading gains."""
    out = np.empty(len(groups))
    for n, g in enumerate(groups):
        whole = mass[mass_offsets[g]:mass_offsets[g + 1]]
        light = whole.copy()
        _light_part(amount, prob, offsets[g], offsets[g + 1], light, bins)
        out[n] = blur_error(light, lattice_noise(step[g], whole, rounding[g]))
    return out
