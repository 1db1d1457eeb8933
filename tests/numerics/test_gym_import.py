"""rlrates.from_gymnasium against gymnasium's own transition tables.

The expected values come from outside rlrates: a plain value iteration written
here over the raw ``env.P`` dict (terminated transitions end the episode, worth 0
afterwards), the reward tables documented by gymnasium for Taxi and CliffWalking,
hand counts on the maps, and one value remembered from public tutorials (marked).
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pytest

gymnasium = pytest.importorskip("gymnasium")
from gymnasium.envs.toy_text import CliffWalkingEnv, FrozenLakeEnv, TaxiEnv  # noqa: E402
from gymnasium.spaces import Box, Discrete  # noqa: E402

import rlrates  # noqa: E402
from rlrates.exact import policy_matrix  # noqa: E402

# FrozenLake / CliffWalking action codes, from gymnasium's documentation.
LEFT, DOWN, RIGHT, UP_FL = 0, 1, 2, 3
UP, RIGHT_CW, DOWN_CW, LEFT_CW = 0, 1, 2, 3


def _environments() -> dict[str, Any]:
    return {
        "frozenlake-4x4": FrozenLakeEnv(map_name="4x4", is_slippery=True),
        "frozenlake-8x8": FrozenLakeEnv(map_name="8x8", is_slippery=True),
        "taxi": TaxiEnv(),
        "cliffwalking": CliffWalkingEnv(),
    }


ENVS = _environments()


# ---------------------------------------------------------------------------------------------
# an independent reference: value iteration over the raw dict (no rlrates code)


def _flatten(table: dict[int, dict[int, list[tuple[float, int, float, bool]]]]) -> tuple[np.ndarray, ...]:
    entries = [
        (s, a, p, s_next, r, bool(done))
        for s, actions in table.items()
        for a, outcomes in actions.items()
        for p, s_next, r, done in outcomes
    ]
    s, a, p, s_next, r, done = (np.array(column) for column in zip(*entries))
    return s.astype(int), a.astype(int), p.astype(float), s_next.astype(int), r.astype(float), done.astype(bool)


def _backup(flat: tuple[np.ndarray, ...], V: np.ndarray, gamma: float, states: int, actions: int) -> np.ndarray:
    """Q(s, a) = sum over listed outcomes of p * (r + gamma * [not terminated] V(s'))."""
    s, a, p, s_next, r, done = flat
    contribution = p * (r + gamma * np.where(done, 0.0, V[s_next]))
    return np.bincount(s * actions + a, weights=contribution, minlength=states * actions).reshape(states, actions)


def value_iteration(table: Any, gamma: float, states: int, actions: int, tol: float = 1e-10) -> np.ndarray:
    """Optimal Q of the raw table, within ``tol`` in sup norm (stopping rule: common practice,
    ||V_k - V*|| <= gamma / (1 - gamma) ||V_k - V_{k-1}||)."""
    flat = _flatten(table)
    V = np.zeros(states)
    while True:
        Q = _backup(flat, V, gamma, states, actions)
        V_new = Q.max(axis=1)
        if np.max(np.abs(V_new - V)) * gamma / (1.0 - gamma) < tol:
            return _backup(flat, V_new, gamma, states, actions)
        V = V_new


def policy_evaluation(table: Any, policy: np.ndarray, gamma: float, states: int, actions: int, tol: float = 1e-12) -> np.ndarray:
    """V^pi of the raw table by repeated backups (gamma = 1 is fine when every episode ends)."""
    flat = _flatten(table)
    V = np.zeros(states)
    for _ in range(200_000):
        V_new = (policy * _backup(flat, V, gamma, states, actions)).sum(axis=1)
        if np.max(np.abs(V_new - V)) < tol:
            return V_new
        V = V_new
    raise AssertionError("policy evaluation did not converge")


def _sizes(env: Any) -> tuple[int, int]:
    return int(env.observation_space.n), int(env.action_space.n)


# ---------------------------------------------------------------------------------------------
# sizes and tables


@pytest.mark.parametrize(
    ("key", "states", "actions"),
    # sizes from gymnasium's documentation of each environment, plus one absorbing state
    [("frozenlake-4x4", 16, 4), ("frozenlake-8x8", 64, 4), ("taxi", 500, 6), ("cliffwalking", 48, 4)],
)
def test_sizes_rows_and_absorbing_state(key: str, states: int, actions: int) -> None:
    mdp = rlrates.from_gymnasium(ENVS[key])
    assert (mdp.states, mdp.actions) == (states + 1, actions)
    np.testing.assert_allclose(mdp.P.sum(axis=2), 1.0, rtol=0, atol=1e-12)
    absorbing = mdp.metadata["absorbing_state"]
    assert absorbing == states
    assert np.all(mdp.P[absorbing, :, absorbing] == 1.0)
    # the absorbing state is entered exactly with the probability of the table's terminated outcomes
    expected = np.zeros((states, actions))
    for s, by_action in ENVS[key].P.items():
        for a, outcomes in by_action.items():
            expected[s, a] = sum(p for p, _, _, done in outcomes if done)
    np.testing.assert_allclose(mdp.P[:states, :, absorbing], expected, rtol=0, atol=1e-15)


def test_duplicate_successors_add_up() -> None:
    # Hand count on the 4x4 map (common practice): from the top-left corner, "left" on slippery
    # ice slides left, down or up with probability 1/3 each; left and up hit walls and stay put.
    mdp = rlrates.from_gymnasium(ENVS["frozenlake-4x4"])
    np.testing.assert_allclose(mdp.P[0, LEFT, 0], 2.0 / 3.0, rtol=1e-15)
    np.testing.assert_allclose(mdp.P[0, LEFT, 4], 1.0 / 3.0, rtol=1e-15)
    assert np.count_nonzero(mdp.P[0, LEFT]) == 2


def test_a_wrapped_environment_is_unwrapped_and_named_by_its_spec() -> None:
    env = gymnasium.make("FrozenLake-v1")
    try:
        mdp = rlrates.from_gymnasium(env)
    finally:
        env.close()
    assert mdp.name == "FrozenLake-v1"  # the id gymnasium registers (its documentation)
    assert mdp == rlrates.from_gymnasium(ENVS["frozenlake-4x4"])  # the default map is 4x4 slippery
    assert rlrates.from_gymnasium(env, name="lake").name == "lake"


# ---------------------------------------------------------------------------------------------
# solved values against the independent value iteration


@pytest.mark.parametrize("key", ["frozenlake-4x4", "frozenlake-8x8"])
@pytest.mark.parametrize("gamma", [0.9, 0.99])
def test_frozenlake_q_star_matches_value_iteration(key: str, gamma: float) -> None:
    env = ENVS[key]
    S, A = _sizes(env)
    mdp = rlrates.from_gymnasium(env)
    assert mdp.metadata["rewards_rescaled"] is False  # rewards already in [0, 1]
    q, _ = rlrates.q_star(mdp, gamma)
    reference = value_iteration(env.P, gamma, S, A)
    np.testing.assert_allclose(q[:S], reference, rtol=0, atol=1e-9)
    np.testing.assert_allclose(q[S], 0.0, atol=1e-12)


def test_frozenlake_4x4_start_value_from_memory() -> None:
    # From memory, widely reported in public tutorials: the optimal start-state value of the
    # slippery 4x4 lake at gamma = 0.99 is about 0.54. Loose tolerance on purpose.
    q, _ = rlrates.q_star(rlrates.from_gymnasium(ENVS["frozenlake-4x4"]), 0.99)
    assert q[0].max() == pytest.approx(0.54, abs=0.01)


def test_frozenlake_episodic_v_pi_matches_policy_evaluation() -> None:
    # gamma = 1: every episode of the uniform random walk ends in a hole or the goal, so V^pi is
    # the probability of reaching the goal; reference: repeated backups on the raw table.
    env = ENVS["frozenlake-4x4"]
    S, A = _sizes(env)
    mdp = rlrates.from_gymnasium(env)
    values = rlrates.v_pi(mdp, 1.0)
    reference = policy_evaluation(env.P, np.full((S, A), 1.0 / A), 1.0, S, A)
    np.testing.assert_allclose(values[:S], reference, rtol=0, atol=1e-10)
    assert 0.0 < values[0] < 1.0


# Taxi (gymnasium docs): -1 per step, -10 for an illegal pickup or dropoff, +20 for a delivery;
# the absorbing state's 0 lies inside, so r_min = -10 and r_max = 20.
TAXI = ("taxi", -10.0, 30.0)
# CliffWalking (gymnasium docs): -1 per step, -100 for stepping into the cliff; with the
# absorbing state's 0, r_min = -100 and r_max = 0.
CLIFF = ("cliffwalking", -100.0, 100.0)


# Taxi at one discount only: policy iteration on its 501 states takes a few seconds.
@pytest.mark.parametrize(("key", "offset", "scale", "gamma"), [(*TAXI, 0.99), (*CLIFF, 0.9), (*CLIFF, 0.99)])
def test_rescaled_rewards_keep_the_problem(key: str, offset: float, scale: float, gamma: float) -> None:
    env = ENVS[key]
    S, A = _sizes(env)
    mdp = rlrates.from_gymnasium(env)
    meta = mdp.metadata
    assert meta["rewards_rescaled"] is True and mdp.name.endswith("-rescaled")
    assert (meta["reward_offset"], meta["reward_scale"]) == (offset, scale)
    assert mdp.R.min() == 0.0 and mdp.R.max() == 1.0
    np.testing.assert_allclose(mdp.R[S], -offset / scale, rtol=1e-15)
    # The raw problem, solved independently, maps onto the rescaled one affinely:
    # Q' = (Q - r_min / (1 - gamma)) / (r_max - r_min) (a shift paid at every step forever).
    q, _ = rlrates.q_star(mdp, gamma)
    reference = value_iteration(env.P, gamma, S, A)
    expected = (reference - offset / (1.0 - gamma)) / scale
    np.testing.assert_allclose(q[:S], expected, rtol=0, atol=1e-9 * max(1.0, float(np.abs(expected).max())))
    np.testing.assert_allclose(q[S], -offset / scale / (1.0 - gamma), rtol=1e-12)


def test_cliffwalking_shortest_path_value() -> None:
    # Hand count on the 4 x 12 cliff map (common practice; the layout of Sutton and Barto's
    # cliff-walking example): from the start, up once, right 11 times, down once = 13 steps of
    # -1. Raw rewards and gamma = 1 (episodic), with that path as the policy.
    env = ENVS["cliffwalking"]
    S, A = _sizes(env)
    with pytest.warns(rlrates.RewardRangeWarning):
        mdp = rlrates.from_gymnasium(env, rescale=False)
    assert mdp.metadata["rewards_rescaled"] is False and "reward_offset" not in mdp.metadata
    rows, cols = 4, 12
    actions = np.empty(S + 1, dtype=np.int64)
    for s in range(S):
        row, col = divmod(s, cols)
        if row == rows - 1 and col < cols - 1:
            actions[s] = UP
        elif col < cols - 1:
            actions[s] = RIGHT_CW
        else:
            actions[s] = DOWN_CW
    actions[S] = 0
    start = 3 * cols + 0
    values = rlrates.v_pi(mdp, 1.0, actions)
    assert values[start] == pytest.approx(-13.0, abs=1e-9)
    # the optimal value at gamma < 1 is the discounted sum of the same 13 steps
    gamma = 0.95
    q, _ = rlrates.q_star(mdp, gamma)
    assert q[start].max() == pytest.approx(-(1 - gamma**13) / (1 - gamma), abs=1e-9)
    reference = policy_evaluation(env.P, policy_matrix(actions[:S], A), 1.0, S, A)
    np.testing.assert_allclose(values[:S], reference, atol=1e-9)


def test_rescale_false_keeps_raw_rewards() -> None:
    env = ENVS["taxi"]
    with pytest.warns(rlrates.RewardRangeWarning, match="outside"):
        mdp = rlrates.from_gymnasium(env, rescale=False)
    assert mdp.name == "TaxiEnv"
    assert mdp.R.min() == -10.0 and mdp.R.max() == 20.0


# ---------------------------------------------------------------------------------------------
# objects without a usable table


class _Fake:
    def __init__(self, P: Any = None, observation_space: Any = None, action_space: Any = None) -> None:
        if P is not None:
            self.P = P
        if observation_space is not None:
            self.observation_space = observation_space
        if action_space is not None:
            self.action_space = action_space


def test_any_object_with_a_table_works_and_terminal_free_tables_add_no_state() -> None:
    table = {0: {0: [(1.0, 1, 0.5, False)]}, 1: {0: [(0.25, 0, 1.0, False), (0.75, 1, 0.0, False)]}}
    mdp = rlrates.from_gymnasium(_Fake(table))
    assert mdp.states == 2 and mdp.metadata["absorbing_state"] is None
    np.testing.assert_array_equal(mdp.P[:, 0], [[0.0, 1.0], [0.25, 0.75]])
    np.testing.assert_array_equal(mdp.R[:, 0], [0.5, 0.25])


@pytest.mark.parametrize(
    ("env", "match"),
    [
        (_Fake(), r"_Fake has no transition table: expected `env.unwrapped.P`"),
        (_Fake({0: {0: [(1.0, 0, 0.0, False)]}}, observation_space=Box(0.0, 1.0, (2,))),
         r"`observation_space` must be a Discrete space"),
        (_Fake({0: {0: [(1.0, 0, 0.0, False)]}}, Discrete(1), Discrete(3)),
         r"`action_space` has n=3 but `P` lists 1 actions"),
        (_Fake({0: {0: [(1.0, 0, 0.0, False)]}}, Discrete(1, start=1)), r"starts at 1"),
        (_Fake({0: {0: [(1.0, 0, 0.0)]}}), r"P\[0\]\[0\]\[0\] = \(1.0, 0, 0.0\) must be a tuple \(prob"),
        (_Fake({0: {0: [(1.0, 5, 0.0, False)]}}), r"P\[0\]\[0\]\[0\]: next_state 5 is not a state 0..0"),
        (_Fake({0: {0: [(0.5, 0, 0.0, False)]}}), r"does not give a valid MDP: `P` row \(s=0, a=0\) sums to 0.5"),
        (_Fake({0: {0: [(1.0, 0, float("nan"), False)]}}), r"the reward is nan, not finite"),
        (_Fake({0: {0: [(1.0, 0, 0.0, False)], 1: [(1.0, 0, 0.0, False)]}, 1: {0: [(1.0, 0, 0.0, False)]}}),
         r"state 1 has 1 actions in `P`, state 0 has 2"),
        (_Fake({1: {0: [(1.0, 1, 0.0, False)]}}), r"states of `P` must be the integers 0..S-1"),
        (_Fake({0: {0: []}}), r"P\[0\]\[0\] must be a non-empty list"),
    ],
)
def test_unusable_environments_are_refused_with_the_reason(env: Any, match: str) -> None:
    with pytest.raises(ValueError, match=match):
        rlrates.from_gymnasium(env)


def test_a_table_whose_dense_P_the_machine_cannot_hold_is_refused_before_allocating(monkeypatch) -> None:  # type: ignore[no-untyped-def]
    from rlrates import costs

    monkeypatch.setattr(costs, "machine_memory", lambda: 2**30)  # a 1 GiB machine
    # 4000 states and the absorbing state the import may add: 4001 * 4 * 4001 = 64,032,004 entries, under
    # MAX_ENTRIES (10**8); at 48 bytes each while built: 2.86 GiB
    table = {s: {a: [(1.0, (s + a) % 4000, 0.0, False)] for a in range(4)} for s in range(4000)}
    with pytest.raises(costs.TooLargeError, match=r"environment _Fake needs about 2.86 GiB \(a dense P of shape "
                       r"\(4001, 4, 4001\).*more than the 1 GiB of memory this machine has; use a smaller environment"):
        rlrates.from_gymnasium(_Fake(table))
