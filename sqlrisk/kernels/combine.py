"""Sums of independent outcomes: ``outcome_add`` and ``outcome_merge``.

The distribution of a sum of independent totals is the convolution of their
distributions. Outcomes on one step convolve exactly; a step that is a whole
multiple of the finest one is spread onto the finer lattice exactly (zeros in
between). Otherwise every outcome is moved onto the coarsest step by splitting
each point's mass between its two neighbours (mean kept), and ``rounding``
grows by that step for each outcome moved. Inputs are convolved pairwise in a
balanced tree, trimming tails of mass below ``TRIM`` after each product so the
supports follow the spread of the partial sums.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from .lattice import tail_window as window
from .lattice import common_unit
from .readout import is_smooth
from .spectral import fft_convolve

#: Mass a convolution may drop from each tail (summed over a merge, ~1e-12 at worst).
TRIM = 1e-15
#: Bins below this share of the peak count as rounding noise at the tails.
NOISE = 1e-16
#: Bins a merged outcome may hold before the common step is coarsened.
MERGE_MAX_BINS = 1 << 18
#: Relative tolerance when comparing steps.
STEP_TOL = 1e-9
#: Below this many multiply-adds a direct convolution beats the FFT.
DIRECT_LIMIT = 1 << 15


@dataclass
class Outcome:
    """One outcome: ``P(total = origin + i * step) = mass[i]``."""

    origin: float
    step: float
    mass: np.ndarray
    trials: int = 0
    rounding: float = 0.0


def _is_multiple(x: float, unit: float) -> bool:
    r = x / unit
    return abs(r - round(r)) <= STEP_TOL * max(1.0, r)


def respread(o: Outcome, step: float) -> tuple[Outcome, float]:
    """Move ``o`` onto lattice ``step``; returns it and the rounding this added."""
    if o.step == step or len(o.mass) == 1:
        return Outcome(o.origin, step, o.mass, o.trials, o.rounding), 0.0
    ratio = o.step / step
    pos = np.arange(len(o.mass)) * ratio
    if _is_multiple(o.step, step):
        idx = np.rint(pos).astype(np.int64)
        mass = np.zeros(idx[-1] + 1)
        mass[idx] = o.mass
        return Outcome(o.origin, step, mass, o.trials, o.rounding), 0.0
    low = np.floor(pos).astype(np.int64)
    frac = pos - low
    size = low[-1] + 2
    mass = (np.bincount(low, o.mass * (1.0 - frac), minlength=size)
            + np.bincount(low + 1, o.mass * frac, minlength=size))
    first, last = nonzero_span(mass)
    return Outcome(o.origin + first * step, step, mass[first:last], o.trials, o.rounding), step


def nonzero_span(mass: np.ndarray) -> tuple[int, int]:
    """``first, last`` such that ``mass[first:last]`` holds every non-zero bin."""
    nz = np.flatnonzero(mass)
    return (int(nz[0]), int(nz[-1]) + 1) if len(nz) else (0, 1)


def _convolve(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    if len(x) * len(y) <= DIRECT_LIMIT:
        return np.convolve(x, y)
    return fft_convolve(x, y)


def _trim_tails(o: Outcome) -> Outcome:
    """Drop leading and trailing bins that hold only rounding noise or negligible mass.

    A bin goes when its mass is below NOISE x the peak (an FFT product leaves
    about 1e-17 everywhere, which would otherwise keep every support at its full
    range) and the mass dropped from that side stays below TRIM in total.
    """
    mass = o.mass
    small = mass <= NOISE * mass.max()
    cum = np.cumsum(np.where(small, mass, np.inf))
    first = int(np.searchsorted(cum, TRIM, side="right"))
    back = np.cumsum(np.where(small, mass, np.inf)[::-1])
    last = len(mass) - int(np.searchsorted(back, TRIM, side="right"))
    if first == 0 and last == len(mass):
        return o
    first = min(first, last - 1)
    return Outcome(o.origin + first * o.step, o.step, mass[first:last], o.trials, o.rounding)


def common_step(steps: list[float], spread: float) -> tuple[float, bool]:
    """The step all lattices go onto, and whether that is exact (no splitting).

    Exact when every step is a whole multiple of one unit (the finest step, or
    their common unit such as 1 for steps 100 and 7) that keeps the sum within
    MERGE_MAX_BINS; otherwise the coarsest step, or coarser if the sum needs it.
    """
    fine = min(steps)
    unit = fine if all(_is_multiple(s, fine) for s in steps) else common_unit(np.array(steps))[0]
    if unit > 0 and spread / unit <= MERGE_MAX_BINS:
        return unit, True
    step = max(steps)
    if spread / step > MERGE_MAX_BINS:
        return spread / MERGE_MAX_BINS, False
    return step, False


def _spread(lattices: list[Outcome]) -> float:
    """Width that holds all but ~1e-16 a side of the sum's mass (``lattice.tail_window``)."""
    mean = var = dev = lo = hi = 0.0
    for o in lattices:
        x = o.origin + o.step * np.arange(len(o.mass))
        mu = float(np.dot(x, o.mass))
        mean += mu
        var += float(np.dot((x - mu) ** 2, o.mass))
        dev = max(dev, x[-1] - mu, mu - x[0])
        lo += x[0]
        hi += x[-1]
    w_lo, w_hi = window(mean, var, dev, lo, hi)
    return w_hi - w_lo


def _canonical(o: Outcome):
    return (o.step, o.origin, len(o.mass), o.rounding, o.trials, o.mass.tobytes())


def combine(outcomes: list[Outcome]) -> Outcome:
    """Distribution of the sum of independent outcomes (at least one).

    The inputs are put in a canonical order first, so the result is
    bit-identical whatever order the rows arrive in.
    """
    outcomes = sorted(outcomes, key=_canonical)
    shift = 0.0
    rounding = 0.0
    trials = [o.trials for o in outcomes if o.trials > 0]
    lattices = []
    for o in outcomes:
        rounding += o.rounding
        if len(o.mass) == 1:
            shift += o.origin
        else:
            lattices.append(o)
    sim_trials = min(trials) if trials else 0
    if not lattices:
        steps = [o.step for o in outcomes]
        return Outcome(shift, max(steps), np.ones(1), sim_trials, rounding)
    step, _ = common_step([o.step for o in lattices], _spread(lattices))
    parts = []
    for o in lattices:
        moved, added = respread(o, step)
        rounding += added
        parts.append(moved)
    if is_smooth(step, rounding):
        if not any(is_smooth(o.step, o.rounding) for o in lattices):
            rounding += step / 2.0  # the merged outcome is now read as bins
        for o in lattices:
            if 0.0 < o.rounding < o.step:
                # a small group's totals were moved up onto its points; read as bins, centre
                # the move (within +/- rounding/2) so it blurs like a split, not a shift
                shift -= o.rounding / 2.0
                rounding -= o.rounding / 2.0
    while len(parts) > 1:
        nxt = []
        for i in range(0, len(parts) - 1, 2):
            a, b = parts[i], parts[i + 1]
            mass = _convolve(a.mass, b.mass)
            nxt.append(_trim_tails(Outcome(a.origin + b.origin, step, mass)))
        if len(parts) % 2:
            nxt.append(parts[-1])
        parts = nxt
    mass = parts[0].mass / parts[0].mass.sum()
    return Outcome(parts[0].origin + shift, step, mass, sim_trials, rounding)
