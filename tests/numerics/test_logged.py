"""Logged data against exact answers: occupancies, concentrability, the value targets, and the samplers.

Sources: the discounted occupancy identity J(pi) = sum_{s,a} d^pi(s, a) r(s, a) / (1 - gamma)
(Puterman, Markov Decision Processes, 1994, section 6.9 on the dual linear program; also
Sutton and Barto, 2nd ed., section 9.2 for the on-policy distribution); the finite geometric
sum sum_{t<L} (gamma P)^t = (I - (gamma P)^L)(I - gamma P)^{-1} (a textbook identity); the
concentrability coefficient as defined by Munos (2003) and Munos and Szepesvari (2008),
recomputed here by a direct loop; chi-square goodness of fit (scipy.stats.chisquare) for the
samplers, each at level 1e-3 with fixed seeds (false-alarm rate per test 0.1% over seeds; the
seeds are fixed, so each test is deterministic).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

import rlrates
from rlrates import occupancy
from rlrates.exact import q_pi, v_pi
from rlrates.logged import LoggedKernel, draw_logged_block
from rlrates.regimes import logged_truths
from rlrates.sampling import mdp_kernel
from rlrates.targets import solve_truth


@pytest.fixture(scope="module")
def garnet() -> rlrates.TabularMDP:
    return rlrates.garnet(states=8, actions=3, branching=3, seed=4)


def _kernel(mdp: rlrates.TabularMDP, policy: np.ndarray) -> np.ndarray:
    return np.einsum("sa,sat->st", policy, mdp.P)


def test_discounted_occupancy_matches_its_series_and_the_dual_identity(garnet: rlrates.TabularMDP) -> None:
    gamma, policy = 0.8, occupancy.default_behaviour(garnet)
    initial = occupancy.uniform_initial(garnet)
    d = occupancy.discounted_occupancy(garnet, gamma, policy, initial)
    # direct computation: the truncated series (1 - gamma) sum_t gamma^t initial P^t, 400 terms (gamma^400 ~ 1e-39)
    series, current = np.zeros(garnet.states), initial.copy()
    for t in range(400):
        series += (1 - gamma) * gamma**t * current
        current = current @ _kernel(garnet, policy)
    np.testing.assert_allclose(d, series[:, None] * policy, atol=1e-12)
    # dual identity: J = sum d r / (1 - gamma)
    J = initial @ v_pi(garnet, gamma, policy)
    assert np.isclose(J, (d * garnet.R).sum() / (1 - gamma), rtol=1e-12)


def test_episode_value_is_the_finite_geometric_sum(garnet: rlrates.TabularMDP) -> None:
    gamma, length = 0.9, 7
    policy = occupancy.default_behaviour(garnet)
    initial = occupancy.uniform_initial(garnet)
    P = _kernel(garnet, policy)
    r = np.einsum("sa,sa->s", policy, garnet.R)
    closed = initial @ (np.eye(garnet.states) - np.linalg.matrix_power(gamma * P, length)) @ np.linalg.solve(
        np.eye(garnet.states) - gamma * P, r)
    assert np.isclose(occupancy.episode_value(garnet, gamma, policy, initial, length), closed, rtol=1e-12)
    # and a long episode tends to the infinite-horizon value
    long = occupancy.episode_value(garnet, gamma, policy, initial, 600)
    assert np.isclose(long, initial @ v_pi(garnet, gamma, policy), rtol=1e-12)


def test_concentrability_is_the_largest_occupancy_ratio(garnet: rlrates.TabularMDP) -> None:
    target = occupancy.discounted_occupancy(garnet, 0.7, np.full((8, 3), 1 / 3), occupancy.uniform_initial(garnet))
    data = occupancy.discounted_occupancy(garnet, 0.7, occupancy.default_behaviour(garnet),
                                          occupancy.uniform_initial(garnet))
    direct = max(target[s, a] / data[s, a] for s in range(8) for a in range(3) if target[s, a] > 0)
    assert occupancy.concentrability(target, data) == pytest.approx(direct, rel=1e-14)
    assert occupancy.concentrability(target, target) == pytest.approx(1.0)
    missing = data.copy()
    missing[0, 0] = 0.0
    assert occupancy.concentrability(target, missing) == float("inf")


def test_graded_behaviours_double_their_concentrability(garnet: rlrates.TabularMDP) -> None:
    truth = solve_truth(garnet, 0.75, "q_pi")
    levels = logged_truths(truth, "transitions", None, None, 4)
    coverages = [t.data.coverage for t in levels]
    np.testing.assert_allclose(np.diff(np.log2(coverages)), 1.0, atol=1e-6)
    assert all(t.data.level == i for i, t in enumerate(levels))


def _setting(mdp: rlrates.TabularMDP, regime: str, gamma: float = 0.75, length: int | None = None):
    truth = logged_truths(solve_truth(mdp, gamma, "q_pi"), regime, None, length, 1)[0]
    spec = truth.data
    return truth, LoggedKernel.build(regime, mdp_kernel(mdp), spec.distribution, spec.initial, spec.behaviour,
                                     spec.episode_length or 1, np.asarray(mdp.R))


def test_transitions_sampler_draws_pairs_from_the_occupancy_and_successors_from_P(garnet: rlrates.TabularMDP) -> None:
    truth, kernel = _setting(garnet, "transitions")
    (batch,) = draw_logged_block(kernel, 60_000, 1, np.random.SeedSequence(11))
    visits = batch.visits.ravel()
    expected = truth.data.distribution.ravel() * batch.n
    assert stats.chisquare(visits, expected).pvalue > 1e-3
    counts = np.asarray(batch.counts)
    assert counts.sum() == batch.n and np.array_equal(counts.sum(axis=2), batch.visits)
    for s, a in [(0, 0), (3, 2), (7, 1)]:  # successors of a few pairs against P[s, a] on its support
        support = garnet.P[s, a] > 0
        assert stats.chisquare(counts[s, a][support], garnet.P[s, a][support] * counts[s, a].sum()).pvalue > 1e-3


def test_trajectories_follow_the_state_marginals_of_the_behaviour(garnet: rlrates.TabularMDP) -> None:
    truth, kernel = _setting(garnet, "trajectories", length=6)
    (batch,) = draw_logged_block(kernel, 6 * 20_000, 1, np.random.SeedSequence(12))
    assert batch.states.shape == (20_000, 6) and batch.episodes == 20_000
    np.testing.assert_array_equal(batch.next_states[:, :-1], batch.states[:, 1:])  # one episode per row
    marginal = occupancy.uniform_initial(garnet) @ np.linalg.matrix_power(_kernel(garnet, truth.data.behaviour), 5)
    observed = np.bincount(batch.states[:, 5], minlength=garnet.states)
    assert stats.chisquare(observed, marginal * 20_000).pvalue > 1e-3
    visits = batch.visits.ravel()  # every step pooled: the per-step occupancy of the episode
    assert stats.chisquare(visits, truth.data.distribution.ravel() * batch.n).pvalue > 1e-3


def test_logged_arrays_and_the_problem_cannot_be_made_writable(garnet: rlrates.TabularMDP) -> None:
    truth, kernel = _setting(garnet, "transitions")
    (batch,) = draw_logged_block(kernel, 100, 1, np.random.SeedSequence(0))
    problem = truth.problem()
    for array in (batch.states, batch.counts, batch.visits, batch.rewards, problem.rewards, problem.policy,
                  problem.behaviour):
        with pytest.raises(ValueError):
            array.setflags(write=True)
    generative = rlrates.draw(garnet, 16, seed=0)
    for array in (generative.counts, generative.next_states):
        with pytest.raises(ValueError):
            array.setflags(write=True)


def test_value_target_of_trajectories_is_the_episode_value(garnet: rlrates.TabularMDP) -> None:
    truth = logged_truths(solve_truth(garnet, 0.5, "value"), "trajectories", None, 3, 1)[0]
    initial, policy = truth.data.initial, truth.policy
    P, r = _kernel(garnet, policy), np.einsum("sa,sa->s", policy, garnet.R)
    by_hand = initial @ r + 0.5 * initial @ P @ r + 0.25 * initial @ P @ P @ r
    assert float(truth.value) == pytest.approx(by_hand, rel=1e-13)
    transitions = logged_truths(solve_truth(garnet, 0.5, "value"), "transitions", None, None, 1)[0]
    assert float(transitions.value) == pytest.approx(initial @ np.einsum("sa,sa->s", policy, q_pi(garnet, 0.5, policy)))


def test_wide_rows_sample_by_binary_search_with_the_same_law() -> None:
    """Rows wider than the comparison lookup's limit (here 24 successors) use the searchsorted path."""
    dense = rlrates.garnet(states=24, actions=2, branching=24, seed=5)
    truth, kernel = _setting(dense, "trajectories", length=3)
    (batch,) = draw_logged_block(kernel, 3 * 30_000, 1, np.random.SeedSequence(13))
    marginal = occupancy.uniform_initial(dense) @ np.linalg.matrix_power(_kernel(dense, truth.data.behaviour), 2)
    observed = np.bincount(batch.states[:, 2], minlength=dense.states)
    assert stats.chisquare(observed, marginal * 30_000).pvalue > 1e-3


def test_a_sparse_mdp_gets_sparse_counts_of_the_same_data() -> None:
    sparse = rlrates.garnet(states=8, actions=3, branching=3, seed=4, sparse=True)
    truth, kernel = _setting(sparse, "transitions")
    (batch,) = draw_logged_block(kernel, 5_000, 1, np.random.SeedSequence(14))
    assert batch.sparse and batch.counts.shape == (24, 8)
    by_hand = np.bincount((batch.states * 3 + batch.actions) * 8 + batch.next_states, minlength=24 * 8)
    np.testing.assert_array_equal(batch.counts.toarray().ravel(), by_hand)
    assert stats.chisquare(batch.visits.ravel(), truth.data.distribution.ravel() * batch.n).pvalue > 1e-3
