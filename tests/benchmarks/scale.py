"""How the exact kernel's time and output size grow: deals per group, groups, resolution.

Runs the kernel directly (no DuckDB) on the synthetic pipeline; prints a markdown table.
"""

from __future__ import annotations

import time

import numpy as np

from sqlrisk.kernels.outcome import exact_outcomes
from tests.benchmarks import data


def measure(n_deals: int, n_groups: int, bins: int) -> tuple[float, float]:
    table = data.pipeline(n_deals, n_groups)
    amount, prob = table["amount"].to_numpy(), table["prob"].to_numpy()
    offsets = np.concatenate([[0], np.cumsum(np.bincount(table["owner"].to_numpy(),
                                                          minlength=n_groups))])
    exact_outcomes(amount[:1000], prob[:1000], np.array([0, min(1000, n_deals)]), bins=bins)
    start = time.perf_counter()
    batch, _ = exact_outcomes(amount, prob, offsets, bins=bins)
    return time.perf_counter() - start, batch.mass.nbytes / n_groups / 1024


def main() -> None:
    rows = [("deals per group", n, 1_000_000 // n, 1024) for n in (10, 100, 1_000, 10_000, 100_000)]
    rows += [("groups", 100, g, 1024) for g in (100, 1_000, 10_000)]
    rows += [("bin budget", 100, 10_000, b) for b in (512, 1024, 2048, 4096)]
    print("| varying | deals per group | groups | bin budget | seconds | KiB per outcome |")
    print("|---|---|---|---|---|---|")
    for what, per_group, groups, bins in rows:
        seconds, kib = measure(per_group * groups, groups, bins)
        print(f"| {what} | {per_group:,} | {groups:,} | {bins:,} | {seconds:.3f} | {kib:.1f} |")


if __name__ == "__main__":
    main()
