"""sqlrisk on Spark: the same functions registered on a SparkSession, and a DataFrame path.

>>> import sqlrisk.spark
>>> sqlrisk.spark.register(spark)                      # doctest: +SKIP
>>> spark.sql("SELECT owner_id, band_odds(amount, win_prob, array(50000, 80000)) "
...           "FROM pipeline GROUP BY owner_id")        # doctest: +SKIP
>>> sqlrisk.spark.outcomes(deals_df, "owner_id", amount="amount", prob="win_prob",
...                        cuts=[50000, 80000])          # doctest: +SKIP

Needs pyspark 4.1 or later (``pip install 'sqlrisk[spark]'``); nothing here is imported by
``import sqlrisk``. See the README, "On Spark".
"""

from __future__ import annotations

from .frames import outcomes
from .registration import error_line, register, registered_names
from .session import local_session

__all__ = ["register", "registered_names", "outcomes", "local_session", "error_line"]
