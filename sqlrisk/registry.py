"""Registering sqlrisk's functions and macros on a DuckDB connection.

Scalars are Python UDFs under their public names. Aggregates are TEMP macros
over one ``list()`` of structs feeding a UDF named ``_sqlrisk_*`` (DuckDB has
no Python aggregate API; one aggregate per macro keeps them usable as window
functions). TEMP macros live with the connection, so nothing is written into
a user's database file.
"""

from __future__ import annotations

import duckdb

from . import calibration as cal
from . import functions as f
from . import simulation as sim

OUTCOME_SQL = "STRUCT(origin DOUBLE, step DOUBLE, mass DOUBLE[], trials BIGINT, rounding DOUBLE)"
_DEALS = "STRUCT(a DOUBLE, p DOUBLE{extra})[]"


def _t(sql: str):
    return duckdb.sqltype(sql)


# name -> (python function, parameter types, return type)
UDFS = {
    "_sqlrisk_outcome_dist": (f.outcome_dist, [_DEALS.format(extra=""), "DOUBLE", "DOUBLE"],
                              OUTCOME_SQL),
    "_sqlrisk_outcome_sim": (sim.outcome_sim,
                             [_DEALS.format(extra=", lo DOUBLE, hi DOUBLE"), "BIGINT", "BIGINT",
                              "DOUBLE", "DOUBLE"], OUTCOME_SQL),
    "_sqlrisk_outcome_bands_ci": (sim.outcome_bands_ci, [OUTCOME_SQL, "DOUBLE[]", "DOUBLE"],
                                  "STRUCT(lo DOUBLE, hi DOUBLE)[]"),
    "_sqlrisk_band_odds": (f.band_odds, [_DEALS.format(extra=", c DOUBLE[]")], "DOUBLE[]"),
    "_sqlrisk_reach_odds": (f.reach_odds, [_DEALS.format(extra=", t DOUBLE")], "DOUBLE"),
    "_sqlrisk_total_quantiles": (f.total_quantiles, [_DEALS.format(extra=", q DOUBLE[]")],
                                 "DOUBLE[]"),
    "_sqlrisk_outcome_merge": (f.outcome_merge, [f"{OUTCOME_SQL}[]"], OUTCOME_SQL),
    "outcome_bands": (f.outcome_bands, [OUTCOME_SQL, "DOUBLE[]"], "DOUBLE[]"),
    "outcome_reach": (f.outcome_reach, [OUTCOME_SQL, "DOUBLE"], "DOUBLE"),
    "outcome_quantiles": (f.outcome_quantiles, [OUTCOME_SQL, "DOUBLE[]"], "DOUBLE[]"),
    "outcome_mean": (f.outcome_mean, [OUTCOME_SQL], "DOUBLE"),
    "outcome_sd": (f.outcome_sd, [OUTCOME_SQL], "DOUBLE"),
    "outcome_error": (f.outcome_error, [OUTCOME_SQL], "DOUBLE"),
    "outcome_shift": (f.outcome_shift, [OUTCOME_SQL, "DOUBLE"], OUTCOME_SQL),
    "outcome_add": (f.outcome_add, [OUTCOME_SQL, OUTCOME_SQL], OUTCOME_SQL),
    "outcome_histogram": (f.outcome_histogram, [OUTCOME_SQL, "BIGINT"],
                          "STRUCT(lo DOUBLE, hi DOUBLE, prob DOUBLE)[]"),
    "_sqlrisk_calibration_map": (cal.calibration_map, [cal.CLOSED_SQL], cal.MAP_SQL),
    "_sqlrisk_brier_score": (cal.brier_score, [cal.CLOSED_SQL], "DOUBLE"),
    "_sqlrisk_brier_parts": (cal.brier_parts, [cal.CLOSED_SQL, "DOUBLE"], cal.PARTS_SQL),
    "_sqlrisk_apply_calibration": (cal.apply_calibration, [cal.MAP_SQL, "DOUBLE"], "DOUBLE"),
    "_sqlrisk_deal_swing": (f.deal_swing, [_DEALS.format(extra=", t DOUBLE")],
                            "STRUCT(i BIGINT, reach_if_won DOUBLE, reach_if_lost DOUBLE, "
                            "swing DOUBLE)[]"),
}


# deal_swing: the deal ids ride along in the list (any type) and are put back by position.
_SWING_LIST = ("list({'id': deal_id, 'a': amount::DOUBLE, 'p': prob::DOUBLE, "
               "'t': target::DOUBLE})")
_SWING_MACRO = (f"list_transform(_sqlrisk_deal_swing(list_transform({_SWING_LIST}, "
                "lambda x: {'a': x.a, 'p': x.p, 't': x.t})), "
                f"lambda s: {{'deal_id': {_SWING_LIST}[s.i].id, 'reach_if_won': s.reach_if_won, "
                "'reach_if_lost': s.reach_if_lost, 'swing': s.swing})")

MACROS = {
    "outcome_dist": ("amount, prob, step := NULL, correlation := 0.0",
                     "_sqlrisk_outcome_dist(list({'a': amount::DOUBLE, 'p': prob::DOUBLE}), "
                     "step::DOUBLE, correlation::DOUBLE)"),
    "outcome_sim": ("amount, prob, trials := 100000, seed := 0, correlation := 0.0, "
                    "low := NULL, high := NULL, step := NULL",
                    "_sqlrisk_outcome_sim(list({'a': amount::DOUBLE, 'p': prob::DOUBLE, "
                    "'lo': low::DOUBLE, 'hi': high::DOUBLE}), trials::BIGINT, seed::BIGINT, "
                    "correlation::DOUBLE, step::DOUBLE)"),
    "outcome_bands_ci": ("o, cuts, level := 0.95",
                         "_sqlrisk_outcome_bands_ci(o, cuts::DOUBLE[], level::DOUBLE)"),
    "band_odds": ("amount, prob, cuts",
                  "_sqlrisk_band_odds(list({'a': amount::DOUBLE, 'p': prob::DOUBLE, "
                  "'c': cuts::DOUBLE[]}))"),
    "reach_odds": ("amount, prob, target",
                   "_sqlrisk_reach_odds(list({'a': amount::DOUBLE, 'p': prob::DOUBLE, "
                   "'t': target::DOUBLE}))"),
    "total_quantiles": ("amount, prob, qs",
                        "_sqlrisk_total_quantiles(list({'a': amount::DOUBLE, 'p': prob::DOUBLE, "
                        "'q': qs::DOUBLE[]}))"),
    "outcome_merge": ("o", f"_sqlrisk_outcome_merge(list(o::{OUTCOME_SQL}))"),
    # won is cast to DOUBLE, not INTEGER, so that a 0.5 is refused rather than rounded.
    "calibration_map": ("prob, won", "_sqlrisk_calibration_map(list({'p': prob::DOUBLE, "
                        "'w': won::DOUBLE}))"),
    "brier_score": ("prob, won", "_sqlrisk_brier_score(list({'p': prob::DOUBLE, "
                    "'w': won::DOUBLE}))"),
    "brier_parts": ("prob, won, bins := 10", "_sqlrisk_brier_parts(list({'p': prob::DOUBLE, "
                    "'w': won::DOUBLE}), bins::DOUBLE)"),
    # A scalar; the macro's cast lets a hand-written map ({'prob': [...], 'rate': [...]}) in.
    "apply_calibration": ("map, prob",
                          f"_sqlrisk_apply_calibration(map::{cal.MAP_SQL}, prob::DOUBLE)"),
    "deal_swing": ("deal_id, amount, prob, target", _SWING_MACRO),
}


def _existing(con: duckdb.DuckDBPyConnection) -> set[str]:
    """Which of our UDF names the database already has (one catalog query)."""
    rows = con.execute("SELECT DISTINCT function_name FROM duckdb_functions() "
                       "WHERE function_name IN (SELECT unnest(?::VARCHAR[]))",
                       [list(UDFS)]).fetchall()
    return {r[0] for r in rows}


def register(con: duckdb.DuckDBPyConnection) -> duckdb.DuckDBPyConnection:
    """Register every sqlrisk function and macro on ``con``; returns ``con``.

    Safe to call again: each function is removed and created anew, so a second
    call replaces what an earlier call on this connection registered. DuckDB
    keeps Python functions in the database instance, which all connections to
    one file in a process share; a function another such connection registered
    cannot be removed from here, and is kept (it is this same module's function,
    so it is never stale).
    """
    existing = _existing(con)
    for name, (func, params, result) in UDFS.items():
        if name in existing:
            try:
                con.remove_function(name)
            except duckdb.InvalidInputException:
                continue  # registered by another connection to the same database
        con.create_function(name, func, [_t(p) for p in params], _t(result),
                            type="arrow", null_handling="special")
    for name, (params, body) in MACROS.items():
        con.execute(f"CREATE OR REPLACE TEMP MACRO {name}({params}) AS {body}")
    return con


def connect(path: str | None = None, *, read_only: bool = False,
            config: dict | None = None) -> duckdb.DuckDBPyConnection:
    """Open a DuckDB connection (in memory when ``path`` is None) with sqlrisk registered."""
    con = duckdb.connect(path or ":memory:", read_only=read_only, config=config or {})
    return register(con)
