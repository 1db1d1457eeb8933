"""The rate engine end to end: API, targets, estimator failures, determinism, escalation, messages."""

from __future__ import annotations

import re
from concurrent.futures import ProcessPoolExecutor
from typing import Any

import numpy as np
import pandas as pd
import pytest

import rlrates
from rlrates import reference
from rlrates.budgets import BUDGETS
from rlrates.result import FIT_KEYS, Fit

import zoo

CLAIM = rlrates.Claim(n=-0.5, horizon=2.0)


@pytest.fixture(scope="module")
def garnet() -> rlrates.TabularMDP:
    return rlrates.garnet(states=10, actions=2, branching=3, seed=1)


# ---------------------------------------------------------------------------------------------
# claims and inputs


@pytest.mark.parametrize(
    ("kwargs", "error", "match"),
    [
        ({"n": None, "horizon": None}, ValueError, "at least one factor"),
        ({"n": 0.5}, ValueError, "must be negative"),
        ({"n": 0.0}, ValueError, "must be negative"),
        ({"n": float("nan")}, ValueError, "must be finite"),
        ({"n": "fast"}, TypeError, "`n` exponent must be a number"),
        ({"n": -0.5, "horizon": float("inf")}, ValueError, "`horizon` exponent must be finite"),
        ({"n": True}, TypeError, "`n` exponent must be a number"),
    ],
)
def test_claim_rejects_bad_exponents(kwargs: dict[str, Any], error: type[Exception], match: str) -> None:
    with pytest.raises(error, match=match):
        rlrates.Claim(**kwargs)


def test_claim_describes_itself() -> None:
    assert rlrates.Claim(n=-0.5, horizon=2).describe() == "error <~ n^-0.5 * H^2"
    assert rlrates.Claim(n=None, horizon=1.5).describe() == "error <~ H^1.5"


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"target": "v_star"}, "unknown `target` 'v_star'"),
        ({"budget": "fast"}, "unknown `budget` 'fast'"),
        ({"norm": "l2"}, "unknown `norm` 'l2'"),
        ({"seed": -1}, "`seed` must be a non-negative integer"),
        ({"n_grid": (64, 128)}, "at least three distinct values"),
        ({"n_grid": (64, 64, 128, 128)}, "at least three distinct values"),
        ({"n_grid": (0, 64, 128)}, "positive integers"),
        ({"n_grid": (64.5, 128, 256)}, "positive integers"),
        ({"gammas": (0.5, 1.0)}, r"`gammas` must lie in \(0, 1\)"),
        ({"gammas": (0.9,)}, "needs at least two discounts"),
        ({"replicates": 2}, "at least 4"),
    ],
)
def test_check_rejects_bad_settings_before_running(garnet: rlrates.TabularMDP, kwargs: dict[str, Any], match: str) -> None:
    def never_called(batch: Any, problem: Any) -> None:
        raise AssertionError("the estimator must not run on bad settings")

    with pytest.raises((ValueError, TypeError), match=match):
        rlrates.check(never_called, garnet, CLAIM, **kwargs)


def test_check_rejects_a_non_claim(garnet: rlrates.TabularMDP) -> None:
    with pytest.raises(TypeError, match="rlrates.Claim"):
        rlrates.check(reference.plugin_q_pi, garnet, (-0.5, 2.0))  # type: ignore[arg-type]


# ---------------------------------------------------------------------------------------------
# the four targets with correct reference estimators


@pytest.mark.parametrize(
    ("estimator", "target", "claim"),
    [
        (reference.plugin_q_pi, "q_pi", CLAIM),
        (reference.plugin_q_star, "q_star", CLAIM),
        (reference.plugin_policy, "policy", rlrates.Claim(n=-0.5)),
        (reference.empirical_model, "model", rlrates.Claim(n=-0.5)),
    ],
)
def test_reference_estimators_pass_every_target(garnet: rlrates.TabularMDP, estimator: Any, target: str, claim: rlrates.Claim) -> None:
    result = rlrates.check(estimator, garnet, claim, target=target, seed=3)
    assert result.status == "pass", result.message
    assert result.passed
    assert list(result.fits.columns) == list(FIT_KEYS)
    assert all(isinstance(fit, Fit) for fit in result.factors)
    assert set(result.fits["factor"]) == {"n"} | ({"horizon"} if claim.horizon is not None else set())
    assert list(result.table.columns) == ["gamma", "H", "n", "replicate", "error", "seconds"]
    ci = BUDGETS["ci"]
    assert set(result.table["gamma"]) == (set(ci.gammas) if target != "model" else {min(ci.gammas)})  # model: n only
    assert set(ci.n_grid) <= set(result.table["n"])


def test_model_error_is_max_l1_distance(garnet: rlrates.TabularMDP) -> None:
    # Weissman et al. (2003): E||p_hat - p||_1 <= sqrt((d - 1)/n) for each row; the max over
    # 20 rows at n >= 128 stays below a few times that (common practice: a loose sanity bound).
    result = rlrates.check(reference.empirical_model, garnet, rlrates.Claim(n=-0.5), target="model", seed=0)
    means = result.table.groupby("n")["error"].mean()
    assert (means <= 3 * np.sqrt((3 - 1) / means.index.to_numpy())).all()


def test_model_target_is_swept_over_n_only(garnet: rlrates.TabularMDP) -> None:
    """The empirical model's L1 error does not involve the discount (its definition), so one discount suffices;
    gammas given by the caller are kept."""
    result = rlrates.check(reference.empirical_model, garnet, rlrates.Claim(n=-0.5), target="model", seed=0)
    assert set(result.table["gamma"]) == {min(BUDGETS["ci"].gammas)}
    assert result.budget.gammas == (min(BUDGETS["ci"].gammas),)
    both = rlrates.check(reference.empirical_model, garnet, rlrates.Claim(n=-0.5), target="model", seed=0,
                         gammas=(0.5, 0.9))
    assert set(both.table["gamma"]) == {0.5, 0.9}


def test_mean_absolute_norm_is_smaller_than_sup_norm(garnet: rlrates.TabularMDP) -> None:
    sup = rlrates.check(reference.plugin_q_pi, garnet, CLAIM, seed=0)
    mean = rlrates.check(reference.plugin_q_pi, garnet, CLAIM, seed=0, norm="mean")
    joined = sup.table.merge(mean.table, on=["gamma", "n", "replicate"], suffixes=("_sup", "_mean"))
    assert (joined["error_mean"] <= joined["error_sup"] + 1e-15).all()
    assert (joined["error_mean"] < joined["error_sup"]).any()


def test_policy_argument_changes_the_target(garnet: rlrates.TabularMDP) -> None:
    always_first = np.zeros(garnet.states, dtype=np.int64)
    seen: list[np.ndarray] = []

    def spy(batch: Any, problem: Any) -> np.ndarray:
        seen.append(np.array(problem.policy))
        return reference.plugin_q_pi(batch, problem)

    rlrates.check(spy, garnet, CLAIM, policy=always_first, seed=0)
    assert np.array_equal(seen[0], rlrates.exact.policy_matrix(always_first, garnet.actions))


def test_estimator_never_sees_the_transition_kernel(garnet: rlrates.TabularMDP) -> None:
    def inspect(batch: Any, problem: Any) -> np.ndarray:
        names = {n for n in dir(problem) if not n.startswith("_")} | {n for n in dir(batch) if not n.startswith("_")}
        assert not {"P", "mdp", "kernel", "transitions"} & names
        return reference.plugin_q_pi(batch, problem)

    assert rlrates.check(inspect, garnet, CLAIM, seed=0).status == "pass"


# ---------------------------------------------------------------------------------------------
# failing estimators become "error" results that name the cell and keep earlier rows


def test_an_estimator_that_raises_is_reported_with_its_cell_and_traceback(garnet: rlrates.TabularMDP) -> None:
    def breaks_at_large_n(batch: Any, problem: Any) -> np.ndarray:
        if batch.n >= 1024 and problem.gamma > 0.7:
            raise ZeroDivisionError("bucket width went to zero")
        return reference.plugin_q_pi(batch, problem)

    result = rlrates.check(breaks_at_large_n, garnet, CLAIM, seed=0)
    assert result.status == "error"
    assert result.failure is not None
    assert (result.failure.gamma, result.failure.n, result.failure.replicate) == (0.75, 1024, 0)
    assert "breaks_at_large_n" in result.failure.traceback
    assert "gamma=0.75, n=1024, replicate=0" in result.message
    assert "ZeroDivisionError: bucket width went to zero" in result.message
    assert len(result.table) > 0  # cells computed before the failure are kept


@pytest.mark.parametrize(
    ("returned", "target", "match"),
    [
        (lambda p: p.rewards.tolist(), "q_pi", "returned list, not a numpy.ndarray"),
        (lambda p: np.zeros((p.states, p.actions + 1)), "q_pi", r"returned shape \(10, 3\)"),
        (lambda p: np.full((p.states, p.actions), np.nan), "q_pi", r"non-finite value nan at index \(0, 0\)"),
        (lambda p: np.full((p.states, p.actions), np.inf), "q_star", "non-finite value inf"),
        (lambda p: np.zeros((p.states, p.actions), dtype=np.int64), "q_pi", "dtype int64; Q-values must be floating point"),
        (lambda p: np.full(p.states, p.actions, dtype=np.int64), "policy", "picks action 2 in state 0"),
        (lambda p: np.zeros(p.states), "policy", "actions must be integers"),
        (lambda p: np.full((p.states, p.actions), 0.7), "policy", "row for state 0 sums to 1.4"),
        (lambda p: np.full((p.states, p.actions, p.states), 0.5), "model", r"row \(s=0, a=0\) sums to 5"),
    ],
)
def test_invalid_returns_are_named(garnet: rlrates.TabularMDP, returned: Any, target: str, match: str) -> None:
    result = rlrates.check(lambda batch, problem: returned(problem), garnet, rlrates.Claim(n=-0.5), target=target)
    assert result.status == "error"
    assert result.failure is not None and result.failure.kind == "invalid"
    assert re.search(match, result.message), result.message
    assert "gamma=0.5, n=128, replicate=0" in result.message


class _GoesWrongAt:
    """The plug-in estimate, except at one call of the cell (gamma=0.75, n=512): then ``wrong(estimate)``."""

    def __init__(self, call: int, wrong: Any, then_raise_at: int | None = None) -> None:
        self.call, self.wrong, self.then_raise_at, self.seen = call, wrong, then_raise_at, 0

    def __call__(self, batch: Any, problem: Any) -> Any:
        estimate = reference.plugin_q_pi(batch, problem)
        if problem.gamma != 0.75 or batch.n != 512:
            return estimate
        self.seen += 1
        if self.then_raise_at is not None and self.seen == self.then_raise_at + 1:
            raise RuntimeError("a later call raised")
        return self.wrong(estimate) if self.seen == self.call + 1 else estimate


@pytest.mark.parametrize(("wrong", "match"), [
    (lambda q: np.where(q == q.max(), np.nan, q), r"non-finite value nan at index"),
    (lambda q: q.astype(np.float32), None),  # valid, scored on the spot between queued float64 estimates
    (lambda q: q.tolist(), "returned list, not a numpy.ndarray"),
])
def test_a_bad_estimate_inside_a_cell_names_its_replicate_and_keeps_the_rows_before_it(
        garnet: rlrates.TabularMDP, wrong: Any, match: str | None) -> None:
    # Errors of plain float64 Q-value arrays are scored a cell at a time (rlrates.scoring.CellScorer): the
    # failure must still be the first bad call, in replicate order, with every row before it kept.
    reference_result = rlrates.check(reference.plugin_q_pi, garnet, CLAIM, seed=3)
    result = rlrates.check(_GoesWrongAt(5, wrong), garnet, CLAIM, seed=3)
    if match is None:
        float32_row = (result.table["gamma"] == 0.75) & (result.table["n"] == 512) & (result.table["replicate"] == 5)
        same = result.table.drop(columns="seconds")[~float32_row].reset_index(drop=True)
        expected = reference_result.table.drop(columns="seconds")[~float32_row].reset_index(drop=True)
        pd.testing.assert_frame_equal(same, expected, check_exact=True)
        return
    assert result.status == "error" and result.failure is not None and result.failure.kind == "invalid"
    assert (result.failure.gamma, result.failure.n, result.failure.replicate) == (0.75, 512, 5)
    assert re.search(match, result.message), result.message
    in_cell = result.table[(result.table["gamma"] == 0.75) & (result.table["n"] == 512)]
    assert sorted(in_cell["replicate"]) == [0, 1, 2, 3, 4]
    expected = reference_result.table.set_index(["gamma", "n", "replicate"])["error"]
    np.testing.assert_array_equal(in_cell["error"], expected.loc[[(0.75, 512, r) for r in range(5)]])


def test_an_invalid_estimate_queued_before_a_raising_call_is_the_failure_reported(garnet: rlrates.TabularMDP) -> None:
    result = rlrates.check(_GoesWrongAt(2, lambda q: q * np.inf, then_raise_at=4), garnet, CLAIM, seed=3)
    assert result.failure is not None and result.failure.kind == "invalid" and result.failure.replicate == 2
    assert "non-finite value" in result.failure.message


def test_an_estimator_cannot_mutate_its_batch(garnet: rlrates.TabularMDP) -> None:
    def scribbles(batch: Any, problem: Any) -> np.ndarray:
        batch.counts[0, 0, 0] += 1
        return reference.plugin_q_pi(batch, problem)

    result = rlrates.check(scribbles, garnet, CLAIM)
    assert result.status == "error"
    assert "read-only" in result.message


# ---------------------------------------------------------------------------------------------
# determinism


def _numbers(result: rlrates.CheckResult) -> pd.DataFrame:
    return result.table.drop(columns="seconds")


def test_same_seed_gives_identical_tables(garnet: rlrates.TabularMDP) -> None:
    first = rlrates.check(reference.plugin_q_pi, garnet, CLAIM, seed=11, context="tests/a.py::t")
    second = rlrates.check(reference.plugin_q_pi, garnet, CLAIM, seed=11, context="tests/a.py::t")
    pd.testing.assert_frame_equal(_numbers(first), _numbers(second))
    assert first.fits.equals(second.fits)


def test_seed_and_context_both_change_the_streams(garnet: rlrates.TabularMDP) -> None:
    base = rlrates.check(reference.plugin_q_pi, garnet, CLAIM, seed=11, context="a")
    other_seed = rlrates.check(reference.plugin_q_pi, garnet, CLAIM, seed=12, context="a")
    other_context = rlrates.check(reference.plugin_q_pi, garnet, CLAIM, seed=11, context="b")
    assert not np.allclose(base.table["error"], other_seed.table["error"][: len(base.table)])
    assert not np.allclose(base.table["error"], other_context.table["error"][: len(base.table)])


def test_process_executor_gives_bit_identical_numbers(garnet: rlrates.TabularMDP) -> None:
    serial = rlrates.check(reference.plugin_q_pi, garnet, CLAIM, seed=5)
    with ProcessPoolExecutor(max_workers=2) as pool:
        parallel = rlrates.check(reference.plugin_q_pi, garnet, CLAIM, seed=5, executor=pool)
    pd.testing.assert_frame_equal(_numbers(serial), _numbers(parallel))
    assert serial.status == parallel.status


# ---------------------------------------------------------------------------------------------
# escalation and messages


def test_an_ambiguous_first_pass_escalates_before_answering(garnet: rlrates.TabularMDP) -> None:
    # A true exponent 0.01 past the tested limit (-0.5 + 0.08): each look is undecided, so the check
    # escalates through its whole allowance. Seeded: of seeds 0-7, seed 7 stays undecided at every look
    # (the others stop earlier, inconclusive too, when the estimate lands within 0.01 of the limit).
    estimator = zoo.SyntheticPower(garnet, a=-0.41, b=1.0)
    result = rlrates.check(estimator, garnet, rlrates.Claim(n=-0.5), seed=7)
    ci = BUDGETS["ci"]
    assert result.status == "inconclusive", result.message
    assert result.run.passes == 2 + ci.n_doublings
    assert result.table["replicate"].max() + 1 == ci.replicates * ci.more_replicates
    assert result.table["n"].max() == ci.n_grid[-1] * 2**ci.n_doublings
    assert "budget spent" in result.message
    assert "undecided sub-test(s): rate" in result.message
    assert "straddles the tested limit -0.420" in result.message and "would settle it" in result.message


def test_an_estimate_on_the_tested_limit_stops_and_says_no_budget_would_settle_it(garnet: rlrates.TabularMDP) -> None:
    # The fitted exponent sits within 0.01 of the tested limit -0.42: more replicates would need
    # many times the budget, so the check stops after one pass and says so.
    result = rlrates.check(zoo.SyntheticPower(garnet, a=-0.43, b=1.0), garnet, rlrates.Claim(n=-0.5), seed=0)
    assert result.status == "inconclusive" and result.run.passes == 1, result.message
    assert "no practical budget would settle it" in result.message
    assert "no larger budget of this design would settle it" in result.message


def test_a_failure_message_answers_the_four_questions(garnet: rlrates.TabularMDP) -> None:
    result = rlrates.check(zoo.stale_buffer_q_pi, garnet, CLAIM, seed=4, context="tests/test_x.py::test_y")
    assert result.status == "fail"
    text = result.message
    assert "error <~ n^-0.5 * H^2" in text  # what was claimed
    assert re.search(r"n\s+[+-]\d\.\d{3} \[[+-]\d\.\d{3}, [+-]\d\.\d{3}\]", text)  # what was seen
    assert re.search(r"why: +(error floor|rate too slow)", text)  # why
    assert "mean error by n:" in text and "gamma=0.9" in text
    last = text.splitlines()[-1]
    assert last.startswith("reproduce: import rlrates; import zoo; rlrates.check(zoo.stale_buffer_q_pi")
    assert "seed=4" in last and "context='tests/test_x.py::test_y'" in last


def test_the_python_reproducer_reruns_the_same_check() -> None:
    mdp = rlrates.garnet(states=10, actions=2, branching=3, seed=1)
    result = rlrates.check(zoo.stale_buffer_q_pi, mdp, CLAIM, seed=4, n_grid=(128, 256, 512), replicates=8,
                           context="tests/test_x.py::test_y")
    *imports, call = result.run.reproducer.split("; ")  # "import rlrates; import zoo; rlrates.check(zoo....)"
    assert imports == ["import rlrates", "import zoo"]
    again = eval(call, {"rlrates": rlrates, "zoo": zoo})
    pd.testing.assert_frame_equal(_numbers(result), _numbers(again))
    assert again.status == result.status


def test_the_message_is_rendered_when_first_read_and_then_kept(garnet: rlrates.TabularMDP,
                                                               monkeypatch: pytest.MonkeyPatch) -> None:
    # a check whose message nobody reads (a passing test without a report) never renders it
    from rlrates import messages, rate_check

    calls: list[int] = []

    def counted(result: Any) -> str:
        calls.append(1)
        return messages.format_message(result)

    monkeypatch.setattr(rate_check, "format_message", counted)
    result = rlrates.check(reference.plugin_q_pi, garnet, rlrates.Claim(n=-0.5))
    assert calls == []
    assert result.message == messages.format_message(result) and calls == [1]
    assert result.message.startswith(f"rlrates {result.status.upper()}") and calls == [1]
