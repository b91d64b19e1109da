"""Synthetic pipelines for the benchmarks: fixed seed, realistic shapes.

Amounts are log-normal (median 40,000, sigma 1) rounded to 100; each deal's
stage sets its win probability (0.02 to 0.95), with a little noise.
"""

from __future__ import annotations

import numpy as np
import pyarrow as pa

STAGE_PROBS = np.array([0.05, 0.15, 0.35, 0.6, 0.85])
SEED = 20261201


def pipeline(n_deals: int, n_owners: int, seed: int = SEED) -> pa.Table:
    rng = np.random.default_rng(seed)
    amount = np.maximum(np.round(np.exp(rng.normal(np.log(40_000), 1.0, n_deals)) / 100) * 100, 100)
    stage = rng.integers(0, len(STAGE_PROBS), n_deals)
    prob = np.clip(STAGE_PROBS[stage] + rng.normal(0, 0.05, n_deals), 0.02, 0.95).round(3)
    owner = np.sort(rng.integers(0, n_owners, n_deals)) if n_owners > 1 else np.zeros(n_deals, int)
    return pa.table({"owner": owner.astype(np.int64), "amount": amount, "prob": prob})


def load(con, n_deals: int, n_owners: int) -> None:
    """Tables ``deals`` and ``cuts`` (per owner: 0.6, 1.0 and 1.3 x its expected value)."""
    con.register("_deals", pipeline(n_deals, n_owners))
    con.execute("CREATE OR REPLACE TABLE deals AS SELECT * FROM _deals")
    con.unregister("_deals")
    con.execute("""
        CREATE OR REPLACE TABLE cuts AS
        SELECT owner, [0.6 * ev, 1.0 * ev, 1.3 * ev]::DOUBLE[] AS cuts
        FROM (SELECT owner, sum(amount * prob) AS ev FROM deals GROUP BY owner)""")
