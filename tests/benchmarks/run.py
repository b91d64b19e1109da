"""`make bench`: run every case in its own process and print one markdown table.

Targets (ratios are medians measured in the same run, on the same machine):
A  band_odds, 1M deals / 10k owners, 3 cuts      <= 5x the no-op UDF over the same lists; bands within 1e-3
B  band_odds vs hand-written SQL Monte Carlo     >= 50x faster (1,000 trials, 100k deals / 1k owners)
C  one group of 1M deals                         <= 3x case A on the same rows; bands within 1e-3
                                                 of the Edgeworth expansion (cuts at EV, EV +- sd)
D  outcome_sim, 1,000 trials, vs the same SQL MC >= 3x faster
E  peak memory                                   A <= 1.5 GB, C <= 2 GB
F  sqlrisk demo wall time                        warm; first run (numba compiling) reported
Second round (issue 17, tests/benchmarks/round2.py):
G  band_odds (constant and joined cuts), reach_odds, total_quantiles, 1M deals / 10k owners
                                                 <= 3x a no-op UDF over list(amount), list(prob)
H  band_odds on 1M deals in groups of 10 ... 100,000   <= 1.5x groups of 100
K  outcome_dist(1, prob), 10,000 deals           >= 20x faster than scipy poisson_binom pmf,
                                                 within 1e-12
L  case A on two threads                         faster than on one (gain reported)
M  sqlrisk --help                                <= 1.5x python -c "import duckdb, typer, numpy"
N  outcome_dist(..., correlation := 0.2 / 0.3), 10,000 deals   faster than outcome_sim, 10,000 trials
P  outcome_dist(..., correlation := 0.1 ... 0.3), 1,000 deals  <= 30x outcome_dist without correlation
Q  sqlrisk demo (warm)                           <= 2x the sum of its queries' own times
"""

from __future__ import annotations

import json
import os
import platform
import subprocess
import sys
import time

TARGETS = {
    "A": ("band_odds 1M deals / 10k owners", "no-op UDF, same lists", lambda r: r <= 5, "<= 5x"),
    "B": ("band_odds 100k deals / 1k owners", "SQL Monte Carlo 1,000 trials", lambda r: r <= 1 / 50,
          ">= 50x faster"),
    "C": ("band_odds, one group of 1M deals", "case A, same rows", lambda r: r <= 3, "<= 3x"),
    "D": ("outcome_sim 1,000 trials", "SQL Monte Carlo 1,000 trials", lambda r: r <= 1 / 3,
          ">= 3x faster"),
    "F": ("sqlrisk demo (warm)", "first run, numba compiling", lambda r: True, "reported"),
    "G": ("slowest reader, 1M deals / 10k owners", "no-op UDF over 2 lists", lambda r: r <= 3,
          "<= 3x"),
    "H": ("band_odds, slowest group size", "groups of 100", lambda r: r <= 1.5, "<= 1.5x"),
    "K": ("outcome_dist(1, prob), 10k deals", "scipy poisson_binom pmf", lambda r: r <= 1 / 20,
          ">= 20x faster"),
    "L": ("case A, threads = 2", "threads = 1", lambda r: r < 1, "faster"),
    "M": ("sqlrisk --help", "import duckdb, typer, numpy", lambda r: r <= 1.5, "<= 1.5x"),
    "N": ("correlated outcome_dist, 10k deals", "outcome_sim 10,000 trials", lambda r: r < 1,
          "faster"),
    "P": ("correlated outcome_dist, 1k deals", "outcome_dist, independent", lambda r: r <= 30,
          "<= 30x"),
    "Q": ("sqlrisk demo (warm)", "its queries in a warm process", lambda r: r <= 2, "<= 2x"),
}
ACCURACY = {"K": 1e-12}
MEMORY = {"A": 1536, "C": 2048}


def run_case(name: str) -> dict:
    proc = subprocess.run([sys.executable, "-m", "tests.benchmarks.cases", name],
                          capture_output=True, text=True)
    if proc.returncode != 0:
        return {"error": proc.stderr.strip().splitlines()[-1] if proc.stderr else "failed"}
    return json.loads(proc.stdout.strip().splitlines()[-1])


def main() -> int:
    started = time.time()
    lines = [f"Machine: {os.cpu_count()} cores, {platform.machine()}, Python {platform.python_version()}; "
             f"{time.strftime('%Y-%m-%d')}", "",
             "| case | seconds | reference | reference seconds | ratio | target | met | peak MB | accuracy |",
             "|---|---|---|---|---|---|---|---|---|"]
    failures = 0
    details = []
    for name, (what, ref, ok, target) in TARGETS.items():
        r = run_case(name)
        if "error" in r:
            lines.append(f"| {name} {what} | error: {r['error']} | | | | {target} | no | | |")
            failures += 1
            continue
        ratio = r["seconds"] / r["reference_seconds"]
        met = ok(ratio) and r.get("accuracy", 0) <= ACCURACY.get(name, 1e-3)
        if name in MEMORY:
            met = met and r["peak_mb"] <= MEMORY[name]
            target += f", peak <= {MEMORY[name]} MB"
        failures += not met
        acc = f"{r['accuracy']:.1e}" if "accuracy" in r else ""
        if "detail" in r:
            details.append(f"- {name}: {r['detail']}")
        lines.append(f"| {name} {what} | {r['seconds']:.3f} | {ref} | {r['reference_seconds']:.3f} | "
                     f"{ratio:.3g} | {target} | {'yes' if met else 'no'} | {r['peak_mb']:.0f} | {acc} |")
    lines += [""] + details
    lines.append("")
    lines.append(f"Total bench time {time.time() - started:.0f} s.")
    print("\n".join(lines))
    return 0


if __name__ == "__main__":
    sys.exit(main())
