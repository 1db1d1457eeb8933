"""The escalation state machine: the steps a check takes after an ambiguous pass (rules of rlrates.escalation)."""

from __future__ import annotations

from rlrates.escalation import Escalation, Step
from rlrates.budgets import BUDGETS

CI_BUDGET = BUDGETS["ci"]


def test_the_first_pass_runs_the_budget_grid() -> None:
    state, step = Escalation.start(CI_BUDGET)
    assert step == Step(CI_BUDGET.n_grid, 0, CI_BUDGET.replicates)
    assert state.n_values == CI_BUDGET.n_grid


def test_wide_intervals_buy_replicates_once_then_larger_n() -> None:
    state, _ = Escalation.start(CI_BUDGET)
    escalated = state.next("replicates")
    assert escalated is not None
    state, step = escalated
    assert step == Step(CI_BUDGET.n_grid, CI_BUDGET.replicates, CI_BUDGET.replicates * CI_BUDGET.more_replicates)
    assert state.replicates == CI_BUDGET.replicates * CI_BUDGET.more_replicates
    escalated = state.next("replicates")  # replicates are spent: the next step doubles n
    assert escalated is not None
    state, step = escalated
    assert step == Step((CI_BUDGET.n_grid[-1] * 2,), 0, state.replicates)


def test_pre_asymptotic_curves_buy_larger_n_first_and_the_budget_ends() -> None:
    state, _ = Escalation.start(CI_BUDGET)
    steps = []
    while (escalated := state.next("larger_n")) is not None:
        state, step = escalated
        steps.append(step)
    doublings = [step for step in steps if step.start == 0]
    assert [step.n_values for step in doublings] == [(CI_BUDGET.n_grid[-1] * 2 ** (k + 1),) for k in range(CI_BUDGET.n_doublings)]
    assert len(steps) == CI_BUDGET.n_doublings + 1  # and one replicate step once the doublings are spent
    assert state.next("larger_n") is None and state.next("replicates") is None
