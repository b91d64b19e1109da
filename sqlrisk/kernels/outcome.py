"""A batch of outcomes as flat arrays, and building one from deals.

An outcome is the distribution of a total on a lattice:
``P(total = origin + i * step) = mass[i]``. ``trials`` is 0 for an exact
outcome and the number of simulated totals otherwise; ``rounding`` bounds
``|true total - lattice total|`` (0 when every amount sat on the lattice).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .lattice import DEFAULT_BINS, EMPTY, OK, TOO_MANY_BINS
from .recursion import exact_batch
from .spectral import fold_group

__all__ = ["OutcomeBatch", "concat", "exact_outcomes", "EMPTY", "OK", "TOO_MANY_BINS"]


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

    @property
    def smooth(self) -> np.ndarray:
        """Rows read as bins rather than points: those whose lattice is not exact
        (see ``readout``). A simulated outcome on an exact lattice is read as points."""
        return self.rounding > 0


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


def exact_outcomes(amount, prob, offsets, step_req=None, bins: int = DEFAULT_BINS):
    """Exact outcome of every group of deals.

    Parameters
    ----------
    amount, prob : float64 arrays of the usable deals (no NULL, p in [0, 1]),
        groups back to back.
    offsets : int64 array, ``len(groups) + 1``.
    step_req : float64 array per group, ``<= 0`` or NaN for the automatic lattice.
    bins : the automatic lattice's bin budget.

    Returns
    -------
    (OutcomeBatch, status) with ``status[g]`` one of OK, EMPTY, TOO_MANY_BINS.

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
    (status, origin, step, _exact, rounding, linear, lo, mass_offsets, mass,
     k, frac, p, a0, a1) = exact_batch(amount, prob, offsets, step_req, int(bins))
    for g in np.flatnonzero((status == OK) & ~linear):
        mass[mass_offsets[g]:mass_offsets[g + 1]] = fold_group(
            k[a0[g]:a1[g]], frac[a0[g]:a1[g]], p[a0[g]:a1[g]], int(lo[g]),
            int(mass_offsets[g + 1] - mass_offsets[g]))
    batch = OutcomeBatch(origin, step, mass, mass_offsets,
                         np.zeros(n_groups, np.int64), rounding, status == OK)
    return batch, status
