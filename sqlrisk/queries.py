"""Saved queries: the ``.sql`` files in ``sql/``, a .sql file by path, or SQL text.

A query's header comment (``query_header``) says what it answers, its typed
``$parameters`` and the tables and columns it reads. Parameters are bound by
DuckDB as prepared-statement values (``$name``), never pasted into the SQL text.
"""

from __future__ import annotations

import os
import re
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path

from .errors import QueryLookupError, SqlriskError, did_you_mean
from .query_header import Param, TableRead, parse_header


def _shipped_folder(package: str) -> Path:
    """The folder of the data package ``package`` (``sqlrisk.sql`` or ``sqlrisk.seeds``).

    pyproject.toml maps these packages to the repository's ``sql/`` and ``seeds/``: an
    editable install reads those folders themselves, a wheel carries copies inside
    ``sqlrisk/``. importlib.resources finds whichever this sqlrisk was installed with.
    """
    try:
        folder = resources.files(package)
    except ModuleNotFoundError as exc:  # an editable install made before this mapping
        raise SqlriskError(f"sqlrisk: {package} is not installed ({exc}); reinstall sqlrisk, "
                           "e.g. pip install -e . in the repository") from exc
    # Callers keep this folder (glob, read_text, DuckDB's read_csv, relative_to), so it must
    # be a real directory. Every pip install (wheel or editable) unpacks files, and then
    # files() already is a pathlib.Path: returned as it is, nothing copied. Only a zipped
    # import gives another Traversable; there Path(str(...)) would name a folder that does
    # not exist (globs find nothing: "no saved query"), and as_file() would extract into a
    # temporary folder deleted when its with-block ends (Python 3.11 cannot extract a
    # folder at all). So that case is an error that says so.
    if not isinstance(folder, Path):
        raise SqlriskError(f"sqlrisk: {package} is not a folder on disk ({folder!r}); "
                           "install sqlrisk unzipped, as pip install does")
    return folder


# The folder that holds the shipped sql/ and seeds/: the repository root under an editable
# install, the installed sqlrisk/ package of a wheel. The demo names saved queries by their
# path below it (sql/owner_band_odds.sql either way).
PACKAGE_ROOT = _shipped_folder("sqlrisk.sql").parent
_PARAM_USE = re.compile(r"(?<![\w$])\$([A-Za-z_]\w*)")


def query_dir() -> Path:
    """Where the saved queries live: ``$SQLRISK_SQL_DIR``, else the shipped ``sql/``."""
    override = os.environ.get("SQLRISK_SQL_DIR")
    return Path(override) if override is not None else _shipped_folder("sqlrisk.sql")


def seeds_dir() -> Path:
    """Where the demo's CSVs live: ``$SQLRISK_SEEDS_DIR``, else the shipped ``seeds/``."""
    override = os.environ.get("SQLRISK_SEEDS_DIR")
    return Path(override) if override is not None else _shipped_folder("sqlrisk.seeds")


@dataclass
class SavedQuery:
    name: str
    path: Path | None
    description: str
    params: list[Param] = field(default_factory=list)
    sql: str = ""
    reads: list[TableRead] = field(default_factory=list)

    def param_names(self) -> list[str]:
        return [p.name for p in self.params]

    @property
    def declares_params(self) -> bool:
        """Whether the header lists parameters; a plain .sql file binds any --param as text."""
        return bool(self.params)


def from_text(text: str, name: str, path: Path | None = None) -> SavedQuery:
    """A query from SQL ``text`` and its header comment."""
    header = parse_header(text, name)
    return SavedQuery(name, path, header.description, header.params, text, header.reads)


def parse(path: Path) -> SavedQuery:
    """Read a ``.sql`` file and its header comment."""
    return from_text(path.read_text(), path.stem, path)


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


def bind(query: SavedQuery, given: dict[str, str]) -> dict[str, object]:
    """Parameter values for ``query``: given ones, then defaults, each converted to its type.

    A query whose header lists no parameters takes the ``$names`` its SQL uses, as text.
    An unknown, missing or unconvertible parameter is a one-line error.
    """
    params = query.params
    if not query.declares_params:
        params = [Param(n, "text") for n in sorted(used_params(query.sql))]
    expected = [p.name for p in params]
    for name in given:
        if name not in expected:
            listing = ", ".join(expected) or "none"
            raise QueryLookupError(
                f"run: {query.name} has no parameter {name!r}{did_you_mean(name, expected)} "
                f"(it takes: {listing})")
    values = {}
    for p in params:
        if p.name in given:
            values[p.name] = p.convert(given[p.name], query.name)
        elif p.default is not None:
            values[p.name] = p.convert(p.default, query.name)
        else:
            listing = ", ".join(q.name for q in params)
            raise QueryLookupError(
                f"run: {query.name} needs --param {p.name}=... ({p.help}); it takes: {listing}")
    return values
