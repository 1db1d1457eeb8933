"""Sweeps: run an estimator over (gamma, n, replicate) cells and collect a tidy error table.

A *cell task* holds everything one (gamma, n) cell needs (the exact answer, the
replicate range, the master seed and a context string) and is picklable, so it
can run in any ``concurrent.futures.Executor``. All replicates of the task are
drawn in one vectorised call from the block's own stream
:func:`rlrates.sampling.block_seed`, so the numbers do not depend on execution
order or on the executor.

An estimator that raises, or returns something invalid, does not stop the
session: the cell records a :class:`CellFailure` naming (gamma, n, replicate)
with the estimator's own traceback, and everything computed so far is kept.
"""

from __future__ import annotations

import time
import traceback
from collections.abc import Callable, Iterable, Iterator
from concurrent.futures import Executor, Future
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from .sampling import SupportKernel, block_seed, draw_block, mdp_kernel
from .targets import EstimateError, Truth, estimate_error, validate_estimate

__all__ = ["CellTask", "CellFailure", "CellOutcome", "run_cell", "run_sweep", "TABLE_COLUMNS"]

TABLE_COLUMNS = ["gamma", "H", "n", "replicate", "error", "seconds"]

Estimator = Callable[[Any, Any], Any]


@dataclass(frozen=True)
class CellFailure:
    """Why an estimator call did not give a usable error."""

    gamma: float
    n: int
    replicate: int
    kind: str  # "raised", "invalid" or "interrupted"
    message: str
    traceback: str

    def describe(self) -> str:
        where = f"gamma={self.gamma:g}, n={self.n}, replicate={self.replicate}"
        if self.kind == "raised":
            return f"the estimator raised at {where}: {self.message}"
        if self.kind == "interrupted":
            return f"interrupted (KeyboardInterrupt) at {where}; the rows finished before it are kept"
        return f"invalid estimate at {where}: {self.message}"


@dataclass
class CellTask:
    """One (gamma, n) cell: replicates ``start .. stop - 1``."""

    estimator: Estimator
    truth: Truth
    n: int
    start: int
    stop: int
    master_seed: int
    context: str
    norm: str = "sup"
    kernel: SupportKernel | None = field(default=None, repr=False)
    time_limit: float | None = None


@dataclass
class CellOutcome:
    gamma: float
    n: int
    rows: list[tuple[int, float, float]]  # (replicate, error, seconds)
    failure: CellFailure | None = None


def run_cell(task: CellTask) -> CellOutcome:
    """Run the replicates of one cell; stop at the first failure, keeping earlier rows."""
    truth = task.truth
    problem = truth.problem()
    outcome = CellOutcome(truth.gamma, task.n, [])
    kernel = task.kernel
    if kernel is None:
        kernel = mdp_kernel(truth.mdp)
    seed = block_seed(task.master_seed, task.context, truth.gamma, task.n, task.start, task.stop)
    batches = draw_block(kernel, task.n, task.stop - task.start, seed)
    previous: object = None
    for replicate, batch in zip(range(task.start, task.stop), batches):
        started = time.perf_counter()
        try:
            estimate = task.estimator(batch, problem)
        except KeyboardInterrupt:  # keep what is done; rate_check re-raises after recording it
            outcome.failure = CellFailure(truth.gamma, task.n, replicate, "interrupted", "KeyboardInterrupt", "")
            return outcome
        except Exception as exc:  # the estimator's own bug: record it, keep the session alive
            outcome.failure = CellFailure(
                truth.gamma, task.n, replicate, "raised", f"{type(exc).__name__}: {exc}",
                "".join(traceback.format_exception(type(exc), exc, exc.__traceback__)),
            )
            return outcome
        seconds = time.perf_counter() - started
        problem_text = _call_problem(estimate, previous, seconds, task.time_limit)
        if problem_text is None:
            try:
                valid = validate_estimate(estimate, truth)
            except EstimateError as exc:
                problem_text = str(exc)
        if problem_text is not None:
            outcome.failure = CellFailure(truth.gamma, task.n, replicate, "invalid", problem_text, "")
            return outcome
        previous = estimate
        outcome.rows.append((replicate, estimate_error(valid, truth, task.norm), seconds))
    return outcome


def _call_problem(estimate: object, previous: object, seconds: float, time_limit: float | None) -> str | None:
    """Problems with a call that the return value alone does not show."""
    if time_limit is not None and seconds > time_limit:
        return (
            f"the call took {seconds:.3g} s, over the per-call time limit of {time_limit:g} s "
            "(a call that never returns is not interrupted; pair with a test-level timeout)"
        )
    if estimate is not None and estimate is previous and isinstance(estimate, np.ndarray):
        return (
            "the estimator returned the same array object as on the previous call; return a fresh "
            "array each time (a reused buffer changes earlier estimates after the fact)"
        )
    return None


def _outcomes(tasks: list[CellTask], executor: Executor | None) -> Iterator[CellOutcome]:
    if executor is None:
        for task in tasks:
            yield run_cell(task)
        return
    futures: list[Future[CellOutcome]] = [executor.submit(run_cell, task) for task in tasks]
    try:
        for future in futures:
            yield future.result()
    finally:
        for future in futures:
            future.cancel()


def run_sweep(tasks: Iterable[CellTask], executor: Executor | None = None) -> tuple[pd.DataFrame, CellFailure | None]:
    """Run all tasks; return the tidy table and the first failure (if any).

    On a failure the remaining tasks are cancelled; rows already computed are kept.
    """
    task_list = list(tasks)
    records: list[tuple[float, float, int, int, float, float]] = []
    failure: CellFailure | None = None
    for outcome in _outcomes(task_list, executor):
        horizon = 1.0 / (1.0 - outcome.gamma)
        records.extend((outcome.gamma, horizon, outcome.n, r, e, s) for r, e, s in outcome.rows)
        if outcome.failure is not None:
            failure = outcome.failure
            break
    return rows_to_table(records), failure


def rows_to_table(records: list[tuple[float, float, int, int, float, float]]) -> pd.DataFrame:
    table = pd.DataFrame.from_records(records, columns=TABLE_COLUMNS)
    table = table.astype({"gamma": float, "H": float, "n": np.int64, "replicate": np.int64, "error": float, "seconds": float})
    return table.sort_values(["gamma", "n", "replicate"], ignore_index=True)
