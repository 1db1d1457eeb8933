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


def _words(value: int) -> list[int]:
    """A non-negative int as numpy's SeedSequence reads one: its 32-bit words, least significant first ([0] for 0)."""
    words = [value & 0xFFFFFFFF]
    value >>= 32
    while value:
        words.append(value & 0xFFFFFFFF)
        value >>= 32
    return words


def _assembled(entropy: object, key: tuple[int, ...], pool_size: int) -> list[int] | None:
    """The entropy words SeedSequence(entropy, spawn_key=key) mixes, or None unless entropy and key are non-negative ints."""
    if not key or type(entropy) is not int or entropy < 0:
        return None
    words = _words(entropy)
    words.extend([0] * (pool_size - len(words)))
    for part in key:
        if type(part) is not int or part < 0:
            return None
        if part <= 0xFFFFFFFF:
            words.append(part)
        else:
            words.extend(_words(part))
    return words


class StreamKey(NamedTuple):
    """A :class:`numpy.random.SeedSequence` by its entropy and spawn key, not built yet.

    A block draws from its seed's children only; building the seed itself as well
    would cost one more SeedSequence per block. ``child(*path)`` is the
    SeedSequence at ``(*spawn_key, *path)``, as ``seed.spawn`` would make it but
    without advancing any spawn counter; ``sequence()`` is the seed itself.

    A child is built from its assembled entropy: the entropy's 32-bit words, zeros
    up to the pool size, then the words of the spawn key, which is how SeedSequence
    assembles (entropy, spawn_key) before mixing (the same pool, the same stream:
    tests/numerics/test_properties.py compares them). Given as one uint32 array it
    costs about a third of the construction from Python ints, whose words numpy
    converts one int at a time.
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
        key = (*self.spawn_key, *path)
        words = _assembled(self.entropy, key, self.pool_size)
        if words is None:  # not plain non-negative ints: the usual construction (it also says what is wrong)
            return np.random.SeedSequence(self.entropy, spawn_key=key, pool_size=self.pool_size)
        if self.pool_size == 4:  # numpy's default pool size: passing it costs a fifth of the construction
            return np.random.SeedSequence(np.array(words, dtype=np.uint32))
        return np.random.SeedSequence(np.array(words, dtype=np.uint32), pool_size=self.pool_size)

    def sequence(self) -> np.random.SeedSequence:
        """The seed itself, built with its spawn key (logged draws read it as a SeedSequence)."""
        return np.random.SeedSequence(self.entropy, spawn_key=self.spawn_key, pool_size=self.pool_size)


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
