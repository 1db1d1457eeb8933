"""Occupancies, concentrability and behaviour policies: the exact side of logged data.

Logged data come from a behaviour policy. Its data distribution over
state-action pairs is computed exactly here, as is the target policy's, so that
the concentrability coefficient ``C = max_{s,a} d^pi(s, a) / mu(s, a)`` of a
check is a number, not an estimate:

* the discounted occupancy ``d(s, a) = (1 - gamma) sum_t gamma^t Pr(s_t = s, a_t = a)``
  from an initial distribution, by one linear solve of
  ``(I - gamma P_pi^T) d_S = (1 - gamma) initial`` (a sparse LU for sparse MDPs);
* the per-step occupancy of an episode of length L,
  ``(1 / L) sum_{t < L} Pr(s_t = s, a_t = a)``, and the discounted value of such
  an episode, ``sum_{t < L} gamma^t E[r(s_t, a_t)]``, by L exact vector-matrix
  products (a finite sum: nothing is iterated to convergence).

The policies: :func:`default_behaviour` (a seeded random stochastic policy that
gives every action at least half the uniform weight) and
:func:`graded_behaviours` (the family a coverage claim is fitted over: mixtures
of the behaviour with a policy that avoids what the target policy does, chosen
so that their concentrability coefficients double from one to the next).
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numpy.typing import NDArray

from .exact import _policy_arrays
from .mdp import TabularMDP

__all__ = ["uniform_initial", "default_behaviour", "discounted_occupancy", "episode_occupancy", "episode_value",
           "concentrability", "graded_behaviours", "default_episode_length"]

Array = NDArray[np.float64]


def uniform_initial(mdp: TabularMDP) -> Array:
    """The default initial distribution: uniform over states."""
    return np.full(mdp.states, 1.0 / mdp.states)


def default_episode_length(gamma: float) -> int:
    """The default episode length: the smallest power of two at least 2 H (H = 1 / (1 - gamma)).

    Twice the effective horizon keeps an episode long enough to see the discounted
    future (gamma^L <= e^-2) and a power of two divides the default n grids, so
    every cell holds whole episodes.
    """
    horizon = 1.0 / (1.0 - gamma)
    return int(2 ** int(np.ceil(np.log2(2.0 * horizon - 1e-9))))


def default_behaviour(mdp: TabularMDP) -> Array:
    """The default behaviour policy: half uniform, half a flat-Dirichlet draw per state, seeded by the fingerprint.

    Every action keeps at least ``1 / (2 A)`` of the mass, so every pair the
    target policy visits is covered; being random, it differs from the default
    evaluation policy (:func:`rlrates.targets.default_policy`), so a forgotten
    behaviour correction shows.
    """
    words = [int(mdp.fingerprint[i : i + 8], 16) for i in range(0, 32, 8)]
    rng = np.random.default_rng(np.random.SeedSequence(words, spawn_key=(0x626568,)))
    return 0.5 / mdp.actions + 0.5 * rng.dirichlet(np.ones(mdp.actions), size=mdp.states)


def _state_kernel(mdp: TabularMDP, policy: Array) -> Any:
    kernel, _ = _policy_arrays(mdp, policy)
    return kernel


def discounted_occupancy(mdp: TabularMDP, gamma: float, policy: Array, initial: Array) -> Array:
    """``(1 - gamma) sum_t gamma^t Pr(s_t = s, a_t = a)`` as an (S, A) array summing to 1 (one linear solve)."""
    kernel = _state_kernel(mdp, policy)
    rhs = (1.0 - gamma) * np.asarray(initial, dtype=float)
    if mdp.is_sparse:
        from scipy import sparse
        from scipy.sparse.linalg import spsolve

        system = (sparse.eye_array(mdp.states, format="csc") - gamma * kernel.T).tocsc()
        states = np.asarray(spsolve(system, rhs), dtype=float).reshape(-1)
    else:
        states = np.linalg.solve(np.eye(mdp.states) - gamma * kernel.T, rhs)
    states = np.clip(states, 0.0, None)
    occupancy = states[:, None] * policy
    return occupancy / occupancy.sum()


def _state_marginals(mdp: TabularMDP, policy: Array, initial: Array, length: int) -> Array:
    """Pr(s_t = s) for t = 0 .. length - 1, shape (length, S)."""
    kernel = _state_kernel(mdp, policy)
    marginals = np.empty((length, mdp.states))
    current = np.asarray(initial, dtype=float)
    for t in range(length):  # one vector-matrix product per step of the episode
        marginals[t] = current
        current = np.asarray(kernel.T @ current).reshape(-1)
    return marginals


def episode_occupancy(mdp: TabularMDP, policy: Array, initial: Array, length: int) -> Array:
    """The distribution of a transition drawn uniformly from an episode of ``length`` steps, (S, A)."""
    states = _state_marginals(mdp, policy, initial, length).mean(axis=0)
    occupancy = states[:, None] * policy
    return occupancy / occupancy.sum()


def episode_value(mdp: TabularMDP, gamma: float, policy: Array, initial: Array, length: int) -> float:
    """``sum_{t < length} gamma^t E[r(s_t, a_t)]`` with ``s_0 ~ initial``: the discounted value of one episode."""
    marginals = _state_marginals(mdp, policy, initial, length)
    rewards = np.einsum("sa,sa->s", policy, mdp.R)
    return float((gamma ** np.arange(length)) @ (marginals @ rewards))


def concentrability(target: Array, data: Array) -> float:
    """``max_{s,a} target(s, a) / data(s, a)`` over the pairs the target visits (inf where the data miss one)."""
    visited = target > 0
    if not visited.any():
        return 1.0
    if (data[visited] <= 0).any():
        return float("inf")
    return float((target[visited] / data[visited]).max())


def _avoiding(target_policy: Array) -> Array:
    """A policy that puts most of its mass where the target policy puts least (every action keeps some)."""
    actions = target_policy.shape[1]
    weights = (1.0 - target_policy) ** 4 + 0.02 / actions
    return weights / weights.sum(axis=1, keepdims=True)


def graded_behaviours(coverage_of: Any, base: Array, target_policy: Array, levels: int,
                      ratio: float = 2.0) -> list[tuple[Array, float]]:
    """Behaviour policies whose concentrability coefficients grow by ``ratio`` from ``base`` on.

    Level 0 is ``base``; level k mixes ``base`` with a policy that avoids the
    target's actions, the mixture weight found by bisection so that its
    coefficient is ``ratio**k`` times the base one (or as close as the mixture
    reaches). ``coverage_of(policy)`` gives a policy's coefficient. Returns
    ``(policy, C)`` per level.
    """
    avoid = _avoiding(target_policy)
    base_c = coverage_of(base)
    family = [(base, base_c)]
    low = 0.0
    for level in range(1, levels):
        wanted = base_c * ratio**level
        lo, hi = low, 1.0
        if coverage_of((1 - hi) * base + hi * avoid) <= wanted:
            lo = hi
        else:
            for _ in range(40):
                mid = 0.5 * (lo + hi)
                if coverage_of((1 - mid) * base + mid * avoid) < wanted:
                    lo = mid
                else:
                    hi = mid
        policy = (1 - lo) * base + lo * avoid
        family.append((policy, coverage_of(policy)))
        low = lo
    return family
