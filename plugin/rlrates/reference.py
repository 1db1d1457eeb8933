"""Reference estimators: correct, vectorised baselines that follow the estimator protocol.

Use them to see what a passing check looks like, as a yardstick next to your
own estimator, or in the demo. Each takes ``(batch, problem)`` and never sees P.

* :func:`plugin_q_pi`: certainty-equivalence policy evaluation (error ~ sqrt(H^3 / n)
  on the horizon-hard family; Azar, Munos and Kappen 2013).
* :func:`plugin_q_star`: Q* of the empirical model by policy iteration.
* :func:`plugin_policy`: the greedy policy of :func:`plugin_q_star` (planning in a learned model).
* :func:`empirical_model`: counts / n (L1 error ~ sqrt(S / n) per row; Weissman et al. 2003).
* :func:`synchronous_q_learning`: one sweep of synchronous Q-learning per sample with
  the rescaled linear step size 1 / (1 + (1 - gamma) t) (error ~ H^2 / sqrt(n) up to logs;
  Li, Cai, Chen, Wei and Chi 2021).
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numpy.typing import NDArray

from .exact import evaluate_arrays, policy_iteration

__all__ = ["plugin_q_pi", "plugin_q_star", "plugin_policy", "empirical_model", "synchronous_q_learning", "evaluate_arrays"]

Array = NDArray[np.float64]


def empirical_model(batch: Any, problem: Any) -> Array:
    """The maximum-likelihood transition estimate ``counts / n``."""
    return batch.counts / float(batch.n)


def plugin_q_pi(batch: Any, problem: Any) -> Array:
    """Q^pi of the empirical model (one linear solve)."""
    return evaluate_arrays(empirical_model(batch, problem), problem.rewards, problem.gamma, problem.policy)


def plugin_q_star(batch: Any, problem: Any) -> Array:
    """Q* of the empirical model (exact policy iteration)."""
    q, _ = policy_iteration(empirical_model(batch, problem), problem.rewards, problem.gamma)
    return q


def plugin_policy(batch: Any, problem: Any) -> NDArray[np.int64]:
    """The optimal policy of the empirical model, as (S,) actions."""
    _, policy = policy_iteration(empirical_model(batch, problem), problem.rewards, problem.gamma)
    return policy


def synchronous_q_learning(batch: Any, problem: Any) -> Array:
    """Synchronous Q-learning over the n samples, all (s, a) updated at once per step."""
    gamma = problem.gamma
    rewards = problem.rewards
    next_states = batch.next_states
    q = np.zeros_like(rewards)
    for t in range(batch.n):
        step = 1.0 / (1.0 + (1.0 - gamma) * (t + 1))
        target = rewards + gamma * q.max(axis=1)[next_states[:, :, t]]
        q += step * (target - q)
    return q
