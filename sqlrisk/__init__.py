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


def draw_outcome(outcome: dict, cuts=None, title: str = "outcome", path=None) -> str:
    """One stored outcome drawn as sqlrisk's outcome chart: the SVG text (and ``path``
    written, .svg or .png, when given); see ``sqlrisk.chart_rows.draw_outcome``."""
    from .chart_rows import draw_outcome as draw

    return draw(outcome, cuts, title, path)

__all__ = [
    "connect",
    "register",
    "register_macros",
    "draw_outcome",
    "OUTCOME_SQL",
    "SqlriskError",
    "InputDataError",
    "ParameterError",
    "QueryLookupError",
    "__version__",
]
