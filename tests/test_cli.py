"""The command line, in-process with CliRunner and once as a real subprocess."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import typer.main
from typer.testing import CliRunner

from sqlrisk.cli import app

runner = CliRunner()


def test_demo_prints_owner_band_odds():
    result = runner.invoke(app, ["demo"])
    assert result.exit_code == 0, result.output
    assert "band_odds" in result.output
    assert "below_floor" in result.output and "stretch_or_more" in result.output
    assert "sql/owner_band_odds.sql" in result.output
    assert "(company)" in result.output


def test_queries_lists_saved_queries_with_parameters():
    result = runner.invoke(app, ["queries"])
    assert result.exit_code == 0
    assert "owner_band_odds" in result.output and "--param period=" in result.output


def test_every_command_and_option_has_help_text():
    command = typer.main.get_command(app)
    for name, sub in command.commands.items():
        assert sub.help and sub.help.strip(), f"command {name} has no help"
        for param in sub.params:
            if param.name != "help" and getattr(param, "help", None) is not None:
                assert param.help.strip(), f"{name} --{param.name} has no help"


def test_installed_entry_point_runs_as_a_subprocess():
    exe = Path(sys.executable).with_name("sqlrisk")
    proc = subprocess.run([str(exe), "queries"], capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    assert "region_rollup" in proc.stdout
