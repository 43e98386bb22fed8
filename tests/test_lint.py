"""The code base stays ruff clean (lint and format), checked with the test
suite so that one command runs every check."""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


def _ruff() -> list[str]:
    found = shutil.which("ruff", path=str(Path(sys.executable).parent))
    if found is None:
        pytest.fail("ruff is not installed: install the test extras with pip install -e '.[test]'")
    return [found]


def test_ruff_lint_is_clean() -> None:
    result = subprocess.run([*_ruff(), "check", str(ROOT)], capture_output=True, text=True)
    assert result.returncode == 0, result.stdout + result.stderr


def test_ruff_format_is_clean() -> None:
    result = subprocess.run(
        [*_ruff(), "format", "--check", str(ROOT)], capture_output=True, text=True
    )
    assert result.returncode == 0, result.stdout + result.stderr
