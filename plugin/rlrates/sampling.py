"""Generative-model sampling: n next-state samples for every state-action pair.

A :class:`Batch` is one draw with two views: ``counts`` (S, A, S) (for a sparse
MDP a scipy.sparse (S*A, S) array) and ``next_states`` (S, A, n). The draw is
kept as counts on each row's support (S*A, k), from one multinomial call over
the supports (cost O(S A k) per replicate, whatever n). Each view
is built from them only when an estimator reads it: ``counts`` by scattering
into the dense array (or wrapping them as a sparse one), ``next_states`` by
laying the successors out and shuffling each row with an independent child
stream. Both views are of the same draw and both are read-only.

Streams: every batch is rebuilt from a :class:`numpy.random.SeedSequence` given
by an integer entropy and a spawn key of stable identifiers (see
:mod:`rlrates.streams`), so any cell of a sweep can be re-drawn alone, in any process.
Dense count views are written into reused memory (:mod:`rlrates.buffers`).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import NDArray

from .buffers import COUNT_VIEWS
from .mdp import TabularMDP
from .streams import StreamKey, block_key, block_seed, cell_seed, gamma_key, stable_words, stream_context
from .targets import frozen

__all__ = ["Batch", "draw", "draw_block", "block_seed", "block_key", "StreamKey", "cell_seed", "stream_context", "mdp_kernel", "stable_words", "sampling_kernel", "cached_kernel", "SupportKernel", "support_kernel", "sparse_support_kernel",
           "kernels_by_discount"]

IntArray = NDArray[np.int64]


def sampling_kernel(mdp: TabularMDP) -> NDArray[np.float64]:
    """``P`` reshaped to (S*A, S) with rows renormalised exactly for multinomial draws (dense MDPs only)."""
    if mdp.is_sparse:
        raise ValueError(f"sampling_kernel needs a dense MDP; {mdp.name!r} is sparse: use mdp_kernel")
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
    ``sparse`` says which counts view the batches give: a scipy.sparse (S*A, S)
    array (sparse MDPs) or a dense (S, A, S) ndarray. The conditional
    probabilities of the binomial chain (for draws given each row's total) are computed once, here.
    """

    states: int
    actions: int
    support: NDArray[np.int64]
    probs: NDArray[np.float64]
    sparse: bool = False
    conditional: NDArray[np.float64] = field(init=False, repr=False, compare=False)
    scatter: NDArray[np.int64] = field(init=False, repr=False, compare=False)
    _columns: NDArray[np.float64] = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "conditional", _conditional(self.probs))
        # column j of the conditionals as one contiguous row: binomial reads it faster than a strided column
        object.__setattr__(self, "_columns", np.ascontiguousarray(self.conditional.T))
        # where each support column lands in a flat dense (S*A*S) array of counts
        rows = self.support.shape[0]
        object.__setattr__(self, "scatter", (self.support + self.states * np.arange(rows)[:, None]).ravel())
        for array in (self.support, self.probs, self.conditional, self._columns, self.scatter):
            array.setflags(write=False)  # kernels are shared between checks (cached_kernel)

    def sample_support(self, rng: np.random.Generator, n: int, replicates: int = 1) -> IntArray:
        """Counts on the support of ``replicates`` independent draws of n samples per row, shape (replicates, S*A, k).

        One ``Generator.multinomial`` call over every row's support (numpy runs the
        chain of conditional binomials per row in C, and stops a row once its n is
        spent). Column j of row i counts successor ``support[i, j]``.
        """
        return rng.multinomial(int(n), self.probs, size=(replicates, self.probs.shape[0]))

    def sample_given_totals(self, rng: np.random.Generator, totals: IntArray) -> IntArray:
        """Counts on the support given each row's own number of samples ``totals`` (replicates, S*A).

        The chain of conditional binomials (each successor's count given the ones
        before it), vectorised over replicates and rows: one ``Generator.binomial``
        call per support column. Logged transitions draw their successors this
        way; numpy's multinomial would broadcast over the totals too, and switching
        is a change of every logged table (a calibration change).
        """
        rows, width = self.probs.shape
        left = np.array(totals, dtype=np.int64)
        columns = []
        for j in range(width - 1):
            column = rng.binomial(left, self._columns[j])
            columns.append(column)
            left = left - column
        columns.append(left)
        return np.stack(columns, axis=-1)

    def dense_view(self, drawn: IntArray) -> IntArray:
        """Support counts (..., S*A, k) of a dense kernel as a read-only (..., S*A, S) view.

        Scattered into memory reused from earlier views that nobody holds any more
        (:mod:`rlrates.buffers`). A sparse kernel's padding repeats a successor's
        index, so its counts are a sparse array instead (:meth:`sparse_counts`).
        """
        if self.sparse:
            raise ValueError("dense_view needs a dense kernel; a sparse MDP's counts are sparse_counts")
        rows, width = self.support.shape
        blocks = drawn.size // (rows * width)
        flat, view = COUNT_VIEWS.take(blocks * rows * self.states, self.scatter)
        flat.reshape(blocks, rows * self.states)[:, self.scatter] = drawn.reshape(blocks, rows * width)
        return view.reshape(*drawn.shape[:-1], self.states)

    def sparse_counts(self, drawn: IntArray) -> Any:
        """Support counts (S*A, k) of one draw as a scipy.sparse CSR array of shape (S*A, S)."""
        from scipy import sparse

        keep = drawn > 0
        indptr = np.zeros(drawn.shape[0] + 1, dtype=np.int64)
        np.cumsum(keep.sum(axis=1), out=indptr[1:])
        # positive columns of a row are in increasing state order, so the CSR array is canonical
        counts = sparse.csr_array((drawn[keep], self.support[keep], indptr), shape=(drawn.shape[0], self.states))
        counts.has_canonical_format = True
        return counts

    def successors(self, drawn: IntArray, n: int) -> IntArray:
        """Each row's sampled successors in increasing state order, shape (S*A, n), from support counts (S*A, k)."""
        return np.repeat(self.support.ravel(), drawn.ravel()).reshape(drawn.shape[0], n)


def _conditional(probs: NDArray[np.float64]) -> NDArray[np.float64]:
    """P(successor j | not one of the successors before j), per row."""
    before = np.cumsum(probs, axis=1) - probs
    remaining = 1.0 - before
    with np.errstate(divide="ignore", invalid="ignore"):
        cond = np.where(remaining > 0, probs / remaining, 1.0)
    return np.clip(cond, 0.0, 1.0)


def _normalised(probs: NDArray[np.float64]) -> NDArray[np.float64]:
    """Rows renormalised, the last column absorbing rounding so that the leading partial sums stay <= 1."""
    probs = probs / probs.sum(axis=1, keepdims=True)
    probs[:, -1] = np.clip(1.0 - probs[:, :-1].sum(axis=1), 0.0, None)
    return probs


def support_kernel(kernel: NDArray[np.float64], states: int, actions: int) -> SupportKernel:
    """Compress a dense (S*A, S) kernel from :func:`sampling_kernel` to its rows' supports."""
    positive = kernel > 0
    width = max(int(positive.sum(axis=1).max()), 1)
    order = np.argsort(positive, axis=1, kind="stable")  # zero-probability columns first
    support = np.ascontiguousarray(order[:, -width:])
    probs = np.take_along_axis(kernel, support, axis=1)
    return SupportKernel(states, actions, support, _normalised(probs))


def sparse_support_kernel(flat: Any, states: int, actions: int) -> SupportKernel:
    """The support kernel of a canonical scipy.sparse CSR (S*A, S) kernel (explicit zeros dropped).

    Rows with fewer successors than the widest are padded in front with
    zero-probability columns (state 0, never drawn).
    """
    rows = states * actions
    lengths = np.diff(flat.indptr).astype(np.int64)
    width = max(int(lengths.max()), 1)
    row_of = np.repeat(np.arange(rows), lengths)
    column = np.arange(flat.nnz) - flat.indptr[row_of] + (width - lengths)[row_of]
    support = np.zeros((rows, width), dtype=np.int64)
    probs = np.zeros((rows, width))
    support[row_of, column] = flat.indices
    probs[row_of, column] = flat.data
    return SupportKernel(states, actions, support, _normalised(probs), sparse=True)


def kernels_by_discount(mdps: "dict[float, TabularMDP]") -> dict[float, SupportKernel]:
    """The sampling kernel per discount, one per distinct MDP (one MDP serves every gamma unless it is a family)."""
    return {gamma: cached_kernel(mdp) for gamma, mdp in mdps.items()}


#: The kernels this process built, by MDP fingerprint: the next check of the same MDP, and a
#: worker's next cell of it (cells travel without their kernel), reuse them.
_KERNELS: dict[str, SupportKernel] = {}
#: Support entries kept in all (each kernel holds five arrays of that size); the newest kernel is always kept.
_KERNEL_ENTRIES = 2**22


def cached_kernel(mdp: TabularMDP) -> SupportKernel:
    """:func:`mdp_kernel`, built once per MDP fingerprint and process (the four newest, within ``_KERNEL_ENTRIES``)."""
    kernel = _KERNELS.get(mdp.fingerprint)
    if kernel is None:
        kernel = mdp_kernel(mdp)
        while _KERNELS and (len(_KERNELS) >= 4 or kernel.probs.size + sum(k.probs.size for k in _KERNELS.values())
                            > _KERNEL_ENTRIES):
            _KERNELS.pop(next(iter(_KERNELS)))
        _KERNELS[mdp.fingerprint] = kernel
    return kernel


def mdp_kernel(mdp: TabularMDP) -> SupportKernel:
    """The support kernel of an MDP, ready for :func:`draw` and :func:`draw_block`."""
    if mdp.is_sparse:
        return sparse_support_kernel(mdp.P, mdp.states, mdp.actions)
    return support_kernel(sampling_kernel(mdp), mdp.states, mdp.actions)


#: Dense entries (8 MB of int64) up to which a block's dense count views are built in one scatter.
_WHOLE_BLOCK = 2**20


class _BlockDraw:
    """The support counts of a block of replicates, and the dense views an estimator reads.

    A dense (S, A, S) view is built only when an estimator reads ``batch.counts``.
    A small block (at most ``_WHOLE_BLOCK`` dense entries) builds the views of all
    its replicates in one scatter on the first read; a larger one builds one view
    at a time and keeps only the last, so its memory stays at its support counts
    plus one view (the block's batches are read one after the other).
    """

    def __init__(self, kernel: SupportKernel, drawn: IntArray, n: int) -> None:
        drawn.setflags(write=False)
        self.kernel = kernel
        self.drawn = drawn
        self.n = int(n)
        self._view: tuple[int, Any] | None = None
        self._whole: list[Any] | None = None
        self._at_once = not kernel.sparse and drawn.shape[0] * drawn.shape[1] * kernel.states <= _WHOLE_BLOCK

    def counts(self, replicate: int) -> Any:
        if self._whole is not None:
            return self._whole[replicate]
        kernel = self.kernel
        if self._at_once:
            whole = kernel.dense_view(self.drawn).reshape(self.drawn.shape[0], kernel.states, kernel.actions,
                                                          kernel.states)
            self._whole = list(whole)  # one view object per replicate, the same on every read
            return self._whole[replicate]
        if self._view is None or self._view[0] != replicate:
            self._view = None  # the last view's buffer can serve this one when nobody else holds it
            if kernel.sparse:
                view = kernel.sparse_counts(self.drawn[replicate])
                view.data.setflags(write=False)
            else:
                view = kernel.dense_view(self.drawn[replicate]).reshape(kernel.states, kernel.actions, kernel.states)
            self._view = (replicate, view)
        return self._view[1]

    def successors(self, replicate: int) -> IntArray:
        return self.kernel.successors(self.drawn[replicate], self.n)


class Batch:
    """One generative-model draw: n sampled next states for each (s, a).

    Views are built lazily from the counts on the support: reading ``counts``
    builds the (S, A, S) array (or, for a sparse MDP, the (S*A, S) sparse array)
    and never the (S, A, n) one; reading ``next_states`` builds that once.
    """

    _next_states: IntArray | None = None  # built on the first read of next_states

    def __init__(self, block: _BlockDraw, replicate: int, seed: StreamKey, path: tuple[int, ...] = ()) -> None:
        self._block = block
        self._replicate = replicate
        # the order of next_states comes from the child (*path, 1) of `seed`, built on demand
        self._seed = seed
        self._path = path

    @property
    def n(self) -> int:
        """Samples per state-action pair."""
        return self._block.n

    @property
    def states(self) -> int:
        return self._block.kernel.states

    @property
    def actions(self) -> int:
        return self._block.kernel.actions

    @property
    def sparse(self) -> bool:
        """True for a sparse MDP: then ``counts`` is a scipy.sparse (S*A, S) array."""
        return self._block.kernel.sparse

    @property
    def counts(self) -> Any:
        """How often each successor was sampled: a read-only (S, A, S) int array, or for a sparse
        MDP a scipy.sparse CSR array of shape (S*A, S) (row ``s * A + a``) with read-only data."""
        return self._block.counts(self._replicate)

    @property
    def next_states(self) -> IntArray:
        """Read-only (S, A, n) int array: the i-th sampled successor of (s, a)."""
        if self._next_states is None:
            ordered = self._block.successors(self._replicate)
            shuffled = np.random.default_rng(self._seed.child(*self._path, 1)).permuted(ordered, axis=1)
            self._next_states = frozen(shuffled.reshape(self.states, self.actions, self._block.n), copy=False)
        return self._next_states

    @property
    def empirical_P(self) -> Any:
        """The plug-in model ``counts / n`` (a fresh, writable array; sparse (S*A, S) for a sparse MDP)."""
        return self.counts / float(self._block.n)

    def __repr__(self) -> str:
        return f"Batch(states={self.states}, actions={self.actions}, n={self._block.n})"


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
    if kernel is None:
        kernel = cached_kernel(mdp)
    elif not isinstance(kernel, SupportKernel):
        kernel = support_kernel(kernel, mdp.states, mdp.actions)
    key = StreamKey.of(seq)
    drawn = kernel.sample_support(np.random.default_rng(key.child(0)), n)
    return Batch(_BlockDraw(kernel, drawn, n), 0, key)


def draw_block(
    kernel: SupportKernel,
    n: int,
    replicates: int,
    seed: np.random.SeedSequence | StreamKey,
) -> list[Batch]:
    """``replicates`` independent batches drawn in one vectorised call (a sweep cell's block).

    Counts come from child 0 of ``seed``; batch ``r``'s next-state order from the
    seed's child ``(1 + r, 1)``, built only if that batch's ``next_states`` is read.
    """
    n = _validate_n(n)
    key = seed if isinstance(seed, StreamKey) else StreamKey.of(seed)
    block = _BlockDraw(kernel, kernel.sample_support(np.random.default_rng(key.child(0)), n, replicates), n)
    return [Batch(block, r, key, (1 + r,)) for r in range(replicates)]
