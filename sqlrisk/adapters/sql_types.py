"""The SQL types sqlrisk's functions take and return, each written once.

A struct type is its fields in order; ``*_FIELDS`` (the Arrow side, used by
the adapters) and ``*_SQL`` (the DuckDB side, used by ``catalog``) come from
the same tuple, so they cannot disagree.
"""

from __future__ import annotations


def struct_sql(fields: tuple[tuple[str, str], ...]) -> str:
    """``STRUCT(name TYPE, ...)`` for ``(name, TYPE)`` pairs."""
    return "STRUCT(" + ", ".join(f"{name} {kind}" for name, kind in fields) + ")"


def names(fields: tuple[tuple[str, str], ...]) -> tuple[str, ...]:
    return tuple(name for name, _ in fields)


#: P(total = origin + i * step) = mass[i]; trials 0 = exact; rounding bounds the lattice error.
OUTCOME = (("origin", "DOUBLE"), ("step", "DOUBLE"), ("mass", "DOUBLE[]"), ("trials", "BIGINT"),
           ("rounding", "DOUBLE"))
OUTCOME_FIELDS = names(OUTCOME)
OUTCOME_SQL = struct_sql(OUTCOME)

#: A calibration map: stated-probability breakpoints, fitted win rates, closed deals fitted on.
CALIBRATION_MAP = (("prob", "DOUBLE[]"), ("rate", "DOUBLE[]"), ("deals", "BIGINT"))
MAP_FIELDS = names(CALIBRATION_MAP)
MAP_SQL = struct_sql(CALIBRATION_MAP)

#: Murphy's partition of the Brier score.
BRIER_PARTS = (("reliability", "DOUBLE"), ("resolution", "DOUBLE"), ("uncertainty", "DOUBLE"))
PARTS_FIELDS = names(BRIER_PARTS)
PARTS_SQL = struct_sql(BRIER_PARTS)

#: An interval of a probability (Wilson score interval, or lo = hi for an exact band).
INTERVAL = (("lo", "DOUBLE"), ("hi", "DOUBLE"))
INTERVAL_FIELDS = names(INTERVAL)
INTERVAL_SQL = struct_sql(INTERVAL)

#: One bar of ``outcome_histogram``.
HISTOGRAM_BIN = (("lo", "DOUBLE"), ("hi", "DOUBLE"), ("prob", "DOUBLE"))
HISTOGRAM_FIELDS = names(HISTOGRAM_BIN)
HISTOGRAM_SQL = struct_sql(HISTOGRAM_BIN)

#: One deal of ``deal_swing``, as the UDF returns it: ``i`` is the deal's 1-based position in
#: its group's list, which the macro turns back into the deal's own id.
SWING = (("i", "BIGINT"), ("reach_if_won", "DOUBLE"), ("reach_if_lost", "DOUBLE"),
         ("swing", "DOUBLE"))
SWING_FIELDS = names(SWING)
SWING_SQL = struct_sql(SWING)
