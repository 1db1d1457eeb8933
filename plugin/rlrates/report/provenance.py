"""Provenance: everything needed to trust and redo a check's numbers.

The package versions, platform and git commit of the run (:func:`environment`),
and how every replicate's random stream is built (:func:`streams`): the master
seed, the context, the per-discount spawn-key prefixes and the replicate blocks,
enough to redraw any replicate alone. :func:`json_safe` turns numpy and pandas
values into plain JSON. Pure: no pytest import, no I/O except ``git rev-parse``
(3 s timeout, cached per directory).
"""

from __future__ import annotations

import dataclasses
import importlib.metadata
import math
import os
import platform
import re
import subprocess
import sys
from collections.abc import Mapping
from functools import lru_cache
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from .. import __version__
from ..sampling import gamma_key, stable_words, stream_context

if TYPE_CHECKING:  # pragma: no cover
    from ..result import CheckResult

__all__ = ["json_safe", "frame_records", "package_version", "environment", "git_commit", "streams"]


def json_safe(value: Any) -> Any:
    """A JSON-safe copy: numpy scalars to Python, tuples to lists, non-finite floats to null."""
    if value is None or isinstance(value, bool):
        return value
    if isinstance(value, str):
        return str(value)  # numpy's str_ too
    if isinstance(value, np.bool_):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        number = float(value)
        return number if math.isfinite(number) else None
    if isinstance(value, Mapping):
        return {str(key): json_safe(item) for key, item in value.items()}
    if isinstance(value, (list, tuple, np.ndarray, pd.Series)):
        return [json_safe(item) for item in list(value)]
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return json_safe(dataclasses.asdict(value))
    return repr(value)


def frame_records(frame: pd.DataFrame) -> list[dict[str, Any]]:
    """The rows of ``frame`` as JSON-safe dicts (``[]`` for an empty frame)."""
    return [json_safe(row) for row in frame.to_dict("records")] if len(frame) else []


def package_version(distribution: str) -> str | None:
    """The installed version of ``distribution``, or ``None`` when it is not installed."""
    try:
        return importlib.metadata.version(distribution)
    except importlib.metadata.PackageNotFoundError:
        return None


@lru_cache(maxsize=8)
def git_commit(cwd: str) -> str | None:
    """``git rev-parse HEAD`` in ``cwd``; ``None`` outside a repository, without git, or after 3 s."""
    try:
        done = subprocess.run(["git", "rev-parse", "HEAD"], cwd=cwd, capture_output=True, text=True, timeout=3, check=False)
    except (OSError, subprocess.SubprocessError):
        return None
    commit = done.stdout.strip()
    return commit if done.returncode == 0 and re.fullmatch(r"[0-9a-f]{40}|[0-9a-f]{64}", commit) else None


def environment() -> dict[str, Any]:
    """Package versions, platform, Python and the git commit of the working directory."""
    return {
        "versions": {
            "rlrates": __version__,
            "python": platform.python_version(),
            **{name: package_version(name) for name in ("numpy", "scipy", "pandas", "pytest", "matplotlib")},
        },
        "platform": platform.platform(),
        "python": sys.version,
        "implementation": platform.python_implementation(),
        "machine": platform.machine(),
        "git_commit": git_commit(os.getcwd()),
    }


def streams(result: "CheckResult") -> dict[str, Any]:
    """How every replicate's stream is built, with the per-discount keys and the blocks drawn together."""
    base = result.run.context
    per_gamma = []
    for gamma, fingerprint in sorted(result.mdp.fingerprints.items()):
        full = stream_context(base, fingerprint)
        per_gamma.append({
            "gamma": float(gamma),
            "fingerprint": fingerprint,
            "context": full,
            "spawn_key_prefix": [*stable_words(full), gamma_key(gamma)],
        })
    return {
        "master_seed": int(result.seed),
        "context": base,
        "block_seed": "numpy.random.SeedSequence(master_seed, spawn_key=spawn_key_prefix + [n, start, stop])",
        "spawn_key_prefix": "[*stable_words(context + '|' + fingerprint), gamma_key(gamma)]",
        "stable_words": "two little-endian 32-bit words of blake2b(utf-8 text, digest_size=8)",
        "gamma_key": "round(gamma * 1e9)",
        "replicate": (
            "replicates start .. stop - 1 of a cell are drawn together: rlrates.sampling.draw_block(kernel, n, "
            "stop - start, block_seed); replicate r is batch r - start (counts from the block seed's child 0, "
            "the order of next_states from its child 1 + r - start)"
        ),
        "blocks": [json_safe(block) for block in result.run.blocks],
        "per_gamma": per_gamma,
    }
