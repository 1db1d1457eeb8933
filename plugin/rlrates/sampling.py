"""Generative-model sampling: n next-state samples for every state-action pair.

A :class:`Batch` is one draw with two views: ``counts`` (S, A, S) and
``next_states`` (S, A, n). The counts come from one vectorised
``Generator.multinomial`` call (cost O(S^2 A), whatever n); the sequence view is
built from the counts only when an estimator reads it, by laying the states out
and shuffling each row with an independent child stream. Both views are of the
same draw and both are read-only.

Streams: every batch is rebuilt from a :class:`numpy.random.SeedSequence` given
by an integer entropy and a spawn key of stable identifiers (see
:func:`cell_seed`), so any cell of a sweep can be re-drawn alone, in any process.
"""

from __future__ import annotations

import hashlib
from collections.abc import Sequence
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from numpy.typing import NDArray

from .mdp import TabularMDP

__all__ = ["Batch", "draw", "draw_block", "block_seed", "cell_seed", "stream_context", "mdp_kernel", "stable_words", "sampling_kernel", "SupportKernel", "support_kernel"]

IntArray = NDArray[np.int64]


@lru_cache(maxsize=1024)
def stable_words(text: str, words: int = 2) -> tuple[int, ...]:
    """Turn a string into ``words`` 32-bit integers (a stable spawn-key part)."""
    digest = hashlib.blake2b(text.encode("utf-8"), digest_size=4 * words).digest()
    return tuple(int.from_bytes(digest[4 * i : 4 * i + 4], "little") for i in range(words))


def stream_context(context: str, fingerprint: str) -> str:
    """The context string of an MDP's streams in a check: the caller's context and the MDP's fingerprint."""
    return f"{context}|{fingerprint}"


def gamma_key(gamma: float) -> int:
    """A stable integer for a discount factor (exact to 1e-9)."""
    return int(round(float(gamma) * 1_000_000_000))


def block_seed(master_seed: int, context: str, gamma: float, n: int, start: int, stop: int) -> np.random.SeedSequence:
    """The seed of replicates ``start .. stop - 1`` of one sweep cell, drawn together.

    Key: (hash of ``context``, gamma, n, start, stop). A replicate is rebuilt from
    its block's seed and its position in the block (see :func:`draw_block`).
    """
    key = (*stable_words(context), gamma_key(gamma), int(n), int(start), int(stop))
    return np.random.SeedSequence(int(master_seed), spawn_key=key)


def cell_seed(master_seed: int, context: str, gamma: float, n: int, replicate: int) -> np.random.SeedSequence:
    """The seed of one sweep cell: ``SeedSequence(master_seed, spawn_key=(...))``.

    The key is built from stable identifiers only: a hash of ``context`` (for
    example a test id and an MDP fingerprint), the discount, n and the replicate.
    """
    key = (*stable_words(context), gamma_key(gamma), int(n), int(replicate))
    return np.random.SeedSequence(int(master_seed), spawn_key=key)


def sampling_kernel(mdp: TabularMDP) -> NDArray[np.float64]:
    """``P`` reshaped to (S*A, S) with rows renormalised exactly for multinomial draws."""
    flat = np.array(mdp.P.reshape(mdp.states * mdp.actions, mdp.states))
    flat /= flat.sum(axis=1, keepdims=True)
    # Generator.multinomial rejects sum(pvals[:-1]) > 1 beyond a tiny tolerance; move
    # any rounding excess off the last entries so the leading partial sums stay <= 1.
    head = flat[:, :-1].sum(axis=1)
    flat[:, -1] = np.clip(1.0 - head, 0.0, None)
    return flat


@dataclass(frozen=True)
class SupportKernel:
    """A sampling kernel restricted to each row's support, for fast multinomial draws.

    ``Generator.multinomial`` costs one binomial draw per category, so a sparse row
    (a Garnet with branching b) is drawn over its b successors rather than all S.
    ``support`` (S*A, k) holds successor indices (zero-probability padding first, so
    that the last column, which absorbs rounding, is always a real successor).
    """

    states: int
    actions: int
    support: NDArray[np.int64]
    probs: NDArray[np.float64]

    def sample_counts(self, rng: np.random.Generator, n: int, replicates: int = 1) -> IntArray:
        """Counts of ``replicates`` independent draws, shape (replicates, S, A, S).

        Multinomial by the chain of conditional binomials (each successor's count
        given the ones before it), vectorised over replicates and rows: one
        ``Generator.binomial`` call per support column, whatever n and replicates.
        """
        rows, width = self.probs.shape
        left = np.full((replicates, rows), n, dtype=np.int64)
        drawn = np.empty((replicates, rows, width), dtype=np.int64)
        for j in range(width - 1):
            drawn[:, :, j] = rng.binomial(left, self._conditional[:, j])
            left -= drawn[:, :, j]
        drawn[:, :, -1] = left
        counts = np.zeros((replicates, rows, self.states), dtype=np.int64)
        np.put_along_axis(counts, np.broadcast_to(self.support, drawn.shape), drawn, axis=2)
        return counts.reshape(replicates, self.states, self.actions, self.states)

    @property
    def _conditional(self) -> NDArray[np.float64]:
        """P(successor j | not one of the successors before j), per row."""
        before = np.cumsum(self.probs, axis=1) - self.probs
        remaining = 1.0 - before
        with np.errstate(divide="ignore", invalid="ignore"):
            cond = np.where(remaining > 0, self.probs / remaining, 1.0)
        return np.clip(cond, 0.0, 1.0)


def support_kernel(kernel: NDArray[np.float64], states: int, actions: int) -> SupportKernel:
    """Compress a dense (S*A, S) kernel from :func:`sampling_kernel` to its rows' supports."""
    positive = kernel > 0
    width = max(int(positive.sum(axis=1).max()), 1)
    order = np.argsort(positive, axis=1, kind="stable")  # zero-probability columns first
    support = np.ascontiguousarray(order[:, -width:])
    probs = np.take_along_axis(kernel, support, axis=1)
    probs = probs / probs.sum(axis=1, keepdims=True)
    probs[:, -1] = np.clip(1.0 - probs[:, :-1].sum(axis=1), 0.0, None)
    return SupportKernel(states, actions, support, probs)


def mdp_kernel(mdp: TabularMDP) -> SupportKernel:
    """The support kernel of an MDP, ready for :func:`draw` and :func:`draw_block`."""
    return support_kernel(sampling_kernel(mdp), mdp.states, mdp.actions)


class Batch:
    """One generative-model draw: n sampled next states for each (s, a).

    Attributes are computed lazily: reading ``counts`` never builds the (S, A, n)
    array; reading ``next_states`` builds it once from the counts.
    """

    def __init__(self, counts: IntArray, n: int, seed: np.random.SeedSequence, path: tuple[int, ...] = ()) -> None:
        counts.setflags(write=False)
        self._counts = counts
        self._n = int(n)
        # the order of next_states comes from the child (*path, 1) of `seed`, built on demand
        self._seed = seed
        self._path = path
        self._next_states: IntArray | None = None

    @property
    def n(self) -> int:
        """Samples per state-action pair."""
        return self._n

    @property
    def states(self) -> int:
        return int(self._counts.shape[0])

    @property
    def actions(self) -> int:
        return int(self._counts.shape[1])

    @property
    def counts(self) -> IntArray:
        """Read-only (S, A, S) int array: how often each successor was sampled."""
        return self._counts

    @property
    def next_states(self) -> IntArray:
        """Read-only (S, A, n) int array: the i-th sampled successor of (s, a)."""
        if self._next_states is None:
            S, A = self.states, self.actions
            flat_counts = self._counts.reshape(S * A, S)
            laid_out = np.repeat(np.tile(np.arange(S, dtype=np.int64), S * A), flat_counts.ravel())
            ordered = laid_out.reshape(S * A, self._n)
            shuffled = np.random.default_rng(_child(self._seed, *self._path, 1)).permuted(ordered, axis=1)
            shuffled = shuffled.reshape(S, A, self._n)
            shuffled.setflags(write=False)
            self._next_states = shuffled
        return self._next_states

    @property
    def empirical_P(self) -> NDArray[np.float64]:
        """The plug-in model ``counts / n`` (a fresh, writable array)."""
        return self._counts / float(self._n)

    def __repr__(self) -> str:
        return f"Batch(states={self.states}, actions={self.actions}, n={self._n})"


def _child(seq: np.random.SeedSequence, *path: int) -> np.random.SeedSequence:
    """The descendant of ``seq`` at spawn-key ``path``, built without ``seq.spawn`` (which
    advances the parent's spawn counter and would make a reused SeedSequence draw differently)."""
    return np.random.SeedSequence(seq.entropy, spawn_key=(*seq.spawn_key, *path), pool_size=seq.pool_size)


def _validate_n(n: object) -> int:
    if isinstance(n, bool) or not isinstance(n, (int, np.integer)):
        raise TypeError(f"`n` must be a positive integer, got {n!r} of type {type(n).__name__}")
    if int(n) < 1:
        raise ValueError(f"`n` must be a positive integer, got {n}")
    return int(n)


def draw(
    mdp: TabularMDP,
    n: int,
    seed: int | np.random.SeedSequence | Sequence[int] = 0,
    *,
    kernel: NDArray[np.float64] | SupportKernel | None = None,
) -> Batch:
    """Draw ``n`` next states for every (s, a) of ``mdp`` from its generative model.

    ``seed`` is an int, a sequence of ints, or a ready :class:`SeedSequence`; its
    first child seeds the counts and its second the order of ``next_states``
    (the same children every time: ``seed`` is not advanced, so reusing it repeats the draw).
    ``kernel`` lets a sweep pass :func:`sampling_kernel` (or its :func:`support_kernel`)
    once instead of rebuilding it per draw.
    """
    n = _validate_n(n)
    seq = seed if isinstance(seed, np.random.SeedSequence) else np.random.SeedSequence(seed)
    if not isinstance(kernel, SupportKernel):
        dense = sampling_kernel(mdp) if kernel is None else kernel
        kernel = support_kernel(dense, mdp.states, mdp.actions)
    counts = kernel.sample_counts(np.random.default_rng(_child(seq, 0)), n)[0]
    return Batch(counts, n, seq)


def draw_block(
    kernel: SupportKernel,
    n: int,
    replicates: int,
    seed: np.random.SeedSequence,
) -> list[Batch]:
    """``replicates`` independent batches drawn in one vectorised call (a sweep cell's block).

    Counts come from child 0 of ``seed``; batch ``r``'s next-state order from the
    seed's child ``(1, r)``, built only if that batch's ``next_states`` is read.
    """
    n = _validate_n(n)
    counts = kernel.sample_counts(np.random.default_rng(_child(seed, 0)), n, replicates)
    return [Batch(counts[r], n, seed, (1 + r,)) for r in range(replicates)]
