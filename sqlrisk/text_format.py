"""Plain-text tables for the terminal (no colours, no box drawing: they paste anywhere)."""

from __future__ import annotations

import decimal
import math
from collections.abc import Callable, Sequence


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


def table(headers: Sequence[str], rows: Sequence[Sequence],
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
