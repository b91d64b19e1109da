"""Sums of independent stored outcomes: ``outcome_add`` and ``outcome_merge``.

The distribution of a sum of independent totals is the convolution of their
distributions, computed by ``sums.sum_outcomes`` (the same sum that adds up a
large group's leaves): outcomes on one step, or on steps that are whole
multiples of one unit, convolve exactly; otherwise every outcome is moved onto
a common step by splitting each point's mass between its two neighbours (mean
kept), and ``rounding`` grows by that step for each outcome moved. This module
puts the outcomes in a canonical order, so the result is bit-identical whatever
order the rows arrive in, and describes each one to the sum (its mean, variance
and range).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .sums import sum_outcomes

__all__ = ["Outcome", "combine"]


@dataclass
class Outcome:
    """One outcome: ``P(total = origin + i * step) = mass[i]``."""

    origin: float
    step: float
    mass: np.ndarray
    trials: int = 0
    rounding: float = 0.0


def _canonical(o: Outcome):
    return (o.step, o.origin, len(o.mass), o.rounding, o.trials, o.mass.tobytes())


def _moments(o: Outcome) -> tuple[float, float, float]:
    """Mean, variance and the largest distance from the mean to an end of the support."""
    x = o.origin + o.step * np.arange(len(o.mass))
    mu = float(np.dot(x, o.mass))
    return mu, float(np.dot((x - mu) ** 2, o.mass)), float(max(x[-1] - mu, mu - x[0]))


def combine(outcomes: list[Outcome]) -> Outcome:
    """Distribution of the sum of independent outcomes (at least one); simulated
    inputs make a simulated sum, with the smallest ``trials`` among them."""
    outcomes = sorted(outcomes, key=_canonical)
    trials = [o.trials for o in outcomes if o.trials > 0]
    stats = np.array([_moments(o) for o in outcomes])
    lengths = np.array([len(o.mass) for o in outcomes], dtype=np.int64)
    origin, step, mass, rounding = sum_outcomes(
        np.array([o.origin for o in outcomes]), np.array([o.step for o in outcomes]),
        np.concatenate([o.mass for o in outcomes]),
        np.concatenate([[0], np.cumsum(lengths)]).astype(np.int64),
        np.array([o.rounding for o in outcomes]), stats[:, 0], stats[:, 1], stats[:, 2])
    return Outcome(origin, step, mass, min(trials) if trials else 0, rounding)
