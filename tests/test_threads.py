"""A batch split between threads gives the numbers of one call, to the bit.

``outcome._exact_batch_threads`` plans the parts of a batch into slices of one set of arrays
and fills their groups' slices of one mass array; ``outcome._pooled_groups`` shares large
groups between threads. Every group is computed on its own, so nothing may depend on the
split: the single-thread path (one ``exact_batch`` call) is the reference.
"""

from __future__ import annotations

import numpy as np
import pytest

from sqlrisk.kernels import outcome
from tests.benchmarks.data import pipeline


def _batch():
    """Invented groups of every kind, the large windowed and pooled ones last (in the second
    part): empty, small (scenario-sized), 100-deal, 3,000-deal (the window cuts its support),
    5,000-deal (pooled), and one with a requested step."""
    t = pipeline(40_000, 1, seed=7)
    a, p = t["amount"].to_numpy(), t["prob"].to_numpy()
    sizes = [0, 3, 12, 40, 100] * 60 + [0, 3_000, 100, 5_000, 3_000]
    sizes = [s for s in sizes if s >= 0]
    offsets = np.concatenate([[0], np.cumsum(sizes)]).astype(np.int64)
    n = int(offsets[-1])
    step_req = np.zeros(len(sizes))
    step_req[-1] = 100.0
    return a[:n], p[:n], offsets, step_req


def _fields(b):
    return [b.origin, b.step, b.mass, b.offsets, b.rounding, b.valid]


@pytest.mark.parametrize("scenario_max", [0, 24])
def test_threads_give_the_bits_of_one_call(monkeypatch, scenario_max):
    a, p, offsets, step_req = _batch()
    assert offsets[-1] >= outcome.PARALLEL_MIN_DEALS  # the threaded path is taken
    monkeypatch.setattr(outcome, "THREADS", 1)
    one, status_one = outcome.exact_outcomes(a, p, offsets, step_req, scenario_max=scenario_max)
    monkeypatch.setattr(outcome, "THREADS", 2)
    two, status_two = outcome.exact_outcomes(a, p, offsets, step_req, scenario_max=scenario_max)
    assert np.array_equal(status_one, status_two)
    for x, y in zip(_fields(one), _fields(two)):
        assert x.dtype == y.dtype and x.tobytes() == y.tobytes()
    # the batch holds what it is meant to: windowed, pooled and (with scenario_max) scenario groups
    lengths = np.diff(offsets)
    assert (status_one[lengths == 0] == outcome.EMPTY).all()
    if scenario_max:
        assert (status_one == outcome.SCENARIOS).any()
    assert (np.diff(one.offsets)[lengths >= 3_000] > 1).all()


def test_threaded_plan_keeps_each_groups_deals(monkeypatch):
    """The plan's deal ranges are rows of the whole batch, whichever part planned them."""
    a, p, offsets, step_req = _batch()
    args = (a, p, offsets, step_req, 1024, 0, 20, np.zeros(len(step_req), bool), True)
    monkeypatch.setattr(outcome, "THREADS", 2)
    split = outcome._exact_batch_threads(*args)
    whole = outcome.exact_batch(*args)
    assert np.array_equal(split.act_start, whole.act_start)
    assert np.array_equal(split.act_stop, whole.act_stop)
    assert (split.act_start >= offsets[:-1]).all() and (split.act_stop <= offsets[1:]).all()
    assert not split.linear[np.diff(offsets) == 3_000].all()  # the window cut one of these
