"""Exact solutions checked against sources outside this project.

Every check names its source in a comment. Values transcribed from printed
figures are marked as such; facts used without a specific source are marked
"common practice".
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import linprog

import rlrates
from rlrates import RewardRangeWarning, TabularMDP
from rlrates.exact import (
    greedy_policy,
    model_distance,
    policy_matrix,
    q_pi,
    q_star,
    suboptimality,
    uniform_policy,
    v_pi,
    validate_gamma,
    validate_policy,
)

# Moves as (row, column) steps: up, down, right, left.
MOVES = ((-1, 0), (1, 0), (0, 1), (0, -1))


def _quiet_mdp(P: np.ndarray, R: np.ndarray) -> TabularMDP:
    """Build an MDP whose rewards are knowingly outside [0, 1], expecting the warning."""
    with pytest.warns(RewardRangeWarning):
        return TabularMDP(P, R)


# --------------------------------------------------------------------------- Sutton & Barto, Example 3.5


def sutton_barto_grid() -> TabularMDP:
    """Sutton & Barto, Reinforcement Learning: An Introduction, 2nd ed., Example 3.5.

    5x5 grid, states numbered row-major from the top-left. From A = (0, 1) every
    action gives +10 and moves to A' = (4, 1); from B = (0, 3) every action gives
    +5 and moves to B' = (2, 3). Moves off the grid give -1 and leave the state
    unchanged; all other moves give 0.
    """
    S = 25
    P = np.zeros((S, 4, S))
    R = np.zeros((S, 4))
    for r in range(5):
        for c in range(5):
            s = 5 * r + c
            for a, (dr, dc) in enumerate(MOVES):
                if (r, c) == (0, 1):
                    P[s, a, 5 * 4 + 1], R[s, a] = 1.0, 10.0
                elif (r, c) == (0, 3):
                    P[s, a, 5 * 2 + 3], R[s, a] = 1.0, 5.0
                elif 0 <= r + dr < 5 and 0 <= c + dc < 5:
                    P[s, a, 5 * (r + dr) + (c + dc)] = 1.0
                else:
                    P[s, a, s], R[s, a] = 1.0, -1.0
    return _quiet_mdp(P, R)


# Transcribed from the printed figures of Sutton & Barto (2nd ed.); written down
# from memory of the book and not re-checked against a printed copy. They agree
# with our solves to the printed precision, which two independent errors would
# be unlikely to do.
# Figure 3.2 (right): v_pi for the equiprobable random policy, gamma = 0.9.
FIGURE_3_2 = np.array(
    [
        [3.3, 8.8, 4.4, 5.3, 1.5],
        [1.5, 3.0, 2.3, 1.9, 0.5],
        [0.1, 0.7, 0.7, 0.4, -0.4],
        [-1.0, -0.4, -0.4, -0.6, -1.2],
        [-1.9, -1.3, -1.2, -1.4, -2.0],
    ]
)
# Figure 3.5 (middle): v*, gamma = 0.9.
FIGURE_3_5 = np.array(
    [
        [22.0, 24.4, 22.0, 19.4, 17.5],
        [19.8, 22.0, 19.8, 17.8, 16.0],
        [17.8, 19.8, 17.8, 16.0, 14.4],
        [16.0, 17.8, 16.0, 14.4, 13.0],
        [14.4, 16.0, 14.4, 13.0, 11.7],
    ]
)
# Printed to one decimal: the true value is within 0.05 of the printed one (plus
# float slack for a value like 2.2501 printed as 2.3).
PRINTED_ATOL = 0.05 + 1e-6


def test_sutton_barto_figure_3_2_random_policy_values() -> None:
    # Sutton & Barto (2nd ed.), Example 3.5 / Figure 3.2
    mdp = sutton_barto_grid()
    values = v_pi(mdp, 0.9).reshape(5, 5)
    np.testing.assert_allclose(values, FIGURE_3_2, rtol=0, atol=PRINTED_ATOL)
    # the same values as sum_a pi(a|s) Q^pi(s, a)
    q = q_pi(mdp, 0.9)
    np.testing.assert_allclose((q * uniform_policy(mdp)).sum(axis=1).reshape(5, 5), FIGURE_3_2, atol=PRINTED_ATOL)


def test_sutton_barto_figure_3_5_optimal_values() -> None:
    # Sutton & Barto (2nd ed.), Example 3.5 / Figure 3.5
    mdp = sutton_barto_grid()
    q, policy = q_star(mdp, 0.9)
    np.testing.assert_allclose(q.max(axis=1).reshape(5, 5), FIGURE_3_5, rtol=0, atol=PRINTED_ATOL)
    # Read off the Figure 3.5 values with one Bellman step: from A' = (4, 1) the only
    # optimal action is up (17.8 above, 14.4 left and right); from (0, 0) it is
    # right, into A (24.4 against 19.8 below). This agrees with the figure's arrows.
    assert policy[5 * 4 + 1] == 0
    assert policy[0] == 2
    # Sutton & Barto, Section 3.6: v* of A is 10 + gamma v*(A'), since every action
    # from A jumps to A'. Exact identity, not a printed value.
    v = q.max(axis=1)
    assert v[1] == pytest.approx(10 + 0.9 * v[21], rel=1e-12)


# --------------------------------------------------------------------------- Sutton & Barto, Example 4.1


def sutton_barto_small_grid() -> TabularMDP:
    """Sutton & Barto (2nd ed.), Example 4.1: 4x4 grid, terminal corners, reward -1 per step.

    The terminal corners 0 and 15 are modelled as absorbing states with reward 0.
    """
    P = np.zeros((16, 4, 16))
    R = -np.ones((16, 4))
    for s in range(16):
        r, c = divmod(s, 4)
        if s in (0, 15):
            P[s, :, s], R[s] = 1.0, 0.0
            continue
        for a, (dr, dc) in enumerate(MOVES):
            inside = 0 <= r + dr < 4 and 0 <= c + dc < 4
            P[s, a, 4 * (r + dr) + (c + dc) if inside else s] = 1.0
    return _quiet_mdp(P, R)


# Sutton & Barto (2nd ed.), Figure 4.1, k = infinity panel (transcribed from memory of
# the printed figure). The printed numbers are integers and they satisfy the
# Bellman equation exactly (e.g. v(1) = -1 + (v(1) + v(0) + v(2) + v(5)) / 4 =
# -1 + (-14 + 0 - 20 - 18) / 4 = -14), so they are the exact values.
FIGURE_4_1 = np.array(
    [
        [0, -14, -20, -22],
        [-14, -18, -20, -20],
        [-20, -20, -18, -14],
        [-22, -20, -14, 0],
    ],
    dtype=float,
)


def test_sutton_barto_figure_4_1_undiscounted_episodic() -> None:
    # Sutton & Barto (2nd ed.), Example 4.1 / Figure 4.1; gamma = 1
    mdp = sutton_barto_small_grid()
    values = v_pi(mdp, 1.0).reshape(4, 4)
    np.testing.assert_allclose(values, FIGURE_4_1, rtol=0, atol=1e-9)


def test_sutton_barto_exercise_4_1_action_values() -> None:
    # Sutton & Barto (2nd ed.), Exercise 4.1: q_pi(11, down) = -1 (reaches the
    # terminal state: reward -1 on that transition, then value 0) and
    # q_pi(7, down) = -1 + v(11) = -15. Computed by hand from Figure 4.1.
    q = q_pi(sutton_barto_small_grid(), 1.0)
    assert q[11, 1] == pytest.approx(-1.0, abs=1e-9)
    assert q[7, 1] == pytest.approx(-15.0, abs=1e-9)


def test_gamma_one_policy_that_never_terminates_raises() -> None:
    # Sutton & Barto (2nd ed.), Section 3.4: gamma = 1 is only meaningful for
    # episodic tasks. Always "up" traps state 1 against the top wall forever.
    mdp = sutton_barto_small_grid()
    with pytest.raises(ValueError, match="episodic"):
        v_pi(mdp, 1.0, np.zeros(16, dtype=np.int64))


def test_gamma_one_non_episodic_model_raises() -> None:
    # common practice: a garnet has no absorbing zero-reward state, so the
    # undiscounted return is infinite
    with pytest.raises(ValueError, match="episodic"):
        v_pi(rlrates.garnet(10, 2, 3, seed=0), 1.0)


def test_gamma_one_absorbing_state_with_reward_raises() -> None:
    # common practice: an absorbing state with reward 1 accumulates reward forever
    P = np.zeros((2, 1, 2))
    P[0, 0, 1] = 1.0
    P[1, 0, 1] = 1.0
    with pytest.raises(ValueError, match="episodic"):
        v_pi(TabularMDP(P, np.array([[0.0], [1.0]])), 1.0)


def test_q_star_rejects_gamma_one() -> None:
    with pytest.raises(ValueError, match=r"\(0, 1\)"):
        q_star(sutton_barto_small_grid(), 1.0)


# --------------------------------------------------------------------------- Q* by linear programming


GARNET_CASES = [
    ((10, 3, 4), 0.5, 0),
    ((10, 3, 4), 0.9, 1),
    ((20, 4, 5), 0.99, 2),
    ((15, 2, 15), 0.7, 3),
    ((30, 5, 3), 0.95, 4),
    ((8, 6, 2), 0.999, 5),
]


@pytest.mark.parametrize(("shape", "gamma", "seed"), GARNET_CASES)
def test_q_star_matches_linear_program(shape: tuple[int, int, int], gamma: float, seed: int) -> None:
    # Independent method: the primal LP of a discounted MDP, minimise sum_s V(s)
    # subject to V(s) >= R(s, a) + gamma sum_s' P(s'|s, a) V(s') for all (s, a);
    # its solution is V* (Puterman, Markov Decision Processes, 1994, Section 6.9).
    mdp = rlrates.garnet(*shape, seed=seed)
    S, A = mdp.states, mdp.actions
    # constraint rows gamma P[s, a] - e_s, right-hand side -R[s, a]
    A_ub = gamma * mdp.P.reshape(S * A, S) - np.repeat(np.eye(S), A, axis=0)
    result = linprog(
        np.ones(S), A_ub=A_ub, b_ub=-mdp.R.reshape(-1), bounds=[(None, None)] * S, method="highs"
    )
    assert result.status == 0, result.message
    q_lp = mdp.R + gamma * mdp.P @ result.x
    q, policy = q_star(mdp, gamma)
    np.testing.assert_allclose(q, q_lp, rtol=0, atol=1e-8 * max(1.0, np.abs(q_lp).max()))
    # the greedy policy of Q* is optimal: its own Q equals Q* (Puterman 1994, ch. 6)
    np.testing.assert_allclose(q_pi(mdp, gamma, policy), q, rtol=0, atol=1e-9 * max(1.0, np.abs(q).max()))
    # where the LP's best action leads the runner-up clearly, both pick the same action
    top_two = np.sort(q_lp, axis=1)[:, -2:]
    clear = top_two[:, 1] - top_two[:, 0] > 1e-6
    assert clear.any()
    np.testing.assert_array_equal(greedy_policy(q_lp)[clear], policy[clear])


def test_q_star_hand_computed_single_state() -> None:
    # One state, self-loop; action 0 pays 1, action 1 pays 0. By the geometric series
    # (common practice): Q*(0) = 1 / (1 - gamma), Q*(1) = gamma / (1 - gamma).
    mdp = TabularMDP(np.ones((1, 2, 1)), np.array([[1.0, 0.0]]))
    q, policy = q_star(mdp, 0.9)
    np.testing.assert_allclose(q, [[10.0, 9.0]], rtol=1e-12)
    assert policy.tolist() == [0]


def test_q_star_ties_go_to_lowest_action() -> None:
    # all actions identical: every action is optimal; the documented tie rule picks 0
    P = np.zeros((3, 4, 3))
    P[:, :, 1] = 1.0
    mdp = TabularMDP(P, np.full((3, 4), 0.3))
    _, policy = q_star(mdp, 0.9)
    assert policy.tolist() == [0, 0, 0]


# --------------------------------------------------------------------------- simulation lemma


@pytest.mark.parametrize("seed", range(5))
@pytest.mark.parametrize("gamma", [0.5, 0.9, 0.99])
def test_simulation_lemma(seed: int, gamma: float) -> None:
    # Agarwal, Jiang, Kakade and Sun, "Reinforcement Learning: Theory and Algorithms",
    # ch. 2 (simulation lemma), in (S, A) form. With Pi the S x SA matrix
    # Pi[s, (s, a)] = pi(a|s), Q = R + gamma P Pi Q and Qhat = R + gamma Phat Pi Qhat, so
    #   Q - Qhat = gamma P Pi Q - gamma Phat Pi Qhat
    #            = gamma (P - Phat) Pi Q + gamma Phat Pi (Q - Qhat)
    #   => Q - Qhat = gamma (I - gamma Phat Pi)^{-1} (P - Phat) V^pi,  with V^pi = Pi Q.
    rng = np.random.default_rng(seed)
    true = rlrates.garnet(12, 3, 4, seed=seed)
    other = rlrates.garnet(12, 3, 6, seed=seed + 100)
    S, A = true.states, true.actions
    P_hat = 0.7 * true.P + 0.3 * other.P  # a perturbed model with the same rewards
    model = TabularMDP(P_hat, true.R)
    pi = rng.dirichlet(np.ones(A), size=S)

    q_true = q_pi(true, gamma, pi)
    q_model = q_pi(model, gamma, pi)
    V = v_pi(true, gamma, pi)
    Pi = np.zeros((S, S * A))
    Pi[np.repeat(np.arange(S), A), np.arange(S * A)] = pi.reshape(-1)
    P_flat, P_hat_flat = true.P.reshape(S * A, S), P_hat.reshape(S * A, S)
    rhs = gamma * np.linalg.solve(np.eye(S * A) - gamma * P_hat_flat @ Pi, (P_flat - P_hat_flat) @ V)
    scale = 1.0 / (1.0 - gamma)
    np.testing.assert_allclose((q_true - q_model).reshape(-1), rhs, rtol=0, atol=1e-10 * scale)
    assert np.abs(q_true - q_model).max() > 1e-3  # the identity is not 0 = 0


# --------------------------------------------------------------------------- resolvent bound


@pytest.mark.parametrize("gamma", [0.5, 0.9, 0.999])
def test_resolvent_sup_norm_bound(gamma: float) -> None:
    # common practice (Neumann series): (I - gamma P^pi)^{-1} = sum_k gamma^k (P^pi)^k and
    # each (P^pi)^k is stochastic, so ||(I - gamma P^pi)^{-1} v||_inf <= ||v||_inf / (1 - gamma),
    # with equality for constant v. v_pi solves exactly this system with v = r^pi.
    base = rlrates.garnet(15, 3, 5, seed=11)
    rng = np.random.default_rng(0)
    pi = rng.dirichlet(np.ones(3), size=15)
    for v in (rng.random(15), rng.random(15) * (rng.random(15) < 0.3)):
        mdp = TabularMDP(base.P, np.repeat(v[:, None], 3, axis=1))  # r^pi = v for any pi
        values = v_pi(mdp, gamma, pi)
        assert np.abs(values).max() <= np.abs(v).max() / (1 - gamma) * (1 + 1e-12)
    constant = TabularMDP(base.P, np.full((15, 3), 0.4))
    np.testing.assert_allclose(v_pi(constant, gamma, pi), 0.4 / (1 - gamma), rtol=1e-10)


# --------------------------------------------------------------------------- argument validation


@pytest.mark.parametrize("gamma", [0, 1, -0.1, 1.5, float("nan"), float("inf")])
def test_validate_gamma_value_errors(gamma: float) -> None:
    with pytest.raises(ValueError, match=r"`gamma` must lie in \(0, 1\)"):
        validate_gamma(gamma)


@pytest.mark.parametrize("gamma", ["0.9", True, None, [0.9]])
def test_validate_gamma_type_errors(gamma: object) -> None:
    with pytest.raises(TypeError, match="`gamma` must be a number"):
        validate_gamma(gamma)


def test_validate_gamma_accepts() -> None:
    assert validate_gamma(np.float32(0.5)) == 0.5
    assert validate_gamma(1, allow_one=True) == 1.0
    with pytest.raises(ValueError, match=r"\(0, 1\]"):
        validate_gamma(1.01, allow_one=True)


class TestValidatePolicy:
    mdp = TabularMDP(np.full((3, 2, 3), 1.0 / 3.0), np.zeros((3, 2)))

    def test_actions_to_one_hot(self) -> None:
        np.testing.assert_array_equal(validate_policy(self.mdp, np.array([1, 0, 1])), [[0, 1], [1, 0], [0, 1]])
        np.testing.assert_array_equal(policy_matrix([1, 0], 3), [[0, 1, 0], [1, 0, 0]])

    @pytest.mark.parametrize("policy", [np.zeros(2, dtype=int), np.zeros(4, dtype=int), np.full((3, 3), 1 / 3), np.ones((3, 2, 1))])
    def test_wrong_shape(self, policy: np.ndarray) -> None:
        with pytest.raises(ValueError, match="must have shape"):
            validate_policy(self.mdp, policy)

    @pytest.mark.parametrize("bad", [2, -1])
    def test_bad_action_index(self, bad: int) -> None:
        with pytest.raises(ValueError, match=rf"picks action {bad} in state 1; valid actions are 0\.\.1"):
            validate_policy(self.mdp, np.array([0, bad, 1]))

    def test_float_actions(self) -> None:
        with pytest.raises(ValueError, match="must hold integers"):
            validate_policy(self.mdp, np.array([0.0, 1.0, 0.0]))

    def test_not_row_stochastic(self) -> None:
        policy = np.array([[0.5, 0.5], [0.6, 0.6], [1.0, 0.0]])
        with pytest.raises(ValueError, match=r"row for state 1 sums to 1\.2"):
            validate_policy(self.mdp, policy)

    def test_negative_probability(self) -> None:
        policy = np.array([[0.5, 0.5], [1.5, -0.5], [1.0, 0.0]])
        with pytest.raises(ValueError, match=r"negative probability -0\.5 at state 1, action 1"):
            validate_policy(self.mdp, policy)

    def test_non_finite(self) -> None:
        policy = np.array([[0.5, 0.5], [0.5, 0.5], [np.nan, 0.0]])
        with pytest.raises(ValueError, match="non-finite entry at state 2, action 0"):
            validate_policy(self.mdp, policy)

    def test_functions_validate(self) -> None:
        with pytest.raises(ValueError, match="valid actions"):
            q_pi(self.mdp, 0.9, np.array([0, 0, 5]))


# --------------------------------------------------------------------------- suboptimality and distances


def test_suboptimality_optimal_and_bad_policy() -> None:
    mdp = rlrates.garnet(20, 4, 5, seed=9)
    gamma = 0.9
    q, policy = q_star(mdp, gamma)
    assert suboptimality(mdp, gamma, policy) <= 1e-10
    worst = np.argmin(q, axis=1)
    # common practice: V^worst(s) = Q^worst(s, worst(s)) <= Q*(s, worst(s)) = min_a Q*(s, a),
    # so at every state the policy loses at least that state's spread of Q* values.
    spread = np.ptp(q, axis=1).max()
    gap = suboptimality(mdp, gamma, worst, q_opt=q)
    v_worst = v_pi(mdp, gamma, worst)
    assert np.all(q.max(axis=1) - v_worst >= np.ptp(q, axis=1) - 1e-9)
    assert spread > 0.01
    # and Q* - Q^worst = gamma P (V* - V^worst) >= gamma min_s spread(s) everywhere
    assert gap >= gamma * np.ptp(q, axis=1).min() - 1e-9
    assert gap > 0.01
    assert gap == pytest.approx(suboptimality(mdp, gamma, worst), rel=1e-12)


def test_suboptimality_hand_computed() -> None:
    # One state, self-loop; action 0 pays 1, action 1 pays 0; gamma = 0.9.
    # Q* = (10, 9). "Always 1": V = 0, Q^pi = (1, 0). ||Q* - Q^pi||_inf = max(9, 9) = 9.
    mdp = TabularMDP(np.ones((1, 2, 1)), np.array([[1.0, 0.0]]))
    assert suboptimality(mdp, 0.9, np.array([1])) == pytest.approx(9.0, rel=1e-12)
    assert suboptimality(mdp, 0.9, np.array([0])) == pytest.approx(0.0, abs=1e-12)
    # the uniform policy: V = 0.5 / 0.1 = 5, Q^pi = (1 + 4.5, 4.5): gaps (4.5, 4.5)
    assert suboptimality(mdp, 0.9, np.array([[0.5, 0.5]])) == pytest.approx(4.5, rel=1e-12)


def test_model_distance_hand_computed() -> None:
    P = np.array([[[1.0, 0.0], [0.5, 0.5]], [[0.0, 1.0], [0.25, 0.75]]])
    assert model_distance(P, P) == 0.0
    Q = P.copy()
    Q[0, 0] = [0.0, 1.0]  # L1 distance 2, the maximum possible
    assert model_distance(Q, P) == 2.0
    Q = P.copy()
    Q[1, 1] = [0.5, 0.5]  # |0.25| + |0.25| = 0.5
    Q[0, 1] = [0.6, 0.4]  # 0.2
    assert model_distance(Q, P) == pytest.approx(0.5, abs=1e-15)
    assert model_distance(P, Q) == model_distance(Q, P)



# --------------------------------------------------------------------------- sparse models


def _held_sparse(mdp: TabularMDP) -> TabularMDP:
    from scipy import sparse

    return TabularMDP(sparse.csr_array(mdp.transition_rows), mdp.R)


def test_sparse_figure_3_2_values() -> None:
    # Sutton & Barto (2nd ed.), Figure 3.2 again, solved from a sparse copy of the grid by sparse LU
    grid = sutton_barto_grid()
    with pytest.warns(RewardRangeWarning):
        held = _held_sparse(grid)
    values = v_pi(held, 0.9).reshape(5, 5)
    np.testing.assert_allclose(values, FIGURE_3_2, atol=PRINTED_ATOL)
    np.testing.assert_allclose(v_pi(held, 0.9), v_pi(grid, 0.9), rtol=0, atol=1e-12)


@pytest.mark.parametrize(("shape", "gamma", "seed"), GARNET_CASES[:4])
def test_sparse_solves_match_scipy_and_the_dense_solve(shape: tuple[int, int, int], gamma: float, seed: int) -> None:
    # Independent methods: scipy.linalg.solve of the dense system (I - gamma P^pi) V = r^pi,
    # and the LP for Q* (Puterman 1994, Section 6.9), on a sparse copy of a Garnet
    from scipy.linalg import solve

    mdp = rlrates.garnet(*shape, seed=seed)
    held = rlrates.garnet(*shape, seed=seed, sparse=True)
    S, A = mdp.states, mdp.actions
    pi = np.random.default_rng(seed).dirichlet(np.ones(A), size=S)
    P_pi = np.einsum("sa,sat->st", pi, mdp.P)
    expected = solve(np.eye(S) - gamma * P_pi, (pi * mdp.R).sum(axis=1))
    scale = max(1.0, 1.0 / (1.0 - gamma))
    np.testing.assert_allclose(v_pi(held, gamma, pi), expected, rtol=0, atol=1e-10 * scale)
    np.testing.assert_allclose(q_pi(held, gamma, pi), q_pi(mdp, gamma, pi), rtol=0, atol=1e-10 * scale)
    result = linprog(np.ones(S), A_ub=gamma * mdp.P.reshape(S * A, S) - np.repeat(np.eye(S), A, axis=0),
                     b_ub=-mdp.R.reshape(-1), bounds=[(None, None)] * S, method="highs")
    q, policy = q_star(held, gamma)
    np.testing.assert_allclose(q, mdp.R + gamma * mdp.P @ result.x, rtol=0, atol=1e-8 * scale)
    np.testing.assert_array_equal(policy, q_star(mdp, gamma)[1])
    assert suboptimality(held, gamma, policy) <= 1e-9 * scale


def test_sparse_gamma_one_episodic_and_not() -> None:
    # Sutton & Barto (2nd ed.), Example 4.1, from a sparse copy: the random policy's values at gamma = 1
    grid = sutton_barto_small_grid()
    with pytest.warns(RewardRangeWarning):
        held = _held_sparse(grid)
    np.testing.assert_allclose(v_pi(held, 1.0), v_pi(grid, 1.0), rtol=0, atol=1e-9)
    assert v_pi(held, 1.0)[1] == pytest.approx(-14.0, abs=1e-9)
    with pytest.raises(ValueError, match="episodic"):  # always "up" never terminates (Section 3.4)
        v_pi(held, 1.0, np.zeros(16, dtype=np.int64))
    with pytest.raises(ValueError, match="episodic"):  # a Garnet has no absorbing state (common practice)
        v_pi(rlrates.garnet(10, 2, 3, seed=0, sparse=True), 1.0)


def test_sparse_model_distance_matches_the_dense_one() -> None:
    # max_{s,a} L1 distance (definition): same number from any mix of layouts
    one, two = rlrates.garnet(9, 2, 3, seed=1), rlrates.garnet(9, 2, 3, seed=2)
    expected = model_distance(one.P, two.P)
    held_one, held_two = _held_sparse(one), _held_sparse(two)
    assert model_distance(held_one.P, held_two.P) == pytest.approx(expected, abs=1e-15)
    assert model_distance(held_one.P, two.P) == pytest.approx(expected, abs=1e-15)
    assert model_distance(one.P, held_two.P) == pytest.approx(expected, abs=1e-15)


class _DenseTwin:
    """The dense view of a sparse batch's draw: (S, A, S) counts and the same next states."""

    def __init__(self, batch: object, states: int, actions: int) -> None:
        self.n = batch.n  # type: ignore[attr-defined]
        self.counts = batch.counts.toarray().reshape(states, actions, states)  # type: ignore[attr-defined]
        self.next_states = batch.next_states  # type: ignore[attr-defined]


def test_reference_estimators_work_on_sparse_batches() -> None:
    # the plug-in estimators on a sparse MDP's batch give what they give on the same draw held
    # densely (definition of the plug-in estimate: the empirical model counts / n)
    from rlrates import reference
    from rlrates.sampling import draw
    from rlrates.targets import solve_truth

    held = rlrates.ring(7, slip=0.3, sparse=True)
    sparse_batch = draw(held, 40, seed=5)
    assert sparse_batch.sparse and sparse_batch.counts.shape == (21, 7)
    dense_batch = _DenseTwin(sparse_batch, 7, 3)
    # one policy for both: the default policy is seeded by the fingerprint, which differs between the twins
    policy = np.random.default_rng(0).dirichlet(np.ones(3), size=7)
    dense_problem = solve_truth(rlrates.ring(7, slip=0.3), 0.9, "q_pi", policy).problem()
    sparse_problem = solve_truth(held, 0.9, "q_pi", policy).problem()
    for estimator in (reference.plugin_q_pi, reference.plugin_q_star):
        np.testing.assert_allclose(estimator(sparse_batch, sparse_problem), estimator(dense_batch, dense_problem),
                                   rtol=0, atol=1e-11)
    np.testing.assert_array_equal(reference.plugin_policy(sparse_batch, sparse_problem),
                                  reference.plugin_policy(dense_batch, dense_problem))
    np.testing.assert_array_equal(reference.synchronous_q_learning(sparse_batch, sparse_problem),
                                  reference.synchronous_q_learning(dense_batch, dense_problem))
    model = reference.empirical_model(sparse_batch, sparse_problem)
    np.testing.assert_allclose(model.toarray(), reference.empirical_model(dense_batch, dense_problem).reshape(21, 7),
                               rtol=0, atol=1e-15)


def test_the_model_target_of_a_sparse_mdp_measures_the_max_row_l1_distance() -> None:
    # definition of the model error, max_{s,a} ||P_hat[s, a] - P[s, a]||_1, computed on dense copies
    from scipy import sparse

    from rlrates.targets import EstimateError, estimate_error, solve_truth, validate_estimate

    held = rlrates.garnet(8, 2, 3, seed=3, sparse=True)
    truth = solve_truth(held, 0.9, "model")
    guess = sparse.csr_array(rlrates.garnet(8, 2, 3, seed=4).P.reshape(16, 8))
    valid = validate_estimate(guess, truth)
    dense_gap = np.abs(guess.toarray() - held.P.toarray()).sum(axis=1)
    assert estimate_error(valid, truth, "sup") == pytest.approx(dense_gap.max(), abs=1e-15)
    assert estimate_error(valid, truth, "mean") == pytest.approx(dense_gap.mean(), abs=1e-15)
    with pytest.raises(EstimateError, match=r"row \(s=0, a=0\) sums to 2"):
        validate_estimate(guess * 2.0, truth)


# --------------------------------------------------------------------------- values beyond float64


def _constant_reward(reward: float) -> TabularMDP:
    """Two states, two actions, every reward ``reward``: Q^pi = Q* = reward / (1 - gamma) everywhere
    (the geometric series; Puterman 1994, Section 6.1)."""
    P = np.full((2, 2, 2), 0.5)
    return _quiet_mdp(P, np.full((2, 2), reward))


def test_huge_but_representable_values_are_solved_exactly() -> None:
    mdp = _constant_reward(1e307)
    np.testing.assert_allclose(q_pi(mdp, 0.5), np.full((2, 2), 2e307), rtol=1e-12)
    np.testing.assert_allclose(q_star(mdp, 0.5)[0], np.full((2, 2), 2e307), rtol=1e-12)


@pytest.mark.parametrize("solve, what", [
    (lambda mdp: q_pi(mdp, 0.9), "V\\^pi"),
    (lambda mdp: v_pi(mdp, 0.9), "V\\^pi"),
    (lambda mdp: q_star(mdp, 0.9), "Q\\*"),
])
def test_values_beyond_float64_blame_the_mdp_without_numpy_warnings(solve, what) -> None:  # type: ignore[no-untyped-def]
    # 1e308 / (1 - 0.9) = 1e309 is beyond float64's largest finite 1.8e308; pyproject turns any
    # RuntimeWarning (overflow, invalid value in matmul) into an error, so none may escape either
    mdp = _constant_reward(1e308)
    with pytest.raises(ValueError, match=rf"the exact {what} of MDP 'mdp' at gamma=0.9 overflows float64 .*"
                       r"\|R\| = 1e\+308 and values can reach max\|R\| / \(1 - gamma\) = inf\. The MDP is at fault"):
        solve(mdp)


def test_q_pi_of_a_known_valid_policy_is_q_pi() -> None:
    # the check's shortcut for its own default policy gives the validated function's numbers
    from rlrates.exact import q_pi_of_valid
    from rlrates.targets import default_policy

    mdp = rlrates.garnet(12, 3, 4, seed=3)
    policy = default_policy(mdp)
    np.testing.assert_array_equal(q_pi_of_valid(mdp, 0.9, policy), rlrates.q_pi(mdp, 0.9, policy))
    policy[0] = 0.5  # default_policy hands out a fresh, writable copy of the cached one
    assert not np.array_equal(policy, default_policy(mdp))
