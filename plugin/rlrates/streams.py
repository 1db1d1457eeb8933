"""Stream seeds: every batch of a sweep is rebuilt from an integer entropy and a spawn key.

A :class:`numpy.random.SeedSequence` is given by the master seed and a spawn key
of stable identifiers (a hash of the check's context and the MDP's fingerprint,
the discount, n and the replicates), so any cell of a sweep can be re-drawn
alone, in any process, in any order (:func:`block_key`, :func:`cell_seed`).
"""

from __future__ import annotations

import hashlib
from collections.abc import Sequence
from functools import lru_cache
from typing import NamedTuple

import numpy as np

__all__ = ["stable_words", "stream_context", "gamma_key", "StreamKey", "block_key", "block_seed", "cell_seed"]


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


class StreamKey(NamedTuple):
    """A :class:`numpy.random.SeedSequence` by its entropy and spawn key, not built yet.

    A block draws from its seed's children only; building the seed itself as well
    would cost one more SeedSequence (about 25 us) per block. ``child(*path)`` is the
    SeedSequence at ``(*spawn_key, *path)``, as ``seed.spawn`` would make it but
    without advancing any spawn counter; ``sequence()`` is the seed itself.
    """

    entropy: int | Sequence[int]
    spawn_key: tuple[int, ...]
    pool_size: int = 4

    @classmethod
    def of(cls, seq: np.random.SeedSequence) -> "StreamKey":
        entropy = seq.entropy
        assert entropy is not None  # a SeedSequence made without entropy draws it from the OS at once
        return cls(entropy, tuple(seq.spawn_key), seq.pool_size)

    def child(self, *path: int) -> np.random.SeedSequence:
        if self.pool_size == 4:  # numpy's default pool size: passing it costs a fifth of the construction
            return np.random.SeedSequence(self.entropy, spawn_key=(*self.spawn_key, *path))
        return np.random.SeedSequence(self.entropy, spawn_key=(*self.spawn_key, *path), pool_size=self.pool_size)

    def sequence(self) -> np.random.SeedSequence:
        return self.child()


def block_key(master_seed: int, context: str, gamma: float, n: int, start: int, stop: int) -> StreamKey:
    """The seed of replicates ``start .. stop - 1`` of one sweep cell, drawn together, as a :class:`StreamKey`.

    Key: (hash of ``context``, gamma, n, start, stop). A replicate is rebuilt from
    its block's seed and its position in the block (see :func:`rlrates.sampling.draw_block`).
    """
    return StreamKey(int(master_seed), (*stable_words(context), gamma_key(gamma), int(n), int(start), int(stop)))


def block_seed(master_seed: int, context: str, gamma: float, n: int, start: int, stop: int) -> np.random.SeedSequence:
    """The seed of :func:`block_key` as a ready :class:`numpy.random.SeedSequence`."""
    return block_key(master_seed, context, gamma, n, start, stop).sequence()


def cell_seed(master_seed: int, context: str, gamma: float, n: int, replicate: int) -> np.random.SeedSequence:
    """The seed of one sweep cell: ``SeedSequence(master_seed, spawn_key=(...))``.

    The key is built from stable identifiers only: a hash of ``context`` (for
    example a test id and an MDP fingerprint), the discount, n and the replicate.
    """
    key = (*stable_words(context), gamma_key(gamma), int(n), int(replicate))
    return np.random.SeedSequence(int(master_seed), spawn_key=key)
