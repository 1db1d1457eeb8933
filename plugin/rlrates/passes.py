"""The passes of a check: sweep the planned cells, summarise them, decide, and escalate while the answer is unclear.

Each pass runs the cells the escalation step asks for (:mod:`rlrates.escalation`),
adds their rows to the table, summarises every (gamma, n) cell (for logged data
every (gamma, behaviour, n) cell), and decides (:func:`rlrates.verdict.decide`).
Rows are never recomputed: a pass only adds replicates or larger n.
"""

from __future__ import annotations

import dataclasses
from concurrent.futures import Executor
from dataclasses import dataclass

import numpy as np

from .budgets import Budget
from .claims import Claim
from .columns import Columns
from .escalation import Escalation
from .fitting import summarise_cells
from .mdp import _fingerprint as fingerprint_of  # recomputed after a check: was the ground truth written into?
from .probes import constant_replicates
from .regimes import coverage_map, smallest_probability
from .result import Block, CellFailure
from .sweep import SweepPlan, blocks_of, run_sweep
from .targets import Truth, zero_levels
from .verdict import Decision, decide

__all__ = ["Passes", "run_passes", "ground_truth_unchanged"]


@dataclass(frozen=True)
class Passes:
    """What the passes of a check produced (``table``: the error rows, sorted)."""

    table: Columns
    decision: Decision
    failure: CellFailure | None
    passes: int
    blocks: tuple[Block, ...]
    state: Escalation


def run_passes(plan: SweepPlan, executor: Executor | None, claim: Claim, design: Budget, target: str,
               truths: dict[float, Truth]) -> Passes:
    """Run passes until the verdict is decided, a cell fails, or the escalation allowance is spent."""
    zero_tolerance, exact_tolerance = zero_levels(truths, target, design)
    scale = {g: t.scale for g, t in truths.items()}
    logged = any(t.data is not None for t in plan.truths.values())
    coverage = coverage_map(dict(plan.truths)) if logged else None
    smallest = smallest_probability(dict(plan.truths)) if logged else {}
    state, step = Escalation.start(design)
    tables: list[Columns] = []
    blocks: list[Block] = []
    decision = Decision(status="ambiguous")
    passes = 0
    while True:
        passes += 1
        pending = plan.tasks(step.n_values, step.start, step.stop)
        blocks.extend(blocks_of(pending))
        part, failure = run_sweep(pending, executor, coverage)
        tables.append(part)
        table = part if len(tables) == 1 else Columns.concat(tables)
        if failure is not None:
            break
        graded = None
        if coverage is None:
            summary = summarise_cells(table, zero_tolerance, exact_tolerance)
        else:  # logged data: the n- and H-claims on behaviour 0, the C-claim over every behaviour
            graded = summarise_cells(table, zero_tolerance, exact_tolerance)
            graded = graded.with_columns(n_eff=graded["n"] * np.array(
                [smallest[(g, b)] for g, b in zip(graded["gamma"].tolist(), graded["behaviour"].tolist())], dtype=float))
            summary = graded[graded["behaviour"] == 0]
        failure = constant_replicates(summary, table, target)
        if failure is not None:
            break
        decision = decide(summary, claim, design, scale, window=len(design.n_grid),
                          graded=graded if claim.coverage is not None else None)
        escalated = state.next(decision.need) if decision.status == "ambiguous" else None
        if escalated is None:
            break
        state, step = escalated
    if len(tables) > 1:  # one sweep's table is sorted already (rows_to_table), in this order
        table = table.sort(*(["gamma", "behaviour", "n", "replicate"] if logged else ["gamma", "n", "replicate"]))
    return Passes(table, decision, failure, passes, tuple(blocks), state)


def ground_truth_unchanged(passes: Passes, truths: dict[float, Truth]) -> Passes:
    """An MDP whose arrays changed during the check (an estimator that wrote into them) turns the result into an error."""
    checked: set[int] = set()
    for gamma, truth in truths.items():
        if id(truth.mdp) in checked:  # one MDP serves every discount: hash its arrays once
            continue
        checked.add(id(truth.mdp))
        if fingerprint_of(truth.mdp.P, truth.mdp.R) != truth.mdp.fingerprint:
            last = int(passes.table["n"].max()) if len(passes.table) else 0
            failure = CellFailure(gamma, int(last), 0, "invalid", (
                f"the MDP {truth.mdp.name!r} changed during the check (its fingerprint no longer matches its "
                "arrays): something wrote into the ground truth, so no error of this check can be trusted"), "")
            return dataclasses.replace(passes, failure=failure)
    return passes
