"""The marker's `data=`, `behaviour=` and `coverage=` (logged data), run as a user would.

Inner runs are seeded, so each verdict here is deterministic.
"""

from __future__ import annotations

import json

import pytest

LOGGED_TESTS = """
import numpy as np
import pytest
import rlrates
from rlrates.reference_logged import logged_plugin_q_pi

GARNET = rlrates.garnet(states=10, actions=2, branching=3, seed=0)
seen = []


def first_64(batch, problem):
    class Few:
        sparse = False
    few = Few()
    S, A = problem.states, problem.actions
    s, a, t = (x.ravel()[:64] for x in (batch.states, batch.actions, batch.next_states))
    few.counts = np.bincount((s * A + a) * S + t, minlength=S * A * S).reshape(S, A, S)
    return logged_plugin_q_pi(few, problem)


def recording(batch, problem):
    seen.append(problem.behaviour.copy())
    return logged_plugin_q_pi(batch, problem)


@pytest.mark.rlrates(n=-0.5, coverage=0.5, data="transitions")
def test_coverage(rlrates):
    result = rlrates(logged_plugin_q_pi, GARNET)
    assert result.fit("coverage").measured


@pytest.mark.rlrates(n=-0.5, data="trajectories", behaviour=np.full((10, 2), 0.5))
def test_given_behaviour(rlrates):
    seen.clear()
    rlrates(recording, GARNET, gammas=(0.5, 0.75))
    assert all(np.array_equal(b, np.full((10, 2), 0.5)) for b in seen) and seen


@pytest.mark.rlrates(n=-0.5, data="transitions")
def test_first_64(rlrates):
    rlrates(first_64, GARNET, gammas=(0.5, 0.75))
"""


def test_logged_data_through_the_marker(project: pytest.Pytester) -> None:
    project.makepyfile(test_inner_logged=LOGGED_TESTS)
    result = project.runpytest("-q", "-p", "no:cacheprovider", "--rlrates-report=out")
    result.assert_outcomes(passed=2, failed=1)
    output = result.stdout.str()
    assert "test_first_64" in output and "error floor" in output or "rate too slow" in output
    records = {json.loads(p.read_text())["test_id"]: json.loads(p.read_text())
               for p in (project.path / "out").glob("*/check.json")}
    coverage = records["test_inner_logged.py::test_coverage"]
    assert coverage["status"] == "pass" and coverage["claim"]["coverage"] == 0.5
    assert coverage["data_regime"] == "transitions"
