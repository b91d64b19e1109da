"""Placing a group of deals on a lattice of totals.

The won total of a group is ``S = sum_i a_i * B_i`` with independent
``B_i ~ Bernoulli(p_i)`` (the weighted Poisson-binomial distribution). On a
lattice of step ``h`` every amount becomes an integer offset ``k_i = a_i / h``
and the distribution follows from the recursion
``f_j(s) = (1 - p_j) f_{j-1}(s) + p_j f_{j-1}(s - k_j)`` (see ``recursion.py``).

This module decides, per group, which lattice to use:

* deals with ``p = 0`` or ``a = 0`` change nothing and are dropped; deals with
  ``p = 1`` are certain and are added to the origin exactly, off the lattice;
* the **window**: the totals the lattice must cover. Bernstein's inequality
  (Bernstein 1924; see Boucheron, Lugosi & Massart, *Concentration
  Inequalities*, 2013, eq. 2.10) bounds the mass beyond ``mean +/- t`` by
  ``TAIL`` on each side, with ``t = L*M/3 + sqrt((L*M/3)^2 + 2*L*V)``,
  ``L = ln(1/TAIL)``, ``V`` the variance and ``M`` the largest ``|a_i|``. The
  window is that interval intersected with the support, so it follows the
  spread of the total rather than its range once groups get large;
* the **step**: the exact common unit of the amounts (the largest ``u`` with
  every ``a_i / u`` an integer, searched over up to ``UNIT_DIGITS`` decimal
  places) when the window fits in the exact budget at that unit
  (``exact_budget``: up to EXACT_WORK / n bins for n deals, at most
  EXACT_MAX_BINS); otherwise the finest step that fits the bin budget
  (``inexact_budget``: ``bins``, DEFAULT_BINS, for groups of 100 deals or more,
  up to INEXACT_MAX_BINS for smaller ones), or finer for large groups:
  splitting an amount adds at most ``p h^2 / 4`` to the variance, so the step
  is also kept below ``sqrt(4 * SPLIT_VARIANCE * V / sum(p))`` (at most
  AUTO_MAX_BINS bins), with ``V`` the variance left once the RESOLVE_TOP
  deals of largest variance are fixed (a dominant deal makes two copies of the
  rest of the group, which the step must resolve); when that step is under
  twice the exact unit, the unit is used instead. On an inexact step each amount is split
  between its two neighbouring lattice points with weights that keep its mean
  (``a = (k + f) h`` goes to ``k h`` with weight ``1 - f`` and to ``(k+1) h``
  with weight ``f``), so the lattice total has exactly the mean of the true
  total, and ``rounding`` states the worst-case distance between the two.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

#: Bins the automatic lattice may use for one group's window.
DEFAULT_BINS = 1024
#: An exact lattice keeps every atom of the total (such as "this one large deal
#: is won") where it is, so it may use more bins than an inexact one: up to
#: EXACT_WORK / n bins for n uncertain deals (the recursion's work is about
#: deals x bins: 1M multiply-adds, about a quarter of a millisecond), and at most
#: EXACT_MAX_BINS (512 KB of mass per outcome).
EXACT_WORK = 1 << 20
EXACT_MAX_BINS = 1 << 16
#: An inexact lattice of a smaller group may also use more bins for the same
#: work: up to INEXACT_WORK / n (groups of 100 deals or more keep the bin
#: budget), and at most INEXACT_MAX_BINS.
INEXACT_WORK = 100 * 1024
INEXACT_MAX_BINS = 1 << 13
#: Hard ceiling on the bins of one outcome (32 MiB of mass), whatever the step.
MAX_BINS = 1 << 22
#: Ceiling on the bins the automatic lattice may grow to for large groups.
AUTO_MAX_BINS = 1 << 20
#: Largest share of the variance that splitting amounts may add on the automatic lattice:
#: of the whole group's, and of what is left once its RESOLVE_TOP largest deals are fixed.
SPLIT_VARIANCE = 4e-3
RESOLVE_TOP = 3
#: Mass the window may leave out on each side of the total.
TAIL = 1e-16
LOG_TAIL = math.log(1.0 / TAIL)
#: Decimal places searched for a common unit of the amounts.
UNIT_DIGITS = 6
#: Relative tolerance when asking whether an amount is a multiple of the step.
MULTIPLE_TOL = 1e-9

# Plan status codes (per group)
OK = 0
EMPTY = 1  # no usable deal: the outcome is NULL
TOO_MANY_BINS = 2  # an explicit step would need more than MAX_BINS bins
SCENARIOS = 3  # a small group left to its scenarios (``scenarios.py``), no lattice computed


@njit(cache=True, nogil=True)
def _gcd(x, y):
    while y:
        x, y = y, x % y
    return x


@njit(cache=True, nogil=True)
def common_unit(amount):
    """Largest unit ``u`` (a whole number over a power of ten) dividing every amount.

    Returns ``(u, scale, g)`` with ``u = g / scale`` and ``g`` an integer, or
    ``(0.0, 0.0, 0)`` when no unit with at most ``UNIT_DIGITS`` decimals is
    found. Amounts are compared with a relative tolerance of ``MULTIPLE_TOL``
    so that DECIMAL values converted to DOUBLE (1234.56 -> 1234.5599999...)
    still count as whole cents.
    """
    for digits in range(UNIT_DIGITS + 1):
        scale = 10.0**digits
        g = 0
        ok = True
        for a in amount:
            x = abs(a) * scale
            if x >= 9.0e15:
                ok = False
                break
            r = math.floor(x + 0.5)
            if abs(x - r) > MULTIPLE_TOL * max(1.0, x):
                ok = False
                break
            g = _gcd(g, np.int64(r))
        if ok and g > 0:
            return g / scale, scale, g
    return 0.0, 0.0, 0


@njit(cache=True, nogil=True)
def exact_budget(n, bins):
    """Bins an exact lattice may use for ``n`` uncertain deals."""
    return max(bins, min(EXACT_MAX_BINS, EXACT_WORK // max(n, 1)))


@njit(cache=True, nogil=True)
def inexact_budget(n, bins):
    """Bins an inexact lattice uses for ``n`` uncertain deals."""
    return max(bins, min(INEXACT_MAX_BINS, INEXACT_WORK // max(n, 1)))


@njit(cache=True, nogil=True)
def tail_window(mean, var, largest, lo, hi):
    """Totals outside ``[mean - t, mean + t]`` have mass below TAIL per side."""
    lm = LOG_TAIL * largest / 3.0
    t = lm + math.sqrt(lm * lm + 2.0 * LOG_TAIL * var)
    return max(lo, mean - t), min(hi, mean + t)


@njit(cache=True, nogil=True)
def place_deals(amount, prob, step, exact, units, unit_g, offset, frac):
    """Write each deal's lattice offset ``k`` and split fraction ``f`` at ``step``."""
    for i in range(len(amount)):
        if exact:
            if unit_g > 0:
                x = math.floor(abs(amount[i]) * units + 0.5)
                k = np.int64(x) // unit_g
                offset[i] = k if amount[i] > 0 else -k
            else:
                offset[i] = np.int64(math.floor(amount[i] / step + 0.5))
            frac[i] = 0.0
        else:
            x = amount[i] / step
            k = math.floor(x)
            offset[i] = np.int64(k)
            frac[i] = x - k


@njit(cache=True, nogil=True)
def is_whole(x):
    """Whether ``x`` is a whole number, within the relative tolerance MULTIPLE_TOL.

    The one test of "is a multiple of the step" (``x = amount / step``) that every
    lattice, sum and simulated outcome uses.
    """
    return abs(x - math.floor(x + 0.5)) <= MULTIPLE_TOL * max(1.0, abs(x))


@njit(cache=True, nogil=True)
def is_multiple(amount, step):
    """Whether every amount is a whole multiple of ``step``."""
    for a in amount:
        if not is_whole(a / step):
            return False
    return True


@njit(cache=True, nogil=True)
def group_moments(amount, prob):
    """``mean, var, wins, largest, lo_sum, hi_sum, rest`` of a group of uncertain deals:
    ``wins`` the expected number won, ``largest`` the largest ``|a|``, ``lo_sum`` and
    ``hi_sum`` the negative and positive amounts' sums, and ``rest`` the variance
    left once the RESOLVE_TOP deals of largest variance are fixed (``var`` when
    nothing is left)."""
    n = len(amount)
    mean = 0.0
    var = 0.0
    wins = 0.0
    largest = 0.0
    lo_sum = 0.0
    hi_sum = 0.0
    top = np.zeros(RESOLVE_TOP + 1)  # the largest variance contributions, descending
    for i in range(n):
        a = amount[i]
        p = prob[i]
        mean += a * p
        part = a * a * p * (1.0 - p)
        var += part
        wins += p
        largest = max(largest, abs(a))
        j = RESOLVE_TOP
        top[j] = part
        while j > 0 and top[j] > top[j - 1]:
            top[j], top[j - 1] = top[j - 1], top[j]
            j -= 1
        if a < 0:
            lo_sum += a
        else:
            hi_sum += a
    rest = var - top[:RESOLVE_TOP].sum() if n > RESOLVE_TOP else 0.0
    if rest <= 1e-12 * var:  # nothing left, up to float noise in the subtraction
        rest = var
    return mean, var, wins, largest, lo_sum, hi_sum, rest


@njit(cache=True, nogil=True)
def automatic_step(width, n, var, rest, wins, unit, bins):
    """The automatic lattice's step for ``n`` uncertain deals whose totals span ``width``,
    and whether it is exact: the amounts' ``unit`` (0 when they have none) when the
    window fits the exact budget; otherwise the finest step that fits the inexact
    budget, finer still so that splitting adds under SPLIT_VARIANCE of the variance
    of the group and of its ``rest`` (a dominant deal's "won" and "lost" copies of
    the rest are each as narrow as the rest), at most AUTO_MAX_BINS across; and
    the unit after all when that step comes out under twice it (exactness for at
    most twice the bins)."""
    if unit > 0 and width / unit + 3 <= exact_budget(n, bins):
        return unit, True
    step = width / max(inexact_budget(n, bins) - 8, 1)
    fine = math.sqrt(4.0 * SPLIT_VARIANCE * rest / max(wins, 1e-300))
    step = max(min(step, fine), width / AUTO_MAX_BINS)
    if unit > 0 and step < 2.0 * unit and width / unit <= AUTO_MAX_BINS:
        return unit, True
    return step, False


@njit(cache=True, nogil=True)
def plan_group(amount, prob, step_req, bins, offset, frac):
    """Choose the lattice for one group of active deals (0 < p < 1, a != 0).

    Fills ``offset``/``frac`` and returns
    ``(status, step, exact, lo, size, linear, rounding)``: the lattice covers
    indices ``lo .. lo + size - 1`` (total = index * step); ``linear`` is True
    when that range holds every reachable total (no window cut), False when the
    window cut the support and the total must be folded modulo ``size``.
    """
    n = len(amount)
    mean, var, wins, largest, lo_sum, hi_sum, rest = group_moments(amount, prob)
    w_lo, w_hi = tail_window(mean, var, largest, lo_sum, hi_sum)
    width = w_hi - w_lo

    unit_g = 0
    units = 0.0
    if step_req > 0:
        step = step_req
        exact = is_multiple(amount, step)
    else:
        u, units, unit_g = common_unit(amount)
        step, exact = automatic_step(width, n, var, rest, wins, u, bins)
        if not (u > 0 and width / u + 3 <= exact_budget(n, bins)):
            unit_g = 0  # offsets from amount / step, as on any lattice the budget did not give
    place_deals(amount, prob, step, exact, units, unit_g, offset, frac)

    # The lattice total's own spread (the split adds a little variance).
    lat_var = 0.0
    lat_largest = 0.0
    k_lo = 0
    k_hi = 0
    sum_f = 0.0
    sum_g = 0.0
    for i in range(n):
        k = offset[i]
        f = frac[i]
        p = prob[i]
        up = 1 if f > 0 else 0
        second = p * step * step * ((1.0 - f) * k * k + f * (k + 1) * (k + 1))
        lat_var += second - (amount[i] * p) ** 2
        lat_largest = max(lat_largest, (abs(k) + up) * step)
        k_lo += min(0, k)
        k_hi += max(0, k + up)
        if f > 0:
            sum_f += f
            sum_g += 1.0 - f
    rounding = 0.0 if exact else step * (max(sum_f, sum_g) + 0.5)

    full = k_hi - k_lo + 1
    l_lo, l_hi = tail_window(mean, max(lat_var, 0.0), lat_largest, k_lo * step, k_hi * step)
    lo = np.int64(math.floor(l_lo / step)) - 1
    hi = np.int64(math.ceil(l_hi / step)) + 1
    size = hi - lo + 1
    # Cover every reachable total unless that is much wider than the window
    # (the split can add one index per deal beyond the window's width).
    if full <= 2 * size + n:
        if full > MAX_BINS:
            return TOO_MANY_BINS, step, exact, k_lo, full, True, rounding
        return OK, step, exact, k_lo, full, True, rounding
    if size > MAX_BINS:
        return TOO_MANY_BINS, step, exact, lo, size, False, rounding
    return OK, step, exact, lo, size, False, rounding
