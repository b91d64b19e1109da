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
from pathlib import Path

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


def _one_group(con, n: int, sql: str) -> float:
    data.load(con, n, 1)
    return timed(con, sql)


def case_correlated_large():
    """Target 3: correlated exact odds on 10,000 deals faster than outcome_sim with 10,000
    trials (the worse of rho = 0.2 and 0.3)."""
    con = _connect()
    ratios = {}
    detail = []
    for rho in (0.2, 0.3):
        exact = _one_group(con, 10_000, f"SELECT outcome_dist(amount, prob, correlation := {rho}) "
                                        "FROM deals")
        sim = _one_group(con, 10_000, "SELECT outcome_sim(amount, prob, trials := 10000, "
                                      f"correlation := {rho}) FROM deals")
        ratios[rho] = (exact, sim)
        detail.append(f"rho {rho}: outcome_dist {exact:.3f} s, outcome_sim {sim:.3f} s")
    worst = max(ratios, key=lambda r: ratios[r][0] / ratios[r][1])
    return {"seconds": ratios[worst][0], "reference_seconds": ratios[worst][1],
            "detail": "; ".join(detail)}


def case_correlated_small():
    """Target 3: correlated exact odds on 1,000 deals within 30x the independent outcome."""
    con = _connect()
    plain = _one_group(con, 1_000, "SELECT outcome_dist(amount, prob) FROM deals")
    times = {rho: _one_group(con, 1_000, f"SELECT outcome_dist(amount, prob, correlation := {rho}) "
                                         "FROM deals") for rho in (0.1, 0.2, 0.3)}
    worst = max(times, key=times.get)
    detail = "; ".join(f"rho {r}: {t:.4f} s ({t / plain:.1f}x)" for r, t in times.items())
    return {"seconds": times[worst], "reference_seconds": plain,
            "detail": f"independent {plain:.4f} s; {detail}"}


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


class _TimedConnection:
    """A connection that adds up the time its queries take: ``execute`` runs a query to
    completion (fetching converts what is already computed); a relation from ``sql`` runs
    when it is converted, so its conversions are timed too."""

    def __init__(self, con):
        self._con = con
        self.seconds = 0.0

    def _timed(self, call, *args, **kwargs):
        start = time.perf_counter()
        try:
            return call(*args, **kwargs)
        finally:
            self.seconds += time.perf_counter() - start

    def execute(self, *args, **kwargs):
        return self._timed(self._con.execute, *args, **kwargs)

    def sql(self, *args, **kwargs):
        return _TimedRelation(self._timed(self._con.sql, *args, **kwargs), self)

    def __getattr__(self, name):
        return getattr(self._con, name)


class _TimedRelation:
    """A relation whose conversions to rows or Arrow add to its connection's time."""

    RUNS = {"to_arrow_table", "arrow", "fetchall", "fetchone", "fetchmany", "fetchnumpy",
            "execute"}

    def __init__(self, rel, owner):
        self._rel = rel
        self._owner = owner

    def __getattr__(self, name):
        value = getattr(self._rel, name)
        if name in self.RUNS:
            return lambda *args, **kwargs: self._owner._timed(value, *args, **kwargs)
        return value


def case_demo_queries():
    """Target 4: `sqlrisk demo` (warm numba cache) within 2x the sum of its queries' own
    times, measured in one warm process on the same seeds."""
    import sqlrisk
    from sqlrisk.demo import run_demo
    exe = os.path.join(os.path.dirname(sys.executable), "sqlrisk")
    with tempfile.TemporaryDirectory() as tmp:
        subprocess.run([exe, "demo", "--output-dir", tmp], check=True, capture_output=True)
        wall = _wall([exe, "demo", "--output-dir", tmp])
        sums = []
        for _ in range(4):  # the first run warms this process up
            con = _TimedConnection(sqlrisk.connect())
            run_demo(con, Path(tmp))
            sums.append(con.seconds)
    queries = min(sums[1:])
    return {"seconds": wall, "reference_seconds": queries,
            "detail": f"sqlrisk demo {wall:.2f} s; its queries {queries:.2f} s in a warm process"}


CASES = {"G": case_floor, "H": case_sizes, "K": case_counts, "L": case_threads,
         "M": case_help, "N": case_correlated_large, "P": case_correlated_small,
         "Q": case_demo_queries}
