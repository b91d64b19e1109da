"""Benchmark cases of the second speed round (issue 17); run by run.py like cases.py.

Each case returns seconds, reference_seconds (ratio = seconds / reference_seconds), accuracy
where one applies, and ``detail``: the figures behind the ratio, printed under the table.
"""

from __future__ import annotations

import os
import subprocess
import sys
import tempfile
import time

import duckdb
import numpy as np
import pyarrow as pa

from tests.benchmarks import data
from tests.benchmarks.cases import connect, timed

LISTS_NOOP = "SELECT owner, bench_lists(list(amount), list(prob)) FROM deals GROUP BY owner"
READERS = {
    "band_odds, constant cuts":
        "SELECT owner, band_odds(amount, prob, [2e5, 4e5, 6e5]) FROM deals GROUP BY owner",
    "band_odds, joined cuts":
        "SELECT owner, band_odds(amount, prob, cuts) FROM deals JOIN cuts USING (owner) "
        "GROUP BY owner",
    "reach_odds": "SELECT owner, reach_odds(amount, prob, 4e5) FROM deals GROUP BY owner",
    "total_quantiles":
        "SELECT owner, total_quantiles(amount, prob, [0.1, 0.5, 0.9]) FROM deals GROUP BY owner",
}
BANDS = READERS["band_odds, joined cuts"]


def _lists_noop(amount, prob):
    return pa.array(np.zeros(len(amount)))


def _connect():
    con = connect()
    con.create_function("bench_lists", _lists_noop,
                        [duckdb.sqltype("DOUBLE[]"), duckdb.sqltype("DOUBLE[]")],
                        duckdb.sqltype("DOUBLE"), type="arrow")
    return con


def case_floor():
    """Target 1: each reader within 3x a no-op UDF over list(amount), list(prob)."""
    con = _connect()
    data.load(con, 1_000_000, 10_000)
    floor = timed(con, LISTS_NOOP)
    times = {name: timed(con, sql) for name, sql in READERS.items()}
    worst = max(times, key=times.get)
    detail = "; ".join(f"{n} {t:.3f} s ({t / floor:.1f}x)" for n, t in times.items())
    return {"seconds": times[worst], "reference_seconds": floor,
            "detail": f"no-op {floor:.3f} s; {detail}; worst: {worst}"}


def case_sizes():
    """Target 2: 1M deals in groups of 10 ... 100,000 within 1.5x groups of 100."""
    con = _connect()
    times = {}
    for size in (100, 10, 1_000, 10_000, 100_000):
        data.load(con, 1_000_000, 1_000_000 // size)
        times[size] = timed(con, BANDS)
    base = times.pop(100)
    worst = max(times, key=times.get)
    detail = "; ".join(f"{s:,}: {t:.3f} s ({t / base:.2f}x)" for s, t in times.items())
    return {"seconds": times[worst], "reference_seconds": base,
            "detail": f"groups of 100: {base:.3f} s; {detail}"}


def case_counts():
    """Target 5: outcome_dist(1, prob) on 10,000 deals against SciPy's poisson_binom pmf."""
    from scipy import stats
    rng = np.random.default_rng(data.SEED)
    probs = rng.uniform(0.02, 0.95, 10_000).round(3)
    con = _connect()
    con.execute("CREATE TABLE counts AS SELECT unnest(?::DOUBLE[]) AS prob", [probs.tolist()])
    sql = "SELECT outcome_dist(1, prob) FROM counts"
    ours = timed(con, sql)
    o = con.execute(sql).fetchall()[0][0]
    start = time.perf_counter()
    ref = stats.poisson_binom(probs).pmf(np.arange(len(probs) + 1))
    scipy_seconds = time.perf_counter() - start
    mass = np.zeros(len(probs) + 1)
    first = int(round(o["origin"]))
    mass[first:first + len(o["mass"])] = o["mass"]
    return {"seconds": ours, "reference_seconds": scipy_seconds,
            "accuracy": float(np.max(np.abs(mass - ref))),
            "detail": f"outcome_dist(1, prob) {ours:.4f} s, scipy poisson_binom pmf "
                      f"{scipy_seconds:.2f} s, largest difference {np.max(np.abs(mass - ref)):.1e}"}


def case_threads():
    """Target 6: case A's band_odds on two threads against one."""
    con = _connect()
    data.load(con, 1_000_000, 10_000)
    con.execute("SET threads = 1")
    one = timed(con, BANDS)
    con.execute("SET threads = 2")
    two = timed(con, BANDS)
    return {"seconds": two, "reference_seconds": one,
            "detail": f"threads = 1: {one:.3f} s, threads = 2: {two:.3f} s, gain {one / two:.2f}x"}


def _wall(args, env=None, repeats: int = 3) -> float:
    best = float("inf")
    for _ in range(repeats):
        start = time.perf_counter()
        subprocess.run(args, env=env, check=True, capture_output=True)
        best = min(best, time.perf_counter() - start)
    return best


def case_help():
    """Target 4: `sqlrisk --help` against `python -c "import duckdb, typer, numpy"`, and the
    first band_odds query with an empty numba cache (reported)."""
    exe = os.path.join(os.path.dirname(sys.executable), "sqlrisk")
    help_seconds = _wall([exe, "--help"])
    imports = _wall([sys.executable, "-c", "import duckdb, typer, numpy"])
    first = ("import time, sqlrisk; t = time.perf_counter(); c = sqlrisk.connect(); "
             "c.execute('SELECT band_odds(x, 0.5, [1.0]) FROM range(10) t(x)').fetchall(); "
             "print(time.perf_counter() - t)")
    with tempfile.TemporaryDirectory() as tmp:
        env = dict(os.environ, NUMBA_CACHE_DIR=tmp)
        out = subprocess.run([sys.executable, "-c", first], env=env, check=True,
                             capture_output=True, text=True).stdout
    cold = float(out.strip().splitlines()[-1])
    return {"seconds": help_seconds, "reference_seconds": imports,
            "detail": f"sqlrisk --help {help_seconds:.2f} s, imports {imports:.2f} s; first "
                      f"band_odds with an empty numba cache {cold:.1f} s"}


CASES = {"G": case_floor, "H": case_sizes, "K": case_counts, "L": case_threads,
         "M": case_help}
