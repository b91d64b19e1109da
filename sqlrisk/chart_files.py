"""Chart labels and file names: which column names a row, the file each row goes to, and the
line that states a chart's accuracy in probability."""

from __future__ import annotations

import re
from pathlib import Path

import pyarrow as pa


def label_column(table: pa.Table, skip: str) -> str | None:
    for name, typ in zip(table.column_names, table.schema.types):
        if name != skip and (pa.types.is_string(typ) or pa.types.is_large_string(typ)):
            return name
    return None


def slug(text: str) -> str:
    """``text`` as a file-name part: letters, digits, ``_`` and ``-``; runs of others -> ``-``."""
    return re.sub(r"[^A-Za-z0-9_]+", "-", text).strip("-").lower() or "row"


def named_file(out: Path, label: str | None, i: int, count: int, taken: set) -> Path:
    """``out`` for a single chart; for several, FILE-LABEL.svg after each row's label
    (``owners-own_017.svg``; ``row-3`` without one), a repeated label numbered on."""
    if count == 1:
        return out
    stem = f"{out.stem}-{slug(label) if label else f'row-{i}'}"
    candidate, n = stem, 2
    while candidate in taken:
        candidate, n = f"{stem}-{n}", n + 1
    taken.add(candidate)
    return out.with_name(candidate + out.suffix)


def quote(name: str) -> str:
    """``name`` as a quoted SQL identifier."""
    return '"' + name.replace('"', '""') + '"'


def accuracy_text(error: float) -> str:
    """An outcome's accuracy in probability, as a reader of odds reads it (from outcome_error)."""
    if error == 0:
        return "exact odds"
    points = 100 * error
    return f"odds within +/-{points:.2g} percentage points"


def note_for(error: float, trials: int) -> str:
    if trials > 0:
        return (f"Monte Carlo, {trials:,} trials: {accuracy_text(error)} (95%); "
                "the shaded envelope is each point's 95% Wilson interval.")
    return accuracy_text(error).capitalize() + "."
