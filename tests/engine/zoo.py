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


def float32_plugin_q_pi(batch: Any, problem: Any) -> np.ndarray:
    """Plug-in evaluation in single precision: rounding (about 1e-7 relative) sits far below the
    n^-1/2 sampling error at these n (common practice)."""
    S, A = problem.states, problem.actions
    model = (batch.counts / np.float32(batch.n)).astype(np.float32)
    pi = problem.policy.astype(np.float32)
    rewards = problem.rewards.astype(np.float32)
    p_pi = np.einsum("sat,tb->satb", model, pi).reshape(S * A, S * A)
    q = np.linalg.solve(np.eye(S * A, dtype=np.float32) - np.float32(problem.gamma) * p_pi, rewards.reshape(-1))
    return q.reshape(S, A).astype(np.float64)


def subsampled_plugin_q_pi(batch: Any, problem: Any) -> np.ndarray:
    """Plug-in evaluation from 90% of each (s, a)'s samples. ``next_states`` is in a random order,
    so its first 90% is a random subsample: the constant grows by 1/sqrt(0.9), the n^-1/2 rate
    stays (common practice)."""
    S, A = problem.states, problem.actions
    keep = max(1, int(0.9 * batch.n))
    kept = batch.next_states[:, :, :keep]
    flat = (np.arange(S * A).reshape(S, A, 1) * S + kept).ravel()
    model = np.bincount(flat, minlength=S * A * S).reshape(S, A, S) / float(keep)
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


def fixed_discount_q_pi(batch: Any, problem: Any) -> np.ndarray:
    """Ignores the discount it is given and always uses 0.9 (a default argument left in place): at the
    other discounts the error is large and flat (common practice)."""
    model = batch.counts / float(batch.n)
    return evaluate_arrays(model, problem.rewards, 0.9, problem.policy)


def sign_error_q_pi(batch: Any, problem: Any) -> np.ndarray:
    """Bellman backup with the sign of the future term flipped, Q = r - gamma P V (common practice)."""
    model = batch.counts / float(batch.n)
    return evaluate_arrays(model, problem.rewards, -problem.gamma, problem.policy)


def masked_nan_q_pi(batch: Any, problem: Any) -> np.ndarray:
    """Plug-in evaluation returned as a masked array that masks a NaN it produced (common practice:
    a masked "invalid" entry hides a bug from any check that skips masked values)."""
    q = reference.plugin_q_pi(batch, problem)
    q[0, 0] = np.nan
    return np.ma.masked_invalid(q)


def transposed_policy_q_pi(batch: Any, problem: Any) -> np.ndarray:
    """The policy stored action-major ((A, S)) and read back state-major: entries land on the wrong
    (s, a). A uniform evaluation policy hides it, a random one does not (common practice)."""
    scrambled = np.ascontiguousarray(problem.policy.T).reshape(problem.states, problem.actions)
    scrambled = scrambled / scrambled.sum(axis=1, keepdims=True)
    model = batch.counts / float(batch.n)
    return evaluate_arrays(model, problem.rewards, problem.gamma, scrambled)


@dataclass
class PerNCache:
    """Caches the first estimate it computes for each (gamma, n) and returns it for every later
    replicate: the estimate depends on n but not on the batch (common practice: a cache keyed on
    the wrong thing)."""

    _seen: dict[tuple[float, int], np.ndarray] = field(default_factory=dict, repr=False)

    def __call__(self, batch: Any, problem: Any) -> np.ndarray:
        key = (problem.gamma, batch.n)
        if key not in self._seen:
            self._seen[key] = reference.plugin_q_pi(batch, problem)
        return self._seen[key].copy()


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
    a_at: tuple[tuple[float, float], ...] = ()  # (gamma, n-exponent) pairs that override ``a`` there
    floor_from: float | None = None  # with ``floor``: the bias at every discount >= this one
    _cache: dict[float, np.ndarray] = field(default_factory=dict, compare=False, repr=False)

    def __call__(self, batch: Any, problem: Any) -> np.ndarray:
        gamma = problem.gamma
        if gamma not in self._cache:
            self._cache[gamma] = rlrates.q_pi(self.mdp, gamma, problem.policy)
        rng = _batch_stream(batch)
        H = 1.0 / (1.0 - gamma)
        shape = rng.lognormal(0.0, 0.3, size=problem.rewards.shape) * rng.choice((-1.0, 1.0), size=problem.rewards.shape)
        a = dict(self.a_at).get(round(gamma, 12), self.a)
        error = self.scale * batch.n**a * H**self.b * shape
        if self.floor_at is not None and np.isclose(gamma, self.floor_at):
            error = error + self.floor
        if self.floor_from is not None and gamma >= self.floor_from - 1e-12:
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
    # budgets in which the member sits inside the indifference zone between the tested limit and the
    # smallest shortfall the budget promises to detect: any verdict but "pass" is right there
    not_pass_in: tuple[str, ...] = ()
    data: str = "generative"  # the data regime (logged members: see zoo_logged.py)

    def expects(self, budget: str) -> str:
        """The verdict this member must get in ``budget``: "pass", "fail" or "not pass"."""
        return "not pass" if budget in self.not_pass_in else self.expected


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
        # correct estimators of other kinds
        Member("value iteration to 1e-10 / garnet", value_iteration_to_tolerance, garnet, sim_lemma, "q_pi", "pass",
               "the plug-in value up to 1e-10: simulation lemma, as above"),
        Member("float32 plug-in q_pi / garnet", float32_plugin_q_pi, garnet, sim_lemma, "q_pi", "pass",
               "single-precision rounding far below the sampling error (common practice)"),
        Member("90% subsample plug-in q_pi / garnet", subsampled_plugin_q_pi, garnet, sim_lemma, "q_pi", "pass",
               "a constant fraction of the data keeps the n^-1/2 rate (common practice)"),
        Member("synthetic n^-0.5 H^1.5 (claim H^1.5 on the bound)", SyntheticPower(garnet, -0.5, 1.5), garnet,
               rlrates.Claim(n=-0.5, horizon=1.5), "q_pi", "pass", "constructed: exponents equal to the claim"),
        # broken: gross bugs
        Member("fixed discount 0.9", fixed_discount_q_pi, garnet, sim_lemma, "q_pi", "fail",
               "evaluates at the wrong discount: large flat errors (common practice)"),
        Member("sign error in the backup", sign_error_q_pi, garnet, sim_lemma, "q_pi", "fail",
               "converges to the wrong fixed point (common practice)"),
        Member("NaN hidden in a masked array", masked_nan_q_pi, garnet, sim_lemma, "q_pi", "error",
               "a masked entry hides a NaN (common practice)"),
        Member("transposed policy", transposed_policy_q_pi, garnet, sim_lemma, "q_pi", "fail",
               "evaluates another policy (common practice)"),
        Member("one cached estimate per n", PerNCache(), garnet, sim_lemma, "q_pi", "error",
               "the estimate ignores the batch: replicates carry no evidence (common practice)"),
        # broken: rates a little too slow
        Member("synthetic n^-0.35 (shortfall 0.15)", SyntheticPower(garnet, -0.35, 1.0), garnet, sim_lemma, "q_pi",
               "fail", "constructed: the ci budget's promised n-shortfall"),
        Member("synthetic n^-1/3 (a mistuned step or smoothing)", SyntheticPower(garnet, -1 / 3, 1.0), garnet,
               sim_lemma, "q_pi", "fail", "constructed: n^-1/3, shortfall 1/6"),
        Member("synthetic n^-0.4 (shortfall 0.1)", SyntheticPower(garnet, -0.4, 1.0), garnet, sim_lemma, "q_pi",
               "fail", "constructed: the appendix budget's promised n-shortfall", not_pass_in=("ci",)),
        Member("synthetic slow rate at two discounts, fast at one", SyntheticPower(
            garnet, -0.25, 1.0, a_at=((0.9, -1.1), (0.95, -1.1))), garnet, sim_lemma, "q_pi", "fail",
            "constructed: constant-step TD shape, n^-1/4 with a decaying start-up bias at large gamma"),
        # broken: horizon growth
        Member("synthetic H^2.5 against H^2 (shortfall 0.5)", SyntheticPower(garnet, -0.5, 2.5), garnet, sim_lemma,
               "q_pi", "fail", "constructed: the ci budget's promised H-shortfall"),
        Member("synthetic H^2.3 against H^2 (shortfall 0.3)", SyntheticPower(garnet, -0.5, 2.3), garnet, sim_lemma,
               "q_pi", "fail", "constructed: the appendix budget's promised H-shortfall", not_pass_in=("ci",)),
        Member("synthetic large H^3 bias", SyntheticPower(garnet, -0.5, 3.0, scale=0.02), garnet, sim_lemma, "q_pi",
               "fail", "constructed: error 0.02 H^3 n^-1/2"),
        # broken: errors at one end of the discount range only
        Member("synthetic bias at large discounts only", SyntheticPower(garnet, -0.5, 1.0, floor=0.05,
                                                                        floor_from=0.9), garnet, sim_lemma, "q_pi",
               "fail", "constructed: a bias that appears only for gamma >= 0.9"),
    ]
