"""The lab's estimators. Each follows the rlrates protocol: ``estimator(batch, problem)``.

``batch.counts`` (S, A, S) and ``batch.next_states`` (S, A, n) are n simulated seasons per
(storage, release) pair from the lab's simulator; ``problem`` carries the rewards, the
discount and the policy under evaluation.
"""

from __future__ import annotations

from typing import Any

import numpy as np


def _evaluate(model: np.ndarray, rewards: np.ndarray, gamma: float, policy: np.ndarray) -> np.ndarray:
    """Q^pi of a transition model: one linear solve."""
    states = rewards.shape[0]
    P_pi = np.einsum("sa,sat->st", policy, model)
    r_pi = (policy * rewards).sum(axis=1)
    values = np.linalg.solve(np.eye(states) - gamma * P_pi, r_pi)
    return rewards + gamma * model @ values


def plug_in_evaluation(batch: Any, problem: Any) -> np.ndarray:
    """Certainty-equivalence evaluation: Q^pi of the empirical model counts / n."""
    return _evaluate(batch.counts / batch.n, problem.rewards, problem.gamma, problem.policy)


def greedy_planner(batch: Any, problem: Any) -> np.ndarray:
    """Plan in the learned model by policy iteration; return the greedy release per storage level."""
    model = batch.counts / batch.n
    states, actions = problem.rewards.shape
    policy = np.zeros(states, dtype=np.int64)
    while True:
        q = _evaluate(model, problem.rewards, problem.gamma, np.eye(actions)[policy])
        better = q.argmax(axis=1)
        gain = q[np.arange(states), better] - q[np.arange(states), policy]
        if (gain <= 1e-12).all():
            return policy
        policy = np.where(gain > 1e-12, better, policy)


def synchronous_q_learning(batch: Any, problem: Any) -> np.ndarray:
    """Synchronous Q-learning over the simulated seasons, step 1 / (1 + (1 - gamma) t)."""
    gamma, rewards, seasons = problem.gamma, problem.rewards, batch.next_states
    q = np.zeros_like(rewards)
    for t in range(batch.n):
        step = 1.0 / (1.0 + (1.0 - gamma) * (t + 1))
        q += step * (rewards + gamma * q.max(axis=1)[seasons[:, :, t]] - q)
    return q


def chunked_evaluation(batch: Any, problem: Any, chunk: int = 32) -> np.ndarray:
    """Plug-in evaluation refactored to stream seasons in chunks of 32 (to bound memory).

    The refactor has a bug kept on purpose as a regression example: the chunk buffer is
    reset inside the loop, so only the last chunk's seasons reach the model.
    """
    states, actions = problem.rewards.shape
    seasons = batch.next_states
    for start in range(0, batch.n, chunk):
        buffer = np.zeros((states, actions, states))  # BUG: should be created once, before the loop
        block = seasons[:, :, start:start + chunk]
        np.add.at(buffer, (np.arange(states)[:, None, None], np.arange(actions)[None, :, None], block), 1.0)
        used = block.shape[2]
    return _evaluate(buffer / used, problem.rewards, problem.gamma, problem.policy)


def logged_records_evaluation(batch: Any, problem: Any) -> np.ndarray:
    """Q of a proposed rule from the district's logged operating records (certainty equivalence).

    ``batch.counts`` (S, A, S) counts the logged seasons; a (storage, release) pair the
    records never show keeps the storage where it is in the model (a self-loop), so the
    estimate stays a valid MDP while the records are thin.
    """
    counts = np.asarray(batch.counts, dtype=float)
    visits = counts.sum(axis=2, keepdims=True)
    model = counts / np.maximum(visits, 1.0)
    states = counts.shape[0]
    unseen = visits[..., 0] == 0
    model[unseen] = np.eye(states)[np.nonzero(unseen)[0]]
    return _evaluate(model, problem.rewards, problem.gamma, problem.policy)


def logged_rule_value(batch: Any, problem: Any) -> float:
    """The proposed rule's expected discounted value from a uniform starting storage, from the logged records."""
    q = logged_records_evaluation(batch, problem)
    return float(problem.initial @ (problem.policy * q).sum(axis=1))
