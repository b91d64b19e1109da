"""What a small group's exact answer costs: band_odds per group by size and amount unit.

    python -m tests.benchmarks.small_groups [--groups 2000]

Groups of up to ``scenarios.MAX_DEALS`` uncertain deals whose exact lattice does not fit
the exact budget (amounts in cents) are answered from their scenarios by meeting in the
middle; larger ones are read off an inexact lattice. Amounts in whole hundreds mostly fit
an exact lattice. The table gives microseconds per group (three cuts per group, the
median of three runs after a warm-up) so the threshold between the two can be checked.
"""

from __future__ import annotations

import argparse
import statistics
import time

import numpy as np
import pyarrow as pa

import sqlrisk
from sqlrisk.kernels.scenarios import MAX_DEALS
from tests.benchmarks.accuracy import random_group

SIZES = [3, 8, 12, 16, 20, 24, 25, 30, 40]
QUERY = ("SELECT g, band_odds(amount, prob, [0.3 * ev, 0.5 * ev, 0.7 * ev]) "
         "FROM deals JOIN (SELECT g, sum(abs(amount)) AS ev FROM deals GROUP BY g) USING (g) "
         "GROUP BY g")


def per_group_us(n: int, unit: float, groups: int) -> float:
    rng = np.random.default_rng([n, int(unit * 100)])
    parts = []
    for g in range(groups):
        units, probs = random_group(rng, n, unit)
        parts.append(pa.table({"g": np.full(n, g), "amount": units * unit, "prob": probs}))
    con = sqlrisk.connect()
    con.register("_deals", pa.concat_tables(parts))
    con.execute("CREATE TABLE deals AS SELECT * FROM _deals")
    con.execute(QUERY).fetchall()
    times = []
    for _ in range(3):
        start = time.perf_counter()
        con.execute(QUERY).fetchall()
        times.append(time.perf_counter() - start)
    con.close()
    return statistics.median(times) / groups * 1e6


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--groups", type=int, default=2000)
    args = parser.parse_args()
    print(f"band_odds, microseconds per group ({args.groups:,} groups; scenarios up to "
          f"{MAX_DEALS} uncertain deals)\n")
    print("| deals | cents | hundreds |")
    print("|---|---|---|")
    for n in SIZES:
        cents = per_group_us(n, 0.01, args.groups)
        hundreds = per_group_us(n, 100.0, args.groups)
        print(f"| {n} | {cents:,.0f} | {hundreds:,.0f} |", flush=True)


if __name__ == "__main__":
    main()
