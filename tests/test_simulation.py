"""``outcome_sim`` and ``outcome_bands_ci``: simulated outcomes against the exact
ones, Wilson intervals against SciPy, triangular deal sizes, reproducibility,
memory, errors."""

from __future__ import annotations

import json
import math
import random
import subprocess
import sys
import textwrap

import duckdb
import numpy as np
import pytest
from scipy import stats

import sqlrisk

TRIALS = 100_000


@pytest.fixture(scope="module")
def con():
    """One connection for the module (registering costs ~0.6 s per connection)."""
    connection = sqlrisk.connect()
    yield connection
    connection.close()


def invented_pipeline(seed: int) -> list[tuple[str, float, float]]:
    """Four groups of 20 to 80 deals: lognormal amounts rounded to 100, p in [0.05, 0.9]."""
    rng = np.random.default_rng(seed)
    rows = []
    for group, n in zip("abcd", (20, 45, 80, 60)):
        amounts = np.maximum(100.0, np.round(rng.lognormal(math.log(2000.0), 0.8, n), -2))
        probs = rng.uniform(0.05, 0.9, n)
        rows += [(group, float(a), float(p)) for a, p in zip(amounts, probs)]
    return rows


@pytest.fixture(scope="module")
def deals(con):
    con.execute("CREATE OR REPLACE TABLE deals(g VARCHAR, amount DOUBLE, prob DOUBLE)")
    con.executemany("INSERT INTO deals VALUES (?, ?, ?)", invented_pipeline(20240611))
    return "deals"


def cdf_on(o, xs):
    """P(S <= x) of an outcome read as lattice points, at each x in xs."""
    points = o["origin"] + o["step"] * np.arange(len(o["mass"]))
    cum = np.cumsum(o["mass"])
    idx = np.searchsorted(points, xs + 1e-6 * o["step"], side="right")
    return np.where(idx > 0, cum[np.maximum(idx - 1, 0)], 0.0)


@pytest.mark.parametrize("rho", [0.0, 0.2, 0.5])
def test_band_probabilities_inside_wilson_intervals(con, deals, rho):
    # Cuts halfway between the 100-unit lattice points, at the exact quantiles.
    rows = con.execute(f"""
        WITH o AS (SELECT g, outcome_dist(amount, prob, correlation := {rho}) AS exact,
                          outcome_sim(amount, prob, trials := {TRIALS}, seed := 3,
                                      correlation := {rho}) AS sim
                   FROM {deals} GROUP BY g),
             c AS (SELECT *, [x + 50 FOR x IN
                       outcome_quantiles(exact, [0.02, 0.2, 0.4, 0.6, 0.8, 0.98])] AS cuts FROM o)
        SELECT g, outcome_bands(exact, cuts), outcome_bands_ci(sim, cuts, level := 0.999),
               outcome_bands(sim, cuts), sim.trials
        FROM c ORDER BY g""").fetchall()
    assert [r[0] for r in rows] == list("abcd")
    for g, exact, intervals, estimate, trials in rows:
        assert trials == TRIALS
        for p, ci, est in zip(exact, intervals, estimate):
            assert ci["lo"] <= est <= ci["hi"]
            assert ci["lo"] <= p <= ci["hi"], (g, exact, intervals)


@pytest.mark.parametrize("rho", [0.0, 0.3])
def test_kolmogorov_smirnov_distance_to_exact_cdf(con, deals, rho):
    # step := 100 puts both on the exact 100-unit lattice (rounding 0), so both
    # CDFs are step functions jumping only at lattice points and the supremum is
    # reached on the union of those points.
    rows = con.execute(f"""
        SELECT g, outcome_dist(amount, prob, step := 100, correlation := {rho}),
               outcome_sim(amount, prob, trials := {TRIALS}, seed := 9, step := 100,
                           correlation := {rho})
        FROM {deals} GROUP BY g ORDER BY g""").fetchall()
    # Source: exact distribution of the one-sample KS statistic D_n (scipy.stats.kstwo,
    # Simard & L'Ecuyer 2011). For a discrete law the test is conservative.
    critical = stats.kstwo(TRIALS).ppf(0.999)
    assert critical == pytest.approx(1.949 / math.sqrt(TRIALS), rel=0.01)
    # ... whose 95% point is the familiar 1.36 / sqrt(n) (Smirnov 1948).
    assert stats.kstwo(TRIALS).ppf(0.95) == pytest.approx(1.36 / math.sqrt(TRIALS), rel=0.01)
    for g, exact, sim in rows:
        assert exact["rounding"] == 0.0 and sim["rounding"] == 0.0
        assert exact["step"] == sim["step"] == 100.0
        xs = np.union1d(exact["origin"] + 100.0 * np.arange(len(exact["mass"])),
                        sim["origin"] + 100.0 * np.arange(len(sim["mass"])))
        distance = np.abs(cdf_on(exact, xs) - cdf_on(sim, xs)).max()
        assert distance < critical, (g, distance, critical)


@pytest.mark.parametrize("level", [0.5, 0.8, 0.95, 0.99, 0.999])
def test_wilson_bounds_match_scipy(con, level):
    o, bands, intervals = con.execute(f"""
        SELECT o, outcome_bands(o, [150.0, 400.0]),
               outcome_bands_ci(o, [150.0, 400.0], level := {level})
        FROM (SELECT outcome_sim(amount, prob, trials := 2500, seed := 21) AS o
              FROM (VALUES (100.0, 0.3), (200.0, 0.45), (300.0, 0.2)) t(amount, prob))
        """).fetchone()
    assert o["rounding"] == 0.0 and o["step"] == 100.0  # exact lattice: read as points
    for p, ci in zip(bands, intervals):
        k = round(p * 2500)
        assert p == pytest.approx(k / 2500, abs=1e-12)  # point estimate = count / trials
        # Source: scipy.stats.binomtest(...).proportion_ci(method='wilson')
        # (Wilson, JASA 22, 1927; no continuity correction).
        ref = stats.binomtest(k, 2500).proportion_ci(confidence_level=level, method="wilson")
        assert ci["lo"] == pytest.approx(ref.low, abs=1e-12)
        assert ci["hi"] == pytest.approx(ref.high, abs=1e-12)


def test_exact_outcome_has_degenerate_intervals(con):
    bands, intervals = con.execute("""
        SELECT outcome_bands(o, [150.0, 400.0]), outcome_bands_ci(o, [150.0, 400.0])
        FROM (SELECT outcome_dist(amount, prob) AS o
              FROM (VALUES (100.0, 0.3), (200.0, 0.45), (300.0, 0.2)) t(amount, prob))
        """).fetchone()
    assert [(ci["lo"], ci["hi"]) for ci in intervals] == [(p, p) for p in bands]


def triangular_moments(low, mode, high):
    """Mean (a + b + c) / 3 and variance (a^2 + b^2 + c^2 - ab - ac - bc) / 18 of the
    triangular distribution (Evans, Hastings & Peacock, Statistical Distributions,
    3rd ed. 2000, ch. 40)."""
    a, b, c = low, mode, high
    return (a + b + c) / 3.0, (a * a + b * b + c * c - a * b - a * c - b * c) / 18.0


@pytest.mark.parametrize("prob, low, mode, high", [
    (1.0, 1000.0, 1500.0, 4000.0),
    (1.0, 200.0, 200.0, 500.0),   # mode at the low end
    (1.0, 0.0, 900.0, 900.0),     # mode at the high end
    (0.4, 1000.0, 1500.0, 4000.0),
])
def test_triangular_amounts(con, prob, low, mode, high):
    trials = 200_000
    o, mean = con.execute(f"""
        SELECT o, outcome_mean(o) FROM (
            SELECT outcome_sim({mode}, {prob}, trials := {trials}, seed := 4,
                               low := {low}, high := {high}) AS o)""").fetchone()
    mu, var = triangular_moments(low, mode, high)
    # A deal won with probability p: mean p mu, variance p (var + mu^2) - (p mu)^2.
    mean_ref, var_ref = prob * mu, prob * (var + mu * mu) - (prob * mu) ** 2
    assert abs(mean - mean_ref) < 4.0 * math.sqrt(var_ref / trials), (mean, mean_ref)
    if prob == 1.0:
        # Totals go to the nearest of the lattice points, so the counts up to each
        # midpoint x_i + step/2 are the empirical CDF there: a KS test against
        # scipy.stats.triang (c = (mode - low) / (high - low)) at those points.
        assert o["rounding"] == o["step"] > 0
        edges = o["origin"] + o["step"] * (np.arange(len(o["mass"])) + 0.5)
        shape = (mode - low) / (high - low)
        ref = stats.triang.cdf(edges, shape, loc=low, scale=high - low)
        distance = np.abs(np.cumsum(o["mass"]) - ref).max()
        assert distance < stats.kstwo(trials).ppf(0.999)


# -- reproducibility ------------------------------------------------------------

SIM = ("outcome_sim(amount, prob, trials := {trials}, seed := {seed}, correlation := {rho}, "
       "low := low, high := high)")


def ranged_rows(con, name, order):
    """A table of the invented pipeline with size ranges on some deals, rows in ``order``."""
    rows = invented_pipeline(77)
    rows = [(g, a, p, a * 0.8 if i % 3 == 0 else None, a * 1.3 if i % 4 == 0 else None)
            for i, (g, a, p) in enumerate(rows)]
    con.execute(f"CREATE OR REPLACE TABLE {name}"
                "(g VARCHAR, amount DOUBLE, prob DOUBLE, low DOUBLE, high DOUBLE)")
    con.executemany(f"INSERT INTO {name} VALUES (?, ?, ?, ?, ?)", [rows[i] for i in order])


@pytest.mark.parametrize("rho", [0.0, 0.25])
def test_same_result_whatever_the_row_order(con, rho):
    n = len(invented_pipeline(77))
    shuffled = list(range(n))
    random.Random(5).shuffle(shuffled)
    ranged_rows(con, "ordered", range(n))
    ranged_rows(con, "shuffled", shuffled)
    sim = SIM.format(trials=20_000, seed=8, rho=rho)
    results = [con.execute(f"SELECT g, {sim} FROM {t} GROUP BY g ORDER BY g").fetchall()
               for t in ("ordered", "shuffled")]
    assert results[0] == results[1]
    assert len({str(o) for _, o in results[0]}) == 4


def test_same_result_whatever_threads_and_batches():
    # 5,000 groups are more than one 2,048-group UDF batch, and 2,048 groups x
    # 5,000 trials exceed one simulation slice (TOTALS_PER_SLICE = 2**23 totals).
    con = sqlrisk.connect()
    con.execute("SET enable_progress_bar = false")
    con.execute("""CREATE TABLE many AS
        SELECT g, 100.0 * (1 + (g * 7 + d * 13) % 23) AS amount,
               0.05 + ((g * 11 + d * 5) % 90) / 100.0 AS prob,
               CASE WHEN d = 0 THEN 50.0 * (1 + (g * 7) % 23) END AS low,
               CASE WHEN d < 2 THEN 150.0 * (1 + (g * 7 + d * 13) % 23) END AS high
        FROM range(5000) a(g), range(4) b(d)""")
    sim = SIM.format(trials=5_000, seed=5, rho=0.15)
    for threads in (1, 4):
        con.execute(f"SET threads = {threads}")
        con.execute(f"CREATE TABLE run_{threads} AS SELECT g, {sim} AS o FROM many GROUP BY g")
    # Compared in SQL: STRUCT equality compares every double of every mass list.
    differ, total, distinct = con.execute("""
        SELECT count(*) FILTER (WHERE a.o IS DISTINCT FROM b.o), count(*),
               count(DISTINCT a.o.mass)
        FROM run_1 a JOIN run_4 b USING (g)""").fetchone()
    assert (differ, total) == (0, 5000) and distinct > 100
    picks = (0, 17, 2047, 2048, 4095, 4096, 4999)
    alone = [con.execute(f"SELECT {sim} FROM many WHERE g = {g}").fetchone()[0] for g in picks]
    together = [con.execute(f"SELECT o FROM run_4 WHERE g = {g}").fetchone()[0] for g in picks]
    assert alone == together
    con.close()


def test_seed_changes_the_outcome_and_nothing_else_does(con, deals):
    def sim(seed, trials=20_000):
        return con.execute(f"SELECT outcome_sim(amount, prob, trials := {trials}, seed := {seed}) "
                           f"FROM {deals} WHERE g = 'b'").fetchone()[0]

    assert sim(1) == sim(1)
    outcomes = [sim(s) for s in (0, 1, 2, -1, 2**62)]
    assert len({json.dumps(o) for o in outcomes}) == len(outcomes)
    assert sim("NULL") == sim(0)  # a NULL seed is seed 0
    with sqlrisk.connect() as other:  # a new connection draws the same numbers
        other.execute("CREATE TABLE deals(g VARCHAR, amount DOUBLE, prob DOUBLE)")
        other.executemany("INSERT INTO deals VALUES (?, ?, ?)", invented_pipeline(20240611))
        again = other.execute("SELECT outcome_sim(amount, prob, trials := 20000, seed := 1) "
                              "FROM deals WHERE g = 'b'").fetchone()[0]
    assert again == sim(1)


# -- memory -----------------------------------------------------------------------

MEMORY_SCRIPT = textwrap.dedent("""
    import json, resource, sys, time
    import sqlrisk

    def peak_mib():
        # VmHWM is this process's own high-water mark. ru_maxrss is not: on Linux
        # it keeps the parent's high-water mark across fork + exec, so a child of a
        # pytest process that has grown to 1.4 GB reports 1.4 GB whatever it does.
        try:
            with open("/proc/self/status") as status:
                for line in status:
                    if line.startswith("VmHWM:"):
                        return int(line.split()[1]) / 1024
        except OSError:
            pass
        return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024

    con = sqlrisk.connect()
    con.execute("SET enable_progress_bar = false")
    query = ("SELECT outcome_sim(100.0 * (1 + i % 37), 0.05 + 0.9 * ((i * 7) % 100) / 100.0, "
             "trials := {trials}, seed := 11) FROM range(200) r(i)")
    con.execute(query.format(trials=10)).fetchall()  # compile before measuring
    before = peak_mib()
    start = time.perf_counter()
    o = con.execute(query.format(trials=int(sys.argv[1]))).fetchone()[0]
    mean = sum(i * m for i, m in enumerate(o["mass"])) * o["step"] + o["origin"]
    print(json.dumps({"seconds": time.perf_counter() - start, "trials": o["trials"],
                      "before_mib": before, "peak_mib": peak_mib(), "mean": mean}))
""")


def test_ten_million_trials_over_200_deals_in_bounded_memory():
    # Measured: ~20 s and ~530 MiB peak (~300 MiB before the query) on 2 cores,
    # under the 60 s limit for the default run, so there is no slow marker.
    done = subprocess.run([sys.executable, "-c", MEMORY_SCRIPT, "10000000"],
                          capture_output=True, text=True, timeout=300, check=True)
    run = json.loads(done.stdout.strip().splitlines()[-1])
    assert run["trials"] == 10_000_000
    # A trials x deals matrix of doubles would take 10^7 * 200 * 8 bytes = 16 GB;
    # the totals alone take 80 MB.
    assert run["peak_mib"] < 1536, run
    assert run["peak_mib"] - run["before_mib"] < 800, run
    # The mean of the 200 deals: sum of amount * prob, as in the query.
    expected = sum(100.0 * (1 + i % 37) * (0.05 + 0.9 * ((i * 7) % 100) / 100.0)
                   for i in range(200))
    assert run["mean"] == pytest.approx(expected, rel=1e-3)


# -- errors and mixing --------------------------------------------------------------

DEAL = "(VALUES (100.0, 0.3, 80.0, 150.0), (250.0, 0.6, NULL, NULL)) t(amount, prob, lo, hi)"


@pytest.mark.parametrize("args, message", [
    ("trials := 0", r"outcome_sim: trials 0(\.0)? is outside \[1, 100,000,000\]"),
    ("trials := -5", r"outcome_sim: trials -5(\.0)? is outside \[1, 100,000,000\]"),
    ("trials := 100000001", r"outcome_sim: trials 100000001(\.0)? is outside"),
    ("correlation := -0.1", r"outcome_sim: correlation -0\.1 is outside \[0, 1\)"),
    ("correlation := 1.0", r"outcome_sim: correlation 1(\.0)? is outside \[0, 1\)"),
    ("correlation := 1.5", r"outcome_sim: correlation 1\.5 is outside \[0, 1\)"),
    ("low := amount + 1", r"outcome_sim: low 101(\.0)? is above the amount 100"),
    ("high := amount - 1", r"outcome_sim: high 99(\.0)? is below the amount 100"),
    ("low := lo, high := lo", r"outcome_sim: high 80(\.0)? is below the amount 100"),
    ("step := -1", r"outcome_sim: step -1(\.0)? must be > 0"),
])
def test_errors_name_the_function(con, args, message):
    with pytest.raises(duckdb.Error, match=message) as info:
        con.execute(f"SELECT outcome_sim(amount, prob, {args}) FROM {DEAL}").fetchall()
    assert "\n" not in str(info.value)


def test_step_zero_is_an_error_as_in_outcome_dist(con):
    with pytest.raises(duckdb.Error, match=r"outcome_dist: step 0(\.0)? must be > 0"):
        con.execute(f"SELECT outcome_dist(amount, prob, step := 0) FROM {DEAL}").fetchall()
    with pytest.raises(duckdb.Error, match=r"outcome_sim: step 0(\.0)? must be > 0"):
        con.execute(f"SELECT outcome_sim(amount, prob, step := 0) FROM {DEAL}").fetchall()


def test_bands_ci_level_outside_unit_interval_is_an_error(con):
    with pytest.raises(duckdb.Error, match=r"outcome_bands_ci: level 1(\.0)? is outside \(0, 1\)"):
        con.execute(f"SELECT outcome_bands_ci(outcome_sim(amount, prob, trials := 100), "
                    f"[150.0], level := 1.0) FROM {DEAL}").fetchall()


def test_simulated_mixed_with_exact_stays_simulated(con, deals):
    added, merged, ci = con.execute(f"""
        WITH o AS (SELECT g, outcome_sim(amount, prob, trials := 30000, seed := 2) AS sim,
                             outcome_dist(amount, prob) AS exact FROM {deals} GROUP BY g)
        SELECT outcome_add(a.sim, b.exact),
               (SELECT outcome_merge(x) FROM (SELECT sim AS x FROM o WHERE g = 'a'
                                               UNION ALL SELECT exact FROM o WHERE g <> 'a')),
               outcome_bands_ci(outcome_add(a.sim, b.exact), [50000.0])
        FROM o a, o b WHERE a.g = 'a' AND b.g = 'b'""").fetchone()
    assert added["trials"] == 30_000 and merged["trials"] == 30_000
    assert all(0 < c["lo"] < c["hi"] < 1 for c in ci)  # a real interval, not lo = hi
