"""Sweeps: run an estimator over (gamma, n, replicate) cells and collect a tidy error table.

A *cell task* holds everything one (gamma, n) cell needs (the exact answer, the
replicate range, the master seed and a context string) and is picklable, so it
can run in any ``concurrent.futures.Executor``. All replicates of the task are
drawn in one vectorised call from the block's own stream
:func:`rlrates.sampling.block_key`, so the numbers do not depend on execution
order or on the executor.

An estimator that raises (even ``SystemExit`` or ``GeneratorExit``), or returns
something invalid, does not stop the session: the cell records a
:class:`CellFailure` naming (gamma, n, replicate) with the estimator's own
traceback, and everything computed so far is kept. A cell the executor loses (a
worker process that dies, a killed cluster worker) is a ``"crashed"`` failure
naming that cell, with the rows of the cells finished before it.
"""

from __future__ import annotations

import dataclasses
import time
import traceback
from collections.abc import Iterable, Iterator, Mapping
from concurrent.futures import BrokenExecutor, CancelledError, Executor, Future
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass, field
from itertools import chain
from typing import Any, Protocol

import numpy as np

from .columns import Columns
from .result import Block, CellFailure
from .logged import LoggedKernel, draw_logged_block
from .sampling import Batch, SupportKernel, block_key, cached_kernel, draw_block, stream_context
from .scoring import CellScorer
from .targets import Problem, Truth
from .vocabulary import ERROR_COLUMNS

__all__ = ["Estimator", "CellTask", "CellOutcome", "SweepPlan", "blocks_of", "run_cell", "run_sweep", "BLOCK_ELEMENTS"]

#: Largest number of counts drawn in one block (8M int64 = 64 MB); larger cells are split.
BLOCK_ELEMENTS = 8_000_000


class Estimator(Protocol):
    """What ``rlrates.check`` calls: ``estimator(batch, problem)`` returns the estimate for the target."""

    def __call__(self, batch: Batch, problem: Problem, /) -> Any: ...


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
    kernel: SupportKernel | LoggedKernel | None = field(default=None, repr=False)
    time_limit: float | None = None

    def __getstate__(self) -> dict[str, Any]:
        # a generative kernel is a function of the MDP: a worker rebuilds it once per MDP
        # (sampling.cached_kernel) instead of receiving its arrays (several times P's size) with every cell
        state = dict(self.__dict__)
        if isinstance(state["kernel"], SupportKernel):
            state["kernel"] = None
        return state


@dataclass(frozen=True)
class SweepPlan:
    """Everything the cells of one check share; :meth:`tasks` plans the cells of one pass.

    A block's counts are (replicates, S, A, S) int64 (for a sparse MDP, whose counts
    stay on each row's support, (replicates, S*A, k)): large MDPs split a cell's
    replicates into several blocks so that one block stays under
    ``BLOCK_ELEMENTS`` (the split is part of the design, so it is the same for
    every executor and recorded in the result's blocks). A logged-data block holds
    three (replicates, n) arrays, so its cells split by n instead.

    ``truths`` and ``kernels`` share their keys: the discount for the generative
    model, (discount, behaviour level) for logged data.
    """

    estimator: Estimator
    truths: Mapping[Any, Truth]
    kernels: Mapping[Any, SupportKernel | LoggedKernel]
    master_seed: int
    context: str
    norm: str = "sup"
    time_limit: float | None = None

    def tasks(self, n_values: Iterable[int], start: int, stop: int) -> list[CellTask]:
        """The cell tasks for every discount and every n in ``n_values``, replicates ``start .. stop - 1``."""
        planned = []
        for key, truth in self.truths.items():
            mdp = truth.mdp
            context = stream_context(self.context, mdp.fingerprint)
            if truth.data is not None:  # each behaviour level of a logged regime has streams of its own
                context = f"{context}|{truth.data.regime}|{truth.data.level}"
            kernel = self.kernels[key]
            for n in n_values:
                if truth.data is not None:
                    per_block = 3 * n
                elif isinstance(kernel, SupportKernel) and kernel.sparse:  # its counts stay on the support
                    per_block = kernel.probs.size
                else:
                    per_block = mdp.states * mdp.actions * mdp.states
                size = max(1, BLOCK_ELEMENTS // per_block)
                for low in range(start, stop, size):
                    planned.append(CellTask(self.estimator, truth, n, low, min(low + size, stop), self.master_seed,
                                            context, self.norm, kernel, self.time_limit))
        return planned


def blocks_of(tasks: Iterable[CellTask]) -> list[Block]:
    """The replicate blocks that ``tasks`` draw, in order."""
    return [Block(task.truth.gamma, task.n, task.start, task.stop) for task in tasks]


@dataclass
class CellOutcome:
    gamma: float
    n: int
    rows: list[tuple[int, float, float]]  # (replicate, error, seconds)
    failure: CellFailure | None = None
    level: int = 0  # the behaviour level (logged data)


def run_cell(task: CellTask) -> CellOutcome:
    """Run the replicates of one cell; stop at the first failure, keeping earlier rows.

    An interrupt (Ctrl-C, or SIGTERM in a pytest session) anywhere in the cell, while
    sampling, in the estimator or while scoring, keeps the rows finished before it.
    """
    outcome = CellOutcome(task.truth.gamma, task.n, [], level=task.truth.level)
    try:
        _run_replicates(task, outcome)
    except KeyboardInterrupt as exc:  # keep what is done; rate_check re-raises after recording it
        if outcome.failure is None:
            outcome.failure = _interrupted(task, task.start + len(outcome.rows), exc)
    return outcome


def _interrupted(task: CellTask, replicate: int, exc: BaseException) -> CellFailure:
    return CellFailure(task.truth.gamma, task.n, replicate, "interrupted", type(exc).__name__, "",
                       _behaviour(task.truth))


def _behaviour(truth: Truth) -> int | None:
    return None if truth.data is None else truth.data.level


def _run_replicates(task: CellTask, outcome: CellOutcome) -> None:
    truth = task.truth
    problem = truth.problem()
    kernel = task.kernel
    if kernel is None:
        kernel = cached_kernel(truth.mdp)
    seed = block_key(task.master_seed, task.context, truth.gamma, task.n, task.start, task.stop)
    if isinstance(kernel, LoggedKernel):
        batches: list[Any] = draw_logged_block(kernel, task.n, task.stop - task.start, seed.sequence())
    else:
        batches = draw_block(kernel, task.n, task.stop - task.start, seed)
    scorer = CellScorer(truth, task.norm, task.n, task.stop - task.start, outcome.rows, _behaviour(truth))
    estimator, time_limit, add, clock = task.estimator, task.time_limit, scorer.add, time.perf_counter
    previous: object = None
    try:
        for replicate, batch in zip(range(task.start, task.stop), batches):
            started = clock()
            try:
                estimate = estimator(batch, problem)
            except (Exception, SystemExit, GeneratorExit) as exc:  # the estimator's own bug: record it, keep the session alive
                outcome.failure = scorer.flush() or CellFailure(
                    truth.gamma, task.n, replicate, "raised", f"{type(exc).__name__}: {exc}",
                    "".join(traceback.format_exception(type(exc), exc, exc.__traceback__)), _behaviour(truth),
                )
                return
            seconds = clock() - started
            if time_limit is not None or estimate is previous:  # the only calls _call_problem can object to
                problem_text = _call_problem(estimate, previous, seconds, time_limit)
                if problem_text is not None:
                    outcome.failure = scorer.flush() or CellFailure(truth.gamma, task.n, replicate, "invalid",
                                                                     problem_text, "", _behaviour(truth))
                    return
            failure = add(replicate, estimate, seconds)
            if failure is not None:
                outcome.failure = failure
                return
            previous = estimate
    finally:  # also on an interrupt: the rows finished before it are kept
        if outcome.failure is None:
            outcome.failure = scorer.flush()


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
    # one submission per cell: its blocks run one after the other in the worker, so the cell's
    # MDP is sent once, not once per block; the largest cells (n samples x replicates) go
    # first, so that no long cell starts last and keeps one worker busy alone; results are
    # still read in plan order, so tables do not change
    cells = _cells_of(tasks)
    order = sorted(range(len(cells)), key=lambda c: -sum(tasks[i].n * (tasks[i].stop - tasks[i].start)
                                                         for i in cells[c]))
    slots: list[Future[list[CellOutcome]] | None] = [None] * len(cells)
    try:
        for index in order:
            try:
                slots[index] = executor.submit(run_cells, [tasks[i] for i in cells[index]])
            except BrokenExecutor as exc:  # broken before this cell could even be sent
                yield _lost(_whole_cell(tasks, cells[index]), exc)
                return
        futures = [future for future in slots if future is not None]
        for index, (members, future) in enumerate(zip(cells, futures)):
            try:
                outcomes = future.result()
            except KeyboardInterrupt:  # keep the cells already back from the workers, in order; run_sweep names the next
                for finished in futures[index:]:
                    if not finished.done() or finished.cancelled() or finished.exception() is not None:
                        break
                    yield from finished.result()
                raise
            except CancelledError:
                raise
            except BrokenProcessPool:  # a dead worker breaks every cell in flight: find the one that killed it
                yield from _one_by_one(tasks[members[0]:])
                return
            except BaseException as exc:  # the executor lost the cell: its worker died, or the cluster failed
                outcomes = [_lost(_whole_cell(tasks, members), exc)]
            for outcome in outcomes:
                yield outcome  # outside the try: closing the generator here must not count as a lost cell
                if outcome.failure is not None and outcome.failure.kind == "crashed":
                    return
    finally:
        for pending in slots:
            if pending is not None:
                pending.cancel()


def run_cells(tasks: list[CellTask]) -> list[CellOutcome]:
    """Run the blocks of one cell in order (what a worker is sent); stop after the first failure."""
    outcomes = []
    for task in tasks:
        outcomes.append(run_cell(task))
        if outcomes[-1].failure is not None:
            break
    return outcomes


def _cells_of(tasks: list[CellTask]) -> list[list[int]]:
    """The indices of ``tasks`` grouped by cell: consecutive blocks of the same truth and n."""
    cells: list[list[int]] = []
    for index, task in enumerate(tasks):
        if cells and tasks[cells[-1][-1]].truth is task.truth and tasks[cells[-1][-1]].n == task.n:
            cells[-1].append(index)
        else:
            cells.append([index])
    return cells


def _whole_cell(tasks: list[CellTask], members: list[int]) -> CellTask:
    """One task spanning every block of a cell (to name all its replicates when the cell is lost)."""
    first, last = tasks[members[0]], tasks[members[-1]]
    return first if first is last else dataclasses.replace(first, stop=last.stop)


def _one_by_one(tasks: list[CellTask]) -> Iterator[CellOutcome]:
    """Rerun the cells a broken pool lost, in order, each alone in a fresh one-worker pool, up to the one that dies.

    Streams are seeded per cell, so a rerun gives the rows the lost run would have
    given; the first cell whose worker dies again is the one named.
    """
    from concurrent.futures import ProcessPoolExecutor

    with ProcessPoolExecutor(max_workers=1) as alone:
        for task in tasks:
            try:
                outcome = alone.submit(run_cell, task).result()
            except BrokenExecutor as exc:
                yield _lost(task, exc, "; it died again when the cell was rerun alone")
                return
            yield outcome
            if outcome.failure is not None:
                return


def _lost(task: CellTask, exc: BaseException, confirmed: str = "") -> CellOutcome:
    """The outcome of a cell the executor could not run to the end (no rows: its replicates are unaccounted for)."""
    if isinstance(exc, BrokenExecutor):
        why = ("the worker process running it died (os._exit, a crash or the out-of-memory killer"
               f"{confirmed}) and the process pool broke ({type(exc).__name__})")
    else:
        why = f"the executor failed while running it: {type(exc).__name__}: {exc}"
    message = f"replicates {task.start}..{task.stop - 1} of this cell were lost: {why}"
    # a dead worker leaves no Python traceback of its own; the one at hand is the pool's
    # plumbing, which would only bury the cell's name, so none is shown
    detail = "" if isinstance(exc, BrokenExecutor) else "".join(
        traceback.format_exception(type(exc), exc, exc.__traceback__))
    return CellOutcome(task.truth.gamma, task.n, [], CellFailure(task.truth.gamma, task.n, task.start, "crashed",
                                                                 message, detail, _behaviour(task.truth)),
                       task.truth.level)


def run_sweep(tasks: Iterable[CellTask], executor: Executor | None = None,
              coverage: Mapping[tuple[float, int], float] | None = None) -> tuple[Columns, CellFailure | None]:
    """Run all tasks; return the tidy table and the first failure (if any).

    On a failure the remaining tasks are cancelled; rows already computed are kept.
    ``coverage`` maps (gamma, behaviour level) to C for logged data: the table then
    has the columns ``behaviour`` and ``C`` too.
    """
    task_list = list(tasks)
    finished: list[CellOutcome] = []
    failure: CellFailure | None = None
    done = 0
    try:
        for outcome in _outcomes(task_list, executor):
            finished.append(outcome)
            done += 1
            if outcome.failure is not None:
                failure = outcome.failure
                break
    except KeyboardInterrupt as exc:  # while waiting for a worker, or between cells: the finished cells are kept
        if done < len(task_list):
            failure = _interrupted(task_list[done], task_list[done].start, exc)
        else:
            raise
    return rows_to_table(finished, coverage), failure


def rows_to_table(outcomes: list[CellOutcome], coverage: Mapping[tuple[float, int], float] | None = None) -> Columns:
    """The cells' rows as error-table columns (``ERROR_COLUMNS``, for logged data also ``behaviour`` and ``C``), sorted."""
    kept = [outcome for outcome in outcomes if outcome.rows]
    sizes = [len(outcome.rows) for outcome in kept]
    rows = np.fromiter(chain.from_iterable(chain.from_iterable(outcome.rows for outcome in kept)), dtype=float,
                       count=3 * sum(sizes)).reshape(sum(sizes), 3)  # (replicate, error, seconds) per row
    gamma = np.repeat(np.array([outcome.gamma for outcome in kept], dtype=float), sizes)
    data: dict[str, np.ndarray] = dict(zip(ERROR_COLUMNS, (
        gamma, 1.0 / (1.0 - gamma), np.repeat(np.array([outcome.n for outcome in kept], dtype=np.int64), sizes),
        rows[:, 0].astype(np.int64), rows[:, 1], rows[:, 2])))  # gamma, H, n, replicate, error, seconds
    if coverage is None:
        table = Columns(data, len(gamma))
        # the plan runs cells in (gamma, n, replicate block) order, each block's replicates in order: sorted already
        starts = [(outcome.gamma, outcome.n, outcome.rows[0][0]) for outcome in kept]
        return table if starts == sorted(starts) else table.sort("gamma", "n", "replicate")
    levels = np.repeat(np.array([outcome.level for outcome in kept], dtype=np.int64), sizes)
    data["behaviour"] = levels
    data["C"] = np.array([coverage[(g, b)] for g, b in zip(data["gamma"].tolist(), levels.tolist())], dtype=float)
    return Columns(data, len(gamma)).sort("gamma", "behaviour", "n", "replicate")
