"""`make bench`, Spark case (issue 18): sqlrisk on a local[2] Spark session.

S  band odds per owner, 1M deals / 10k owners, 3 cuts joined per owner, read from Parquet:
   the SQL aggregate ``band_odds(amount, prob, c.cuts)``, its list form
   ``band_odds_list(collect_list(named_struct(...)), first(c.cuts))`` and the DataFrame
   path ``sqlrisk.spark.outcomes`` (which also stores each owner's outcome), against
   ``SUM(amount * prob)`` on Spark and against DuckDB + sqlrisk on the same Parquet; and
   the SQL list forms that give what the DataFrame path gives (outcome and band odds).
T  one group of 1M deals on one task: seconds and the Python workers' peak memory.

Spark results are written to Spark's ``noop`` sink (computed in full, nothing collected).
Each figure is the median of three runs after a warm-up run. Prints markdown tables.
"""

from __future__ import annotations

import os
import resource
import statistics
import sys
import tempfile
import time
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq

import sqlrisk
import sqlrisk.spark
from tests.benchmarks import data

DEALS, OWNERS = 1_000_000, 10_000


def timed(run, repeats: int = 3) -> float:
    run()
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        run()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def noop(df) -> None:
    df.write.format("noop").mode("overwrite").save()


def write_tables(folder: Path) -> tuple[str, str, str]:
    deals = data.pipeline(DEALS, OWNERS)
    pq.write_table(deals, folder / "deals.parquet")
    con = sqlrisk.connect()
    con.register("deals_in", deals)
    cuts = con.sql("SELECT owner, [0.6 * ev, ev, 1.3 * ev]::DOUBLE[] AS cuts FROM (SELECT "
                   "owner, sum(amount * prob) AS ev FROM deals_in GROUP BY owner)").arrow()
    pq.write_table(cuts.read_all() if hasattr(cuts, "read_all") else cuts,
                   folder / "cuts.parquet")
    one = deals.set_column(0, "owner", pa.array([0] * DEALS, pa.int64()))
    pq.write_table(one, folder / "one_group.parquet")
    return tuple(str(folder / f) for f in ("deals.parquet", "cuts.parquet", "one_group.parquet"))


def spark_case(spark, deals: str, cuts: str) -> dict:
    spark.read.parquet(deals).createOrReplaceTempView("deals")
    spark.read.parquet(cuts).createOrReplaceTempView("cuts")
    listed = "collect_list(named_struct('amount', amount, 'prob', prob))"
    queries = {
        "SUM(amount * prob)": "SELECT owner, sum(amount * prob) AS ev FROM deals GROUP BY owner",
        "SQL aggregate band_odds": "SELECT owner, band_odds(amount, prob, c.cuts) AS b FROM "
                                   "deals JOIN cuts c USING (owner) GROUP BY owner",
        "SQL list form band_odds_list": f"SELECT owner, band_odds_list({listed}, first(c.cuts))"
                                        " AS b FROM deals JOIN cuts c USING (owner) GROUP BY owner",
        "SQL list forms, outcome + band odds": f"SELECT owner, outcome_dist_list({listed}) AS o, "
                                               f"band_odds_list({listed}, first(c.cuts)) AS b "
                                               "FROM deals JOIN cuts c USING (owner) "
                                               "GROUP BY owner",
    }
    out = {name: timed(lambda sql=sql: noop(spark.sql(sql))) for name, sql in queries.items()}
    joined = spark.table("deals").join(spark.table("cuts"), "owner")
    out["DataFrame outcomes(..., cuts=)"] = timed(
        lambda: noop(sqlrisk.spark.outcomes(joined, "owner", cuts="cuts")))
    return out


def duckdb_case(deals: str, cuts: str) -> float:
    con = sqlrisk.connect()
    sql = (f"SELECT owner, band_odds(amount, prob, c.cuts) AS b FROM read_parquet('{deals}') "
           f"JOIN read_parquet('{cuts}') c USING (owner) GROUP BY owner")
    return timed(lambda: con.sql(sql).fetchall())


def worker_peak_mb(spark) -> float:
    """The largest peak resident memory among the (reused) Python workers, in MB."""
    def report(batches):
        for _ in batches:
            pass
        peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
        yield pa.RecordBatch.from_pydict({"pid": [os.getpid()], "peak": [peak]})
    rows = spark.range(0, 64, numPartitions=8).mapInArrow(report, "pid long, peak double")
    return max(r["peak"] for r in rows.collect())


def one_group_case(spark, one: str) -> dict:
    df = spark.read.parquet(one)
    df.createOrReplaceTempView("one_group")
    out = {}
    start = time.perf_counter()
    noop(sqlrisk.spark.outcomes(df, "owner", cuts=[15e6, 16e6, 17e6]))
    out["DataFrame outcomes, one group of 1M deals"] = time.perf_counter() - start
    start = time.perf_counter()
    noop(spark.sql("SELECT owner, band_odds_list(collect_list(named_struct('amount', amount, "
                   "'prob', prob)), array(15e6, 16e6, 17e6)) AS b FROM one_group GROUP BY owner"))
    out["SQL list form, one group of 1M deals"] = time.perf_counter() - start
    start = time.perf_counter()
    noop(spark.sql("SELECT owner, band_odds(amount, prob, array(15e6, 16e6, 17e6)) AS b "
                   "FROM one_group GROUP BY owner"))
    out["SQL aggregate, one group of 1M deals"] = time.perf_counter() - start
    return out


def main() -> int:
    with tempfile.TemporaryDirectory() as folder:
        deals, cuts, one = write_tables(Path(folder))
        spark = sqlrisk.spark.local_session(2, conf={"spark.driver.memory": "2g"})
        spark_times = spark_case(spark, deals, cuts)
        duck = duckdb_case(deals, cuts)
        base = spark_times["SUM(amount * prob)"]
        print(f"Spark case S: {DEALS:,} deals / {OWNERS:,} owners from Parquet, local[2], "
              f"{time.strftime('%Y-%m-%d')}; median of 3 after a warm-up\n")
        print("| route | seconds | vs Spark SUM(amount*prob) | vs DuckDB + sqlrisk band_odds |")
        print("|---|---|---|---|")
        for name, seconds in spark_times.items():
            print(f"| {name} | {seconds:.2f} | {seconds / base:.1f}x | {seconds / duck:.1f}x |")
        print(f"| DuckDB + sqlrisk band_odds, same Parquet | {duck:.2f} | {duck / base:.1f}x | "
              "1x |")
        before = worker_peak_mb(spark)
        big = one_group_case(spark, one)
        after = worker_peak_mb(spark)
        print(f"\nSpark case T: one group of {DEALS:,} deals on one task (one run each)\n")
        print("| route | seconds |")
        print("|---|---|")
        for name, seconds in big.items():
            print(f"| {name} | {seconds:.2f} |")
        print(f"\nPython workers' peak resident memory: {before:.0f} MB after case S, "
              f"{after:.0f} MB after case T.")
        spark.stop()
    return 0


if __name__ == "__main__":
    sys.exit(main())
