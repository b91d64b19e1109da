"""A second invented company, unlike the demo: other column names, percent probabilities,
one quota number per seller, and the flaws real extracts have.

*Quillfeather Lab Supplies* (invented) exports ``deals.csv`` with columns
``seller, territory, deal_ref, contract_value, chance_pct, close_month`` (chance_pct in
0-100) and ``quotas.csv`` with ``seller, territory, quota``. Planted flaws: one deal row
exported twice, one blank contract_value, and one seller (``s_nell``) who has deals but
no quota row. ``write(folder)`` writes both files; ``python -m tests.second_company DIR``
does it from the shell.
"""

from __future__ import annotations

import csv
import sys
from pathlib import Path

import numpy as np

SELLERS = {"s_arlo": "Fenwater", "s_brisa": "Fenwater", "s_cato": "Fenwater",
           "s_dorin": "Highmoor", "s_elke": "Highmoor", "s_fabi": "Highmoor",
           "s_gus": "Saltreach", "s_hedda": "Saltreach", "s_ivo": "Saltreach",
           "s_juno": "Saltreach", "s_nell": "Highmoor"}
NO_QUOTA = "s_nell"
DUPLICATED = "QF-1007"
BLANK_AMOUNT = "QF-1013"


def deals(seed: int = 20270117) -> list[dict]:
    rng = np.random.default_rng(seed)
    rows = []
    number = 1000
    for seller, territory in SELLERS.items():
        for _ in range(int(rng.integers(3, 30))):  # enterprise sellers carry few deals
            number += 1
            rows.append({"seller": seller, "territory": territory,
                         "deal_ref": f"QF-{number}",
                         "contract_value": int(round(rng.lognormal(9.6, 0.8), -1)),
                         "chance_pct": int(rng.choice([10, 20, 25, 40, 50, 60, 75, 90])),
                         "close_month": f"2027-0{int(rng.integers(1, 4))}"})
    for row in rows:
        if row["deal_ref"] == BLANK_AMOUNT:
            row["contract_value"] = ""
    rows.append(dict(next(r for r in rows if r["deal_ref"] == DUPLICATED)))
    return rows


def quotas(rows: list[dict]) -> list[dict]:
    """One quota per seller: about 1.15 times the seller's expected won total, rounded."""
    expected: dict[str, float] = {}
    for r in rows:
        if r["contract_value"] != "":
            expected[r["seller"]] = expected.get(r["seller"], 0.0) + \
                r["contract_value"] * r["chance_pct"] / 100
    return [{"seller": s, "territory": SELLERS[s], "quota": int(round(1.15 * ev, -3))}
            for s, ev in sorted(expected.items()) if s != NO_QUOTA]


def _write(path: Path, rows: list[dict]) -> None:
    with path.open("w", newline="") as f:
        writer = csv.DictWriter(f, fieldnames=list(rows[0]))
        writer.writeheader()
        writer.writerows(rows)


def write(folder: Path) -> tuple[Path, Path]:
    folder.mkdir(parents=True, exist_ok=True)
    rows = deals()
    _write(folder / "deals.csv", rows)
    _write(folder / "quotas.csv", quotas(rows))
    return folder / "deals.csv", folder / "quotas.csv"


if __name__ == "__main__":
    print(*write(Path(sys.argv[1] if len(sys.argv) > 1 else "extracts")), sep="\n")
