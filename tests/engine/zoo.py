"""A zoo of correct and broken estimators, each with the published result that says what it should do.

Used by the engine's tests (a small seeded calibration) and by
``benchmarks/calibrate.py`` (the published false-alarm and detection table).
Broken members are the kinds of slips real refactors produce. Every member is a
module-level callable, so it pickles for process executors.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from typing import Any, Callable

import numpy as np

import rlrates
from rlrates import reference
from rlrates.exact import evaluate_arrays


# ----------------------------------------------------------------------------------------------
# correct estimators


def laplace_smoothed_q_pi(batch: Any, problem: Any) -> np.ndarray:
    """Plug-in evaluation in the add-one-over-S smoothed model (counts + 1/S) / (n + 1).

    The smoothing bias is O(1/n), below the O(n^-1/2) noise (common practice).
    """
    S = problem.states
    model = (batch.counts + 1.0 / S) / (batch.n + 1.0)
    return evaluate_arrays(model, problem.rewards, problem.gamma, problem.policy)


def value_iteration_to_tolerance(batch: Any, problem: Any) -> np.ndarray:
    """Q^pi of the empirical model by value iteration run to 1e-10 (a correct, slower route)."""
    model = batch.counts / float(batch.n)
    q = np.zeros_like(problem.rewards)
    while True:
        v = (problem.policy * q).sum(axis=1)
        updated = problem.rewards + problem.gamma * model @ v
        if np.max(np.abs(updated - q)) < 1e-10:
            return updated
        q = updated


# ----------------------------------------------------------------------------------------------
# broken estimators (plausible refactor slips)


def stale_buffer_q_pi(batch: Any, problem: Any) -> np.ndarray:
    """Uses only the first 32 samples of each (s, a): the error stops falling at n = 32."""
    S, A = problem.states, problem.actions
    kept = batch.next_states[:, :, :32]
    model = np.zeros((S, A, S))
    np.add.at(model, (np.arange(S)[:, None, None], np.arange(A)[None, :, None], kept), 1.0 / kept.shape[2])
    return evaluate_arrays(model, problem.rewards, problem.gamma, problem.policy)


def shifted_successor_q_pi(batch: Any, problem: Any) -> np.ndarray:
    """Indexing slip: successor s' is read as s' + 1 (mod S). A constant model bias: an error floor."""
    model = np.roll(batch.counts, 1, axis=2) / float(batch.n)
    return evaluate_arrays(model, problem.rewards, problem.gamma, problem.policy)


def truncated_iteration_q_pi(batch: Any, problem: Any) -> np.ndarray:
    """Value iteration stopped after 10 sweeps: a bias of order gamma^10 H that does not shrink with n."""
    model = batch.counts / float(batch.n)
    q = np.zeros_like(problem.rewards)
    for _ in range(10):
        q = problem.rewards + problem.gamma * model @ (problem.policy * q).sum(axis=1)
    return q


def squared_discount_q_pi(batch: Any, problem: Any) -> np.ndarray:
    """Discount applied twice (gamma^2): converges to the wrong value function."""
    model = batch.counts / float(batch.n)
    return evaluate_arrays(model, problem.rewards, problem.gamma**2, problem.policy)


def _q_learning(batch: Any, problem: Any, step: Callable[[int], float]) -> np.ndarray:
    gamma, rewards, successors = problem.gamma, problem.rewards, batch.next_states
    q = np.zeros_like(rewards)
    for t in range(batch.n):
        target = rewards + gamma * q.max(axis=1)[successors[:, :, t]]
        q += step(t + 1) * (target - q)
    return q


def q_learning_rescaled_linear(batch: Any, problem: Any) -> np.ndarray:
    """Synchronous Q-learning, step 1 / (1 + (1 - gamma) t): error ~ H^2 / sqrt(n) up to logs
    (Li, Cai, Chen, Wei and Chi 2021, "Is Q-learning minimax optimal?")."""
    return reference.synchronous_q_learning(batch, problem)


def q_learning_harmonic(batch: Any, problem: Any) -> np.ndarray:
    """Step 1/t: convergence can be as slow as n^-(1 - gamma) (Even-Dar and Mansour 2003,
    "Learning rates for Q-learning", JMLR 5); far slower than n^-1/2 for gamma >= 0.75."""
    return _q_learning(batch, problem, lambda t: 1.0 / t)


def q_learning_constant_step(batch: Any, problem: Any) -> np.ndarray:
    """Step fixed at 0.1: stochastic approximation with a non-vanishing step has a noise floor
    of order sqrt(step) (common practice; Borkar, Stochastic Approximation, 2008, ch. 9)."""
    return _q_learning(batch, problem, lambda t: 0.1)


# ----------------------------------------------------------------------------------------------
# synthetic errors of known exponents


def _batch_stream(batch: Any) -> np.random.Generator:
    digest = hashlib.blake2b(np.ascontiguousarray(batch.counts).tobytes(), digest_size=8).digest()
    return np.random.default_rng(int.from_bytes(digest, "little"))


@dataclass(frozen=True)
class SyntheticPower:
    """Exact Q^pi plus an error of size ``scale * n^a * H^b`` with log-normal shape noise.

    A test fake: it closes over the MDP to know the exact answer. With ``floor_at``
    set, an extra constant bias ``floor`` is added at that discount only, which a
    pooled slope can hide.
    """

    mdp: rlrates.TabularMDP
    a: float
    b: float
    scale: float = 0.05
    floor: float = 0.0
    floor_at: float | None = None
    _cache: dict[float, np.ndarray] = field(default_factory=dict, compare=False, repr=False)

    def __call__(self, batch: Any, problem: Any) -> np.ndarray:
        gamma = problem.gamma
        if gamma not in self._cache:
            self._cache[gamma] = rlrates.q_pi(self.mdp, gamma, problem.policy)
        rng = _batch_stream(batch)
        H = 1.0 / (1.0 - gamma)
        shape = rng.lognormal(0.0, 0.3, size=problem.rewards.shape) * rng.choice((-1.0, 1.0), size=problem.rewards.shape)
        error = self.scale * batch.n**self.a * H**self.b * shape
        if self.floor_at is not None and np.isclose(gamma, self.floor_at):
            error = error + self.floor
        return self._cache[gamma] + error


# ----------------------------------------------------------------------------------------------
# the catalogue


@dataclass(frozen=True)
class Member:
    """One zoo entry: what to run, on what, against which claim, and what the verdict must be."""

    name: str
    estimator: Callable[[Any, Any], Any]
    mdp: Any
    claim: rlrates.Claim
    target: str
    expected: str  # "pass" or "fail"
    source: str
    slow: bool = False


def members() -> list[Member]:
    garnet = rlrates.garnet(states=20, actions=4, branching=5, seed=7)
    chain = rlrates.chain(states=10, slip=0.1)
    grid = rlrates.gridworld(width=4, height=4, slip=0.2, walls=((1, 1),))
    hard = rlrates.horizon_hard()
    sim_lemma = rlrates.Claim(n=-0.5, horizon=2.0)
    return [
        Member("plug-in q_pi / garnet", reference.plugin_q_pi, garnet, sim_lemma, "q_pi", "pass",
               "simulation lemma: gamma/(1-gamma)^2 sqrt(S log(SA/delta)/n) (Agarwal, Jiang, Kakade, Sun, ch. 2)"),
        Member("plug-in q_pi / chain", reference.plugin_q_pi, chain, sim_lemma, "q_pi", "pass",
               "simulation lemma, as above"),
        Member("plug-in q_pi / grid", reference.plugin_q_pi, grid, sim_lemma, "q_pi", "pass",
               "simulation lemma, as above"),
        Member("plug-in q_pi / horizon-hard, H^1.5", reference.plugin_q_pi, hard, rlrates.Claim(n=-0.5, horizon=1.5),
               "q_pi", "pass", "plug-in error ~ sqrt(H^3/n) (Azar, Munos and Kappen 2013)"),
        Member("smoothed plug-in q_pi / garnet", laplace_smoothed_q_pi, garnet, sim_lemma, "q_pi", "pass",
               "O(1/n) smoothing bias under O(n^-1/2) noise (common practice)"),
        Member("plug-in q_star / garnet", reference.plugin_q_star, garnet, sim_lemma, "q_star", "pass",
               "Azar, Munos and Kappen 2013: ||Q* - Q*_hat|| ~ sqrt(H^3/n) up to logs"),
        Member("plug-in policy / garnet", reference.plugin_policy, garnet, rlrates.Claim(n=-0.5), "policy", "pass",
               "suboptimality <= 2 gamma ||Q - Q_hat|| / (1 - gamma) (Singh and Yee 1994)"),
        Member("empirical model / garnet", reference.empirical_model, garnet, rlrates.Claim(n=-0.5), "model", "pass",
               "E||p_hat - p||_1 <= sqrt((d - 1)/n) (Weissman et al. 2003)"),
        Member("Q-learning, rescaled linear step / garnet", q_learning_rescaled_linear, garnet, sim_lemma, "q_star",
               "pass", "Li, Cai, Chen, Wei and Chi 2021: ~ H^2 / sqrt(n) up to logs", slow=True),
        Member("synthetic n^-0.5 H^1", SyntheticPower(garnet, -0.5, 1.0), garnet, sim_lemma, "q_pi", "pass",
               "constructed: exact exponents -0.5 and 1"),
        Member("synthetic n^-0.5 H^2 (claim on the bound)", SyntheticPower(garnet, -0.5, 2.0), garnet, sim_lemma,
               "q_pi", "pass", "constructed: exponents equal to the claim"),
        Member("stale buffer (first 32 samples)", stale_buffer_q_pi, garnet, sim_lemma, "q_pi", "fail",
               "error floor: only 32 samples used (common practice)"),
        Member("shifted successor index", shifted_successor_q_pi, garnet, sim_lemma, "q_pi", "fail",
               "a biased model does not converge (common practice)"),
        Member("value iteration truncated at 10 sweeps", truncated_iteration_q_pi, garnet, sim_lemma, "q_pi", "fail",
               "bias gamma^10 ||Q|| does not shrink with n (common practice)"),
        Member("squared discount", squared_discount_q_pi, garnet, sim_lemma, "q_pi", "fail",
               "converges to Q^pi of gamma^2 (common practice)"),
        Member("Q-learning, step 1/t", q_learning_harmonic, garnet, sim_lemma, "q_star", "fail",
               "Even-Dar and Mansour 2003: as slow as n^-(1-gamma)", slow=True),
        Member("Q-learning, constant step 0.1", q_learning_constant_step, garnet, sim_lemma, "q_star", "fail",
               "a constant step leaves a noise floor (common practice)", slow=True),
        Member("synthetic n^-0.2 (rate too slow)", SyntheticPower(garnet, -0.2, 1.0), garnet, sim_lemma, "q_pi",
               "fail", "constructed: n-exponent -0.2"),
        Member("synthetic n^-0.25 (just past the n tolerance)", SyntheticPower(garnet, -0.25, 1.0), garnet,
               sim_lemma, "q_pi", "fail", "constructed: 0.1 past the 0.15 tolerance"),
        Member("synthetic H^2.7 (horizon too steep)", SyntheticPower(garnet, -0.5, 2.7), garnet, sim_lemma, "q_pi",
               "fail", "constructed: 0.4 past the claim, 0.1 past the 0.3 tolerance"),
        Member("synthetic floor at gamma=0.5 only", SyntheticPower(garnet, -0.5, 1.0, floor=0.05, floor_at=0.5),
               garnet, sim_lemma, "q_pi", "fail", "constructed: a bias at one discount, hidden by pooling"),
    ]
