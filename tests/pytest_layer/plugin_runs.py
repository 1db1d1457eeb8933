"""Shared parts of the end-to-end tests of the pytest layer: the inner estimators and output readers (the `project` fixture is in conftest.py).

Every inner check is seeded (master seed + test id), so each verdict asserted in
the ``test_plugin_*`` modules is deterministic. The inner MDPs are small (10
states, 2 actions) and the budget is ``ci`` or smaller, so a run costs about
a second. Runs that need plugin isolation (pytest-xdist, ``-p no:rlrates``,
import-time checks) use a subprocess; the rest run in-process.
"""

from __future__ import annotations

import re
import sys

import pytest

import rlrates.rate_check  # noqa: F401  (loads numpy, scipy, pandas before pytester snapshots sys.modules)

__all__ = ["ESTIMATORS", "HEADER_LINE", "SUMMARY_HEADER", "failure_section", "seeded_lines", "summary_lines",
           "run_subprocess"]

# The inner projects' estimators: vectorised numpy, each one a common kind of bug or its fix.
ESTIMATORS = '''
from pathlib import Path

import numpy as np


def evaluate(P, problem, gamma):
    """Q^pi of the model P: one linear solve over state-action pairs."""
    S, A = problem.states, problem.actions
    p_pi = np.einsum("sat,tb->satb", P, problem.policy).reshape(S * A, S * A)
    q = np.linalg.solve(np.eye(S * A) - gamma * p_pi, problem.rewards.ravel())
    return q.reshape(S, A)


def plug_in(batch, problem):
    """Correct: policy evaluation in the empirical model counts / n."""
    return evaluate(batch.counts / batch.n, problem, problem.gamma)


def first_32(batch, problem):
    """Bug: only the first 32 samples of each pair are used, whatever n."""
    head = batch.next_states[:, :, :32]
    P = (head[..., None] == np.arange(problem.states)).mean(axis=2)
    return evaluate(P, problem, problem.gamma)


def squared_discount(batch, problem):
    """Bug: discounts with gamma ** 2."""
    return evaluate(batch.counts / batch.n, problem, problem.gamma ** 2)


def very_noisy(batch, problem):
    """Right rate on average, but a log-normal factor with sigma 6 swamps any fit."""
    seed = int(np.dot(batch.counts.ravel(), np.arange(batch.counts.size)) % 2**32)
    rng = np.random.default_rng(seed)
    return plug_in(batch, problem) + rng.lognormal(0.0, 6.0) / np.sqrt(batch.n)


def breaks_at_512(batch, problem):
    if batch.n >= 512:
        raise RuntimeError("scratch buffer sized for 256 samples")
    return plug_in(batch, problem)


def leaves_a_trace(batch, problem):
    """Records that it ran, so a test can assert it did not."""
    Path(__file__).with_name("estimator-ran.txt").write_text("yes")
    return plug_in(batch, problem)
'''

HEADER_LINE = "rlrates: budget ci, master seed 0 (rerun with --rlrates-seed=0)"




def failure_section(output: str, test_name: str) -> str:
    """The text of one test's failure section in pytest's output."""
    match = re.search(rf"^_+ {re.escape(test_name)} _+$(.*?)(?=^_{{3,}} |^=+ |^-+ generated xml file)", output, re.M | re.S)
    assert match, f"no failure section for {test_name} in:\n{output}"
    return match.group(1)


def seeded_lines(message: str) -> list[str]:
    """The lines of a check message that carry numbers fixed by the seed (not timings)."""
    keep = []
    for line in message.splitlines():
        if line.startswith(("budget:", "reproduce:", "[gw")) or not line.strip():
            continue  # timings, the command, xdist's worker banner
        keep.append(line.rstrip())
    return keep


SUMMARY_HEADER = "rate checks (rlrates), budget "


def summary_lines(output: str) -> list[str]:
    """The lines of the rlrates summary section (it has no timings, so two runs of one seed give the same lines)."""
    match = re.search(rf"^=+ {re.escape(SUMMARY_HEADER)}.*?=+$(.*?)(?=^=+ )", output, re.M | re.S)
    assert match, f"no rlrates summary in:\n{output}"
    return [line.rstrip() for line in match.group(1).strip().splitlines()]


def run_subprocess(pytester: pytest.Pytester, *args: str) -> pytest.RunResult:
    return pytester.run(sys.executable, "-m", "pytest", "-p", "no:cacheprovider", *args, timeout=120)
