"""Python bodies of the SQL functions, imported on first call.

DuckDB checks a function's parameter count when it is registered, so each body is
registered as a plain function with the right signature (``bound``) that imports its
module the first time DuckDB calls it.
"""

from __future__ import annotations

import importlib
import inspect


class Later:
    """A module of bodies, imported when one of them first runs: ``Later(name).fn``."""

    def __init__(self, module: str):
        self.module = module

    def __getattr__(self, name: str) -> "Body":
        if name.startswith("__"):
            raise AttributeError(name)
        return Body(self.module, name)


class Body:
    def __init__(self, module: str, name: str):
        self.module, self.name = module, name

    def resolve(self):
        return getattr(importlib.import_module(self.module), self.name)

    def bound(self, count: int):
        """A function of ``count`` positional arguments calling the body."""
        target = []

        def call(*args):
            if not target:
                target.append(self.resolve())
            return target[0](*args)

        call.__name__ = self.name
        call.__signature__ = inspect.Signature(
            [inspect.Parameter(f"arg{i}", inspect.Parameter.POSITIONAL_OR_KEYWORD)
             for i in range(count)])
        return call
