"""Memory a model or a sweep will need, estimated before anything is allocated.

A call that would need more memory than the machine has is refused up front with
a :class:`TooLargeError` (a ``ValueError``) naming the expected memory, the
memory found and what to change, instead of numpy's raw ``MemoryError`` half-way
through (or the machine swapping for minutes first).

The estimates are upper-side rules of thumb, measured with ``tracemalloc`` on the
families of :mod:`rlrates.families` (peak bytes per stored probability):

- a dense (S, A, S) float64 kernel: :data:`DENSE_BYTES_PER_ENTRY` (the array, the
  validated copy, the fingerprint's copy, the families' working arrays);
- a sparse (S*A, S) kernel: :data:`SPARSE_BYTES_PER_ENTRY` per stored successor
  (successor lists, weights, COO and CSR arrays, the validated copy), plus
  :data:`SPARSE_WORKING_BYTES` of chunked working space.

:func:`sweep_cost` estimates one check's sweep (the largest cell's batch and
views, the exact solve, estimator calls and samples). This module imports
nothing else of rlrates (every other module may use it). Pure: no pytest import.
"""

from __future__ import annotations

import os
from collections.abc import Sequence
from dataclasses import dataclass, replace
from functools import lru_cache
from pathlib import Path
from typing import Any, Protocol

__all__ = [
    "TooLargeError", "Cost", "SweepCost", "machine_memory", "gib", "dense_kernel_cost", "sparse_kernel_cost",
    "require_memory", "sweep_cost", "require_sweep_memory", "DENSE_BYTES_PER_ENTRY", "SPARSE_BYTES_PER_ENTRY", "SPARSE_WORKING_BYTES",
]

#: Peak bytes per entry of building and validating a dense (S, A, S) float64 kernel (32 to 41 measured).
DENSE_BYTES_PER_ENTRY = 48
#: Peak bytes per stored successor of building and validating a sparse (S*A, S) kernel (50 to 130 measured).
SPARSE_BYTES_PER_ENTRY = 100
#: Working space of a sparse build drawn in chunks (a Garnet draws 4M random keys at a time, and partitions them: about 100 MB).
SPARSE_WORKING_BYTES = 128 * 2**20

_CGROUP_LIMIT = Path("/sys/fs/cgroup/memory.max")


class TooLargeError(ValueError):
    """A call would need more memory than the machine has; raised before anything is allocated."""


def gib(size: float) -> str:
    """A byte count in GiB: three significant digits, whole GiB from 100 up (``'74.5 GiB'``, ``'1,490 GiB'``)."""
    value = size / 2**30
    return f"{value:,.0f} GiB" if value >= 100 else f"{value:.3g} GiB"


def machine_memory() -> int | None:
    """The machine's physical memory in bytes (or a smaller cgroup limit); ``None`` when unknown.

    Physical memory, not the memory free right now: the answer does not change
    with what other programs are doing, so a refusal is the same on every run.
    """
    return _physical_memory()


@lru_cache(maxsize=1)
def _physical_memory() -> int | None:
    try:
        total = int(os.sysconf("SC_PAGE_SIZE")) * int(os.sysconf("SC_PHYS_PAGES"))
    except (AttributeError, ValueError, OSError):
        total = 0
    try:
        limit_text = _CGROUP_LIMIT.read_text().strip()
    except OSError:
        limit_text = "max"
    if limit_text.isdigit() and 0 < int(limit_text) < (total or int(limit_text) + 1):
        total = int(limit_text)
    return total or None


@dataclass(frozen=True)
class Cost:
    """What building one thing will take: ``bytes`` at the peak, and how that is made up (``detail``)."""

    what: str
    bytes: int
    detail: str

    def describe(self) -> str:
        return f"{self.what} needs about {gib(self.bytes)} ({self.detail})"


def dense_kernel_cost(what: str, states: int, actions: int, extra_bytes: int = 0) -> Cost:
    """The peak memory of building a dense (S, A, S) float64 kernel (``extra_bytes``: anything built beside it)."""
    entries = int(states) * int(actions) * int(states)
    return Cost(what, entries * DENSE_BYTES_PER_ENTRY + int(extra_bytes),
                f"a dense P of shape ({states}, {actions}, {states}), {entries:,} entries, "
                f"about {DENSE_BYTES_PER_ENTRY} bytes each while it is built and validated")


def sparse_kernel_cost(what: str, states: int, actions: int, successors: int, extra_bytes: int = 0) -> Cost:
    """The peak memory of building a sparse (S*A, S) kernel with ``successors`` stored entries per row."""
    stored = int(states) * int(actions) * int(successors)
    return Cost(what, stored * SPARSE_BYTES_PER_ENTRY + SPARSE_WORKING_BYTES + int(extra_bytes),
                f"a sparse P of shape ({int(states) * int(actions)}, {states}) with {stored:,} stored entries, "
                f"about {SPARSE_BYTES_PER_ENTRY} bytes each while it is built and validated")


def require_memory(cost: Cost, advice: str, memory: int | None = None) -> None:
    """Raise :class:`TooLargeError` when ``cost`` exceeds the machine's memory (``memory``, default
    :func:`machine_memory`); nothing happens when the machine's memory is unknown."""
    available = machine_memory() if memory is None else memory
    if available is None or cost.bytes <= available:
        return
    raise TooLargeError(f"{cost.describe()}, more than the {gib(available)} of memory this machine has; {advice}")


# --------------------------------------------------------------------------- sweeps


class _Model(Protocol):
    @property
    def states(self) -> int: ...

    @property
    def actions(self) -> int: ...

    @property
    def is_sparse(self) -> bool: ...

    @property
    def transition_rows(self) -> Any: ...


@dataclass(frozen=True)
class SweepCost:
    """What one check's sweep will take.

    ``calls`` estimator calls and ``samples`` next-state samples in one pass over
    every (gamma, n, replicate); the peak memory of the largest cell, per worker:
    ``support_bytes`` (one block's support counts), ``counts_bytes`` (one
    ``batch.counts`` view), ``next_states_bytes`` (one ``batch.next_states``
    view, built only when an estimator reads it: the sorted and the shuffled
    successors), ``solve_bytes`` (the exact solution of one discount); ``peak_bytes``
    is their sum times ``workers``.
    """

    calls: int
    samples: int
    support_bytes: int
    counts_bytes: int
    next_states_bytes: int
    solve_bytes: int
    workers: int = 1

    @property
    def cell_bytes(self) -> int:
        return self.support_bytes + self.counts_bytes + self.next_states_bytes + self.solve_bytes

    @property
    def peak_bytes(self) -> int:
        return self.cell_bytes * self.workers

    def describe(self) -> str:
        workers = f" x {self.workers} workers" if self.workers > 1 else ""
        return (f"the sweep makes {self.calls:,} estimator calls drawing {self.samples:,} samples, and its largest "
                f"cell needs about {gib(self.cell_bytes)}{workers} (support counts {gib(self.support_bytes)}, "
                f"batch.counts {gib(self.counts_bytes)}, batch.next_states {gib(self.next_states_bytes)}, "
                f"exact solve {gib(self.solve_bytes)})")

    def refuse_beyond(self, memory: int | None = None) -> None:
        """Raise :class:`TooLargeError` naming this estimate when ``peak_bytes`` exceeds the machine's memory."""
        available = machine_memory() if memory is None else memory
        if available is not None and self.peak_bytes > available:
            raise TooLargeError(f"{self.describe()}, more than the {gib(available)} of memory this machine has; "
                                "use a smaller `n_grid`, fewer `replicates`, fewer workers or a smaller MDP")


def _support_width(mdp: _Model) -> int:
    """The most successors any (s, a) row has (the width of the sampler's support counts)."""
    import numpy as np

    rows = mdp.transition_rows
    if mdp.is_sparse:
        return max(1, int(np.diff(rows.indptr).max(initial=0)))
    return max(1, int(np.count_nonzero(rows, axis=1).max(initial=0)))


def sweep_cost(mdp: _Model, n_grid: Sequence[int], replicates: int, gammas: Sequence[float] | int, *,
               workers: int = 1, block_elements: int = 8_000_000, support: int | None = None) -> SweepCost:
    """Estimate a sweep over ``n_grid`` x ``replicates`` x ``gammas`` on ``mdp`` (nothing is drawn).

    ``gammas`` is the discounts or their number; ``block_elements`` is the
    sampler's block limit (:data:`rlrates.sweep.BLOCK_ELEMENTS`); ``support`` the
    widest row's successor count (found from ``mdp`` when not given). Counts and
    successors are int64; a dense solve holds three (S, S) float64 arrays, a sparse
    one about three copies of the (S*A, S) rows.
    """
    S, A = int(mdp.states), int(mdp.actions)
    width = _support_width(mdp) if support is None else int(support)
    discounts = gammas if isinstance(gammas, int) else len(gammas)
    grid = [int(n) for n in n_grid]
    replicates = int(replicates)
    dense_elements = S * A * S
    # a block holds (replicates, S, A, S) counts; a sparse MDP's stay on the support, (replicates, S*A, k)
    block = max(1, min(replicates, block_elements // max(1, S * A * width if mdp.is_sparse else dense_elements)))
    if mdp.is_sparse:
        counts = 12 * S * A * width  # CSR data, int32-or-int64 indices
        solve = 3 * 12 * S * A * width
    else:
        counts = 8 * dense_elements
        solve = 3 * 8 * S * S
    return SweepCost(
        calls=discounts * len(grid) * replicates,
        samples=discounts * replicates * S * A * sum(grid),
        support_bytes=8 * block * S * A * width,
        counts_bytes=counts,
        next_states_bytes=16 * S * A * max(grid, default=0),
        solve_bytes=solve,
        workers=max(1, int(workers)),
    )


def require_sweep_memory(mdp: _Model, n_grid: Sequence[int], replicates: int, gammas: Sequence[float] | int,
                         workers: int = 1) -> str:
    """Refuse (:class:`TooLargeError`) a sweep whose counts cannot fit in memory; return a warning text ("" if none)
    when only an estimator reading ``batch.next_states`` (built on demand) would not fit."""
    cost = sweep_cost(mdp, n_grid, replicates, gammas, workers=workers)
    replace(cost, next_states_bytes=0).refuse_beyond()
    memory = machine_memory()
    if memory is not None and cost.peak_bytes > memory:
        return (f"{cost.describe()}: an estimator that reads batch.next_states would need more than the "
                f"{gib(memory)} of this machine (batch.counts alone fits)")
    return ""
