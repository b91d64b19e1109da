"""Band accuracy by group size and amount unit, against exact distributions.

    python -m tests.benchmarks.accuracy [--groups 100] [--sizes 3,5,8] [--units cents,tens]
                                        [--scenario-max 12]

For each group size and unit, random groups (amounts log-normal around 13,000,
rounded to the unit, one deal in ten a credit note; win probabilities uniform in
0.02-0.95 to two decimals) are computed by sqlrisk and compared with an exact
distribution from ``tests/exact_reference.py`` (enumeration up to 20 deals, the
exact unit lattice otherwise). Two
columns per cell:

* ``band_odds``: the largest band error with three cuts placed on scenario totals
  (the totals nearest the exact P10, P50 and P90);
* ``outcome_dist``: the largest error of any band read with ``outcome_bands``
  from the stored outcome, with cuts on every scenario total and midway between
  neighbouring ones (a sample of 20,000 of each when there are more).

Groups of 40 or more deals in cents have no exact reference that fits in
memory and time; they are compared with a lattice of step 0.25 (40 deals), 1.00
(100) or 10.00 (1,000) with each amount split between its neighbours, read with
the CDF linear inside each bin. Its split moves the total by a few steps, under
1e-4 of its spread, and at that size no scenario weighs more than 1e-5; its own
error is below 2e-5 there.
"""

from __future__ import annotations

import argparse
import time

import numpy as np
import pyarrow as pa

import sqlrisk
from tests import exact_reference as ref

UNITS = {"cents": 0.01, "tens": 10.0, "hundreds": 100.0}
SIZES = [3, 5, 8, 12, 20, 40, 100, 1000]
SAMPLE = 20_000


def random_group(rng, n: int, unit: float):
    """``(units, probs)``: amounts as whole multiples of ``unit``."""
    amount = np.exp(rng.normal(np.log(13_000), 1.0, n))
    units = np.maximum(np.round(amount / unit), 1).astype(np.int64)
    units[rng.uniform(size=n) < 0.1] *= -1
    probs = rng.uniform(0.02, 0.95, n).round(2)
    return units, probs


def shaped_group(rng, n: int, unit: float, shape: str,
                 dominant: tuple[int, ...] = (10, 100, 1000, 10_000)):
    """``random_group`` bent into a shape that is hard to read: one deal ``dominant`` times
    the others, credit notes, stage probabilities, near-certain deals, or "sure things"
    (lumpy at any size: the likeliest scenario carries at least 1e-4); "plain" as drawn."""
    units, probs = random_group(rng, n, unit)
    if shape == "dominant":
        units[0] = abs(units[0]) * int(rng.choice(list(dominant)))
    elif shape == "credit notes":
        units[rng.uniform(size=n) < 0.4] *= -1
    elif shape == "stages":
        probs = rng.choice([0.1, 0.25, 0.5, 0.75, 0.9], n)
    elif shape == "near certain":
        probs = rng.choice([0.02, 0.05, 0.5, 0.95, 0.98], n)
    elif shape == "sure things":
        probs = rng.choice([0.01, 0.02, 0.97, 0.98, 0.99], n)
    return units, probs


def reference(units, probs, unit: float, rng):
    """``(cdf, cuts)``: a function P(S < c) of cuts in units, and the cuts to test
    (scenario totals and midpoints, in units)."""
    n = len(units)
    if n <= 20:
        values, mass = ref.atoms(units, probs)
        return (lambda c: ref.below(values, mass, c)), _cuts_from_atoms(values, mass, rng)
    if unit < 1:
        step = 25 if n <= 40 else 100 if n <= 100 else 1000  # 0.25, 1.00, 10.00
        cdf_at = _split_lattice(units, probs, step)
        return (lambda c: cdf_at(np.asarray(c, dtype=np.float64))), _sample_points(rng, units, probs)
    first, pmf = ref.lattice(units, probs)
    values = first + np.flatnonzero(pmf > 0)
    mass = pmf[pmf > 0]
    return (lambda c: ref.below(values, mass, c)), _cuts_from_atoms(values, mass, rng)


def _cuts_from_atoms(values, mass, rng):
    if len(values) > SAMPLE:
        heavy = np.argsort(mass)[-SAMPLE // 2:]
        spread = rng.choice(len(values), SAMPLE // 2, p=mass / mass.sum())
        values = values[np.unique(np.concatenate([heavy, spread]))]
    mids = (values[:-1] + values[1:]) / 2.0
    return np.unique(np.concatenate([values.astype(np.float64), mids]))


def _sample_points(rng, units, probs):
    won = rng.uniform(size=(SAMPLE // 2, len(units))) < probs
    on = np.unique(won.astype(np.float64) @ units.astype(np.float64))
    return np.unique(np.concatenate([on, on + 0.5]))


def _split_lattice(units, probs, step):
    """A lattice of ``step`` units with each amount split between its neighbours
    (mean kept), read with the CDF linear inside each bin."""
    k = np.floor(units / step).astype(np.int64)
    f = units / step - k
    first = int(np.minimum(k, 0).sum())
    parts = []
    for kk, ff, p in zip(k, f, probs):
        lo = min(kk, 0)
        row = np.zeros(max(kk + 1, 0) - lo + 1)
        row[-lo] += 1.0 - p
        row[kk - lo] += p * (1.0 - ff)
        row[kk + 1 - lo] += p * ff
        parts.append(row)
    parts.sort(key=len)
    while len(parts) > 1:
        nxt = [ref._convolve(parts[i], parts[i + 1]) for i in range(0, len(parts) - 1, 2)]
        if len(parts) % 2:
            nxt.append(parts[-1])
        parts = nxt
    pmf = np.maximum(parts[0], 0.0)
    pmf /= pmf.sum()
    cum = np.concatenate([[0.0], np.cumsum(pmf)])

    def cdf_at(c):
        u = c / step - first + 0.5  # bin j covers [j - 0.5, j + 0.5) in steps
        j = np.clip(np.floor(u).astype(np.int64), 0, len(pmf))
        frac = np.clip(u - j, 0.0, 1.0)
        nxt = np.minimum(j + 1, len(pmf))
        return cum[j] + frac * (cum[nxt] - cum[j])

    return cdf_at


def quantile_atoms(cdf, cuts, levels=(0.1, 0.5, 0.9)):
    """The scenario totals (from ``cuts``, integers only) nearest the exact quantiles."""
    on = cuts[cuts == np.round(cuts)]
    below = cdf(on + 0.5)  # P(S <= x)
    out = sorted({float(on[min(np.searchsorted(below, q), len(on) - 1)]) for q in levels})
    return np.array(out)


def measure(n: int, unit_name: str, groups: int, seed: int) -> tuple[float, float]:
    unit = UNITS[unit_name]
    rng = np.random.default_rng([seed, n, int(unit * 100)])
    con = sqlrisk.connect()
    rows, refs = [], []
    for g in range(groups):
        units, probs = random_group(rng, n, unit)
        cdf, cuts = reference(units, probs, unit, rng)
        band_cuts = quantile_atoms(cdf, cuts)
        refs.append((cdf, cuts, band_cuts))
        rows.append(pa.table({"g": np.full(n, g), "amount": units * unit, "prob": probs}))
    con.register("_deals", pa.concat_tables(rows))
    con.execute("CREATE TABLE deals AS SELECT * FROM _deals")
    con.register("_cuts", pa.table({
        "g": np.arange(groups),
        "band_cuts": pa.array([list(r[2] * unit) for r in refs], pa.list_(pa.float64())),
        "all_cuts": pa.array([list(r[1] * unit) for r in refs], pa.list_(pa.float64()))}))
    con.execute("CREATE TABLE cuts AS SELECT * FROM _cuts")
    fast = dict(con.execute("SELECT g, band_odds(amount, prob, band_cuts) FROM deals "
                            "JOIN cuts USING (g) GROUP BY g").fetchall())
    stored = dict(con.execute("""
        WITH o AS (SELECT g, outcome_dist(amount, prob) AS o FROM deals GROUP BY g)
        SELECT g, outcome_bands(o, all_cuts) FROM o JOIN cuts USING (g)""").fetchall())
    worst_fast = worst_stored = 0.0
    for g, (cdf, cuts, band_cuts) in enumerate(refs):
        exact = np.diff(np.concatenate([[0.0], cdf(band_cuts), [1.0]]))
        worst_fast = max(worst_fast, float(np.max(np.abs(np.array(fast[g]) - exact))))
        read = np.cumsum(stored[g])[:-1]
        err = read - cdf(cuts)
        worst_stored = max(worst_stored, max(err.max(), 0.0) - min(err.min(), 0.0))
    con.close()
    return worst_fast, worst_stored


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--groups", type=int, default=100)
    parser.add_argument("--sizes", default=",".join(map(str, SIZES)))
    parser.add_argument("--units", default=",".join(UNITS))
    parser.add_argument("--seed", type=int, default=11)
    parser.add_argument("--scenario-max", type=int, default=None,
                        help="answer groups of at most this many uncertain deals from their "
                             "scenarios (default: sqlrisk's own threshold), to measure the "
                             "lattice where the scenarios would otherwise answer")
    args = parser.parse_args()
    if args.scenario_max is not None:
        from sqlrisk.kernels import scenarios
        scenarios.MAX_DEALS = args.scenario_max
    print(f"Largest band error over {args.groups} random groups per cell "
          "(band_odds / outcome_bands(outcome_dist(...)))\n")
    units = args.units.split(",")
    print("| deals | " + " | ".join(units) + " |")
    print("|---|" + "---|" * len(units))
    for n in map(int, args.sizes.split(",")):
        cells = []
        for unit_name in units:
            start = time.perf_counter()
            fast, stored = measure(n, unit_name, args.groups, args.seed)
            cells.append(f"{fast:.1e} / {stored:.1e}")
            print(f"  ({n} deals, {unit_name}: {time.perf_counter() - start:.1f} s)", flush=True,
                  file=__import__("sys").stderr)
        print(f"| {n:,} | " + " | ".join(cells) + " |", flush=True)


if __name__ == "__main__":
    main()
