"""sqlrisk: the distribution of a sales pipeline's won total, as DuckDB SQL.

>>> import sqlrisk
>>> con = sqlrisk.connect()
>>> con.sql("SELECT reach_odds(a, p, 150) FROM (VALUES (100, 0.5), (100, 0.5)) t(a, p)").fetchall()
[(0.25,)]
"""

from .errors import InputDataError, ParameterError, QueryLookupError, SqlriskError
from .adapters.registry import connect, register, register_macros
from .adapters.sql_types import OUTCOME_SQL

__version__ = "0.1.0"

__all__ = [
    "connect",
    "register",
    "register_macros",
    "OUTCOME_SQL",
    "SqlriskError",
    "InputDataError",
    "ParameterError",
    "QueryLookupError",
    "__version__",
]
