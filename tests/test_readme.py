"""The README's SQL and Python examples run, so the docs cannot drift from the code."""

from __future__ import annotations

import re

import pytest

from conftest import ROOT

README = (ROOT / "README.md").read_text()
SQL_BLOCKS = re.findall(r"```sql\n(.*?)```", README, flags=re.S)
PY_BLOCKS = re.findall(r"```python\n(.*?)```", README, flags=re.S)


def test_readme_has_examples():
    assert len(SQL_BLOCKS) >= 5 and PY_BLOCKS


def test_readme_sql_examples_run_on_the_demo_data(demo_con):
    for block in SQL_BLOCKS:  # in order: later blocks use tables earlier ones create
        for statement in (s.strip() for s in block.split(";")):
            if statement:
                rows = demo_con.execute(statement).fetchall()
                if statement.upper().startswith("SELECT"):
                    assert rows, statement


@pytest.mark.parametrize("block", PY_BLOCKS)
def test_readme_python_examples_run(block):
    exec(compile(block, "README.md", "exec"), {})


def test_readme_shows_the_two_commands():
    assert "make demo" in README and "make test" in README
