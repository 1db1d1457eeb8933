"""``rlrates.check``: sweep an estimator, fit its exponents, and decide a claim, escalating when unsure.

The check is a list of named steps: validate the call, solve the exact answer
per discount, plan the cells (:class:`rlrates.sweep.SweepPlan`), run passes
until the verdict is decided or the escalation allowance is spent
(:mod:`rlrates.escalation`), then assemble the frozen result and render its
message once. Every cell's stream is rebuilt from (master seed, context, MDP
fingerprint, gamma, n, replicate block), so escalation reuses what was computed
and the result does not depend on the executor or on the order of work.
"""

from __future__ import annotations

import dataclasses
import numbers
import pickle
import time
import warnings
from collections.abc import Callable
from concurrent.futures import Executor, ThreadPoolExecutor
from dataclasses import dataclass
from typing import Any

from .arguments import check_arguments
from .claims import Claim
from .estimator_origin import estimator_expression, estimator_origin
from .families import rebuild_call
from .mdp import TabularMDP
from .messages import format_message
from .passes import Passes, ground_truth_unchanged, run_passes
from .probes import run_probes
from .budgets import Budget, resolve_budget
from .costs import require_sweep_memory
from .regimes import COVERAGE_LEVELS, logged_n_grid, logged_notes, plan_logged, regime_design, validate_data
from .result import CheckInterrupted, CheckResult, Evidence, MDPDescription, RunInfo
from .sampling import SupportKernel, kernels_by_discount
from .sweep import Estimator, SweepPlan
from .targets import Truth, solve_truth, validate_norm, validate_target
from .vocabulary import Status

__all__ = ["check", "CheckResult", "CheckInterrupted", "RatesWarning"]

MDPSource = TabularMDP | Callable[[float], TabularMDP]


class RatesWarning(UserWarning):
    """A check's design is weaker than it looks (for example a grid that starts pre-asymptotic)."""


def _validate_seed(seed: object) -> int:
    if isinstance(seed, bool) or not isinstance(seed, numbers.Integral) or int(seed) < 0:
        raise ValueError(f"`seed` must be a non-negative integer, got {seed!r}")
    return int(seed)


def _require_picklable(estimator: Estimator, executor: Executor) -> None:
    """A process or cluster executor pickles the estimator with every cell: check that up front."""
    try:
        pickle.dumps(estimator)
    except Exception as exc:  # PicklingError, AttributeError ("local object"), TypeError, ...
        raise TypeError(
            f"`estimator` {_estimator_name(estimator)} cannot be pickled, so it cannot be sent to the "
            f"{type(executor).__name__} (a process or cluster executor runs it in other processes): "
            f"{type(exc).__name__}: {exc}. Define the estimator as a module-level function (not a lambda, "
            "a closure or a function defined inside a test), or pass a "
            "concurrent.futures.ThreadPoolExecutor, or no executor"
        ) from exc


def _estimator_name(estimator: object) -> str:
    return getattr(estimator, "__qualname__", None) or type(estimator).__name__


def _mdp_for(mdp: MDPSource, gamma: float) -> TabularMDP:
    if isinstance(mdp, TabularMDP):
        return mdp
    built = mdp(gamma)
    if not isinstance(built, TabularMDP):
        raise TypeError(f"the MDP family returned {type(built).__name__} for gamma={gamma:g}, not a TabularMDP")
    return built


def _policy_for(policy: Any, mdp: TabularMDP) -> Any:
    """The evaluation policy for one MDP: ``policy(mdp)`` when a callable was given."""
    if policy is None or not callable(policy):
        return policy
    chosen = policy(mdp)
    if chosen is None:
        raise ValueError(f"the `policy` callable returned None for {mdp.name}; return an (S, A) array of action "
                         "probabilities or (S,) actions")
    return chosen


def _describe_source(mdp: MDPSource) -> tuple[str, dict[str, Any]]:
    if isinstance(mdp, TabularMDP):
        return mdp.name, mdp.metadata
    if callable(mdp):
        name = getattr(mdp, "name", None) or getattr(mdp, "__name__", type(mdp).__name__)
        return str(name), dict(getattr(mdp, "metadata", {}) or {})
    raise TypeError(f"`mdp` must be a TabularMDP or a callable gamma -> TabularMDP, got {type(mdp).__name__}")


@dataclass(frozen=True)
class _Call:
    """The validated arguments of one check."""

    estimator: Estimator
    claim: Claim
    target: str
    norm: str
    seed: int
    design: Budget
    time_limit: float | None
    data: str = "generative"


def check(
    estimator: Estimator,
    mdp: MDPSource,
    claim: Claim,
    target: str = "q_pi",
    policy: Any = None,
    budget: str | Budget = "ci",
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
    zero_level: float | None = None,
    label: str | None = None,
    data: str = "generative",
    behaviour: Any = None,
    episode_length: int | None = None,
) -> CheckResult:
    """Check that ``estimator``'s error on ``mdp`` falls and grows as ``claim`` says.

    The estimator runs on generative-model batches (n next states for every
    state-action pair) over a grid of discounts, sample sizes and seeded
    replicates; the n- and H-exponents of its mean error are fitted with
    confidence bounds from the replicates, and the claim is decided. When the
    evidence is ambiguous the check spends more replicates and larger n within
    the budget's escalation allowance before answering "inconclusive".

    Parameters
    ----------
    estimator : callable
        ``estimator(batch, problem)``. ``batch`` is an :class:`rlrates.Batch`
        (``n``, ``counts`` (S, A, S), or a scipy.sparse (S*A, S) array for a
        sparse MDP, ``next_states`` (S, A, n)); ``problem`` an
        :class:`rlrates.Problem` (``states``, ``actions``, ``rewards``,
        ``gamma``, ``policy``, ``target``). It returns an (S, A) float array for
        "q_pi" and "q_star", (S,) actions or (S, A) probabilities for "policy",
        an (S, A, S) kernel for "model".
    mdp : TabularMDP or callable
        The MDP, or a gamma-indexed family ``gamma -> TabularMDP`` (built per discount).
    claim : Claim
        Upper bounds on the exponents of ``error ~ n^a H^b``.
    target : {"q_pi", "q_star", "policy", "model"}, default "q_pi"
        What the estimator estimates.
    policy : array_like or callable, optional
        (S, A) row-stochastic evaluation policy for "q_pi", or a callable
        ``mdp -> policy`` called for each MDP built (default: a random
        stochastic policy seeded by the MDP's fingerprint,
        :func:`rlrates.targets.default_policy`; a uniform one would hide policy bugs).
    budget : str or Budget, default "ci"
        The sweep design and decision levels: "ci" (CI) or "appendix" (appendix).
    seed : int, default 0
        Master seed; every (gamma, n, replicate block) stream derives from it.
    executor : concurrent.futures.Executor, optional
        Runs the cells (a process pool, a dask client's executor); the numbers
        do not depend on it. Process and cluster executors need a picklable estimator.
    norm : {"sup", "mean"}, default "sup"
        Sup-norm or mean absolute error over states and actions.
    n_grid, gammas, replicates : optional
        Override the budget's sample sizes (at least three), discounts in (0, 1)
        and replicates per cell (at least four).
    context : str, default ""
        Mixed into every stream's spawn key (the pytest layer passes the test id).
    reproducer : str, optional
        Replaces the Python call shown at the end of the message.
    time_limit : float, optional
        Seconds; a slower estimator call turns the result into "error".
    zero_level : float, optional
        Absolute error at or below which an error counts as zero (for example the
        stopping tolerance of an iterative solver). By default only floating-point
        zero, relative to the value scale, counts.
    label : str, optional
        A short name for the check in reports (index rows, figure files); the
        pytest layer defaults it to the test function's name.
    data : {"generative", "transitions", "trajectories"}, default "generative"
        Where the samples come from (:mod:`rlrates.regimes`): n next states for
        every pair, or n logged transitions of a behaviour policy, i.i.d. from its
        discounted occupancy or in whole episodes. For logged data n counts
        transitions in all (the default grid is the budget's times S A), the
        targets are "q_pi" and "value", and ``batch`` is an
        :class:`rlrates.logged.LoggedBatch`.
    behaviour : array_like or callable, optional
        Logged data: the (S, A) behaviour policy (or ``mdp -> policy``); default a
        seeded random stochastic one (:func:`rlrates.occupancy.default_behaviour`).
    episode_length : int, optional
        Trajectories: steps per episode (default the smallest power of two at least 2 H).

    Returns
    -------
    CheckResult
        ``status`` ("pass", "fail", "inconclusive" or "error"), ``factors`` (one
        :class:`rlrates.result.Fit` per claimed factor; ``fits`` is the same as a
        DataFrame), ``table`` (one row per (gamma, n, replicate)), ``message``.
        An estimator that raises or returns something invalid gives status
        "error" naming the cell, with the rows finished before it.

    Raises
    ------
    TypeError, ValueError
        For arguments that cannot describe a check, naming the argument.
    CheckInterrupted
        On Ctrl-C during the sweep (a ``KeyboardInterrupt`` carrying the partial result).

    Examples
    --------
    >>> import rlrates
    >>> from rlrates.reference import plugin_q_pi
    >>> mdp = rlrates.garnet(states=10, actions=2, branching=3, seed=0)
    >>> rlrates.check(plugin_q_pi, mdp, rlrates.Claim(n=-0.5)).status
    'pass'
    """
    check_arguments(n_grid=n_grid, gammas=gammas, replicates=replicates, executor=executor, target=target, policy=policy)
    regime = validate_data(data, target, behaviour, episode_length,
                           isinstance(claim, Claim) and claim.coverage is not None)
    call = _validate(estimator, claim, target, norm, seed, executor, time_limit,
                     resolve_budget(budget, n_grid=n_grid, gammas=gammas, replicates=replicates,
                                    zero_level=zero_level))
    call = dataclasses.replace(call, data=regime, design=regime_design(call.design, call.target, regime, call.claim,
                                                                      replicates is not None, gammas is not None))
    if label is not None and (not isinstance(label, str) or not label.strip()):
        raise TypeError(f"`label` must be a non-empty string, got {label!r}")
    call = _model_over_n_only(call, mdp, gammas is not None)
    name, metadata = _describe_source(mdp)
    _warn_design(call, n_grid is not None)
    started = time.perf_counter()
    truths = {}
    for gamma in call.design.gammas:
        built = _mdp_for(mdp, gamma)
        truths[gamma] = solve_truth(built, gamma, call.target, _policy_for(policy, built))
    kernels = kernels_by_discount({g: t.mdp for g, t in truths.items()})
    if regime != "generative":
        call, plan, probe_notes = _logged_plan(call, truths, kernels, context, behaviour, episode_length,
                                               n_grid is not None)
        probe_notes += _probe(call, dict(plan.truths), dict(plan.kernels), executor)
    else:  # refuse a sweep whose counts cannot fit in memory before any is drawn (rlrates.costs)
        too_big = require_sweep_memory(next(iter(truths.values())).mdp, call.design.n_grid, call.design.replicates,
                                       call.design.gammas, getattr(executor, "_max_workers", 1) or 1)
        if too_big:
            warnings.warn(too_big, RatesWarning, stacklevel=2)
        plan = SweepPlan(call.estimator, truths, kernels, call.seed, context, call.norm, call.time_limit)
        probe_notes = _probe(call, truths, kernels, executor)
    probe_notes.extend(dict.fromkeys(note for truth in truths.values() for note in truth.mdp.notes))
    if call.target == "q_pi" and policy is None:  # recorded in the notes, so check.json says which policy ran
        probe_notes.append("evaluation policy: random stochastic rows seeded by the MDP's fingerprint "
                           "(rlrates.targets.default_policy)")
    passes = run_passes(plan, executor, call.claim, call.design, call.target, truths)
    passes = ground_truth_unchanged(passes, truths)
    if reproducer is None:
        extras = {"norm": norm if norm != "sup" else None, "n_grid": n_grid, "gammas": gammas,
                  "replicates": replicates, "context": context or None, "time_limit": time_limit,
                  "zero_level": zero_level, "data": regime if regime != "generative" else None,
                  "behaviour": _Given("<the behaviour given>") if behaviour is not None else None,
                  "episode_length": episode_length}
        mdp_call = rebuild_call(metadata) or f"<the MDP {name!r}: not rebuildable from its metadata, build it as before>"
        reproducer = _reproducer(call, mdp_call, policy is not None, extras)
    run = RunInfo(passes.passes, time.perf_counter() - started,
                  float(passes.table["seconds"].sum()) if len(passes.table) else 0.0, context, passes.blocks,
                  reproducer, estimator_origin(estimator), label or "")
    description = MDPDescription(name, metadata, {g: t.mdp.fingerprint for g, t in truths.items()},
                                 {g: t.scale for g, t in truths.items()})
    result = _assemble(call, passes, run, description, probe_notes)
    if passes.failure is not None and passes.failure.kind == "interrupted":
        raise CheckInterrupted(result)
    return result


def _logged_plan(call: _Call, truths: dict[float, Truth], kernels: dict[float, SupportKernel], context: str,
                 behaviour: Any, episode_length: int | None, own_grid: bool) -> tuple[_Call, SweepPlan, list[str]]:
    """A logged-data check's design, its (discount, behaviour) settings and the notes that describe its data."""
    if not own_grid:  # n counts transitions: the budget's samples per pair times S A
        grid = logged_n_grid(call.design.n_grid, next(iter(truths.values())).mdp)
        call = dataclasses.replace(call, design=dataclasses.replace(call.design, n_grid=grid))
    if episode_length is not None and episode_length > min(call.design.n_grid):
        raise ValueError(f"`episode_length` {episode_length} is longer than the smallest n of the grid, "
                         f"{min(call.design.n_grid)} transitions: every cell must hold at least one whole episode")
    settings, samplers = plan_logged(truths, kernels, call.data, behaviour, episode_length,
                                     COVERAGE_LEVELS if call.claim.coverage is not None else 1)
    plan = SweepPlan(call.estimator, settings, samplers, call.seed, context, call.norm, call.time_limit)
    return call, plan, logged_notes(settings, behaviour is None)  # the probes run on the plan (see check)


def _validate(estimator: object, claim: object, target: object, norm: object, seed: object,
              executor: Executor | None, time_limit: object, design: Budget) -> _Call:
    if not callable(estimator):
        raise TypeError(f"`estimator` must be callable as estimator(batch, problem), got {type(estimator).__name__}")
    if executor is not None and not isinstance(executor, ThreadPoolExecutor):
        _require_picklable(estimator, executor)
    if not isinstance(claim, Claim):
        raise TypeError(f"`claim` must be an rlrates.Claim, got {type(claim).__name__}")
    if time_limit is not None and (isinstance(time_limit, bool) or not isinstance(time_limit, (int, float))
                                   or not time_limit > 0):
        raise ValueError(f"`time_limit` must be a positive number of seconds, got {time_limit!r}")
    if claim.horizon is not None and len(design.gammas) < 2:
        raise ValueError("a `horizon` claim needs at least two discounts in `gammas` to fit an H-exponent")
    return _Call(estimator, claim, validate_target(target), validate_norm(norm), _validate_seed(seed), design,
                 None if time_limit is None else float(time_limit))


def _model_over_n_only(call: _Call, mdp: MDPSource, own_gammas: bool) -> _Call:
    """A model's error does not depend on the discount: sweep one MDP over n only (the smallest discount).

    Kept as asked when the caller gave ``gammas``, claims an H-exponent, or passes a
    gamma-indexed family (whose model changes with the discount).
    """
    if call.target != "model" or own_gammas or call.claim.horizon is not None or not isinstance(mdp, TabularMDP):
        return call
    return dataclasses.replace(call, design=dataclasses.replace(call.design, gammas=call.design.gammas[:1]))


def _warn_design(call: _Call, own_grid: bool) -> None:
    """Warn (at the caller of ``check``) about designs weaker than they look."""
    design = call.design
    if call.target == "model" and call.claim.horizon is not None:
        warnings.warn("a model's L1 error does not depend on the discount; the horizon claim is tested anyway",
                      RatesWarning, stacklevel=3)
    first_n = design.n_grid[0]
    early = [g for g in design.gammas if first_n < design.min_n_per_horizon / (1.0 - g)]
    if own_grid and early:
        warnings.warn(
            f"n_grid starts at n={first_n}, below {design.min_n_per_horizon:g} H for gamma in "
            f"{', '.join(f'{g:g}' for g in early)}; those cells are pre-asymptotic and left out of the fits",
            RatesWarning, stacklevel=3,
        )


def _probe(call: _Call, truths: dict[Any, Truth], kernels: dict[Any, Any],
           executor: Executor | None) -> list[str]:
    """Warn (and note) when the estimator is not a function of its batch or the MDP cannot test a rate."""
    notes = run_probes(call.estimator, call.target, truths, kernels, call.design.n_grid[0], call.seed, executor)
    for note in notes:
        warnings.warn(note, RatesWarning, stacklevel=3)
    return notes


class _Given(str):
    """A placeholder shown as is in a reproducer (an array the call was given cannot be written out)."""

    def __repr__(self) -> str:
        return str(self)


def _reproducer(call: _Call, mdp_call: str, policy_given: bool, extras: dict[str, Any]) -> str:
    """The Python that reproduces the check: ``import rlrates; import module; rlrates.check(module.name, ...)``."""
    imported, name = estimator_expression(call.estimator)
    return (
        "import rlrates; " + (f"{imported}; " if imported else "")
        + f"rlrates.check({name}, {mdp_call}, {call.claim.as_call()}, "
        f"target={call.target!r}, " + ("policy=<the policy given>, " if policy_given else "")
        + f"budget={call.design.name!r}, seed={call.seed}"
        + "".join(f", {key}={value!r}" for key, value in extras.items() if value is not None)
        + ")"
    )


def _assemble(call: _Call, passes: Passes, run: RunInfo, mdp: MDPDescription,
              probe_notes: list[str]) -> CheckResult:
    """The frozen result (its message is rendered when first read)."""
    decision = passes.decision
    status: Status
    if passes.failure is not None:
        status = "error"
    else:
        status = "inconclusive" if decision.status == "ambiguous" else decision.status
    notes = [*probe_notes, *decision.notes]
    if status == "inconclusive":
        spent = (f"{passes.passes} pass(es): {passes.state.replicates} replicates per cell, n up to "
                 f"{max(passes.state.n_values)}")
        if decision.need == "nothing" and passes.passes < call.design.looks:
            notes.append(f"stopped after {spent}; no larger budget of this design would settle it (see why)")
        else:
            notes.append(f"budget spent after {spent}; the replicates or n named under why (more replicates, "
                         "or a longer n_grid) would settle it")
    result = CheckResult(
        status=status, claim=call.claim, target=call.target, norm=call.norm, budget=call.design, seed=call.seed,
        mdp=mdp, run=run, evidence=Evidence(passes.table, decision.cells, decision.slopes),
        factors=() if passes.failure is not None else decision.fits,
        fired=decision.fired, reasons=decision.reasons, notes=tuple(notes), failure=passes.failure,
        data_regime=call.data, _render=format_message,
    )
    return result
