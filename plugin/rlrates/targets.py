"""Targets: what an estimator estimates, how its output is validated, and how its error is measured.

=========  ========================  ==============================================
target     estimator returns         error against the exact answer
=========  ========================  ==============================================
q_pi       (S, A) float Q estimate   ``||Q_hat - Q^pi||`` (sup-norm, or mean abs.)
q_star     (S, A) float Q estimate   ``||Q_hat - Q*||``
policy     (S,) actions or (S, A)    ``||Q* - Q^{pi_hat}||`` (exact suboptimality)
           probabilities
model      (S, A, S) kernel          ``max_{s,a} ||P_hat[s,a] - P[s,a]||_1``
           (sparse MDP: scipy.sparse
           (S*A, S) rows)
value      a float J estimate        ``|J_hat - J(pi)|``, ``J(pi) = sum_s initial(s) V^pi(s)``
                                     (trajectories: the discounted value of an
                                     episode of the stated length, exact)
=========  ========================  ==============================================

The exact answer is solved once per discount (:func:`solve_truth`) and reused for
every replicate and n.
"""

from __future__ import annotations

import math

from collections.abc import Mapping
from dataclasses import dataclass, field
from functools import lru_cache
from typing import TYPE_CHECKING, Any

import numpy as np
from numpy.typing import NDArray

from .exact import q_pi, q_pi_of_valid, q_star, v_pi, validate_policy
from .mdp import TabularMDP, is_sparse
from .vocabulary import NORMS, TARGETS

if TYPE_CHECKING:
    from .budgets import Budget

__all__ = ["TARGETS", "NORMS", "Problem", "Truth", "DataSpec", "frozen", "EstimateError", "default_policy", "solve_truth",
           "validate_estimate", "estimate_error", "scored_error", "zero_levels"]


Array = NDArray[np.float64]


class EstimateError(ValueError):
    """An estimator returned something that is not a valid estimate for the target."""


def validate_target(target: object) -> str:
    if target not in TARGETS:
        raise ValueError(f"unknown `target` {target!r}; choose one of {', '.join(TARGETS)}")
    return str(target)


def validate_norm(norm: object) -> str:
    if norm not in NORMS:
        raise ValueError(f"unknown `norm` {norm!r}; choose 'sup' (sup-norm) or 'mean' (mean absolute error)")
    return str(norm)


@dataclass(frozen=True)
class Problem:
    """What the estimator may know besides the samples: never the transition kernel.

    Logged data (``data`` "transitions" or "trajectories") add the ``behaviour``
    policy that collected them (importance weights need it), the ``initial``
    distribution of the value target and of episodes, and the ``episode_length``
    of trajectories. All arrays are read-only and cannot be made writable.
    """

    states: int
    actions: int
    rewards: Array
    gamma: float
    policy: Array
    target: str
    data: str = "generative"
    behaviour: Array | None = None
    initial: Array | None = None
    episode_length: int | None = None

    @property
    def horizon(self) -> float:
        """Effective horizon H = 1 / (1 - gamma)."""
        return 1.0 / (1.0 - self.gamma)


@dataclass
class Truth:
    """The exact answer for one discount (and, for logged data, one behaviour policy), and its error scale.

    ``data`` describes the logged-data regime, None for the generative model.
    """

    mdp: TabularMDP
    gamma: float
    target: str
    policy: Array
    value: Array  # Q^pi, Q*, P or J depending on the target
    scale: float
    _policy_cache: dict[bytes, float] = field(default_factory=dict, repr=False)
    data: "DataSpec | None" = None
    _problem: Problem | None = field(default=None, repr=False, compare=False)

    def __getstate__(self) -> dict[str, Any]:
        # caches stay behind: a worker rebuilds the Problem, and scores policies afresh
        state = dict(self.__dict__)
        state.update(_problem=None, _policy_cache={})
        return state

    def problem(self) -> Problem:
        """What the estimator is told (built once: a Problem and its arrays are read-only, so cells share it)."""
        if self._problem is None:
            self._problem = self._new_problem()
        return self._problem

    def _new_problem(self) -> Problem:
        S, A = self.mdp.states, self.mdp.actions
        if self.data is None:
            initial = frozen(np.full(S, 1.0 / S)) if self.target == "value" else None
            return Problem(S, A, frozen(self.mdp.R), self.gamma, frozen(self.policy), self.target, initial=initial)
        spec = self.data
        return Problem(S, A, frozen(self.mdp.R), self.gamma, frozen(self.policy), self.target, spec.regime,
                       frozen(spec.behaviour), frozen(spec.initial), spec.episode_length)

    @property
    def level(self) -> int:
        """The behaviour policy's index in the check (0 for the generative model)."""
        return 0 if self.data is None else self.data.level


@dataclass(frozen=True)
class DataSpec:
    """A logged-data regime for one (discount, behaviour): the exact data distribution and its coverage."""

    regime: str  # "transitions" or "trajectories"
    behaviour: Array
    initial: Array
    episode_length: int | None
    distribution: Array  # (S, A): the distribution of a logged pair (s, a)
    coverage: float  # concentrability: max d^pi / distribution
    level: int = 0


def frozen(array: Any, copy: bool = True) -> Any:
    """A read-only view of ``array`` (of a copy of it by default) through a read-only buffer.

    Unlike ``setflags(write=False)``, this cannot be undone with
    ``setflags(write=True)``: the estimator cannot write into the ground truth
    or into its batch. ``copy=False`` is for arrays made for the purpose.
    """
    owned = np.array(array) if copy else np.ascontiguousarray(array)
    return np.frombuffer(owned.data.toreadonly(), dtype=owned.dtype).reshape(owned.shape)


def default_policy(mdp: TabularMDP) -> Array:
    """The default evaluation policy: random stochastic rows, seeded by the MDP's fingerprint.

    Each row is a draw from the flat Dirichlet distribution over actions. A
    uniform policy would hide policy bugs (a transposed policy matrix, actions
    and states swapped) because every row is the same; a random one does not,
    and being derived from the fingerprint it is the same on every run.
    """
    return np.array(_default_policy(mdp.fingerprint, mdp.states, mdp.actions))


@lru_cache(maxsize=8)
def _default_policy(fingerprint: str, states: int, actions: int) -> Array:
    """:func:`default_policy` read-only, drawn once per MDP (every discount of a check, and later checks, share it)."""
    words = [int(fingerprint[i : i + 8], 16) for i in range(0, 32, 8)]
    rng = np.random.default_rng(np.random.SeedSequence(words, spawn_key=(0x706F6C,)))
    return frozen(rng.dirichlet(np.ones(actions), size=states), copy=False)


def solve_truth(mdp: TabularMDP, gamma: float, target: str, policy: Any = None) -> Truth:
    """Solve the exact target once for this discount (``policy=None``: :func:`default_policy`)."""
    pi = _default_policy(mdp.fingerprint, mdp.states, mdp.actions) if policy is None else validate_policy(mdp, policy)
    H = 1.0 / (1.0 - gamma)
    value_scale = mdp.reward_span * H
    if target == "q_pi":
        return Truth(mdp, gamma, target, pi, q_pi_of_valid(mdp, gamma, pi), value_scale)
    if target in ("q_star", "policy"):
        q, _ = q_star(mdp, gamma)
        return Truth(mdp, gamma, target, pi, q, value_scale)
    if target == "model":
        return Truth(mdp, gamma, target, pi, mdp.P if mdp.is_sparse else np.asarray(mdp.P), 2.0)
    if target == "value":  # the generative regime's value: from a uniform initial distribution
        initial = np.full(mdp.states, 1.0 / mdp.states)
        return Truth(mdp, gamma, target, pi, np.asarray(float(initial @ v_pi(mdp, gamma, pi))), value_scale)
    raise ValueError(f"unknown `target` {target!r}")


def _require_array(estimate: object, what: str) -> np.ndarray:
    if not isinstance(estimate, np.ndarray):
        raise EstimateError(
            f"the estimator returned {type(estimate).__name__}, not a numpy.ndarray; return {what}"
        )
    if isinstance(estimate, np.ma.MaskedArray):
        hidden = np.ma.getmaskarray(estimate)
        if hidden.any():
            index = tuple(int(i) for i in np.argwhere(hidden)[0])
            raise EstimateError(
                f"the estimator returned a masked array with {int(hidden.sum())} masked entries (the first at index "
                f"{index}); masked entries hide values from the error, so return a plain ndarray: {what}"
            )
        return np.asarray(estimate.data)
    return estimate


def _require_float(estimate: np.ndarray, what: str) -> Array:
    if estimate.dtype.kind != "f":
        hint = " (integer values usually mean rounding or integer division)" if estimate.dtype.kind in "iub" else ""
        raise EstimateError(f"the estimator returned dtype {estimate.dtype}; {what} must be floating point{hint}")
    bad = ~np.isfinite(estimate)
    if bad.any():
        index = tuple(int(i) for i in np.argwhere(bad)[0])
        raise EstimateError(
            f"the estimator returned a non-finite value {float(estimate[index])} at index {index} "
            f"({int(bad.sum())} non-finite entries in all)"
        )
    return estimate.astype(np.float64, copy=False)


def validate_estimate(estimate: object, truth: Truth) -> Array:
    """Check an estimator's return value for the target; raise :class:`EstimateError` naming the problem."""
    S, A = truth.mdp.states, truth.mdp.actions
    if truth.target == "value":
        return _validate_value(estimate)
    if truth.target in ("q_pi", "q_star"):
        what = f"an (S, A) = ({S}, {A}) float array of Q-values"
        array = _require_array(estimate, what)
        if array.shape != (S, A):
            raise EstimateError(f"the estimator returned shape {array.shape}; expected {what}")
        return _require_float(array, "Q-values")
    if truth.target == "policy":
        what = f"({S},) integer actions or ({S}, {A}) action probabilities"
        array = _require_array(estimate, what)
        if array.ndim == 1 and array.shape == (S,) and array.dtype.kind not in "iu":
            raise EstimateError(f"the estimator returned a ({S},) policy of dtype {array.dtype}; actions must be integers")
        if array.ndim == 2 and array.shape == (S, A):
            array = _require_float(array, "action probabilities")
        try:
            return validate_policy(truth.mdp, array, name="returned policy")
        except ValueError as exc:
            raise EstimateError(str(exc)) from None
    if truth.mdp.is_sparse:
        return _validate_sparse_model(estimate, S, A)
    what = f"an (S, A, S) = ({S}, {A}, {S}) transition estimate"
    array = _require_float_shape(_require_array(estimate, what), (S, A, S), what)
    if (array < 0).any():
        s, a, t = (int(i) for i in np.argwhere(array < 0)[0])
        raise EstimateError(f"the returned model has a negative probability at (s={s}, a={a}, s'={t})")
    sums = array.sum(axis=2)
    off = np.abs(sums - 1.0) > 1e-6
    if off.any():
        s, a = (int(i) for i in np.argwhere(off)[0])
        raise EstimateError(f"the returned model's row (s={s}, a={a}) sums to {sums[s, a]:.10g}, not 1")
    return array


def _validate_value(estimate: object) -> Array:
    """A value estimate: a real number (a float, a numpy floating scalar or a 0-d / one-element float array)."""
    what = "a float estimate of the value J(pi)"
    if isinstance(estimate, (bool, np.bool_)) or not isinstance(estimate, (float, int, np.floating, np.integer, np.ndarray)):
        raise EstimateError(f"the estimator returned {type(estimate).__name__}; return {what}")
    array = _require_array(np.asarray(estimate), what) if not isinstance(estimate, np.ndarray) else _require_array(estimate, what)
    if array.size != 1:
        raise EstimateError(f"the estimator returned shape {array.shape}; return {what}")
    if array.dtype.kind in "iu":
        array = array.astype(np.float64)
    return _require_float(array.reshape(()), "the value")


def _validate_sparse_model(estimate: object, S: int, A: int) -> Any:
    """A sparse MDP's model estimate: a scipy.sparse (S*A, S) float array with stochastic rows."""
    what = f"a scipy.sparse (S*A, S) = ({S * A}, {S}) transition estimate (the MDP is sparse)"
    if not is_sparse(estimate):
        raise EstimateError(f"the estimator returned {type(estimate).__name__}; expected {what}")
    rows: Any = estimate
    if rows.shape != (S * A, S):
        raise EstimateError(f"the estimator returned shape {rows.shape}; expected {what}")
    rows = rows.tocsr()
    _require_float(np.asarray(rows.data), "model probabilities")
    if (rows.data < 0).any():
        k = int(np.argmax(rows.data < 0))
        i = int(np.searchsorted(rows.indptr, k, side="right") - 1)
        raise EstimateError(f"the returned model has a negative probability at (s={i // A}, a={i % A}, s'={int(rows.indices[k])})")
    sums = np.asarray(rows.sum(axis=1)).ravel()
    off = np.abs(sums - 1.0) > 1e-6
    if off.any():
        i = int(np.argmax(off))
        raise EstimateError(f"the returned model's row (s={i // A}, a={i % A}) sums to {sums[i]:.10g}, not 1")
    return rows


def _require_float_shape(array: np.ndarray, shape: tuple[int, ...], what: str) -> Array:
    if array.shape != shape:
        raise EstimateError(f"the estimator returned shape {array.shape}; expected {what}")
    return _require_float(array, "model probabilities")


def estimate_error(estimate: Array, truth: Truth, norm: str = "sup") -> float:
    """Error of a validated estimate against the exact answer."""
    if truth.target == "value":
        return float(abs(float(estimate) - float(truth.value)))
    if truth.target in ("q_pi", "q_star"):
        diff = np.abs(estimate - truth.value)
        return float(diff.max() if norm == "sup" else diff.mean())
    if truth.target == "policy":
        key = np.ascontiguousarray(estimate).tobytes()
        cached = truth._policy_cache.get(key)
        if cached is None:
            gap = np.abs(truth.value - q_pi(truth.mdp, truth.gamma, estimate))
            cached = float(gap.max() if norm == "sup" else gap.mean())
            if len(truth._policy_cache) < 4096:
                truth._policy_cache[key] = cached
        return cached
    if is_sparse(truth.value):
        distances = np.asarray(abs(estimate - truth.value).sum(axis=1)).ravel()
        return float(distances.max() if norm == "sup" else distances.mean())
    distances = np.abs(estimate - truth.value).sum(axis=2)
    return float(distances.max() if norm == "sup" else distances.mean())


def scored_error(estimate: object, truth: Truth, norm: str = "sup") -> float:
    """:func:`validate_estimate` then :func:`estimate_error`, with a fast path for plain float64 Q-value arrays.

    For Q-values of the right shape and dtype the error is computed first: a finite
    sup- or mean-error means every entry is finite (an infinite or NaN entry makes
    both infinite or NaN), so the entry-by-entry finiteness check is needed only when
    the error is not finite, and then the full validation names the bad entry.
    """
    value = truth.value
    if (type(estimate) is np.ndarray and truth.target in ("q_pi", "q_star") and estimate.dtype == np.float64
            and estimate.shape == value.shape):
        diff = np.abs(estimate - value)
        error = float(diff.max() if norm == "sup" else diff.mean())
        if math.isfinite(error):
            return error
    return estimate_error(validate_estimate(estimate, truth), truth, norm)


def zero_levels(truths: Mapping[float, Truth], target: str,
                design: "Budget") -> tuple[dict[float, float], dict[float, float] | None]:
    """Per discount, the mean error at or below which a cell is zero, and (policies) the level its median must meet.

    Floating-point zero is relative to the value scale (rewards of 1e-10 give
    values of 1e-10, not an exact estimator). For policies, a mean suboptimality
    under ``policy_resolution`` of the value range is zero only when most
    replicates returned an optimal policy.
    """
    exact = {g: 1e-9 * max(t.scale, float(abs(t.value).max()) if t.value.size else 0.0) for g, t in truths.items()}
    if target == "policy":
        resolution = {g: max(design.policy_resolution * t.scale, exact[g], design.zero_level) for g, t in truths.items()}
        return resolution, {g: max(exact[g], design.zero_level) for g in truths}
    return {g: max(exact[g], design.zero_level) for g in truths}, None
