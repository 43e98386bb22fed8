"""The command line: help with an example for every command, exit status 2
with a one-paragraph message for bad input, and the store commands."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest
from typer.main import get_command
from typer.testing import CliRunner

from curation.cli import app

COMMANDS = sorted(get_command(app).commands)  # type: ignore[attr-defined]


def run_cli(*args: str, cwd: Path | None = None) -> subprocess.CompletedProcess[str]:
    """Run ``python -m curation`` as a user would, in a real process."""
    return subprocess.run(
        [sys.executable, "-m", "curation", *args],
        capture_output=True,
        text=True,
        cwd=cwd,
        check=False,
    )


def test_main_help_lists_every_command() -> None:
    result = run_cli("--help")
    assert result.returncode == 0
    for name in COMMANDS:
        assert name in result.stdout


@pytest.mark.parametrize("name", COMMANDS)
def test_every_command_has_help_with_an_example(name: str) -> None:
    # In process (the main help above runs in a real process): one Python
    # start per command would cost more than all the checks together.
    result = CliRunner().invoke(app, [name, "--help"], terminal_width=100)
    assert result.exit_code == 0, result.output
    assert "Example: tipledger " + name in result.output


def test_bad_store_exits_2_without_traceback(tmp_path: Path) -> None:
    result = run_cli("show-store", "--store", str(tmp_path / "none.db"))
    assert result.returncode == 2
    output = result.stdout + result.stderr
    assert "no store at" in output and "create-store" in output
    assert "Traceback" not in output


def test_create_then_show_store(tmp_path: Path) -> None:
    store = str(tmp_path / "lab.db")
    assert run_cli("create-store", "--store", store).returncode == 0
    shown = run_cli("show-store", "--store", store)
    assert shown.returncode == 0, shown.stderr
    assert "ledger events: 0" in shown.stdout
