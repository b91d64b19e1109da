"""Invented rows for the Spark tests: one table of each kind, as Arrow tables that both
engines load (Spark with ``createDataFrame``, DuckDB with ``register``).

*Larkspur Valve Works* (invented): 240 sellers in six regions, most with 5-15 open deals
and some with 1-3 (the groups answered from their win/loss scenarios), one with 160;
amounts in cents, a few credit notes, probabilities of exactly 0 and 1, NULL amounts
and probabilities on some rows and one seller whose rows are all NULL; a quota row per
seller; 1,500 closed deals for the calibration functions.
"""

from __future__ import annotations

import numpy as np
import pyarrow as pa

REGIONS = ["Brackenfold", "Cinderwick", "Dunmere", "Eastgrove", "Fallowmarsh", "Greyhaven"]
ALL_NULL = "LV-000"


def pipeline(seed: int = 4_417) -> pa.Table:
    rng = np.random.default_rng(seed)
    owners, regions, ids, amounts, probs = [], [], [], [], []
    for k in range(240):
        owner = f"LV-{k:03d}"
        count = 160 if k == 7 else int(rng.integers(1, 4)) if k % 9 == 0 else int(
            rng.integers(5, 16))
        for _ in range(count):
            owners.append(owner)
            regions.append(REGIONS[k % len(REGIONS)])
            ids.append(f"D{len(ids) + 1:05d}")
            amount = round(float(rng.lognormal(9.2, 0.9)), 2)
            amounts.append(-amount / 10 if rng.random() < 0.02 else amount)
            probs.append(float(rng.choice([0.0, 1.0])) if rng.random() < 0.03
                         else round(float(rng.uniform(0.02, 0.97)), 3))
    amounts, probs = np.array(amounts, dtype=object), np.array(probs, dtype=object)
    amounts[[11, 400, 1200]] = None
    probs[[12, 401, 1800]] = None
    first = owners.index(ALL_NULL), owners.index(ALL_NULL) + owners.count(ALL_NULL)
    amounts[first[0]:first[1]] = None
    return pa.table({"owner_id": owners, "region": regions, "deal_id": ids,
                     "amount": pa.array(list(amounts), pa.float64()),
                     "win_prob": pa.array(list(probs), pa.float64())})


def quota_bands(deals: pa.Table, seed: int = 4_418) -> pa.Table:
    rng = np.random.default_rng(seed)
    owners = sorted(set(deals.column("owner_id").to_pylist()))
    target = np.round(rng.uniform(2e4, 9e4, len(owners)), -2)
    return pa.table({"owner_id": owners, "floor": target * 0.6, "target": target,
                     "stretch": target * 1.4})


def closed_deals(seed: int = 4_419) -> pa.Table:
    rng = np.random.default_rng(seed)
    n = 1_500
    prob = np.round(rng.uniform(0, 1, n), 2)
    won = (rng.random(n) < prob * 0.85).astype(np.int64)
    return pa.table({"region": [REGIONS[i % len(REGIONS)] for i in range(n)],
                     "prob": prob, "won": won})
