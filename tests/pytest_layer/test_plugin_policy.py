"""The marker's `policy=` (an array or a callable `mdp -> policy`) and `zero_level=`, run as a user would.

Inner runs are seeded, so each verdict here is deterministic.
"""

from __future__ import annotations

import pytest

POLICY_TESTS = """
import numpy as np
import pytest
import rlrates
import estimators


def greedy_first_action(mdp):
    policy = np.zeros((mdp.states, mdp.actions))
    policy[:, 0] = 1.0
    return policy


seen = []


def recording_plug_in(batch, problem):
    seen.append(problem.policy.copy())
    return estimators.plug_in(batch, problem)


@pytest.mark.rlrates(n=-0.5, policy=greedy_first_action, suite=["chain", "grid"])
def test_policy_per_mdp(rlrates, rlrates_mdp):
    seen.clear()
    rlrates(recording_plug_in, rlrates_mdp)
    assert all((p[:, 0] == 1.0).all() for p in seen)
    assert len(seen) > 0
"""


def test_a_policy_callable_is_applied_to_each_mdp(project: pytest.Pytester) -> None:
    project.makepyfile(test_inner_policy=POLICY_TESTS)
    project.runpytest("-q", "-p", "no:cacheprovider").assert_outcomes(passed=2)


@pytest.mark.parametrize("argument, message", [
    ('policy="greedy"', "`policy` must be an (S, A) array of action probabilities, (S,) actions, or a callable"),
    ("policy=[[0.5, float('nan')]]", "`policy` must be a finite (S,) or (S, A) array"),
    ("zero_level=-1", "`zero_level` must be a finite number >= 0"),
    ('data="offline"', "unknown `data` 'offline'"),
    ('behaviour="uniform"', "`behaviour` must be an (S, A) array of action probabilities"),
])
def test_a_bad_policy_or_zero_level_fails_at_collection(project: pytest.Pytester, argument: str, message: str) -> None:
    project.makepyfile(test_inner_bad=f"""
import pytest

@pytest.mark.rlrates(n=-0.5, {argument})
def test_marked(rlrates):
    pass
""")
    result = project.runpytest("-q", "-p", "no:cacheprovider")
    result.assert_outcomes(errors=1)
    assert message in result.stdout.str()


ZERO_TESTS = """
import pytest
from rlrates import RatesWarning
import estimators


def solver_floor(batch, problem):
    return estimators.plug_in(batch, problem) + 1e-6


@pytest.mark.rlrates(n=-0.5, suite="exact", zero_level=1e-5)
def test_floor_accepted(rlrates, rlrates_mdp):
    with pytest.warns(RatesWarning, match="the rate is untested here"):
        result = rlrates(solver_floor, rlrates_mdp)
    assert "exact here" in result.message
"""


def test_a_marker_zero_level_lets_a_solver_tolerance_count_as_zero(project: pytest.Pytester) -> None:
    project.makepyfile(test_inner_zero=ZERO_TESTS)
    project.runpytest("-q", "-p", "no:cacheprovider").assert_outcomes(passed=1)
