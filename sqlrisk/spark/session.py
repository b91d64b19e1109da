"""A local SparkSession set up the way sqlrisk's functions need (tests, bench, trying it).

The settings that matter on any cluster are the same (README, "On Spark"): Arrow on,
the workers' Python being the one sqlrisk is installed in, and one numba cache that
every Python worker reads instead of compiling the kernels again.
"""

from __future__ import annotations

import os
import shutil
import sys

from ..errors import SqlriskError


def java_home() -> str | None:
    """The Java installation behind ``java`` on PATH (``JAVA_HOME`` when set)."""
    if os.environ.get("JAVA_HOME"):
        return os.environ["JAVA_HOME"]
    java = shutil.which("java")
    return os.path.dirname(os.path.dirname(os.path.realpath(java))) if java else None


def local_session(cores: int = 2, app: str = "sqlrisk", conf: dict | None = None):
    """A ``local[cores]`` SparkSession with Arrow on and sqlrisk's functions registered.

    Sets ``PYSPARK_PYTHON`` and ``PYSPARK_DRIVER_PYTHON`` to this Python,
    ``SPARK_LOCAL_IP`` to 127.0.0.1 and ``JAVA_HOME`` from ``java`` on PATH, where they
    are not set already; ``conf`` adds or overrides Spark settings.
    """
    home = java_home()
    if home is None:
        raise SqlriskError("local_session: no Java found (Spark needs Java 17 or later); "
                           "install it or set JAVA_HOME")
    for key, value in (("PYSPARK_PYTHON", sys.executable),
                       ("PYSPARK_DRIVER_PYTHON", sys.executable),
                       ("SPARK_LOCAL_IP", "127.0.0.1"), ("JAVA_HOME", home)):
        os.environ.setdefault(key, value)
    from pyspark.sql import SparkSession

    from .registration import register

    settings = {"spark.sql.execution.arrow.pyspark.enabled": "true",
                "spark.ui.enabled": "false", "spark.ui.showConsoleProgress": "false",
                "spark.sql.shuffle.partitions": str(2 * cores)}
    if os.environ.get("NUMBA_CACHE_DIR"):
        settings["spark.executorEnv.NUMBA_CACHE_DIR"] = os.environ["NUMBA_CACHE_DIR"]
    settings.update(conf or {})
    builder = SparkSession.builder.master(f"local[{cores}]").appName(app)
    for key, value in settings.items():
        builder = builder.config(key, value)
    spark = builder.getOrCreate()
    spark.sparkContext.setLogLevel("ERROR")
    return register(spark)
