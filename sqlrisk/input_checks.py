"""What a run is about to drop or double count, said before computing.

The checks read the tables a query declares (after ``inputs.prepare`` made them)
and return one warning line each, with counts and up to five example keys:

- deal rows (pipeline, or the past quarters' past_deals) skipped because amount or
  win_prob is NULL (the SQL functions' NULL rule skips them);
- deal_id values that appear more than once in them (each row counts as a deal);
- owners in pipeline with no row in quota_bands (for the ``period`` parameter when
  quota_bands has a period column); a period that no quota row has is an error;
- win probabilities that look like percentages;
- owners and periods of past_deals with no row in past_quotas (their band scores are NULL).

Two rows of quota_bands (or past_quotas) for one owner and period are an error: the cuts
would be ambiguous and the owner's deals counted once per row.

Each check runs only when the query declares the tables and columns it needs.
"""

from __future__ import annotations

from .errors import InputDataError
from .query_header import TableRead

EXAMPLES = 5
#: Tables of deals with an amount and a win probability: today's and the past quarters'.
DEAL_TABLES = ("pipeline", "past_deals")


def _has(reads: dict[str, TableRead], table: str, *columns: str) -> bool:
    read = reads.get(table)
    return read is not None and all(read.column(c) is not None for c in columns)


def _examples(values) -> str:
    shown = ", ".join(str(v) for v in values[:EXAMPLES])
    return f" (e.g. {shown})" if shown else ""


def _deal_key(con, reads, table: str) -> str:
    """The expression naming a deal row in examples: deal_id when it has values."""
    if _has(reads, table, "deal_id") and con.execute(
            f"SELECT count(deal_id) FROM {table}").fetchall()[0][0]:
        return "CAST(deal_id AS VARCHAR)"
    return "'owner ' || CAST(owner_id AS VARCHAR)" if _has(reads, table, "owner_id") \
        else "'row'"


def null_rows(con, reads, table: str = "pipeline") -> list[str]:
    if not _has(reads, table, "amount", "win_prob"):
        return []
    key = _deal_key(con, reads, table)
    where = "amount IS NULL OR win_prob IS NULL"
    count, total = con.execute(f"SELECT count(*) FILTER (WHERE {where}), count(*) "
                               f"FROM {table}").fetchall()[0]
    if not count:
        return []
    keys = [r[0] for r in con.execute(f"SELECT {key} FROM {table} WHERE {where} "
                                      f"LIMIT {EXAMPLES}").fetchall()]
    return [f"{table}: {count} of {total} rows skipped because amount or win_prob is NULL"
            f"{_examples(keys)}; fill them in or filter them out to silence this"]


def duplicate_deals(con, reads, table: str = "pipeline") -> list[str]:
    if not _has(reads, table, "deal_id"):
        return []
    # past_deals holds each period's deals: a deal open in two periods is two rows
    scope = ", period" if _has(reads, table, "period") and table != "pipeline" else ""
    rows = con.execute(f"SELECT CAST(deal_id AS VARCHAR), count(*) FROM {table} "
                       f"WHERE deal_id IS NOT NULL GROUP BY deal_id{scope} "
                       "HAVING count(*) > 1 ORDER BY count(*) DESC, 1").fetchall()
    if not rows:
        return []
    extra = sum(n for _, n in rows)
    per = " in one period" if scope else ""
    return [f"{table}: {len(rows)} deal_id value(s) appear more than once{per} ({extra} rows, "
            f"each counted as a deal){_examples([f'{k} x{n}' for k, n in rows])}; keep one "
            "row per deal"]


def past_quota_gaps(con, reads) -> list[str]:
    """past_quotas with two rows for an owner and period (an error); owners and periods of
    past_deals with none (a warning)."""
    if not (_has(reads, "past_deals", "owner_id", "period")
            and _has(reads, "past_quotas", "owner_id", "period")):
        return []
    doubled = [f"{o} {p} x{n}" for o, p, n in con.execute(
        "SELECT CAST(owner_id AS VARCHAR), CAST(period AS VARCHAR), count(*) FROM past_quotas "
        "WHERE owner_id IS NOT NULL GROUP BY owner_id, period HAVING count(*) > 1 "
        f"ORDER BY 1, 2 LIMIT {EXAMPLES}").fetchall()]
    if doubled:
        raise InputDataError(f"run: past_quotas has more than one row per owner and period "
                             f"({', '.join(doubled)}); keep one row per owner and period")
    missing = [f"{o} {p}" for o, p in con.execute(
        "SELECT DISTINCT CAST(d.owner_id AS VARCHAR) AS o, CAST(d.period AS VARCHAR) AS p "
        "FROM past_deals AS d WHERE d.owner_id IS NOT NULL AND NOT EXISTS (SELECT 1 FROM "
        "past_quotas AS q WHERE q.owner_id = d.owner_id AND q.period = d.period) "
        "ORDER BY p, o").fetchall()]
    if not missing:
        return []
    return [f"{len(missing)} owner and period pair(s) in past_deals have no row in past_quotas"
            f"{_examples(missing)}; their band and reach scores are NULL (CRPS, PIT and "
            "coverage still count)"]


def _quota_scope(con, reads, values: dict) -> tuple[str, dict, str]:
    """The condition picking quota_bands rows of the run's period, its parameters and label.

    The saved queries' rule: a quota row with no period applies to every period. A
    period that no row has is an error (a wrong -p period would otherwise give every
    owner NULL cuts).
    """
    period = values.get("period")
    if period is None or not _has(reads, "quota_bands", "period") or not con.execute(
            "SELECT count(period) FROM quota_bands").fetchall()[0][0]:
        return "", {}, ""
    in_period = " AND (q.period IS NULL OR q.period = $period)"
    params = {"period": str(period)}
    if not con.execute("SELECT count(*) FROM quota_bands AS q WHERE true" + in_period,
                       params).fetchall()[0][0]:
        periods = [r[0] for r in con.execute(
            "SELECT DISTINCT CAST(period AS VARCHAR) FROM quota_bands ORDER BY 1 "
            f"LIMIT {EXAMPLES + 1}").fetchall()]
        more = ", ..." if len(periods) > EXAMPLES else ""
        raise InputDataError(f"run: no row of quota_bands has period {period!r} (it has: "
                             f"{', '.join(map(str, periods[:EXAMPLES]))}{more}); check -p period")
    return in_period, params, f" for period {period}"


def duplicate_quotas(con, in_period: str, params: dict, label: str) -> None:
    doubled = [f"{o} x{n}" for o, n in con.execute(
        "SELECT CAST(owner_id AS VARCHAR), count(*) FROM quota_bands AS q "
        f"WHERE owner_id IS NOT NULL{in_period} "
        f"GROUP BY owner_id HAVING count(*) > 1 ORDER BY 1 LIMIT {EXAMPLES}", params).fetchall()]
    if doubled:
        raise InputDataError(f"run: quota_bands has more than one row per owner{label} "
                             f"({', '.join(doubled)}); keep one row per owner and period")


def owners_without_quota(con, reads, values: dict) -> list[str]:
    if not (_has(reads, "pipeline", "owner_id") and _has(reads, "quota_bands", "owner_id")):
        return []
    in_period, params, label = _quota_scope(con, reads, values)
    duplicate_quotas(con, in_period, params, label)
    missing = [r[0] for r in con.execute(
        "SELECT DISTINCT CAST(p.owner_id AS VARCHAR) AS o FROM pipeline AS p WHERE "
        "p.owner_id IS NOT NULL AND NOT EXISTS (SELECT 1 FROM quota_bands AS q WHERE "
        f"q.owner_id = p.owner_id{in_period}) ORDER BY o", params).fetchall()]
    if not missing:
        return []
    return [f"{len(missing)} owner(s) in pipeline have no row in quota_bands{label}"
            f"{_examples(missing)}; they have no cuts (NULL in per-owner results, left out of summed region cuts)"]


def percent_probabilities(con, reads, table: str = "pipeline") -> list[str]:
    if not _has(reads, table, "win_prob"):
        return []
    above, in_percent, total, top = con.execute(
        "SELECT count(*) FILTER (WHERE win_prob > 1), "
        "count(*) FILTER (WHERE win_prob > 1 AND win_prob <= 100), count(win_prob), "
        f"max(win_prob) FROM {table}").fetchall()[0]
    if not above:
        return []
    if in_percent == above and above * 2 >= total:
        return [f"{table}.win_prob: {above} of {total} probabilities are above 1 (largest "
                f"{top:g}): percentages? map the column with --column "
                f"{table}.win_prob='your_column / 100'"]
    return [f"{table}.win_prob: {above} of {total} probabilities are above 1 (largest "
            f"{top:g}): a typo in the source?"]


def check(con, reads: list[TableRead], values: dict, absent=()) -> list[str]:
    """The warning lines for a run of a query that declares ``reads`` with ``values``.

    Tables in ``absent`` (optional ones not given, read as empty) are not checked.
    """
    declared = {r.table: r for r in reads if r.table not in absent}
    per_table = [line for table in DEAL_TABLES for check in (null_rows, duplicate_deals)
                 for line in check(con, declared, table)]
    return [*per_table, *owners_without_quota(con, declared, values),
            *past_quota_gaps(con, declared),
            *(line for table in DEAL_TABLES
              for line in percent_probabilities(con, declared, table))]

