"""Logged-data sampling: n transitions from a behaviour policy, i.i.d. or in whole episodes.

``data="transitions"``: n i.i.d. transitions (s, a, s'), the pair (s, a) drawn
from the data distribution (the behaviour policy's discounted occupancy,
:func:`rlrates.occupancy.discounted_occupancy`) and s' from P(. | s, a).
``data="trajectories"``: ``n // L`` episodes of L steps, s_0 from the initial
distribution, a_t from the behaviour policy, s_{t+1} from P(. | s_t, a_t).

Transitions are drawn as multinomial counts (of the pairs, then of each pair's
successors by the conditional binomial chain of the generative sampler) put in
a uniformly random order: the law of an i.i.d. sequence, at the cost of one
permutation. Trajectories loop over the L steps of an episode only, each step
an inverse-CDF lookup vectorised over replicates and episodes, never over samples.

A :class:`LoggedBatch` holds the data as ``states``, ``actions``,
``next_states`` and ``rewards`` (1-D for transitions, (episodes, L) for
trajectories) and builds ``counts`` (S, A, S) (scipy.sparse (S*A, S) for a
sparse MDP) and ``visits`` (S, A) from them when read. All arrays are read-only.
Pairs the data never visit have zero counts: a consistent estimator must not
divide by their zero visits (the reference estimators give such a pair a model
that stays where it is).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from .sampling import SupportKernel
from .targets import frozen

__all__ = ["LoggedKernel", "LoggedBatch", "draw_logged_block"]

IntArray = NDArray[np.int64]


def _cumulative(probs: NDArray[np.float64]) -> NDArray[np.float64]:
    """Row-wise cumulative sums of row-normalised ``probs``, each row ending exactly at 1."""
    cum = np.cumsum(probs / probs.sum(axis=1, keepdims=True), axis=1)
    cum[:, -1] = 1.0
    return np.asarray(cum, dtype=np.float64)


#: Up to this many categories a lookup compares against every column (fast, memory rows x width);
#: wider rows use one binary search over all rows laid end to end.
_NARROW = 16


def _pick(rng: np.random.Generator, cumulative: NDArray[np.float64], rows: IntArray) -> IntArray:
    """One category per entry of ``rows`` (row indices into ``cumulative``): the first column whose
    cumulative probability exceeds a uniform draw (an inverse-CDF lookup, vectorised over entries)."""
    u = rng.random(rows.shape)
    width = cumulative.shape[1]
    if width <= _NARROW:
        return np.asarray((u[..., None] >= cumulative[rows]).sum(axis=-1), dtype=np.int64)
    # row r's cumulative shifted to (r, r + 1]: one searchsorted finds every entry's column
    shifted = (cumulative + np.arange(cumulative.shape[0])[:, None]).ravel()
    position = np.searchsorted(shifted, rows + u, side="right")
    return np.asarray(np.minimum(position - rows * width, width - 1), dtype=np.int64)


@dataclass(frozen=True)
class LoggedKernel:
    """What a logged-data draw needs, precomputed once per (discount, behaviour): picklable."""

    regime: str
    next_states: SupportKernel  # the MDP's successors on each row's support
    pair_probs: NDArray[np.float64]  # transitions: the data distribution over the S*A pairs
    initial: NDArray[np.float64]  # trajectories: cumulative of the initial distribution, (1, S)
    behaviour: NDArray[np.float64]  # trajectories: cumulative of the behaviour policy's rows, (S, A)
    length: int
    rewards: NDArray[np.float64]
    successors: NDArray[np.float64]  # cumulative of each row's successor probabilities, (S*A, k)

    @classmethod
    def build(cls, regime: str, successors: SupportKernel, data: NDArray[np.float64], initial: NDArray[np.float64],
              behaviour: NDArray[np.float64], length: int, rewards: NDArray[np.float64]) -> "LoggedKernel":
        pair_probs = np.clip(data.ravel(), 0.0, None)
        pair_probs = pair_probs / pair_probs.sum()
        pair_probs[-1] = max(0.0, 1.0 - pair_probs[:-1].sum())  # multinomial needs sum(pvals[:-1]) <= 1
        return cls(regime, successors, pair_probs, _cumulative(initial.reshape(1, -1)), _cumulative(behaviour),
                   int(length), rewards, _cumulative(successors.probs))

    @property
    def states(self) -> int:
        return self.next_states.states

    @property
    def actions(self) -> int:
        return self.next_states.actions

    def episodes(self, n: int) -> int:
        """Whole episodes in n transitions (trajectories); at least one."""
        return max(1, n // self.length)

    def sample(self, rng: np.random.Generator, n: int, replicates: int) -> tuple[IntArray, IntArray, IntArray]:
        """States, actions and next states of ``replicates`` batches: (replicates, n) for transitions,
        (replicates, episodes, L) for trajectories."""
        if self.regime == "transitions":
            return self._transitions(rng, n, replicates)
        A = self.actions
        support = self.next_states.support
        episodes = self.episodes(n)
        states = np.empty((replicates, episodes, self.length), dtype=np.int64)
        actions = np.empty_like(states)
        nxt = np.empty_like(states)
        current = _pick(rng, self.initial, np.zeros((replicates, episodes), dtype=np.int64))
        for t in range(self.length):  # one vectorised step of every episode of every replicate
            states[..., t] = current
            actions[..., t] = _pick(rng, self.behaviour, current)
            pair = current * A + actions[..., t]
            current = support[pair, _pick(rng, self.successors, pair)]
            nxt[..., t] = current
        return states, actions, nxt

    def _transitions(self, rng: np.random.Generator, n: int, replicates: int) -> tuple[IntArray, IntArray, IntArray]:
        """n i.i.d. (s, a, s') per replicate: multinomial counts of the pairs, of each pair's successors
        (:meth:`rlrates.sampling.SupportKernel.sample_given_totals`), then a uniformly
        random order, which together have the law of an i.i.d. sequence."""
        S, A = self.states, self.actions
        kernel = self.next_states
        pairs = rng.multinomial(n, self.pair_probs, size=replicates)  # (R, S*A)
        drawn = kernel.sample_given_totals(rng, pairs)  # each pair's successors, given its count
        codes = (np.arange(S * A)[:, None] * S + kernel.support).ravel()  # pair * S + successor
        ordered = np.repeat(np.tile(codes, replicates), drawn.ravel()).reshape(replicates, n)
        shuffled = rng.permuted(ordered, axis=1)
        pair, nxt = np.divmod(shuffled, S)
        return pair // A, pair % A, nxt


class LoggedBatch:
    """One logged dataset: n transitions (s, a, s') of a behaviour policy.

    ``states``, ``actions``, ``next_states`` and ``rewards`` are 1-D (n,) for
    ``data="transitions"`` and (episodes, L) for ``data="trajectories"`` (row e
    is episode e, in time order; ``next_states[e, t] == states[e, t + 1]``).
    ``counts`` and ``visits`` are views of the same data, built when read.
    """

    def __init__(self, kernel: LoggedKernel, states: IntArray, actions: IntArray, next_states: IntArray) -> None:
        self._kernel = kernel
        self._states = frozen(states)
        self._actions = frozen(actions)
        self._next = frozen(next_states)
        self._counts: Any = None
        self._visits: IntArray | None = None
        self._rewards: np.ndarray | None = None

    @property
    def data(self) -> str:
        """``"transitions"`` or ``"trajectories"``."""
        return self._kernel.regime

    @property
    def n(self) -> int:
        """Transitions in the dataset (whole episodes for trajectories)."""
        return int(self._states.size)

    @property
    def episodes(self) -> int | None:
        """Episodes in the dataset (trajectories), None for i.i.d. transitions."""
        return None if self.data == "transitions" else int(self._states.shape[0])

    @property
    def episode_length(self) -> int | None:
        return None if self.data == "transitions" else int(self._states.shape[1])

    @property
    def states(self) -> IntArray:
        return self._states

    @property
    def actions(self) -> IntArray:
        return self._actions

    @property
    def next_states(self) -> IntArray:
        return self._next

    @property
    def rewards(self) -> NDArray[np.float64]:
        """The reward of each logged transition, r(s, a) (rewards are known and deterministic)."""
        if self._rewards is None:
            self._rewards = frozen(self._kernel.rewards[self._states, self._actions], copy=False)
        return self._rewards

    @property
    def sparse(self) -> bool:
        return self._kernel.next_states.sparse

    @property
    def counts(self) -> Any:
        """How often each (s, a, s') was logged: read-only (S, A, S) ints (sparse MDP: scipy.sparse (S*A, S))."""
        if self._counts is None:
            S, A = self._kernel.states, self._kernel.actions
            pairs = (self._states * A + self._actions).ravel()
            if self.sparse:
                from scipy import sparse

                counts = sparse.csr_array((np.ones(pairs.size, dtype=np.int64), (pairs, self._next.ravel())),
                                          shape=(S * A, S))
                counts.sum_duplicates()
                counts.data.setflags(write=False)
            else:
                counts = frozen(np.bincount(pairs * S + self._next.ravel(), minlength=S * A * S).reshape(S, A, S), copy=False)
            self._counts = counts
        return self._counts

    @property
    def visits(self) -> IntArray:
        """How often each pair (s, a) was logged, (S, A); zero for the pairs the data never visit."""
        if self._visits is None:
            S, A = self._kernel.states, self._kernel.actions
            pairs = (self._states * A + self._actions).ravel()
            self._visits = frozen(np.bincount(pairs, minlength=S * A).reshape(S, A), copy=False)
        return self._visits

    def __repr__(self) -> str:
        shape = "x".join(str(d) for d in self._states.shape)
        return f"LoggedBatch(data={self.data!r}, n={self.n}, shape={shape})"


def draw_logged_block(kernel: LoggedKernel, n: int, replicates: int, seed: np.random.SeedSequence) -> list[LoggedBatch]:
    """``replicates`` independent logged datasets of n transitions, drawn in one vectorised call."""
    states, actions, nxt = kernel.sample(np.random.default_rng(seed), int(n), int(replicates))
    return [LoggedBatch(kernel, states[r], actions[r], nxt[r]) for r in range(replicates)]
