"""sqlrisk inside dbt: a dbt-duckdb plugin, named in a profile as

.. code-block:: yaml

    plugins:
      - module: sqlrisk.dbt

dbt opens one DuckDB connection per process and runs every model and test on a cursor
of it, each a connection of its own. The Python functions are registered once, on the
parent (``configure_connection``), and every cursor sees them; sqlrisk's macros are TEMP
and live with one connection, so they are created again on every cursor
(``configure_cursor``, a few milliseconds). Only this module imports dbt; ``import
sqlrisk`` does not (install it with ``pip install 'sqlrisk[dbt]'``).
"""

from __future__ import annotations

from dbt.adapters.duckdb.plugins import BasePlugin

from .adapters.registry import register, register_macros


class Plugin(BasePlugin):
    """Registers sqlrisk's functions on dbt's connection and its macros on each cursor."""

    def configure_connection(self, conn) -> None:
        register(conn)

    def configure_cursor(self, cursor) -> None:
        register_macros(cursor)
