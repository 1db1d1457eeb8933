"""Provenance: the content of a check's ``check.json``, everything needed to trust and redo its numbers.

Top-level keys (schema ``rlrates-check/1``)::

    schema        "rlrates-check/1"
    test_id       the pytest node id (or any id the caller gives)
    status        "pass" | "fail" | "inconclusive" | "error"
    fired         sub-tests that fired: "rate", "floor", "horizon"
    reasons       why the verdict, one sentence per item
    notes         remarks (pre-asymptotic cells left out, where the H-exponent was fitted, ...)
    claim         {n, horizon, text}: the claimed exponents (null when not claimed)
    target, norm  what was estimated and how its error was measured
    fits          [{factor, exponent, low, high, claimed, verdict}], one per claimed factor
    bounds        what low and high mean (one-sided bounds at the profile's levels)
    slopes        the check's per-discount n-slopes (records of CheckResult.slopes)
    profile       every field of the Profile (dataclasses.asdict)
    seed          the master seed
    streams       how every replicate's random stream is built: context, key layout,
                  per-discount spawn-key prefixes, replicate blocks
    mdp           {name, metadata, fingerprints {repr(gamma): hex}}
    run           {started, finished (UTC ISO 8601), elapsed_seconds, estimator_seconds,
                  passes, estimator_calls}
    environment   {versions {rlrates, python, numpy, scipy, pandas, pytest, matplotlib},
                  platform, python, implementation, machine, git_commit}
    failure       null, or {gamma, n, replicate, kind, message, traceback, description}
    reproducer    the call that reproduces the check
    message       the check's full explanation
    data          {errors: "errors.csv", rows, columns, sha256 of the CSV text}
    extra         whatever the caller adds (for example the pytest-xdist worker)

Pure: no pytest import, no I/O except ``git rev-parse`` (3 s timeout, cached per directory).
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
from datetime import datetime, timedelta, timezone
from functools import lru_cache
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from . import __version__
from .sampling import gamma_key, stable_words

if TYPE_CHECKING:  # pragma: no cover
    from .rate_check import CheckResult

__all__ = ["SCHEMA", "ERRORS_FILE", "ERROR_COLUMNS", "FIT_KEYS", "check_record", "environment", "git_commit", "json_safe"]

#: Version tag of ``check.json``; readers refuse other versions.
SCHEMA = "rlrates-check/1"
ERRORS_FILE = "errors.csv"
ERROR_COLUMNS = ("gamma", "H", "n", "replicate", "error", "seconds")
FIT_KEYS = ("factor", "exponent", "low", "high", "claimed", "verdict")


def json_safe(value: Any) -> Any:
    """A JSON-safe copy: numpy scalars to Python, tuples to lists, non-finite floats to null."""
    if value is None or isinstance(value, (str, bool)):
        return value
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


def _records(frame: pd.DataFrame) -> list[dict[str, Any]]:
    return [json_safe(row) for row in frame.to_dict("records")] if len(frame) else []


def _version(distribution: str) -> str | None:
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
            **{name: _version(name) for name in ("numpy", "scipy", "pandas", "pytest", "matplotlib")},
        },
        "platform": platform.platform(),
        "python": sys.version,
        "implementation": platform.python_implementation(),
        "machine": platform.machine(),
        "git_commit": git_commit(os.getcwd()),
    }


def _blocks(result: "CheckResult") -> list[dict[str, Any]]:
    """The replicate blocks (gamma, n, start, stop) that were drawn together, in run order."""
    return _records(result.blocks.loc[:, ["gamma", "n", "start", "stop"]])


def _streams(result: "CheckResult", test_id: str) -> dict[str, Any]:
    base = result.context
    per_gamma = []
    for gamma, fingerprint in sorted(result.fingerprints.items()):
        full = f"{base}|{fingerprint}"
        per_gamma.append({
            "gamma": float(gamma),
            "fingerprint": fingerprint,
            "context": full,
            "spawn_key_prefix": [*stable_words(full), gamma_key(gamma)],
        })
    blocks = _blocks(result)
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
        "blocks": blocks,
        "per_gamma": per_gamma,
    }


def _failure(result: "CheckResult") -> dict[str, Any] | None:
    failure = result.failure
    if failure is None:
        return None
    return {
        "gamma": float(failure.gamma), "n": int(failure.n), "replicate": int(failure.replicate),
        "kind": failure.kind, "message": failure.message, "traceback": failure.traceback,
        "description": failure.describe(),
    }


def check_record(result: "CheckResult", test_id: str, errors_sha256: str, rows: int,
                 extra: Mapping[str, Any] | None = None) -> dict[str, Any]:
    """The content of ``check.json`` for one check (see the module docstring for the keys)."""
    finished = datetime.now(timezone.utc)
    started = finished - timedelta(seconds=float(result.elapsed))
    return {
        "schema": SCHEMA,
        "test_id": test_id,
        "status": result.status,
        "fired": list(result.fired),
        "reasons": list(result.reasons),
        "notes": list(result.notes),
        "claim": {"n": result.claim.n, "horizon": result.claim.horizon, "text": result.claim.describe()},
        "target": result.target,
        "norm": result.norm,
        "fits": _records(result.fits.loc[:, list(FIT_KEYS)]) if len(result.fits) else [],
        "bounds": {
            "low": "fire-side one-sided bound at level 1 - alpha / (number of sub-tests)",
            "high": "pass-side one-sided bound at level 1 - profile.pass_alpha",
        },
        "slopes": _records(result.slopes),
        "profile": json_safe(dataclasses.asdict(result.profile)),
        "seed": int(result.seed),
        "streams": _streams(result, test_id),
        "mdp": {
            "name": result.mdp_name,
            "metadata": json_safe(result.mdp_metadata),
            "fingerprints": {repr(float(g)): f for g, f in sorted(result.fingerprints.items())},
        },
        "run": {
            "started": started.isoformat(timespec="microseconds"),
            "finished": finished.isoformat(timespec="microseconds"),
            "elapsed_seconds": float(result.elapsed),
            "estimator_seconds": float(result.estimator_seconds),
            "passes": int(result.passes),
            "estimator_calls": rows,
        },
        "environment": environment(),
        "failure": _failure(result),
        "reproducer": result.reproducer,
        "message": result.message,
        "data": {"errors": ERRORS_FILE, "rows": rows, "columns": list(ERROR_COLUMNS), "sha256": errors_sha256},
        "extra": json_safe(dict(extra or {})),
    }
