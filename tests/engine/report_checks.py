"""Checks and report folders for the report tests (test_report_files.py, test_report_index.py,
test_report_figures.py): real quick-profile runs.

Each check runs on a 10-state Garnet MDP in well under a second; the fixtures are
module-scoped, so every test module computes them once.
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path
from typing import Any

import numpy as np
import pytest

import rlrates
from rlrates import CheckResult, reference
from rlrates.report import write_check, write_index

PASS_ID = "tests/test_rates.py::test_plugin[garnet_10]"
FAIL_ID = "tests/test_rates.py::test_stale_buffer[garnet_10]"
ERROR_ID = "tests/test_rates.py::test_flaky[garnet_10]"
CLAIM = rlrates.Claim(n=-0.5, horizon=2.0)


def stale_buffer(batch: Any, problem: Any) -> np.ndarray:
    """A plug-in evaluator that keeps only the first 32 samples: its error stops falling."""
    S, A = problem.states, problem.actions
    kept = batch.next_states[:, :, :32]
    model = np.zeros((S, A, S))
    np.add.at(model, (np.arange(S)[:, None, None], np.arange(A)[None, :, None], kept), 1.0 / kept.shape[2])
    return reference.evaluate_arrays(model, problem.rewards, problem.gamma, problem.policy)


def flaky(batch: Any, problem: Any) -> np.ndarray:
    """Correct until n = 512 at the second discount, where it raises."""
    if batch.n >= 512 and problem.gamma > 0.6:
        raise RuntimeError(f"buffer overflow at n={batch.n}")
    return reference.plugin_q_pi(batch, problem)


@pytest.fixture(scope="module")
def garnet() -> rlrates.TabularMDP:
    return rlrates.garnet(10, 2, 3, seed=1)


@pytest.fixture(scope="module")
def passing(garnet: rlrates.TabularMDP) -> CheckResult:
    result = rlrates.check(reference.plugin_q_pi, garnet, CLAIM, profile="quick", seed=3, context=PASS_ID)
    assert result.status == "pass", result.message
    return result


@pytest.fixture(scope="module")
def failing(garnet: rlrates.TabularMDP) -> CheckResult:
    result = rlrates.check(stale_buffer, garnet, CLAIM, profile="quick", seed=3, context=FAIL_ID)
    assert result.status == "fail", result.message
    return result


@pytest.fixture(scope="module")
def erroring(garnet: rlrates.TabularMDP) -> CheckResult:
    result = rlrates.check(flaky, garnet, CLAIM, profile="quick", seed=3, context=ERROR_ID)
    assert result.status == "error", result.message
    return result


@pytest.fixture(scope="module")
def session(tmp_path_factory: pytest.TempPathFactory, passing: CheckResult, failing: CheckResult,
            erroring: CheckResult) -> Path:
    """A report directory as a session leaves it: three check folders with figures, then the index."""
    root = tmp_path_factory.mktemp("report")
    for result, test_id in ((failing, FAIL_ID), (passing, PASS_ID), (erroring, ERROR_ID)):
        write_check(result, root, test_id, extra={"worker": "gw0"})
    write_index(root)
    return root


@pytest.fixture()
def copy(session: Path, tmp_path: Path) -> Path:
    """A copy of the session's report directory, free to edit."""
    return Path(shutil.copytree(session, tmp_path / "report"))


@pytest.fixture()
def tables_only(tmp_path: Path, passing: CheckResult) -> Path:
    """One check folder without figures (cheap to corrupt)."""
    return write_check(passing, tmp_path / "report", PASS_ID, figures=False)


def load(folder: Path) -> dict[str, Any]:
    """A folder's check.json, parsed without validation."""
    record: dict[str, Any] = json.loads((folder / "check.json").read_text(encoding="utf-8"))
    return record


def truncate_json(folder: Path) -> None:
    """Cut a folder's check.json short (invalid JSON)."""
    path = folder / "check.json"
    path.write_text(path.read_text(encoding="utf-8")[:200], encoding="utf-8")
