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
                        [sqlrisk.registry._t("STRUCT(a DOUBLE, p DOUBLE, c DOUBLE[])[]")],
                        sqlrisk.registry._t("DOUBLE"), type="arrow")
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


def case_c():
    con = connect()
    data.load(con, 1_000_000, 1)
    bands = timed(con, BANDS, repeats=1)
    auto_step = con.execute("SELECT outcome_dist(amount, prob).step FROM deals").fetchall()[0][0]
    error = band_error(con, [0], repr(auto_step / 2))
    data.load(con, 1_000_000, 10_000)
    a_time = timed(con, BANDS, repeats=1)
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
    result = CASES[sys.argv[1]]()
    result["peak_mb"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(json.dumps(result))
