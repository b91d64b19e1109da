"""The exceptions sqlrisk raises.

Every message is one line that names the function, quotes the offending value
and says how to fix it. The CLI prints it without a traceback.
"""

from __future__ import annotations

import difflib


class SqlriskError(Exception):
    """Base class of every error sqlrisk raises on purpose."""


class InputDataError(SqlriskError, ValueError):
    """A row of the user's data cannot be used (a probability of 40, a NaN amount...)."""


class ParameterError(SqlriskError, ValueError):
    """A function parameter is outside its domain (unsorted cuts, step <= 0...)."""


class QueryLookupError(SqlriskError, LookupError):
    """A saved query, source or parameter name is unknown."""


def did_you_mean(name: str, choices) -> str:
    """Return ' (did you mean X?)' for the closest known name, or ''."""
    close = difflib.get_close_matches(name, list(choices), n=1)
    return f" (did you mean {close[0]!r}?)" if close else ""
