"""How far a probability read off an outcome can be from the true one: ``outcome_error``.

The estimate is computed from the outcome alone (its five fields), so it works
on outcomes stored long ago. By the outcome's reading (``readout``):

* **exact** (``rounding = 0``, ``trials = 0``): 0. Every total sits on its point.
* **points** (``0 < rounding < step``, a small group's scenario totals each moved
  up to the next point): a cut is read wrong only when a total lies less than
  ``rounding`` below it and its point on or above it; the worst case is the
  heaviest point's mass.
* **simulated** (``trials > 0``): the half-width of the 95% Wilson interval
  (Wilson, JASA 22, 1927) of a proportion of 1/2 from ``trials`` draws, the
  widest any band's interval can be: sampling error, not model error.
* **bins** (``rounding >= step``): the lattice total is the true total plus a
  small noise ``N`` (each amount split between two points keeps its mean, so
  ``N`` has mean zero given the true total; the bin reading adds a uniform
  spread of one step), and a CDF read through a mean-zero noise of variance
  ``v`` differs from the true one by about ``v / 2`` times the slope of the
  density (a second-order Taylor expansion of ``E[F(c - N)]``). The slope is
  taken from the outcome's own neighbouring masses, and ``v`` is bounded two
  ways, the smaller one used: by the split count the worst-case ``rounding``
  implies (``rounding / (2 step)`` squared steps: each split adds at most a
  quarter step squared, and ``rounding`` counts at least half a step for every
  split amount), and by ``SPLIT_SHARE`` of the outcome's variance, which every
  lattice sqlrisk builds respects (the automatic step keeps splits below 0.4%
  of the variance, moving outcomes onto a common step below 0.1%). The band
  error is the spread between the largest error above and below zero. That
  expansion holds where the true distribution is smooth across the noise; a
  heavy total blurred by the lattice is not, and a band around it can be off
  by its whole mass. So the estimate is at least the sum of the two largest
  masses windows as wide as the noise (three standard deviations) hold beyond
  what a smooth density fitted to their neighbouring windows would put there
  (``_lump``): about zero on a smooth density, the blurred totals' masses
  around them. Both terms carry a safety factor (SLOPE_MARGIN, LUMP_MARGIN).

What it assumes: the outcome was built by sqlrisk (a hand-written struct may
break the variance share), and the true distribution is no more concentrated
between two neighbouring points than the outcome shows. ``tests/test_error.py``
measures it against exact distributions over several hundred groups.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from .intervals import Z95, wilson_centre_half
from .readout import is_smooth

#: Share of an outcome's variance its own lattice noise may have (splits and moves).
SPLIT_SHARE = 5e-3
#: Width of the windows that look for blurred heavy totals, in standard deviations of the noise.
LUMP_WIDTH = 3.0
#: Safety factors on the two terms, set on tests/test_error.py's corpus (no group's true
#: band error above its estimate without them; with them, none within a factor of 1.5)
#: and on 150 groups as stored by the version before this estimate existed, on coarser
#: lattices (one group's error 1.7 times its estimate, without them 2.3 times).
SLOPE_MARGIN = 1.5
LUMP_MARGIN = 2.0


@njit(cache=True, nogil=True)
def wilson_half_width(trials):
    """Half-width of the 95% Wilson interval of an observed share of 1/2 after ``trials`` draws."""
    return wilson_centre_half(0.5, float(trials), Z95)[1]


@njit(cache=True, nogil=True)
def lattice_noise(step, mass, rounding):
    """Bound on the variance, in squared steps, of a bins outcome's own noise (the split
    count ``rounding`` implies, or SPLIT_SHARE of the outcome's variance, plus the
    uniform spread of the bin reading)."""
    m = len(mass)
    mean = 0.0
    for i in range(m):
        mean += i * mass[i]
    var = 0.0
    for i in range(m):
        var += (i - mean) ** 2 * mass[i]
    return min(rounding / (2.0 * step), SPLIT_SHARE * var) + 1.0 / 12.0


@njit(cache=True, nogil=True)
def blur_error(mass, noise):
    """Largest error of a CDF read off ``mass`` (a whole outcome, or a part of one such as
    the light scenarios of ``heavy``) through a mean-zero noise of variance ``noise``:
    the slope term and the blurred-lump term of the module notes, with their margins."""
    high = 0.0
    low = 0.0
    for i in range(1, len(mass) - 1):
        e = 0.25 * noise * (mass[i + 1] - mass[i - 1])
        high = max(high, e)
        low = min(low, e)
    return min(max(SLOPE_MARGIN * (high - low), LUMP_MARGIN * _lump(mass, noise)), 1.0)


@njit(cache=True, nogil=True)
def _lattice_error(origin, step, mass, rounding):
    if len(mass) < 3:
        return 0.0
    return blur_error(mass, lattice_noise(step, mass, rounding))


@njit(cache=True, nogil=True)
def _window(cum, start, width):
    m = len(cum) - 1
    return cum[min(max(start + width, 0), m)] - cum[min(max(start, 0), m)]


@njit(cache=True, nogil=True)
def _lump(mass, noise):
    """The two largest masses windows as wide as the noise hold beyond what a smooth
    density would put there: totals the lattice blurred. A band between two such totals
    can be off by both masses.

    The smooth expectation comes from the four neighbouring windows of the same width:
    ``2/3 (left + right) - 1/6 (second left + second right)`` is exact for any density
    that is quadratic across the five windows, so a smooth density leaves almost no
    excess, while a blurred total leaves its whole mass.
    """
    m = len(mass)
    width = max(1, int(round(LUMP_WIDTH * math.sqrt(noise))))
    cum = np.zeros(m + 1)
    for i in range(m):
        cum[i + 1] = cum[i] + mass[i]
    count = max(m - width + 1, 0)
    if count == 0:
        return 0.0
    excess = np.zeros(count)
    for start in range(count):
        near = _window(cum, start - width, width) + _window(cum, start + width, width)
        far = _window(cum, start - 2 * width, width) + _window(cum, start + 2 * width, width)
        smooth = max(2.0 / 3.0 * near - 1.0 / 6.0 * far, 0.0)
        excess[start] = max(_window(cum, start, width) - smooth, 0.0)
    first = np.argmax(excess)
    second = 0.0
    for start in range(count):
        if abs(start - first) >= width:
            second = max(second, excess[start])
    return excess[first] + second


@njit(cache=True, nogil=True)
def error_batch(origin, step, mass, offsets, rounding, trials):
    """``outcome_error`` of every row (see the module notes)."""
    n = len(origin)
    out = np.zeros(n)
    for g in range(n):
        w = mass[offsets[g]:offsets[g + 1]]
        if trials[g] > 0:
            out[g] = wilson_half_width(trials[g])
        elif rounding[g] == 0.0:
            out[g] = 0.0
        elif len(w) == 1:
            out[g] = 1.0  # one total, known only to within rounding: a cut there reads it wrong
        elif not is_smooth(step[g], rounding[g]):
            out[g] = w.max()
        else:
            out[g] = _lattice_error(origin[g], step[g], w, rounding[g])
    return out
