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


#: Past quarters as the company's CRM exports them: its own quarter names and status words.
QUARTERS = [("FY26-1", "2026-02-01"), ("FY26-2", "2026-05-01"), ("FY26-3", "2026-08-01")]
PHASES = {"qualify": 20, "propose": 45, "negotiate": 70, "verbal": 90}


def history(seed: int = 20260201) -> tuple[list[dict], list[dict], list[dict]]:
    """Three past quarters: the deals open at each quarter's start with what became of them
    (``status`` Closed Won / Closed Lost / Pushed), one quota per seller and quarter, and the
    closed deals before and during them (``outcome`` 1/0) for calibration. The same flaws:
    a blank contract_value, a duplicated row, s_nell without quotas."""
    rng = np.random.default_rng(seed)
    open_rows, quota_rows, closed_rows = [], [], []
    number = 5000
    for quarter, opens in QUARTERS:
        for seller, territory in SELLERS.items():
            expected = 0.0
            for _ in range(int(rng.integers(2, 12))):
                number += 1
                phase = str(rng.choice(list(PHASES)))
                pct = PHASES[phase] + int(rng.choice([-10, -5, 0, 5]))
                value = int(round(rng.lognormal(9.6, 0.8), -1))
                won = rng.random() < pct / 100 * 0.8
                status = ("Pushed" if rng.random() < 0.1 else
                          "Closed Won" if won else "Closed Lost")
                open_rows.append({"quarter_label": quarter, "quarter_opens": opens,
                                  "seller": seller, "territory": territory,
                                  "deal_ref": f"QF-{number}", "contract_value": value,
                                  "chance_pct": pct, "phase": phase, "status": status})
                if status != "Pushed":
                    closed_rows.append({"deal_ref": f"QF-{number}", "phase": phase,
                                        "chance_pct": pct, "outcome": int(won),
                                        "closed_date": f"{opens[:5]}{int(opens[5:7]) + 1:02d}-15"})
                expected += value * pct / 100
            if seller != NO_QUOTA:
                quota_rows.append({"seller": seller, "quarter_label": quarter,
                                   "quota": int(round(expected, -3))})
    open_rows[3]["contract_value"] = ""
    open_rows.append(dict(open_rows[7]))
    return open_rows, quota_rows, closed_rows


def write_history(folder: Path) -> tuple[Path, Path, Path]:
    folder.mkdir(parents=True, exist_ok=True)
    paths = (folder / "past_quarters.csv", folder / "past_quota.csv", folder / "closed.csv")
    for path, rows in zip(paths, history()):
        _write(path, rows)
    return paths


if __name__ == "__main__":
    print(*write(Path(sys.argv[1] if len(sys.argv) > 1 else "extracts")), sep="\n")
