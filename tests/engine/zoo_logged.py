"""The logged-data zoo: reference estimators that must pass and refactors that must fail, each with why.

Same shape as :mod:`zoo` (``Member`` with ``data=``); run by
``benchmarks/calibrate.py --zoo logged`` and, one seed each, by the engine tests.
"""

from __future__ import annotations

from typing import Any

import numpy as np

import rlrates
from rlrates import reference_logged as logged
from rlrates.exact import evaluate_arrays

from zoo import Member


class _Counts:
    """A batch-like holder of counts built by an estimator from its own reading of the data."""

    def __init__(self, counts: np.ndarray) -> None:
        self.counts = counts
        self.sparse = False


def _counts(states: np.ndarray, actions: np.ndarray, nxt: np.ndarray, S: int, A: int) -> np.ndarray:
    return np.bincount((states * A + actions) * S + nxt, minlength=S * A * S).reshape(S, A, S)


def first_64_transitions_q_pi(batch: Any, problem: Any) -> np.ndarray:
    """A refactor that keeps only the first 64 transitions of the dataset (a leftover debugging slice)."""
    S, A = problem.states, problem.actions
    s, a, t = (x.ravel()[:64] for x in (batch.states, batch.actions, batch.next_states))
    return logged.logged_plugin_q_pi(_Counts(_counts(s, a, t, S, A)), problem)


def joined_episodes_q_pi(batch: Any, problem: Any) -> np.ndarray:
    """Episodes flattened into one stream, the successor read as the next row's state (across episode ends too)."""
    S, A = problem.states, problem.actions
    s, a = batch.states.ravel(), batch.actions.ravel()
    return logged.logged_plugin_q_pi(_Counts(_counts(s[:-1], a[:-1], s[1:], S, A)), problem)


def behaviour_evaluated_q_pi(batch: Any, problem: Any) -> np.ndarray:
    """The behaviour correction forgotten: the plug-in model evaluates the policy that logged the data."""
    return evaluate_arrays(logged.logged_model(batch, problem), problem.rewards, problem.gamma, problem.behaviour)


def on_policy_return(batch: Any, problem: Any) -> float:
    """The behaviour correction forgotten in Monte Carlo: the mean discounted return of the logged episodes."""
    return float(np.mean(batch.rewards @ (problem.gamma ** np.arange(batch.episode_length))))


def squared_weights_is(batch: Any, problem: Any) -> float:
    """Per-decision IS with the importance weights applied twice (ratio squared)."""
    ratios = problem.policy[batch.states, batch.actions] / problem.behaviour[batch.states, batch.actions]
    weights = np.cumprod(ratios**2, axis=1)
    return float(np.mean((weights * batch.rewards) @ (problem.gamma ** np.arange(batch.episode_length))))


def logged_members() -> list[Member]:
    garnet = rlrates.garnet(states=10, actions=2, branching=3, seed=0)
    rate = rlrates.Claim(n=-0.5)
    horizon = rlrates.Claim(n=-0.5, horizon=2.0)
    return [
        Member("logged plug-in q_pi / transitions", logged.logged_plugin_q_pi, garnet, rate, "q_pi", "pass",
               "certainty equivalence from i.i.d. transitions: consistent at n^-1/2 once every pair is visited "
               "(common practice)", data="transitions"),
        Member("logged plug-in q_pi / trajectories", logged.logged_plugin_q_pi, garnet, rate, "q_pi", "pass",
               "certainty equivalence from episodes: mixing within episodes changes constants, not the n^-1/2 rate "
               "(common practice)", data="trajectories"),
        Member("fitted-Q evaluation / transitions", logged.fitted_q_evaluation, garnet, rate, "q_pi", "pass",
               "tabular FQE reaches the certainty-equivalence fixed point on visited pairs (common practice)",
               data="transitions"),
        Member("model-based value / trajectories, H^2", logged.logged_plugin_value, garnet, horizon, "value", "pass",
               "the episode value in the learned model; simulation-lemma growth in H (common practice)",
               data="trajectories"),
        Member("logged plug-in q_pi, coverage C^0.5", logged.logged_plugin_q_pi, garnet,
               rlrates.Claim(n=-0.5, coverage=0.5), "q_pi", "pass",
               "error <~ sqrt(C / n) for certainty equivalence under concentrability (common practice)",
               data="transitions"),
        Member("per-decision IS / trajectories", logged.per_decision_is, garnet, rate, "value", "pass",
               "unbiased with finite variance at a fixed episode length (Precup, Sutton and Singh 2000)",
               data="trajectories"),
        Member("weighted IS / trajectories", logged.weighted_is, garnet, rate, "value", "pass",
               "self-normalised IS: O(1/n) bias, n^-1/2 error (common practice); in the appendix budget its "
               "64-step episodes at gamma=0.95 are still pre-asymptotic (products of 64 weights: n^-0.26 over the "
               "grid), so it must not pass there", data="trajectories", not_pass_in=("appendix",)),
        Member("per-trajectory IS, H^2 claim", logged.trajectory_is, garnet, horizon, "value", "fail",
               "its variance grows exponentially in the episode length, so faster than any power of H "
               "(Liu, Li, Tang and Zhou 2018)", data="trajectories"),
        Member("behaviour correction forgotten (plug-in)", behaviour_evaluated_q_pi, garnet, rate, "q_pi", "fail",
               "evaluates the behaviour policy: a bias that no data remove", data="transitions"),
        Member("behaviour correction forgotten (Monte Carlo)", on_policy_return, garnet, rate, "value", "fail",
               "the mean logged return estimates the behaviour's value", data="trajectories"),
        Member("only the first 64 transitions", first_64_transitions_q_pi, garnet, rate, "q_pi", "fail",
               "a fixed slice of the data: the error stops falling", data="transitions"),
        Member("episodes joined across their ends", joined_episodes_q_pi, garnet, rate, "q_pi", "fail",
               "one transition in L is made up (an episode's last state followed by the next one's first)",
               data="trajectories"),
        Member("importance weights applied twice", squared_weights_is, garnet, rate, "value", "fail",
               "squared ratios estimate another quantity: a bias that no data remove", data="trajectories"),
    ]
