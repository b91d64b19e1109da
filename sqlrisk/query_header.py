"""The header comment of a saved query: what it answers, its parameters, what it reads.

A header is the run of ``--`` lines before the SQL. The first says what the query
answers. A parameter line is ``-- $name (type): what it is (default: value)``, the
type one of number, integer, date or text (text when left out). A reads line
declares the tables and columns the query reads, required before the ``;`` and
optional after it, each column optionally typed; tables after a ``;`` outside the
parentheses are optional too (a missing one reads as empty)::

    -- reads: pipeline(owner_id, amount number, win_prob number; region, deal_id)
    -- reads: quota_bands(owner_id, target number; floor number, stretch number, period)
    -- reads: ; owners(owner_id; owner_name, region)

Several reads lines add up; one line may name several tables, comma separated.
"""

from __future__ import annotations

import datetime as dt
import math
import re
from dataclasses import dataclass, field

from .errors import ParameterError, QueryLookupError

#: The types a parameter or a declared column may have, with the SQL type each stands for.
TYPES = {"text": "VARCHAR", "number": "DOUBLE", "integer": "BIGINT", "date": "DATE"}
EXAMPLES = {"text": ("any text", "Q1"), "number": ("a number", "0.85"),
            "integer": ("a whole number", "10"), "date": ("a date (YYYY-MM-DD)", "2027-01-17")}

_PARAM_LINE = re.compile(r"^--\s*\$(\w+)\s*(?:\((\w+)\))?\s*:\s*(.*)$")
_DEFAULT = re.compile(r"\(default:\s*([^)]*)\)\s*$")
_READS_LINE = re.compile(r"^--\s*reads\s*:\s*(.*)$", re.I)
_TABLE = re.compile(r"\s*([A-Za-z_]\w*)\s*\(([^)]*)\)\s*(?:,|$)")
_COLUMN = re.compile(r"^([A-Za-z_]\w*)(?:\s+(\w+))?$")


@dataclass
class Param:
    name: str
    help: str
    default: str | None = None
    kind: str = "text"

    def convert(self, value: str, query: str):
        """``value`` (text from the command line) as this parameter's Python value."""
        try:
            if self.kind == "number":
                number = float(value)
                if not math.isfinite(number):
                    raise ValueError(value)
                return number
            if self.kind == "integer":
                return int(value)
            if self.kind == "date":
                return dt.date.fromisoformat(value.strip())
        except ValueError:
            what, example = EXAMPLES[self.kind]
            raise ParameterError(
                f"run: {query} parameter {self.name} must be {what}, and {value!r} is not; "
                f"give e.g. -p {self.name}={example}") from None
        return value


@dataclass
class Column:
    name: str
    kind: str | None = None  # one of TYPES, or None: any type
    required: bool = True

    def sql_type(self) -> str | None:
        return TYPES[self.kind] if self.kind else None


@dataclass
class TableRead:
    """A table a query reads and the columns it needs (required) or uses when present."""
    table: str
    columns: list[Column] = field(default_factory=list)
    required_table: bool = True

    @property
    def required(self) -> list[Column]:
        return [c for c in self.columns if c.required]

    def column(self, name: str) -> Column | None:
        return next((c for c in self.columns if c.name == name), None)

    def describe(self) -> str:
        """The declaration as written in a header: ``t(a, b number; c)``."""
        def text(c: Column) -> str:
            return f"{c.name} {c.kind}" if c.kind else c.name
        required = ", ".join(text(c) for c in self.columns if c.required)
        optional = ", ".join(text(c) for c in self.columns if not c.required)
        text_ = f"{self.table}({required}{'; ' + optional if optional else ''})"
        return text_ if self.required_table else f"{text_} (optional)"


@dataclass
class Header:
    description: str = ""
    params: list[Param] = field(default_factory=list)
    reads: list[TableRead] = field(default_factory=list)


def _split_optional(text: str) -> tuple[str, str]:
    """``text`` split at its first ``;`` outside parentheses (required, optional tables)."""
    depth = 0
    for i, ch in enumerate(text):
        depth += ch == "("
        depth -= ch == ")"
        if ch == ";" and depth == 0:
            return text[:i], text[i + 1:]
    return text, ""


def parse_reads(text: str, where: str) -> list[TableRead]:
    """The tables of one ``reads:`` line; a malformed declaration is an error naming ``where``."""
    required, optional = _split_optional(text)
    return ([*_parse_tables(required, where, True), *_parse_tables(optional, where, False)])


def _parse_tables(text: str, where: str, required_table: bool) -> list[TableRead]:
    tables = []
    rest = text.strip().strip(",").strip()
    while rest:
        match = _TABLE.match(rest)
        if not match:
            raise QueryLookupError(f"{where}: cannot read the declaration {rest!r}; write "
                                   "-- reads: table(col, col number; optional_col)")
        name, body = match.group(1), match.group(2)
        required, _, optional = body.partition(";")
        columns = []
        for part, is_required in ((required, True), (optional, False)):
            for item in filter(None, (s.strip() for s in part.split(","))):
                col = _COLUMN.match(item)
                if not col or (col.group(2) and col.group(2) not in TYPES):
                    raise QueryLookupError(
                        f"{where}: column {item!r} of {name} is not 'name' or 'name type' "
                        f"(types: {', '.join(TYPES)})")
                columns.append(Column(col.group(1), col.group(2), is_required))
        tables.append(TableRead(name, columns, required_table))
        rest = rest[match.end():].strip()
    return tables


def parse_header(text: str, where: str) -> Header:
    """The header of the SQL ``text`` (``where`` names it in errors)."""
    header = Header()
    for line in text.splitlines():
        stripped = line.strip()
        if not stripped.startswith("--"):
            if stripped:
                break
            continue
        param = _PARAM_LINE.match(stripped)
        reads = _READS_LINE.match(stripped)
        if param:
            kind = param.group(2) or "text"
            if kind not in TYPES:
                raise QueryLookupError(f"{where}: parameter ${param.group(1)} has type {kind!r}; "
                                       f"use one of {', '.join(TYPES)}")
            help_text = param.group(3).strip()
            default = _DEFAULT.search(help_text)
            header.params.append(Param(param.group(1), help_text,
                                       default.group(1).strip() if default else None, kind))
        elif reads:
            for table in parse_reads(reads.group(1), where):
                known = next((t for t in header.reads if t.table == table.table), None)
                if known is None:
                    header.reads.append(table)
                else:
                    known.columns.extend(table.columns)
        elif not header.description:
            header.description = stripped.lstrip("-").strip()
    return header
