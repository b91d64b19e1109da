"""Every public SQL function, described once; its macro and UDF signature are generated.

A ``SqlFunction`` says what a user calls: the name, the arguments in order (a
default makes an argument a named parameter, ``step := NULL``), what each is
cast to, the result type and the Python body. From it:

* an **aggregate** becomes a UDF ``_sqlrisk_<name>`` and a TEMP macro that packs
  the group's rows into ONE ``list({...})`` of structs whose fields are the
  per-row arguments under their own names (``amount``, ``prob``, ``cuts``), so
  the adapter reads ``groups.field("amount")`` (a single per-row argument is
  listed as itself: ``outcome_merge``'s outcomes); the other arguments
  (``step``, ``trials``) are passed beside the list. One ``list()`` per macro keeps it
  usable as a window function, unless a ``carried`` argument rides along (the
  deal ids of ``deal_swing``, of any type, put back by position);
* a **scalar** is a UDF under its own name, or, when an argument has a default or
  must be cast first (``cast``: a hand-written calibration map without its
  ``deals`` field), a UDF ``_sqlrisk_<name>`` behind a TEMP macro.

``tests/test_catalog.py`` registers every function from this table, checks each
in DuckDB's catalog and each in the README's function tables.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

from .lazy_bodies import Later

# The bodies' modules (and numba, SciPy behind them) are imported when a function first
# runs, not when sqlrisk is imported (a dbt run or `sqlrisk --help` pays nothing for them).
calibration = Later("sqlrisk.adapters.calibration_udfs")
deals = Later("sqlrisk.adapters.deal_udfs")
outcomes = Later("sqlrisk.adapters.outcome_udfs")
simulation = Later("sqlrisk.adapters.simulation_udfs")
scoring = Later("sqlrisk.adapters.scoring_udfs")
from .sql_types import (HISTOGRAM_SQL, INTERVAL_SQL, MAP_SQL, OUTCOME_SQL, PARTS_SQL,
                        SWING_FIELDS, SWING_SQL)

UDF_PREFIX = "_sqlrisk_"


@dataclass(frozen=True)
class Arg:
    """One argument: its name in SQL, the type it is cast to, and (if named) its default."""

    name: str
    sql_type: str
    default: str | None = None
    #: aggregates: the argument varies by row and rides in the list of structs
    per_row: bool = False
    #: scalars behind a macro: cast a struct argument explicitly (DuckDB does not cast
    #: structs implicitly; numbers and lists are always cast)
    cast: bool = False
    #: aggregates: passed through untouched (any type) and put back by position
    carried: bool = False


@dataclass(frozen=True)
class SqlFunction:
    name: str
    kind: str  # "aggregate" or "scalar"
    args: tuple[Arg, ...]
    returns: str
    body: Callable
    summary: str

    @property
    def window(self) -> bool:
        """An aggregate over one list() works with OVER (...); one that carries ids does not."""
        return self.kind == "aggregate" and not any(a.carried for a in self.args)

    @property
    def udf_name(self) -> str:
        return self.name if not self.needs_macro else UDF_PREFIX + self.name

    @property
    def needs_macro(self) -> bool:
        return self.kind == "aggregate" or any(a.default is not None or a.cast
                                               for a in self.args)

    def udf_params(self) -> list[str]:
        """The UDF's parameter types: the list of row structs first for an aggregate."""
        if self.kind == "scalar":
            return [a.sql_type for a in self.args]
        rows = [a for a in self.args if a.per_row and not a.carried]
        if len(rows) == 1:  # a list of the values themselves (outcome_merge's outcomes)
            return [f"{rows[0].sql_type}[]"] + [a.sql_type for a in self.args if not a.per_row]
        # A carried id rides along as text, so that an error can name the row it is on.
        fields = [f"{a.name} {a.sql_type}" for a in rows]
        fields += [f"{a.name} VARCHAR" for a in self.args if a.carried]
        struct = "STRUCT(" + ", ".join(fields) + ")[]"
        return [struct] + [a.sql_type for a in self.args if not a.per_row]

    def macro_params(self) -> str:
        return ", ".join(a.name if a.default is None else f"{a.name} := {a.default}"
                         for a in self.args)

    def macro_body(self) -> str:
        if self.kind == "scalar":
            # numbers and lists are cast; a struct only when asked (an outcome passes as it
            # is, so a malformed one reaches the adapter's checks)
            return (f"{self.udf_name}(" + ", ".join(
                f"{a.name}::{a.sql_type}" if a.cast or not a.sql_type.startswith("STRUCT")
                else a.name for a in self.args) + ")")
        rows = [a for a in self.args if a.per_row and not a.carried]
        packed = "{" + ", ".join(f"'{a.name}': {a.name}::{a.sql_type}" for a in rows) + "}"
        if len(rows) == 1:
            packed = f"{rows[0].name}::{rows[0].sql_type}"
        others = [f"{a.name}::{a.sql_type}" for a in self.args if not a.per_row]
        carried = [a for a in self.args if a.carried]
        if not carried:
            return f"{self.udf_name}(" + ", ".join([f"list({packed})", *others]) + ")"
        return self._carrying_body(carried[0], rows, others)

    def _carrying_body(self, carried: Arg, rows: list[Arg], others: list[str]) -> str:
        """The rows' list with the carried ids in it (written twice, computed once), the UDF
        called on it with the ids as text (for its error messages), and each result's position ``i`` turned back into its id
        (the result's other fields copied: ``deal_swing``'s, the one function that carries)."""
        full = ("list({" + f"'{carried.name}': {carried.name}, "
                + ", ".join(f"'{a.name}': {a.name}::{a.sql_type}" for a in rows) + "})")
        strip = ("lambda x: {" + ", ".join(f"'{a.name}': x.{a.name}" for a in rows)
                 + f", '{carried.name}': x.{carried.name}::VARCHAR}}")
        call = f"{self.udf_name}(" + ", ".join([f"list_transform({full}, {strip})", *others]) + ")"
        back = ", ".join([f"'{carried.name}': {full}[s.i].{carried.name}"]
                         + [f"'{f}': s.{f}" for f in SWING_FIELDS if f != "i"])
        return f"list_transform({call}, lambda s: {{{back}}})"


def _deal_args(*extra: Arg) -> tuple[Arg, ...]:
    return (Arg("amount", "DOUBLE", per_row=True), Arg("prob", "DOUBLE", per_row=True), *extra)


def _closed_args(*extra: Arg) -> tuple[Arg, ...]:
    # won is cast to DOUBLE, not INTEGER, so that a 0.5 is refused rather than rounded
    return (Arg("prob", "DOUBLE", per_row=True), Arg("won", "DOUBLE", per_row=True), *extra)


O = Arg("o", OUTCOME_SQL)

FUNCTIONS: tuple[SqlFunction, ...] = (
    # -- aggregates over deals
    SqlFunction("outcome_dist", "aggregate",
                _deal_args(Arg("step", "DOUBLE", "NULL"), Arg("correlation", "DOUBLE", "0.0")),
                OUTCOME_SQL, deals.outcome_dist,
                "the exact outcome of the group's won total"),
    SqlFunction("outcome_sim", "aggregate",
                _deal_args(Arg("trials", "BIGINT", "100000"), Arg("seed", "BIGINT", "0"),
                           Arg("correlation", "DOUBLE", "0.0"),
                           Arg("low", "DOUBLE", "NULL", per_row=True),
                           Arg("high", "DOUBLE", "NULL", per_row=True),
                           Arg("step", "DOUBLE", "NULL")),
                OUTCOME_SQL, simulation.outcome_sim, "a Monte Carlo outcome"),
    SqlFunction("band_odds", "aggregate", _deal_args(Arg("cuts", "DOUBLE[]", per_row=True)),
                "DOUBLE[]", deals.band_odds, "len(cuts) + 1 band probabilities"),
    SqlFunction("reach_odds", "aggregate", _deal_args(Arg("target", "DOUBLE", per_row=True)),
                "DOUBLE", deals.reach_odds, "P(total >= target)"),
    SqlFunction("total_quantiles", "aggregate", _deal_args(Arg("qs", "DOUBLE[]", per_row=True)),
                "DOUBLE[]", deals.total_quantiles, "the total's quantiles at levels qs"),
    SqlFunction("odds_error", "aggregate", _deal_args(), "DOUBLE", deals.odds_error,
                "how far band_odds and reach_odds on these deals can be from the true odds"),
    SqlFunction("deal_swing", "aggregate",
                (Arg("deal_id", "ANY", per_row=True, carried=True),
                 *_deal_args(Arg("target", "DOUBLE", per_row=True))),
                f"{SWING_SQL}[]", deals.deal_swing,
                "reach if each deal is won and if it is lost"),
    # -- on stored outcomes
    SqlFunction("outcome_merge", "aggregate", (Arg("o", OUTCOME_SQL, per_row=True),),
                OUTCOME_SQL, outcomes.outcome_merge,
                "the outcome of the sum of the rows' independent outcomes"),
    SqlFunction("outcome_bands", "scalar", (O, Arg("cuts", "DOUBLE[]")), "DOUBLE[]",
                outcomes.outcome_bands, "band probabilities of a stored outcome"),
    SqlFunction("outcome_reach", "scalar", (O, Arg("target", "DOUBLE")), "DOUBLE",
                outcomes.outcome_reach, "P(total >= target) of a stored outcome"),
    SqlFunction("outcome_quantiles", "scalar", (O, Arg("qs", "DOUBLE[]")), "DOUBLE[]",
                outcomes.outcome_quantiles, "quantiles of a stored outcome"),
    SqlFunction("outcome_mean", "scalar", (O,), "DOUBLE", outcomes.outcome_mean,
                "mean of the lattice total"),
    SqlFunction("outcome_sd", "scalar", (O,), "DOUBLE", outcomes.outcome_sd,
                "standard deviation of the lattice total"),
    SqlFunction("outcome_error", "scalar", (O,), "DOUBLE", outcomes.outcome_error,
                "how far a probability read from o can be from the true one"),
    SqlFunction("outcome_shift", "scalar", (O, Arg("amount", "DOUBLE")), OUTCOME_SQL,
                outcomes.outcome_shift, "the outcome moved by amount"),
    SqlFunction("outcome_add", "scalar", (Arg("o1", OUTCOME_SQL), Arg("o2", OUTCOME_SQL)),
                OUTCOME_SQL, outcomes.outcome_add, "the outcome of the sum of two totals"),
    SqlFunction("outcome_histogram", "scalar", (O, Arg("bins", "BIGINT")),
                f"{HISTOGRAM_SQL}[]", outcomes.outcome_histogram, "equal bins for charts"),
    SqlFunction("outcome_bands_ci", "scalar",
                (O, Arg("cuts", "DOUBLE[]"), Arg("level", "DOUBLE", "0.95")),
                f"{INTERVAL_SQL}[]", simulation.outcome_bands_ci,
                "Wilson intervals of a simulated outcome's bands"),
    # -- scoring a forecast against what happened
    SqlFunction("outcome_pit", "scalar", (O, Arg("actual", "DOUBLE")), "DOUBLE",
                scoring.outcome_pit, "P(S < actual) + 0.5 P(S = actual), the PIT of the total"),
    SqlFunction("outcome_crps", "scalar", (O, Arg("actual", "DOUBLE")), "DOUBLE",
                scoring.outcome_crps, "the continuous ranked probability score, in currency"),
    SqlFunction("outcome_interval", "scalar", (O, Arg("level", "DOUBLE", "0.8")), INTERVAL_SQL,
                scoring.outcome_interval, "the central interval holding level of the total"),
    SqlFunction("band_of", "scalar", (Arg("total", "DOUBLE"), Arg("cuts", "DOUBLE[]")),
                "INTEGER", scoring.band_of, "the band (1 to len(cuts) + 1) a total falls in"),
    SqlFunction("band_rps", "scalar", (Arg("bands", "DOUBLE[]"), Arg("landed", "DOUBLE")),
                "DOUBLE", scoring.band_rps,
                "the ranked probability score of band odds given the band that happened"),
    # -- calibration
    SqlFunction("calibration_map", "aggregate", _closed_args(), MAP_SQL,
                calibration.calibration_map, "the isotonic calibration map of closed deals"),
    SqlFunction("brier_score", "aggregate", _closed_args(), "DOUBLE", calibration.brier_score,
                "mean of (prob - won)^2"),
    SqlFunction("brier_parts", "aggregate", _closed_args(Arg("bins", "DOUBLE", "10")),
                PARTS_SQL, calibration.brier_parts, "Murphy's partition of the Brier score"),
    SqlFunction("apply_calibration", "scalar",
                (Arg("map", MAP_SQL, cast=True), Arg("prob", "DOUBLE")), "DOUBLE",
                calibration.apply_calibration, "the calibrated probability"),
    SqlFunction("wilson_interval", "scalar",
                (Arg("successes", "DOUBLE"), Arg("trials", "DOUBLE"),
                 Arg("level", "DOUBLE", "0.95")),
                INTERVAL_SQL, calibration.wilson_interval,
                "the Wilson score interval of successes out of trials"),
)

BY_NAME = {f.name: f for f in FUNCTIONS}
