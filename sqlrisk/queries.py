"""Saved queries: the ``.sql`` files in ``sql/`` and their header comments.

A saved query starts with comment lines: the first says what it answers, and
each parameter has a line ``-- $name: what it is (default: value)``. Parameters
are bound by DuckDB as prepared-statement values (``$name``), never pasted
into the SQL text.
"""

from __future__ import annotations

import os
import re
from dataclasses import dataclass, field
from pathlib import Path

from .errors import QueryLookupError, did_you_mean

PACKAGE_ROOT = Path(__file__).resolve().parent.parent
_PARAM_LINE = re.compile(r"^--\s*\$(\w+)\s*:\s*(.*)$")
_DEFAULT = re.compile(r"\(default:\s*([^)]*)\)\s*$")
_PARAM_USE = re.compile(r"(?<![\w$])\$([A-Za-z_]\w*)")


def query_dir() -> Path:
    """Where the saved queries live: ``$SQLRISK_SQL_DIR`` or the repository's ``sql/``."""
    return Path(os.environ.get("SQLRISK_SQL_DIR", PACKAGE_ROOT / "sql"))


def seeds_dir() -> Path:
    return Path(os.environ.get("SQLRISK_SEEDS_DIR", PACKAGE_ROOT / "seeds"))


@dataclass
class Param:
    name: str
    help: str
    default: str | None = None


@dataclass
class SavedQuery:
    name: str
    path: Path
    description: str
    params: list[Param] = field(default_factory=list)
    sql: str = ""

    def param_names(self) -> list[str]:
        return [p.name for p in self.params]


def parse(path: Path) -> SavedQuery:
    """Read a ``.sql`` file and its header comment."""
    text = path.read_text()
    description = ""
    params = []
    for line in text.splitlines():
        stripped = line.strip()
        if not stripped.startswith("--"):
            if stripped:
                break
            continue
        match = _PARAM_LINE.match(stripped)
        if match:
            help_text = match.group(2).strip()
            default = _DEFAULT.search(help_text)
            params.append(Param(match.group(1), help_text,
                                default.group(1).strip() if default else None))
        elif not description:
            description = stripped.lstrip("-").strip()
    return SavedQuery(path.stem, path, description, params, text)


def used_params(sql: str) -> set[str]:
    """``$names`` the SQL body uses (comments and string literals excluded)."""
    body = re.sub(r"--[^\n]*", "", sql)
    body = re.sub(r"'(?:[^']|'')*'", "''", body)
    return set(_PARAM_USE.findall(body))


def list_queries(directory: Path | None = None) -> list[SavedQuery]:
    directory = directory or query_dir()
    return [parse(p) for p in sorted(directory.glob("*.sql"))]


def find(name_or_path: str) -> SavedQuery:
    """A saved query by name, or any ``.sql`` file by path."""
    path = Path(name_or_path)
    if path.suffix == ".sql" and path.exists():
        return parse(path)
    if path.suffix == ".sql" or os.sep in name_or_path:
        raise QueryLookupError(f"run: no such file {name_or_path!r}")
    names = {q.name: q for q in list_queries()}
    if name_or_path not in names:
        raise QueryLookupError(
            f"run: no saved query {name_or_path!r}{did_you_mean(name_or_path, names)}; "
            "'sqlrisk queries' lists them")
    return names[name_or_path]


def bind(query: SavedQuery, given: dict[str, str]) -> dict[str, str]:
    """Parameter values for ``query``: given ones, then defaults; unknown or missing is an error."""
    expected = query.param_names()
    for name in given:
        if name not in expected:
            listing = ", ".join(expected) or "none"
            raise QueryLookupError(
                f"run: {query.name} has no parameter {name!r}{did_you_mean(name, expected)} "
                f"(it takes: {listing})")
    values = {}
    for p in query.params:
        if p.name in given:
            values[p.name] = given[p.name]
        elif p.default is not None:
            values[p.name] = p.default
        else:
            listing = ", ".join(f"{q.name}" for q in query.params)
            raise QueryLookupError(
                f"run: {query.name} needs --param {p.name}=... ({p.help}); it takes: {listing}")
    return values
