"""``rlrates.check``: sweep an estimator, fit its exponents, and decide a claim, escalating when unsure.

Passes: the profile's grid first; if the verdict is ambiguous, more replicates
for every cell (once), then one doubling of the largest n per pass, up to the
profile's budget. Only then is the answer "inconclusive". Every cell's stream is
rebuilt from (master seed, context, MDP fingerprint, gamma, n, replicate), so
escalation reuses what was computed and the result does not depend on the
executor or on the order of work.
"""

from __future__ import annotations

import pickle
import time
import warnings
from collections.abc import Callable
from concurrent.futures import Executor, ThreadPoolExecutor
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from .claims import Claim
from .fitting import summarise_cells
from .mdp import TabularMDP
from .messages import format_message
from .profiles import Profile, resolve_profile
from .sampling import SupportKernel, mdp_kernel
from .sweep import CellFailure, CellTask, run_sweep
from .targets import Truth, solve_truth, validate_norm, validate_target
from .verdict import FITS_COLUMNS, Decision, decide

__all__ = ["check", "CheckResult", "CheckInterrupted", "RatesWarning", "STATUSES"]

STATUSES = ("pass", "fail", "inconclusive", "error")

#: Largest number of counts drawn in one block (8M int64 = 64 MB); larger cells are split.
BLOCK_ELEMENTS = 8_000_000

MDPSource = TabularMDP | Callable[[float], TabularMDP]


class CheckInterrupted(KeyboardInterrupt):
    """A KeyboardInterrupt during a sweep, carrying the partial result (status "error").

    Catching it as a KeyboardInterrupt behaves as usual; callers that want the rows
    computed so far (the pytest layer writes them to the report) read ``.result``.
    """

    def __init__(self, result: "CheckResult") -> None:
        super().__init__(result.failure.describe() if result.failure else "interrupted")
        self.result = result


class RatesWarning(UserWarning):
    """A check's design is weaker than it looks (for example a grid that starts pre-asymptotic)."""


@dataclass
class CheckResult:
    """Everything a check found. ``message`` explains it in plain words."""

    status: str
    claim: Claim
    target: str
    profile: Profile
    seed: int
    mdp_name: str
    fits: pd.DataFrame
    table: pd.DataFrame
    summary: pd.DataFrame = field(default_factory=pd.DataFrame)
    slopes: pd.DataFrame = field(default_factory=pd.DataFrame)
    fired: list[str] = field(default_factory=list)
    reasons: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    failure: CellFailure | None = None
    passes: int = 0
    elapsed: float = 0.0
    estimator_seconds: float = 0.0
    norm: str = "sup"
    reproducer: str = ""
    mdp_metadata: dict[str, Any] = field(default_factory=dict)
    fingerprints: dict[float, str] = field(default_factory=dict)
    context: str = ""
    blocks: pd.DataFrame = field(default_factory=lambda: pd.DataFrame(columns=["gamma", "n", "start", "stop"]))
    scales: dict[float, float] = field(default_factory=dict)  # error scale per gamma (saturation reference)

    @property
    def passed(self) -> bool:
        return self.status == "pass"

    @property
    def message(self) -> str:
        return format_message(self)

    def __repr__(self) -> str:
        return f"CheckResult(status={self.status!r}, target={self.target!r}, mdp={self.mdp_name!r}, fired={self.fired})"


def _validate_seed(seed: object) -> int:
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or int(seed) < 0:
        raise ValueError(f"`seed` must be a non-negative integer, got {seed!r}")
    return int(seed)


def _require_picklable(estimator: Callable[[Any, Any], Any], executor: Executor) -> None:
    """A process or cluster executor pickles the estimator with every cell: check that up front."""
    try:
        pickle.dumps(estimator)
    except Exception as exc:  # PicklingError, AttributeError ("local object"), TypeError, ...
        est_name = getattr(estimator, "__qualname__", None) or type(estimator).__name__
        raise TypeError(
            f"`estimator` {est_name} cannot be pickled, so it cannot be sent to the "
            f"{type(executor).__name__} (a process or cluster executor runs it in other processes): "
            f"{type(exc).__name__}: {exc}. Define the estimator as a module-level function (not a lambda, "
            "a closure or a function defined inside a test), or pass a "
            "concurrent.futures.ThreadPoolExecutor, or no executor"
        ) from exc


_FAMILY_CALLS = {
    "garnet": ("garnet", ("states", "actions", "branching", "seed")),
    "chain": ("chain", ("states", "slip", "seed")),
    "ring": ("ring", ("states", "slip", "seed")),
    "deterministic": ("deterministic", ("states", "actions", "seed")),
    "horizon_hard": ("horizon_hard", ("actions",)),
}


def _mdp_call(name: str, metadata: dict[str, Any]) -> str:
    """Python that rebuilds a family member from its metadata, or the MDP's name otherwise."""
    known = _FAMILY_CALLS.get(str(metadata.get("family")))
    if known is None or any(key not in metadata for key in known[1]):
        return name
    function, keys = known
    return f"rlrates.{function}(" + ", ".join(f"{key}={metadata[key]!r}" for key in keys) + ")"


def _mdp_for(mdp: MDPSource, gamma: float) -> TabularMDP:
    if isinstance(mdp, TabularMDP):
        return mdp
    built = mdp(gamma)
    if not isinstance(built, TabularMDP):
        raise TypeError(f"the MDP family returned {type(built).__name__} for gamma={gamma:g}, not a TabularMDP")
    return built


def _describe_source(mdp: MDPSource) -> tuple[str, dict[str, Any]]:
    if isinstance(mdp, TabularMDP):
        return mdp.name, mdp.metadata
    if callable(mdp):
        name = getattr(mdp, "name", None) or getattr(mdp, "__name__", type(mdp).__name__)
        return str(name), dict(getattr(mdp, "metadata", {}) or {})
    raise TypeError(f"`mdp` must be a TabularMDP or a callable gamma -> TabularMDP, got {type(mdp).__name__}")


def check(
    estimator: Callable[[Any, Any], Any],
    mdp: MDPSource,
    claim: Claim,
    target: str = "q_pi",
    policy: Any = None,
    profile: str | Profile = "quick",
    seed: int = 0,
    executor: Executor | None = None,
    *,
    norm: str = "sup",
    n_grid: tuple[int, ...] | None = None,
    gammas: tuple[float, ...] | None = None,
    replicates: int | None = None,
    context: str = "",
    reproducer: str | None = None,
    time_limit: float | None = None,
) -> CheckResult:
    """Check that ``estimator``'s error on ``mdp`` falls and grows as ``claim`` says.

    See ``DESIGN.md`` for the estimator protocol. ``context`` is mixed into every
    stream's spawn key (the pytest layer passes the test id); ``reproducer``
    replaces the Python call shown at the end of the message. ``time_limit``
    (seconds) turns any slower estimator call into an "error" result.
    """
    if not callable(estimator):
        raise TypeError(f"`estimator` must be callable as estimator(batch, problem), got {type(estimator).__name__}")
    if executor is not None and not isinstance(executor, ThreadPoolExecutor):
        _require_picklable(estimator, executor)
    if not isinstance(claim, Claim):
        raise TypeError(f"`claim` must be an rlrates.Claim, got {type(claim).__name__}")
    target = validate_target(target)
    norm = validate_norm(norm)
    seed = _validate_seed(seed)
    if time_limit is not None and (isinstance(time_limit, bool) or not isinstance(time_limit, (int, float)) or not time_limit > 0):
        raise ValueError(f"`time_limit` must be a positive number of seconds, got {time_limit!r}")
    design = resolve_profile(profile, n_grid=n_grid, gammas=gammas, replicates=replicates)
    name, metadata = _describe_source(mdp)
    if claim.horizon is not None and len(design.gammas) < 2:
        raise ValueError("a `horizon` claim needs at least two discounts in `gammas` to fit an H-exponent")
    if target == "model" and claim.horizon is not None:
        warnings.warn("a model's L1 error does not depend on the discount; the horizon claim is tested anyway",
                      RatesWarning, stacklevel=2)
    started = time.perf_counter()
    truths: dict[float, Truth] = {}
    for gamma in design.gammas:
        truths[gamma] = solve_truth(_mdp_for(mdp, gamma), gamma, target, policy)
    first_n = design.n_grid[0]
    early = [g for g in design.gammas if first_n < design.min_n_per_horizon / (1.0 - g)]
    if n_grid is not None and early:
        warnings.warn(
            f"n_grid starts at n={first_n}, below {design.min_n_per_horizon:g} H for gamma in "
            f"{', '.join(f'{g:g}' for g in early)}; those cells are pre-asymptotic and left out of the fits",
            RatesWarning, stacklevel=2,
        )
    resolution = design.policy_resolution if target == "policy" else 1e-9
    zero_tolerance = {g: resolution * max(1.0, t.scale) for g, t in truths.items()}
    scale = {g: t.scale for g, t in truths.items()}
    kernels: dict[float, SupportKernel] = {}
    by_fingerprint: dict[str, SupportKernel] = {}  # one MDP serves every gamma unless it is a family
    for g, t in truths.items():
        if t.mdp.fingerprint not in by_fingerprint:
            by_fingerprint[t.mdp.fingerprint] = mdp_kernel(t.mdp)
        kernels[g] = by_fingerprint[t.mdp.fingerprint]

    def tasks(n_values: list[int], start: int, stop: int) -> list[CellTask]:
        tasks_out = []
        for g in design.gammas:
            mdp_g = truths[g].mdp
            # A block's counts are (replicates, S, A, S) int64: split large MDPs' blocks so that
            # one block stays under BLOCK_ELEMENTS (the split is part of the design, so it is
            # the same for every executor and recorded in `blocks`).
            size = max(1, BLOCK_ELEMENTS // (mdp_g.states * mdp_g.actions * mdp_g.states))
            for n in n_values:
                for low in range(start, stop, size):
                    tasks_out.append(CellTask(estimator, truths[g], n, low, min(low + size, stop), seed,
                                              f"{context}|{mdp_g.fingerprint}", norm, kernels[g], time_limit))
        return tasks_out

    n_values = list(design.n_grid)
    reps = design.replicates
    pending = tasks(n_values, 0, reps)
    replicates_added = design.more_replicates <= 1
    doublings_left = design.n_doublings
    tables: list[pd.DataFrame] = []
    decision = Decision(status="ambiguous")
    failure: CellFailure | None = None
    summary = pd.DataFrame()
    passes = 0
    blocks: list[tuple[float, int, int, int]] = []
    while True:
        passes += 1
        blocks.extend((t.truth.gamma, t.n, t.start, t.stop) for t in pending)
        part, failure = run_sweep(pending, executor)
        tables.append(part)
        table = pd.concat(tables, ignore_index=True)
        if failure is not None:
            break
        summary = summarise_cells(table, zero_tolerance)
        decision = decide(summary, claim, design, scale, window=len(design.n_grid))
        if decision.status != "ambiguous":
            break
        # Escalate: more replicates first when the intervals are too wide, larger n first when
        # the curve is not yet asymptotic; either one when the other is spent.
        more_n = doublings_left > 0 and (decision.need == "larger_n" or replicates_added)
        if more_n:
            n_values.append(max(n_values) * 2)
            pending = tasks(n_values[-1:], 0, reps)
            doublings_left -= 1
        elif not replicates_added:
            pending = tasks(n_values, reps, reps * design.more_replicates)
            reps *= design.more_replicates
            replicates_added = True
        else:
            break
    table = table.sort_values(["gamma", "n", "replicate"], ignore_index=True)
    if failure is not None:
        status = "error"
        fits = pd.DataFrame(columns=FITS_COLUMNS)
    else:
        status = {"ambiguous": "inconclusive"}.get(decision.status, decision.status)
        fits = decision.fits
    if reproducer is None:
        est_name = getattr(estimator, "__qualname__", None) or type(estimator).__name__
        extras = {"norm": norm if norm != "sup" else None, "n_grid": n_grid, "gammas": gammas,
                  "replicates": replicates, "context": context or None, "time_limit": time_limit}
        reproducer = (
            f"rlrates.check({est_name}, {_mdp_call(name, metadata)}, {claim.as_call()}, target={target!r}, "
            + ("policy=<the policy given>, " if policy is not None else "")
            + f"profile={design.name!r}, seed={seed}"
            + "".join(f", {key}={value!r}" for key, value in extras.items() if value is not None)
            + ")"
        )
    notes = list(decision.notes)
    if status == "inconclusive":
        notes.append(
            f"budget spent after {passes} pass(es): {reps} replicates per cell, n up to {max(n_values)}; "
            "a larger budget (profile 'full', or more replicates / a longer n_grid) may settle it"
        )
    result = CheckResult(
        status=status,
        claim=claim,
        target=target,
        profile=design,
        seed=seed,
        mdp_name=name,
        fits=fits,
        table=table,
        summary=summary,
        slopes=decision.slopes,
        fired=list(decision.fired),
        reasons=list(decision.reasons),
        notes=notes,
        failure=failure,
        passes=passes,
        elapsed=time.perf_counter() - started,
        estimator_seconds=float(table["seconds"].sum()) if len(table) else 0.0,
        norm=norm,
        reproducer=reproducer,
        mdp_metadata=metadata,
        fingerprints={g: t.mdp.fingerprint for g, t in truths.items()},
        context=context,
        blocks=pd.DataFrame(blocks, columns=["gamma", "n", "start", "stop"]),
        scales=scale,
    )
    if failure is not None and failure.kind == "interrupted":
        raise CheckInterrupted(result)
    return result
