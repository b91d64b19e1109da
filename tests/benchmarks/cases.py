"""One benchmark case per function; each runs in its own process (see run.py).

Every case returns a dict: seconds (median of REPEATS runs after a warm-up),
reference_seconds (the same for what it is compared with), and accuracy where
one applies.
"""

from __future__ import annotations

import json
import resource
import statistics
import subprocess
import sys
import time

import duckdb
import numpy as np
import pyarrow as pa

import sqlrisk
from tests.benchmarks import data

REPEATS = 3


def timed(con, sql: str, repeats: int = REPEATS, params=None) -> float:
    con.execute(sql, params or []).fetchall()  # warm-up (and numba cache load)
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        con.execute(sql, params or []).fetchall()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def _noop(rows):
    return pa.array(np.zeros(len(rows)))


def connect():
    con = sqlrisk.connect()
    con.create_function("bench_noop", _noop,
                        [duckdb.sqltype("STRUCT(a DOUBLE, p DOUBLE, c DOUBLE[])[]")],
                        duckdb.sqltype("DOUBLE"), type="arrow")
    return con


FLOOR = ("SELECT owner, bench_noop(list({'a': amount::DOUBLE, 'p': prob::DOUBLE, 'c': cuts})) "
         "FROM deals JOIN cuts USING (owner) GROUP BY owner")
BANDS = "SELECT owner, band_odds(amount, prob, cuts) FROM deals JOIN cuts USING (owner) GROUP BY owner"
HAND_MC = """
    WITH sims AS (
        SELECT d.owner, t.trial, sum(CASE WHEN random() < d.prob THEN d.amount ELSE 0 END) AS total
        FROM deals AS d CROSS JOIN range({trials}) AS t(trial)
        GROUP BY d.owner, t.trial)
    SELECT s.owner,
           avg((s.total < c.cuts[1])::INT) AS b1,
           avg((s.total >= c.cuts[1] AND s.total < c.cuts[2])::INT) AS b2,
           avg((s.total >= c.cuts[2] AND s.total < c.cuts[3])::INT) AS b3,
           avg((s.total >= c.cuts[3])::INT) AS b4
    FROM sims AS s JOIN cuts AS c USING (owner)
    GROUP BY s.owner"""
SIM = ("SELECT owner, outcome_bands(outcome_sim(amount, prob, trials := {trials}), any_value(cuts)) "
       "FROM deals JOIN cuts USING (owner) GROUP BY owner")


def band_error(con, owners, step_sql: str) -> float:
    """Largest band difference between band_odds and a reference lattice on ``owners``."""
    rows = con.execute(f"""
        SELECT band_odds(amount, prob, cuts) AS fast,
               outcome_bands(outcome_dist(amount, prob, step := {step_sql}), any_value(cuts)) AS ref
        FROM deals JOIN cuts USING (owner)
        WHERE owner IN (SELECT unnest(?::BIGINT[]))
        GROUP BY owner""", [[int(o) for o in owners]]).fetchall()
    return max(float(np.max(np.abs(np.array(f) - np.array(r)))) for f, r in rows)


def case_a():
    con = connect()
    data.load(con, 1_000_000, 10_000)
    floor = timed(con, FLOOR)
    bands = timed(con, BANDS)
    owners = np.random.default_rng(1).choice(10_000, 100, replace=False)
    return {"seconds": bands, "reference_seconds": floor,
            "accuracy": band_error(con, owners, "100")}


def case_b():
    con = connect()
    data.load(con, 100_000, 1_000)
    hand = timed(con, HAND_MC.format(trials=1000), repeats=1)
    bands = timed(con, BANDS)
    return {"seconds": bands, "reference_seconds": hand}


def edgeworth_error(con) -> float:
    """Largest band difference from the Edgeworth expansion, for one very large group.

    A finer lattice is no reference for a million deals: its own splitting error
    is larger than the default's. The Edgeworth expansion of the standardised
    total to order 1/n (skewness, kurtosis and squared-skewness terms; Hall,
    "The Bootstrap and Edgeworth Expansion", 1992, sec. 2.2, from memory) with
    the exact cumulants of the deals is off by O(n^-3/2) plus a lattice term of
    order step / sd (100 / 4e7 here): ~1e-6, far below the 1e-3 tolerance.
    Cuts sit at EV - sd, EV and EV + sd (0.6/1.0/1.3 x EV are hundreds of sd apart).
    """
    from scipy import stats
    a, p = (np.asarray(c) for c in con.execute(
        "SELECT list(amount::DOUBLE), list(prob::DOUBLE) FROM deals").fetchall()[0])
    k1 = float(np.sum(a * p))
    k2 = float(np.sum(a ** 2 * p * (1 - p)))
    sd = np.sqrt(k2)
    g1 = float(np.sum(a ** 3 * p * (1 - p) * (1 - 2 * p))) / sd ** 3
    g2 = float(np.sum(a ** 4 * p * (1 - p) * (1 - 6 * p * (1 - p)))) / sd ** 4
    x = np.array([-1.0, 0.0, 1.0])
    he2, he3, he5 = x ** 2 - 1, x ** 3 - 3 * x, x ** 5 - 10 * x ** 3 + 15 * x
    cdf = stats.norm.cdf(x) - stats.norm.pdf(x) * (g1 / 6 * he2 + g2 / 24 * he3 + g1 ** 2 / 72 * he5)
    bands = con.execute("SELECT band_odds(amount, prob, ?::DOUBLE[]) FROM deals",
                        [list(k1 + sd * x)]).fetchall()[0][0]
    return float(np.max(np.abs(np.cumsum(bands)[:3] - cdf)))


def case_c():
    con = connect()
    data.load(con, 1_000_000, 1)
    bands = timed(con, BANDS, repeats=REPEATS)
    error = edgeworth_error(con)
    data.load(con, 1_000_000, 10_000)
    a_time = timed(con, BANDS, repeats=REPEATS)
    return {"seconds": bands, "reference_seconds": a_time, "accuracy": error}


def case_d():
    con = connect()
    data.load(con, 100_000, 1_000)
    hand = timed(con, HAND_MC.format(trials=1000), repeats=1)
    sim = timed(con, SIM.format(trials=1000))
    return {"seconds": sim, "reference_seconds": hand}


def case_f():
    """`sqlrisk demo` wall time: warm caches, and with numba compiling from scratch."""
    import os
    import tempfile
    exe = os.path.join(os.path.dirname(sys.executable), "sqlrisk")
    with tempfile.TemporaryDirectory() as tmp:
        env = dict(os.environ, NUMBA_CACHE_DIR=tmp)
        start = time.perf_counter()
        subprocess.run([exe, "demo", "--output-dir", tmp], env=env, check=True, capture_output=True)
        cold = time.perf_counter() - start
        warm = []
        for _ in range(REPEATS):
            start = time.perf_counter()
            subprocess.run([exe, "demo", "--output-dir", tmp], env=env, check=True,
                           capture_output=True)
            warm.append(time.perf_counter() - start)
    return {"seconds": statistics.median(warm), "reference_seconds": cold}


CASES = {"A": case_a, "B": case_b, "C": case_c, "D": case_d, "F": case_f}


if __name__ == "__main__":
    from tests.benchmarks import round2
    result = {**CASES, **round2.CASES}[sys.argv[1]]()
    result["peak_mb"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(json.dumps(result))
