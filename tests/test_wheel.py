"""The built wheel on its own: installed (not editable) in a fresh venv, run outside the checkout.

Builds the wheel offline with this venv's setuptools, installs it with ``--no-deps`` into
a temporary venv that borrows this venv's dependencies (duckdb, numpy, numba, ...) but
not its editable sqlrisk, and runs ``sqlrisk queries``, ``run`` and ``demo`` from a
temporary folder. The first run compiles the numba kernels into the temporary
site-packages (their cache lives beside the installed modules), so this takes ~1 minute.
"""

from __future__ import annotations

import importlib.metadata
import os
import shutil
import subprocess
import sys
import sysconfig
import zipfile
from pathlib import Path

import pytest

from conftest import ROOT

# The checkout files a build needs: pyproject.toml names README.md; the rest is the code
# and the data it ships. Copied, so that the build leaves no build/ or *.egg-info in the
# checkout and no stale build/lib from an earlier build slips into the wheel.
BUILD_INPUTS = ("pyproject.toml", "README.md", "sqlrisk", "sql", "seeds")
NOT_SOURCES = shutil.ignore_patterns("__pycache__", "*.pyc", "*.nbi", "*.nbc")
TIMEOUT = 300


def _run(args, **kwargs):
    proc = subprocess.run([str(a) for a in args], capture_output=True, text=True,
                          timeout=TIMEOUT, **kwargs)
    assert proc.returncode == 0, f"{args}\nstdout:\n{proc.stdout}\nstderr:\n{proc.stderr}"
    return proc


@pytest.fixture(scope="module")
def wheel(tmp_path_factory):
    """The wheel, built from a copy of the checkout with this venv's setuptools."""
    setuptools = importlib.metadata.version("setuptools")
    assert int(setuptools.split(".")[0]) >= 77, (
        f"setuptools {setuptools} cannot read pyproject's SPDX license; "
        "pip install -e '.[test]' brings setuptools>=77")
    source = tmp_path_factory.mktemp("source")
    for name in BUILD_INPUTS:
        if (ROOT / name).is_dir():
            shutil.copytree(ROOT / name, source / name, ignore=NOT_SOURCES)
        else:
            shutil.copy2(ROOT / name, source / name)
    dist = tmp_path_factory.mktemp("dist")
    _run([sys.executable, "-m", "pip", "wheel", source, "--no-deps", "--no-build-isolation",
          "--no-index", "-w", dist])
    (built,) = dist.glob("sqlrisk-*.whl")
    return built


@pytest.fixture(scope="module")
def env(wheel, tmp_path_factory):
    """A fresh venv with the wheel installed; it sees this venv's packages, not its sqlrisk."""
    root = tmp_path_factory.mktemp("venv")
    _run([sys.executable, "-m", "venv", "--without-pip", root])
    site = Path(sysconfig.get_path("purelib", vars={"base": root, "platbase": root}))
    # A path line in a .pth is appended to sys.path after the venv's own site-packages,
    # but .pth files in that folder are not run, so the editable install's finder (the
    # one that maps sqlrisk to this checkout) never loads.
    (site / "zz_dev_dependencies.pth").write_text(sysconfig.get_path("purelib") + "\n")
    python = root / "bin" / "python"
    _run([sys.executable, "-m", "pip", "--python", python, "install", "--no-deps",
          "--no-index", wheel])
    return root


@pytest.fixture(scope="module")
def elsewhere(tmp_path_factory):
    """A working folder outside the checkout, and an environment without sqlrisk overrides."""
    folder = tmp_path_factory.mktemp("elsewhere")
    variables = {k: v for k, v in os.environ.items()
                 if k not in ("SQLRISK_SQL_DIR", "SQLRISK_SEEDS_DIR", "PYTHONPATH")}
    return {"cwd": folder, "env": variables}


def _sqlrisk(env, elsewhere, *args):
    return _run([env / "bin" / "sqlrisk", *args], **elsewhere)


def test_wheel_ships_the_code_the_saved_queries_and_the_seeds(wheel):
    names = set(zipfile.ZipFile(wheel).namelist())
    modules = {f"sqlrisk/{p.relative_to(ROOT / 'sqlrisk').as_posix()}"
               for p in (ROOT / "sqlrisk").rglob("*.py") if "__pycache__" not in p.parts}
    # A subpackage missing from pyproject's explicit `packages` list would be left out here.
    assert modules <= names, sorted(modules - names)
    assert {f"sqlrisk/sql/{p.name}" for p in (ROOT / "sql").glob("*.sql")} <= names
    seeds = {f"sqlrisk/seeds/{p.name}" for p in (ROOT / "seeds").glob("*.csv")}
    assert len(seeds) == 7 and seeds | {"sqlrisk/seeds/README.md"} <= names
    assert all(n.startswith(("sqlrisk/", "sqlrisk-")) for n in names), sorted(names)
    metadata = next(n for n in names if n.endswith(".dist-info/METADATA"))
    assert "License-Expression: MIT" in zipfile.ZipFile(wheel).read(metadata).decode()


def test_the_venv_imports_the_installed_wheel_not_the_checkout(env, elsewhere):
    proc = _run([env / "bin" / "python", "-c",
                 "import sqlrisk, sqlrisk.queries as q; print(sqlrisk.__file__); "
                 "print(q.query_dir()); print(q.seeds_dir())"], **elsewhere)
    paths = [Path(line) for line in proc.stdout.split()]
    assert len(paths) == 3
    for path in paths:
        assert path.is_relative_to(env) and not path.is_relative_to(ROOT), path


def test_installed_queries_lists_the_shipped_queries(env, elsewhere):
    proc = _sqlrisk(env, elsewhere, "queries")
    assert "owner_band_odds" in proc.stdout and "--param period=" in proc.stdout


def test_installed_demo_runs_and_writes_its_charts(env, elsewhere):
    # first of the commands that compute: it compiles the kernels into the venv's cache,
    # which the run below then loads (pytest runs a module's tests in file order)
    out = elsewhere["cwd"] / "charts"
    proc = _sqlrisk(env, elsewhere, "demo", "--output-dir", out)
    assert "Brindlewick Software" in proc.stdout
    assert "(from sql/owner_band_odds.sql:" in proc.stdout
    assert sorted(p.name for p in out.iterdir()) == [
        "demo-backtest.svg", "demo-odds-history.svg", "demo-region-chart.svg", "demo-reliability.svg"]


def test_installed_run_answers_from_the_shipped_query_and_seeds(env, elsewhere):
    seeds = next(env.glob("lib/python*/site-packages/sqlrisk/seeds"))
    sources = [f"--source={name}={seeds / name}.csv"
               for name in ("pipeline", "quota_bands", "owners")]
    proc = _sqlrisk(env, elsewhere, "run", "owner_band_odds", *sources, "--format", "csv")
    assert proc.stdout.startswith("owner_id,") and "own_001," in proc.stdout
