"""Verdicts a user can act on: gross bugs fail, NaN evidence never passes, every verdict line states its tested limit.

Each test reproduces one way the verdict engine used to give a wrong or misleading
answer. Checks are seeded, so each verdict asserted here is deterministic; the
rates at which such verdicts come out over fresh seeds are measured by
``benchmarks/calibrate.py`` (docs/verdicts.md).
"""

from __future__ import annotations

import re
import warnings
from typing import Any

import numpy as np
import pytest

import rlrates
from rlrates import reference
from rlrates.exact import evaluate_arrays
from rlrates.rate_check import RatesWarning

import zoo

SIM_LEMMA = rlrates.Claim(n=-0.5, horizon=2.0)


@pytest.fixture(scope="module")
def garnet() -> rlrates.TabularMDP:
    return rlrates.garnet(states=20, actions=4, branching=5, seed=7)


# ------------------------------------------------------------------- 1. gross bugs fail


def test_an_evaluator_stuck_at_one_discount_fails_and_says_the_error_does_not_fall(garnet: rlrates.TabularMDP) -> None:
    result = rlrates.check(zoo.fixed_discount_q_pi, garnet, SIM_LEMMA, seed=0)
    assert result.status == "fail", result.message
    assert result.run.passes == 1  # decided at once: no escalation on the strongest evidence of a bug
    assert re.search(r"the error does not fall: gamma=0\.5: about [\d.]+ at every n", result.message)


# ------------------------------------------------------------------- 2. NaN evidence never passes


def test_a_masked_array_hiding_a_nan_is_an_error_naming_the_masked_entry(garnet: rlrates.TabularMDP) -> None:
    result = rlrates.check(zoo.masked_nan_q_pi, garnet, SIM_LEMMA, seed=0)
    assert result.status == "error"
    assert "masked array with 1 masked entries (the first at index (0, 0))" in result.message


def _fully_masked(batch: Any, problem: Any) -> np.ndarray:
    return np.ma.masked_all((problem.states, problem.actions))


def test_a_fully_masked_return_is_an_error(garnet: rlrates.TabularMDP) -> None:
    result = rlrates.check(_fully_masked, garnet, SIM_LEMMA, seed=0)
    assert result.status == "error" and "masked array with 80 masked entries" in result.message


def test_an_unmasked_masked_array_is_accepted_as_its_data(garnet: rlrates.TabularMDP) -> None:
    def plain(batch: Any, problem: Any) -> np.ndarray:
        return np.ma.MaskedArray(reference.plugin_q_pi(batch, problem))

    assert rlrates.check(plain, garnet, SIM_LEMMA, seed=0).status == "pass"


# ------------------------------------------------------------------- 3. one vanishing discount


def test_one_discount_with_zero_error_leaves_the_horizon_test_on(garnet: rlrates.TabularMDP) -> None:
    # An estimator exact at gamma ~ 0 (the Q-function is the reward there) whose error grows like
    # H^3 elsewhere must fail a claim of H^1: the H-fit runs over the discounts where it is measurable.
    steep = zoo.SyntheticPower(garnet, -0.5, 3.0, scale=0.002)

    def exact_at_tiny_gamma(batch: Any, problem: Any) -> np.ndarray:
        return problem.rewards.copy() if problem.gamma < 1e-6 else steep(batch, problem)

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RatesWarning)  # n_grid below 8 H is not the point here
        result = rlrates.check(exact_at_tiny_gamma, garnet, rlrates.Claim(n=-0.5, horizon=1.0),
                               gammas=(1e-12, 0.5, 0.75, 0.9), seed=0)
    assert result.status == "fail" and "horizon" in result.fired, result.message
    assert "gamma=1e-12 left out of the H-fit: zero error at every usable n" in result.message


# ------------------------------------------------------------------- 4 and 6. tested limit, levels, power


def test_the_message_states_the_tested_limit_the_levels_and_what_the_check_could_catch(
        garnet: rlrates.TabularMDP) -> None:
    result = rlrates.check(reference.plugin_q_pi, garnet, SIM_LEMMA, seed=0)
    assert result.status == "pass"
    assert "<= -0.420 (-0.5 + 0.08)" in result.message and "<= +2.300 (2 + 0.3)" in result.message
    assert re.search(r"bounds: +lower 99\.\d+%, upper 98\.75% one-sided", result.message)
    n_fit = result.fit("n")
    assert n_fit is not None and np.isfinite(n_fit.detectable) and n_fit.detectable > n_fit.limit
    assert f"would have caught n^{n_fit.detectable:+.2f} or slower decay" in result.message


# ------------------------------------------------------------------- 5. power on real shortfalls


@pytest.mark.parametrize("exponent", [-0.35, -1 / 3])
def test_a_rate_short_by_a_sixth_or_more_fails_in_the_ci_budget(garnet: rlrates.TabularMDP, exponent: float) -> None:
    # The calibration measures these at 100% over 150 seeds; three fixed seeds here.
    for seed in range(3):
        result = rlrates.check(zoo.SyntheticPower(garnet, exponent, 1.0), garnet, SIM_LEMMA, seed=seed)
        assert result.status == "fail" and "rate" in result.fired, result.message


def test_horizon_growth_short_by_a_half_fails_in_the_ci_budget(garnet: rlrates.TabularMDP) -> None:
    result = rlrates.check(zoo.SyntheticPower(garnet, -0.5, 2.5), garnet, SIM_LEMMA, seed=0)
    assert result.status == "fail" and result.fired == ("horizon",), result.message


# ------------------------------------------------------------------- 7. default policy


def test_the_default_policy_is_random_and_seeded_by_the_mdp(garnet: rlrates.TabularMDP) -> None:
    from rlrates.targets import default_policy

    policy = default_policy(garnet)
    np.testing.assert_allclose(policy.sum(axis=1), 1.0)
    assert np.ptp(policy, axis=1).min() > 0  # no uniform row
    np.testing.assert_array_equal(policy, default_policy(rlrates.garnet(states=20, actions=4, branching=5, seed=7)))
    assert not np.array_equal(policy, default_policy(rlrates.garnet(states=20, actions=4, branching=5, seed=8)))


def test_a_transposed_policy_fails_under_the_default_policy(garnet: rlrates.TabularMDP) -> None:
    result = rlrates.check(zoo.transposed_policy_q_pi, garnet, SIM_LEMMA, seed=0)
    assert result.status == "fail", result.message
    # under a uniform evaluation policy the same bug is invisible (every row is the same)
    uniform = rlrates.uniform_policy(garnet)
    assert rlrates.check(zoo.transposed_policy_q_pi, garnet, SIM_LEMMA, policy=uniform, seed=0).status == "pass"


# ------------------------------------------------------------------- 8. empty passes and the zero level


def _solver_with_tolerance(batch: Any, problem: Any) -> np.ndarray:
    """Exact Q^pi plus a deterministic 1e-6 offset (a solver's stopping tolerance): a floor of 1e-6."""
    model = batch.counts / float(batch.n)
    exact = evaluate_arrays(model, problem.rewards, problem.gamma, problem.policy)
    return exact + 1e-6


def test_a_zero_level_lets_a_solver_tolerance_count_as_exact() -> None:
    mdp = rlrates.deterministic(states=8, actions=3, seed=0)
    with pytest.warns(RatesWarning, match="the rate is untested here"):
        floored = rlrates.check(_solver_with_tolerance, mdp, SIM_LEMMA, seed=0)
    assert floored.status == "fail"  # a constant 1e-6 is a floor
    with pytest.warns(RatesWarning, match="the rate is untested here"):
        accepted = rlrates.check(_solver_with_tolerance, mdp, SIM_LEMMA, seed=0, zero_level=1e-5)
    assert accepted.status == "pass" and "exact here" in accepted.message
    assert "zero_level=1e-05" in accepted.run.reproducer


def test_tiny_rewards_do_not_make_a_zero_estimator_exact() -> None:
    mdp = rlrates.garnet(states=10, actions=2, branching=3, seed=1)
    tiny = rlrates.TabularMDP(mdp.P, mdp.R * 1e-10, name="garnet-tiny-rewards")

    def zeros(batch: Any, problem: Any) -> np.ndarray:
        return np.zeros((problem.states, problem.actions))

    result = rlrates.check(zeros, tiny, SIM_LEMMA, seed=0)
    assert result.status == "fail" and not any(f.verdict == "exact" for f in result.factors), result.message


# ------------------------------------------------------------------- 9. determinism probe


def _global_noise(batch: Any, problem: Any) -> np.ndarray:
    return reference.plugin_q_pi(batch, problem) + np.random.normal(0.0, 1e-3, size=problem.rewards.shape)


def test_an_estimator_using_global_random_state_is_warned_about(garnet: rlrates.TabularMDP) -> None:
    with pytest.warns(RatesWarning, match=r"not a function of its batch: two calls on one batch \(gamma=0\.5, n=128\)"):
        result = rlrates.check(_global_noise, garnet, SIM_LEMMA, seed=0)
    assert "reruns with the same seed will not reproduce" in result.message


def test_a_pure_estimator_gives_no_probe_warning(garnet: rlrates.TabularMDP) -> None:
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        rlrates.check(reference.plugin_q_pi, garnet, SIM_LEMMA, seed=0)


# ------------------------------------------------------------------- 11. slow rate at one discount


def test_a_slow_rate_at_some_discounts_cannot_hide_behind_a_fast_one(garnet: rlrates.TabularMDP) -> None:
    # n^-1/4 at gamma 0.5 and 0.75, a decaying start-up bias (n^-1.1) at 0.9: the average is about -0.53
    estimator = zoo.SyntheticPower(garnet, -0.25, 1.0, a_at=((0.9, -1.1),))
    result = rlrates.check(estimator, garnet, SIM_LEMMA, seed=0)
    assert result.status == "fail" and "rate" in result.fired, result.message
    assert "at gamma=0.5 it is -0.2" in result.message


# ------------------------------------------------------------------- 13. policy resolution


def test_a_policy_just_under_the_resolution_is_not_exact_unless_optimal_policies_came_back() -> None:
    # Every replicate returns the same slightly suboptimal policy: its mean suboptimality may sit
    # under policy_resolution, but no replicate was optimal, so it is not "zero".
    mdp = rlrates.garnet(states=10, actions=2, branching=3, seed=1)
    from rlrates.exact import q_star as solve_q_star

    def near_optimal(batch: Any, problem: Any) -> np.ndarray:
        q, _ = solve_q_star(mdp, problem.gamma)
        greedy = q.argmax(axis=1)
        second = np.argsort(q, axis=1)[:, -2]
        gaps = q[np.arange(q.shape[0]), greedy] - q[np.arange(q.shape[0]), second]
        worst = int(np.argmin(gaps))  # flip the action with the smallest gap: a small suboptimality
        greedy[worst] = second[worst]
        return greedy

    budget = rlrates.BUDGETS["ci"].with_overrides(policy_resolution=0.5)
    result = rlrates.check(near_optimal, mdp, rlrates.Claim(n=-0.5), target="policy", budget=budget, seed=0)
    assert result.status == "fail", result.message  # a constant suboptimality is a floor, not "exact"
    assert not any(f.verdict == "exact" for f in result.factors)


# ------------------------------------------------------------------- 14. identical replicates


def test_one_cached_estimate_per_n_is_an_error(garnet: rlrates.TabularMDP) -> None:
    result = rlrates.check(zoo.PerNCache(), garnet, SIM_LEMMA, seed=0)
    assert result.status == "error"
    assert "the estimator does not depend on its batch (a cache keyed on n" in result.message


def test_the_default_policy_is_recorded_in_the_notes_and_the_record(garnet: rlrates.TabularMDP) -> None:
    result = rlrates.check(reference.plugin_q_pi, garnet, SIM_LEMMA, seed=0)
    assert any("seeded by the MDP's fingerprint (rlrates.targets.default_policy)" in note for note in result.notes)
    given = rlrates.check(reference.plugin_q_pi, garnet, SIM_LEMMA, seed=0, policy=rlrates.uniform_policy(garnet))
    assert not any("default_policy" in note for note in given.notes)
