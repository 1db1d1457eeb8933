"""Probes of the estimator and the MDP: is the estimator a function of its batch, can the MDP test a rate at all?

:func:`determinism_probe` and :func:`deterministic_mdp` run before the sweep;
:func:`constant_replicates` looks at each pass's cell summary.

The first two return a sentence for a warning and the check's notes, or ``None``.
Pure functions of their arguments; no pytest, no warnings emitted here (the
check turns the sentences into :class:`rlrates.RatesWarning`).
"""

from __future__ import annotations

from collections.abc import Mapping
from concurrent.futures import Executor, ThreadPoolExecutor
from typing import Any

import numpy as np

from .columns import Columns
from .mdp import TabularMDP
from .result import CellFailure
from .logged import LoggedKernel, draw_logged_block
from .sampling import SupportKernel, cached_kernel, draw_block
from .streams import StreamKey
from .targets import Truth

__all__ = ["determinism_probe", "deterministic_mdp", "run_probes", "constant_replicates"]

#: Spawn-key word of the probe's own stream (kept apart from every sweep stream).
_PROBE_KEY = 0x70726F62


def _as_array(value: Any) -> np.ndarray | None:
    try:
        if isinstance(value, np.ma.MaskedArray):  # masked entries compare as NaN (the sweep refuses them)
            return np.ma.filled(value.astype(float), np.nan)
        return np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        return None


def determinism_probe(estimator: Any, truth: Truth, kernel: SupportKernel | LoggedKernel | None, n: int,
                      seed: int) -> str | None:
    """Call ``estimator`` twice on one batch; a sentence when the two estimates differ.

    ``kernel=None`` stands for the generative kernel of ``truth.mdp`` (built here).

    The batch comes from a stream of its own, so the probe changes no number of
    the sweep. An estimator that raises here is left to the sweep, which reports
    the failure with its cell.
    """
    if kernel is None:
        kernel = cached_kernel(truth.mdp)
    stream = StreamKey(int(seed), (_PROBE_KEY,))  # SeedSequence(seed, spawn_key=(_PROBE_KEY,)), built only as needed
    batch: Any = (draw_logged_block(kernel, n, 1, stream.sequence()) if isinstance(kernel, LoggedKernel)
                  else draw_block(kernel, n, 1, stream))[0]
    problem = truth.problem()
    try:
        first = _as_array(estimator(batch, problem))
        second = _as_array(estimator(batch, problem))
    except (Exception, SystemExit, GeneratorExit):  # the sweep reports the estimator's own failure, naming its cell
        return None
    if first is None or second is None or first.shape != second.shape:
        return None
    if np.array_equal(first, second, equal_nan=True):
        return None
    gap = float(np.nanmax(np.abs(first - second))) if first.size else 0.0
    return (
        f"the estimator is not a function of its batch: two calls on one batch (gamma={truth.gamma:g}, n={n}) "
        f"returned estimates that differ by up to {gap:.3g}. It reads global random state or a hidden cache, so "
        "reruns with the same seed will not reproduce its table; draw randomness from a generator seeded by the "
        "batch"
    )


def deterministic_mdp(mdp: TabularMDP) -> str | None:
    """A sentence when every transition is deterministic: any count-reading estimator is then exact."""
    P = mdp.P
    largest = P.max(axis=-1)
    largest = np.asarray(largest.todense() if hasattr(largest, "todense") else largest, dtype=float)
    if not bool(np.all(largest >= 1.0 - 1e-12)):
        return None
    return (
        f"{mdp.name} is deterministic (every state-action pair has one successor): an estimator that reads the "
        "counts sees the exact model at every n, so the rate is untested here; use a stochastic MDP "
        "(for example one with slip) to test it"
    )


def run_probes(estimator: Any, target: str, truths: Mapping[Any, Truth], kernels: Mapping[Any, Any],
               n: int, seed: int, executor: Executor | None) -> list[str]:
    """The sentences of the pre-sweep probes: a deterministic MDP, an estimator that is not a function of its batch.

    ``truths`` and ``kernels`` share their keys (discounts, or (discount, behaviour)
    for logged data); the probe uses the first. With a process or cluster executor
    the determinism probe runs there, so an
    estimator that kills its process takes down a worker (which the sweep then
    reports by cell), never the session.
    """
    notes: list[str] = []
    if target != "model":
        # one MDP serves every discount (a family's may differ): each distinct one is probed once
        distinct = {(truth.mdp.fingerprint, truth.mdp.name): truth.mdp for truth in truths.values()}
        deterministic = {deterministic_mdp(mdp) for mdp in distinct.values()} - {None}
        notes.extend(sorted(text for text in deterministic if text))
    gamma = min(truths)
    args = (estimator, truths[gamma], kernels[gamma], n, seed)
    if executor is None or isinstance(executor, ThreadPoolExecutor):
        drift = determinism_probe(*args)
    else:
        # a generative kernel is a function of the MDP (several times P's size): the worker rebuilds it
        sent = (estimator, truths[gamma], None if isinstance(kernels[gamma], SupportKernel) else kernels[gamma], n, seed)
        try:
            drift = executor.submit(determinism_probe, *sent).result()
        except KeyboardInterrupt:
            raise
        except BaseException:  # a worker lost to the probe: the sweep reports the estimator's failure by cell
            drift = None
    if drift:
        notes.append(drift)
    return notes


def constant_replicates(summary: Columns, table: Columns, target: str) -> CellFailure | None:
    """An "error" when every replicate of a cell gave the same error while the mean changes with n.

    Such an estimator does not depend on its batch (a cache keyed on n, a result
    that ignores the data); its intervals would collapse to zero width. Policies
    are discrete, so identical suboptimalities are expected there and not checked.
    """
    if target == "policy" or not summary["constant"].any():
        return None
    for gamma in np.unique(summary["gamma"]).tolist():
        cells = summary[summary["gamma"] == gamma]
        constant = cells[cells["constant"]]
        means = np.asarray(cells["mean"], dtype=float)
        if len(constant) and len(cells) > 1 and means.max() > means.min() * (1 + 1e-9):
            first = constant.row(0)
            n = int(first["n"])
            replicate = int(table["replicate"][(table["gamma"] == gamma) & (table["n"] == n)].min())
            return CellFailure(float(gamma), n, replicate, "invalid", (
                f"every one of the {int(first['replicates'])} replicates at gamma={gamma:g}, n={n} gave the "
                f"same error {float(first['mean']):.6g}, while the mean error changes with n: the estimator does not "
                "depend on its batch (a cache keyed on n, or a result that ignores the data), so the replicates carry "
                "no evidence"
            ), "")
    return None
