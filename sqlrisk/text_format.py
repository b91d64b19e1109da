"""Plain-text tables for the terminal (no colours, no box drawing: they paste anywhere).

A query result's probabilities are shown as the demo shows them (``pct``): a column is
a probability when its name reads like one (below_*, *_to_*, *_or_more, reach*, p_*,
*bands*, *odds*, *swing*, *prob*, *_rate, stated_mean, wilson_*) and every value, or
every element of its lists, is a number in [0, 1]. Outcomes show as one short label.
"""

from __future__ import annotations

import decimal
import math
import re
from collections.abc import Callable, Sequence

import pyarrow as pa

_PROBABILITY_NAME = re.compile(r"(^below_|_to_|_or_more$|^reach|^p_|bands|odds|swing|prob|"
                               r"_rate$|^stated_mean$|^wilson_|^coverage)")
#: Scores are numbers in their own units, not probabilities, even when the name says reach.
_SCORE_NAME = re.compile(r"(brier|rps|crps|^pit)")


def money(x) -> str:
    if x is None:
        return ""
    return f"{x:,.0f}"


def pct(x) -> str:
    if x is None:
        return ""
    if 0 < x < 0.0005:
        return "<0.1%"
    if 0.9995 < x < 1:
        return ">99.9%"
    return f"{100 * x:.1f}%"


def pct_list(x) -> str:
    return "" if x is None else "[" + ", ".join(pct(v) for v in x) + "]"


def accuracy(x) -> str:
    """An accuracy in probability (odds_error, outcome_error) as a reader of odds reads it:
    ``exact``, or ``+/-0.07 pts`` (percentage points, two significant digits)."""
    if x is None:
        return ""
    return "exact" if x == 0 else f"+/-{100 * x:.2g} pts"


def outcome_label(o) -> str:
    if o is None:
        return ""
    kind = (f"{o['trials']:,} trials" if o["trials"] else
            "exact" if o["rounding"] == 0 else f"lattice step {plain(o['step'])}")
    return f"outcome({kind}, {len(o['mass']):,} points)"


def _is_probability(name: str, values: list) -> bool:
    if not _PROBABILITY_NAME.search(name) or _SCORE_NAME.search(name):
        return False
    flat = [v for x in values if x is not None for v in (x if isinstance(x, list) else [x])]
    return bool(flat) and all(isinstance(v, float) and 0.0 <= v <= 1.0 for v in flat)


def result_table(table: pa.Table) -> str:
    """A query result as a terminal table, probabilities and outcomes formatted."""
    rows = table.to_pylist()
    formats: dict[str, Callable] = {}
    for field in table.schema:
        values = [r[field.name] for r in rows]
        if pa.types.is_struct(field.type) and {f.name for f in field.type} >= {"mass", "trials"}:
            formats[field.name] = outcome_label
        elif field.name.endswith("_error") and pa.types.is_floating(field.type):
            formats[field.name] = accuracy
        elif _is_probability(field.name, values):
            formats[field.name] = pct_list if pa.types.is_list(field.type) else pct
    names = table.column_names
    return table_text(names, [[r[n] for n in names] for r in rows], formats)


def plain(x) -> str:
    if x is None:
        return ""
    if isinstance(x, decimal.Decimal):
        x = int(x) if x == x.to_integral_value() else float(x)
    if isinstance(x, float):
        if not math.isfinite(x):
            return str(x)
        if abs(x) >= 1000:
            return f"{x:,.0f}"
        return f"{x:.4g}"
    if isinstance(x, int) and not isinstance(x, bool) and abs(x) >= 10000:
        return f"{x:,}"
    if isinstance(x, list):
        return "[" + ", ".join(plain(v) for v in x) + "]"
    if isinstance(x, dict):
        return "{" + ", ".join(f"{k}: {plain(v)}" for k, v in x.items()) + "}"
    return str(x)


def table_text(headers: Sequence[str], rows: Sequence[Sequence],
          formats: dict[str, Callable] | None = None, max_width: int = 60) -> str:
    """Rows as aligned text: numbers right-aligned, text left-aligned."""
    formats = formats or {}
    cells = []
    for row in rows:
        line = []
        for name, value in zip(headers, row):
            text = formats.get(name, plain)(value)
            if len(text) > max_width:
                text = text[: max_width - 3] + "..."
            line.append(text)
        cells.append(line)
    numeric = [all(isinstance(r[i], (int, float, decimal.Decimal)) or r[i] is None for r in rows)
               if rows else False
               for i in range(len(headers))]
    widths = [max([len(h)] + [len(c[i]) for c in cells]) for i, h in enumerate(headers)]

    def fmt(values):
        parts = [v.rjust(w) if num else v.ljust(w) for v, w, num in zip(values, widths, numeric)]
        return "  ".join(parts).rstrip()

    out = [fmt(headers), fmt(["-" * w for w in widths])]
    out.extend(fmt(c) for c in cells)
    return "\n".join(out)
