"""Fixtures of the report tests: real ci-budget checks and report folders (helpers in report_checks.py)."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest
from report_checks import CLAIM, ERROR_ID, FAIL_ID, PASS_ID, flaky, stale_buffer

import rlrates
from rlrates import CheckResult, reference
from rlrates.report import write_check, write_index


@pytest.fixture(scope="module")
def garnet() -> rlrates.TabularMDP:
    return rlrates.garnet(10, 2, 3, seed=1)


@pytest.fixture(scope="module")
def passing(garnet: rlrates.TabularMDP) -> CheckResult:
    result = rlrates.check(reference.plugin_q_pi, garnet, CLAIM, budget="ci", seed=1, context=PASS_ID)
    assert result.status == "pass", result.message
    return result


@pytest.fixture(scope="module")
def failing(garnet: rlrates.TabularMDP) -> CheckResult:
    result = rlrates.check(stale_buffer, garnet, CLAIM, budget="ci", seed=3, context=FAIL_ID)
    assert result.status == "fail", result.message
    return result


@pytest.fixture(scope="module")
def erroring(garnet: rlrates.TabularMDP) -> CheckResult:
    result = rlrates.check(flaky, garnet, CLAIM, budget="ci", seed=3, context=ERROR_ID)
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
