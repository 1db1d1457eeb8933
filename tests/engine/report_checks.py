"""Checks and report folders for the report tests (test_report_files.py, test_report_index.py,
test_report_figures.py): real ci-budget runs.

Each check runs on a 10-state Garnet MDP in well under a second; the fixtures that
run them (garnet, passing, failing, erroring, session, copy, tables_only) are in
conftest.py, module-scoped, so every test module computes them once.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import numpy as np

import rlrates
from rlrates import reference

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


def load(folder: Path) -> dict[str, Any]:
    """A folder's check.json, parsed without validation."""
    record: dict[str, Any] = json.loads((folder / "check.json").read_text(encoding="utf-8"))
    return record


def truncate_json(folder: Path) -> None:
    """Cut a folder's check.json short (invalid JSON)."""
    path = folder / "check.json"
    path.write_text(path.read_text(encoding="utf-8")[:200], encoding="utf-8")
