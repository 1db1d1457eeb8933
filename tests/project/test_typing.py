"""The package type-checks: mypy over plugin/rlrates with the settings in pyproject.toml."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]


def test_the_package_type_checks() -> None:
    pytest.importorskip("mypy")
    run = subprocess.run([sys.executable, "-m", "mypy", "--no-incremental"], cwd=ROOT,
                         capture_output=True, text=True, timeout=600)
    assert run.returncode == 0, run.stdout + run.stderr
