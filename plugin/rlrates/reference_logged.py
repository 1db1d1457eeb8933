"""Reference estimators for logged data (``data="transitions"`` or ``"trajectories"``).

Model-based (certainty equivalence): :func:`logged_model` estimates P from the
counts; a pair the data never visit gets a model that stays where it is (a
self-loop), which keeps the estimate a valid MDP and is consistent (every pair
the behaviour takes is visited eventually). :func:`logged_plugin_q_pi` and
:func:`logged_plugin_value` evaluate the target policy exactly in that model
(the value over an episode for trajectories, as the target is).
:func:`fitted_q_evaluation` is FQE with tabular features: each iteration
regresses ``r + gamma sum_a' pi(a'|s') Q(s', a')`` on the logged (s, a); with
one-hot features the regression is the per-pair mean, computed from the counts.

Importance sampling (trajectories, value target), with
``rho_t = prod_{k <= t} pi(a_k | s_k) / b(a_k | s_k)``:

* :func:`trajectory_is` (per-trajectory IS): ``mean_e rho_{L-1} sum_t gamma^t r_t``,
  unbiased for the episode value, with a variance that can grow exponentially
  in the episode length (the "curse of horizon" of off-policy evaluation, Liu,
  Li, Tang and Zhou 2018), so a polynomial H-claim fails;
* :func:`per_decision_is`: ``mean_e sum_t gamma^t rho_t r_t``, unbiased, each
  reward weighted by the ratios up to its own step (Precup, Sutton and Singh 2000);
* :func:`weighted_is`: the self-normalised per-trajectory estimate, biased at
  O(1/episodes) but consistent, with variance bounded by the reward range.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numpy.typing import NDArray

from .exact import evaluate_arrays

__all__ = ["logged_model", "logged_plugin_q_pi", "logged_plugin_value", "fitted_q_evaluation", "trajectory_is",
           "per_decision_is", "weighted_is"]

Array = NDArray[np.float64]


def logged_model(batch: Any, problem: Any) -> Array:
    """The certainty-equivalence model (S, A, S): counts over visits, a self-loop for a pair never visited."""
    S, A = problem.states, problem.actions
    counts = np.asarray(batch.counts.toarray().reshape(S, A, S) if batch.sparse else batch.counts, dtype=float)
    visits = counts.sum(axis=2, keepdims=True)
    model = counts / np.maximum(visits, 1.0)
    unseen = visits[..., 0] == 0
    states = np.broadcast_to(np.arange(S)[:, None], (S, A))
    model[unseen, states[unseen]] = 1.0
    return model


def logged_plugin_q_pi(batch: Any, problem: Any) -> Array:
    """Q^pi of the target policy in the certainty-equivalence model (one linear solve)."""
    return evaluate_arrays(logged_model(batch, problem), problem.rewards, problem.gamma, problem.policy)


def logged_plugin_value(batch: Any, problem: Any) -> float:
    """J(pi) in the certainty-equivalence model: from ``problem.initial``, over ``problem.episode_length`` steps if given."""
    model = logged_model(batch, problem)
    policy = problem.policy
    if problem.episode_length is None:
        q = evaluate_arrays(model, problem.rewards, problem.gamma, policy)
        return float(problem.initial @ np.einsum("sa,sa->s", policy, q))
    kernel = np.einsum("sa,sat->st", policy, model)
    rewards = np.einsum("sa,sa->s", policy, problem.rewards)
    current, total = np.array(problem.initial, dtype=float), 0.0
    for t in range(problem.episode_length):
        total += problem.gamma**t * float(current @ rewards)
        current = current @ kernel
    return total


def fitted_q_evaluation(batch: Any, problem: Any, tolerance: float = 1e-10) -> Array:
    """Tabular FQE: regress the bootstrapped target on one-hot (s, a) features until the fixed point.

    A pair with no data keeps Q = 0 (the regression has nothing to fit there).
    """
    S, A = problem.states, problem.actions
    counts = np.asarray(batch.counts.toarray().reshape(S, A, S) if batch.sparse else batch.counts, dtype=float)
    visits = counts.sum(axis=2)
    seen = visits > 0
    mean_next = counts / np.maximum(visits, 1.0)[..., None]
    q = np.zeros((S, A))
    scale = max(float(np.abs(problem.rewards).max()), 1e-300) / (1.0 - problem.gamma)
    for _ in range(100_000):
        target = problem.rewards + problem.gamma * mean_next @ np.einsum("sa,sa->s", problem.policy, q)
        updated = np.where(seen, target, 0.0)
        if np.abs(updated - q).max() <= tolerance * scale:
            return updated
        q = updated
    return q


def _ratios(batch: Any, problem: Any) -> Array:
    """pi(a_t | s_t) / b(a_t | s_t) per (episode, step)."""
    if batch.episodes is None:
        raise ValueError("importance sampling over episodes needs data='trajectories'")
    return problem.policy[batch.states, batch.actions] / problem.behaviour[batch.states, batch.actions]


def _discounts(problem: Any, length: int) -> Array:
    return np.asarray(problem.gamma ** np.arange(length), dtype=float)


def trajectory_is(batch: Any, problem: Any) -> float:
    """Per-trajectory importance sampling of the episode value."""
    weights = np.prod(_ratios(batch, problem), axis=1)
    returns = batch.rewards @ _discounts(problem, batch.episode_length)
    return float(np.mean(weights * returns))


def per_decision_is(batch: Any, problem: Any) -> float:
    """Per-decision importance sampling: each reward weighted by the ratios up to its step."""
    weights = np.cumprod(_ratios(batch, problem), axis=1)
    return float(np.mean((weights * batch.rewards) @ _discounts(problem, batch.episode_length)))


def weighted_is(batch: Any, problem: Any) -> float:
    """Weighted (self-normalised) per-trajectory importance sampling."""
    weights = np.prod(_ratios(batch, problem), axis=1)
    returns = batch.rewards @ _discounts(problem, batch.episode_length)
    total = float(weights.sum())
    return float(weights @ returns / total) if total > 0 else 0.0
