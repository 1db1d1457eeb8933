"""Executors: thread pools, process pools and a dask cluster give the serial numbers bit for bit,
and an estimator that cannot travel to another process is refused up front with the reason."""

from __future__ import annotations

from concurrent.futures import Executor, Future, ProcessPoolExecutor, ThreadPoolExecutor
from typing import Any

import numpy as np
import pandas as pd
import pytest

import rlrates
from rlrates import reference

import zoo

CLAIM = rlrates.Claim(n=-0.5, horizon=2.0)


@pytest.fixture(scope="module")
def garnet() -> rlrates.TabularMDP:
    return rlrates.garnet(states=10, actions=2, branching=3, seed=1)


@pytest.fixture(scope="module")
def serial(garnet: rlrates.TabularMDP) -> rlrates.CheckResult:
    return rlrates.check(reference.plugin_q_pi, garnet, CLAIM, seed=3)


def _numbers(result: rlrates.CheckResult) -> pd.DataFrame:
    return result.table.drop(columns=["seconds"])


def _closure_estimator() -> Any:
    scale = 1.0

    def estimate(batch: Any, problem: Any) -> np.ndarray:
        return scale * reference.plugin_q_pi(batch, problem)

    return estimate


@pytest.mark.parametrize(
    ("estimator", "shown"),
    [
        (lambda batch, problem: reference.plugin_q_pi(batch, problem), "<lambda>"),
        (_closure_estimator(), "_closure_estimator.<locals>.estimate"),
    ],
    ids=["lambda", "closure"],
)
def test_an_unpicklable_estimator_is_refused_for_a_process_pool(garnet: rlrates.TabularMDP, estimator: Any, shown: str) -> None:
    with ProcessPoolExecutor(max_workers=1) as pool:  # no worker starts: nothing is submitted
        with pytest.raises(TypeError) as info:
            rlrates.check(estimator, garnet, CLAIM, executor=pool)
    message = str(info.value)
    assert f"`estimator` {shown} cannot be pickled" in message
    assert "ProcessPoolExecutor" in message
    assert "AttributeError" in message or "PicklingError" in message  # the pickling error itself
    assert "module-level function" in message and "ThreadPoolExecutor" in message


def test_a_thread_pool_takes_any_estimator_and_matches_serial(garnet: rlrates.TabularMDP, serial: rlrates.CheckResult) -> None:
    # a lambda is fine in threads: nothing is pickled
    estimator = lambda batch, problem: reference.plugin_q_pi(batch, problem)  # noqa: E731
    with ThreadPoolExecutor(max_workers=2) as pool:
        threaded = rlrates.check(estimator, garnet, CLAIM, seed=3, executor=pool)
    pd.testing.assert_frame_equal(_numbers(serial), _numbers(threaded), check_exact=True)
    assert threaded.status == serial.status


def test_a_dask_cluster_matches_serial(garnet: rlrates.TabularMDP, serial: rlrates.CheckResult) -> None:
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1", dashboard_address=":0",
    ) as cluster, distributed.Client(cluster) as client:
        executor = client.get_executor()
        clustered = rlrates.check(reference.plugin_q_pi, garnet, CLAIM, seed=3, executor=executor)
    pd.testing.assert_frame_equal(_numbers(serial), _numbers(clustered), check_exact=True)
    assert clustered.status == serial.status


class _RecordingPool(ThreadPoolExecutor):
    """A one-thread pool that notes the size (n x replicates) and the blocks of each cell in the order it is submitted."""

    def __init__(self) -> None:
        super().__init__(max_workers=1)
        self.sizes: list[int] = []
        self.blocks: list[int] = []

    def submit(self, fn: Any, /, *args: Any, **kwargs: Any) -> Any:
        cell = args[0]  # a cell is sent as the list of its blocks
        self.sizes.append(sum(task.n * (task.stop - task.start) for task in cell))
        self.blocks.append(len(cell))
        return super().submit(fn, *args, **kwargs)


def test_a_pool_gets_the_largest_cells_first_and_the_same_table(garnet: rlrates.TabularMDP, serial: rlrates.CheckResult) -> None:
    # longest-processing-time-first submission (Graham 1969, "Bounds on multiprocessing timing
    # anomalies"); the table must not depend on the order the cells ran in
    with _RecordingPool() as pool:
        pooled = rlrates.check(reference.plugin_q_pi, garnet, CLAIM, seed=3, executor=pool)
    assert len(pool.sizes) > 1 and len(set(pool.sizes)) > 1
    assert pool.sizes == sorted(pool.sizes, reverse=True)
    pd.testing.assert_frame_equal(_numbers(serial), _numbers(pooled), check_exact=True)
    assert pooled.status == serial.status


def test_a_sparse_mdp_in_a_process_pool_matches_serial() -> None:
    # the sparse model and its support kernel travel to the workers by pickle (common practice)
    held = rlrates.ring(9, slip=0.2, sparse=True)
    alone = rlrates.check(reference.plugin_q_pi, held, CLAIM, seed=5)
    with ProcessPoolExecutor(max_workers=2) as pool:
        pooled = rlrates.check(reference.plugin_q_pi, held, CLAIM, seed=5, executor=pool)
    pd.testing.assert_frame_equal(_numbers(alone), _numbers(pooled), check_exact=True)
    assert pooled.status == alone.status == "pass"


def _dies_at_512(batch: Any, problem: Any) -> np.ndarray:
    """A worker-killing bug: the process exits at n = 512 without raising anything."""
    if batch.n >= 512:
        import os

        os._exit(3)
    return reference.plugin_q_pi(batch, problem)


def test_a_worker_that_dies_is_an_error_naming_the_cell_with_the_rows_before_it(garnet: rlrates.TabularMDP,
                                                                                 serial: rlrates.CheckResult) -> None:
    """Common practice: a lost process is reported where it happened, and the finished work survives."""
    with ProcessPoolExecutor(max_workers=2) as pool:
        result = rlrates.check(_dies_at_512, garnet, CLAIM, seed=3, executor=pool)
    assert result.status == "error"
    failure = result.failure
    assert failure is not None and failure.kind == "crashed"
    assert (failure.gamma, failure.n, failure.replicate) == (min(result.budget.gammas), 512, 0)
    assert "worker process running it died" in result.message and "gamma=0.5, n=512" in result.message
    # the cells finished before it are kept, and equal the serial run's rows for those cells
    kept = _numbers(result)
    assert len(kept) > 0 and set(kept["n"]) <= {128, 256}
    expected = _numbers(serial).merge(kept[["gamma", "n", "replicate"]], on=["gamma", "n", "replicate"])
    pd.testing.assert_frame_equal(kept.reset_index(drop=True), expected, check_exact=True)


def test_a_killed_dask_worker_is_an_error_naming_the_cell_with_the_rows_before_it(garnet: rlrates.TabularMDP) -> None:
    """Common practice, as for a process pool: the lost cell is named and the finished rows survive.

    dask retries a task whose worker died on other workers (``allowed-failures``, 3 by default) before
    it gives up with ``KilledWorker``; 0 here makes the first death final, so the test takes seconds.
    """
    distributed = pytest.importorskip("distributed", reason="dask.distributed is not installed (pip install distributed)")
    import dask

    small = {"n_grid": (128, 256, 512), "replicates": 4, "gammas": (0.5, 0.9), "seed": 3}
    with dask.config.set({"distributed.scheduler.allowed-failures": 0, "logging.distributed": "critical"}):
        with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=True, host="127.0.0.1",
                                      dashboard_address=":0") as cluster, distributed.Client(cluster) as client:
            result = rlrates.check(_dies_at_512, garnet, CLAIM, executor=client.get_executor(), **small)
    assert result.status == "error"
    failure = result.failure
    assert failure is not None and failure.kind == "crashed"
    assert (failure.gamma, failure.n, failure.replicate) == (0.5, 512, 0)
    assert "the cell at gamma=0.5, n=512, replicate=0 never finished" in result.message
    assert "KilledWorker" in result.message
    kept = _numbers(result)
    assert len(kept) > 0 and set(kept["n"]) <= {128, 256}
    # below n = 512 the estimator is the plug-in one: the kept rows are a serial plug-in run's rows
    alone = _numbers(rlrates.check(reference.plugin_q_pi, garnet, CLAIM, **small))
    expected = alone.merge(kept[["gamma", "n", "replicate"]], on=["gamma", "n", "replicate"])
    pd.testing.assert_frame_equal(kept.reset_index(drop=True), expected, check_exact=True)



# --------------------------------------------------------------------------- interrupts outside the estimator
# (common practice: an interrupt keeps the work finished before it)


def test_an_interrupt_while_sampling_keeps_the_finished_rows(monkeypatch: pytest.MonkeyPatch, garnet: rlrates.TabularMDP,
                                                              serial: rlrates.CheckResult) -> None:
    from rlrates import sweep

    real = sweep.draw_block

    def interrupted_at_512(kernel: Any, n: int, *args: Any) -> Any:
        if n >= 512:
            raise KeyboardInterrupt
        return real(kernel, n, *args)

    monkeypatch.setattr(sweep, "draw_block", interrupted_at_512)
    with pytest.raises(rlrates.CheckInterrupted) as raised:
        rlrates.check(reference.plugin_q_pi, garnet, CLAIM, seed=3)
    result = raised.value.result
    assert result.failure is not None and (result.failure.kind, result.failure.n) == ("interrupted", 512)
    kept = _numbers(result)
    assert len(kept) > 0 and set(kept["n"]) <= {128, 256}
    expected = _numbers(serial).merge(kept[["gamma", "n", "replicate"]], on=["gamma", "n", "replicate"])
    pd.testing.assert_frame_equal(kept.reset_index(drop=True), expected, check_exact=True)


class _InterruptedWhileWaiting(Executor):
    """An executor whose cells at n >= 512 are 'interrupted' while the caller waits for them (Ctrl-C in the main process)."""

    def submit(self, fn: Any, /, *args: Any, **kwargs: Any) -> Future[Any]:
        future: Future[Any] = Future()
        if args[0][0].n >= 512:
            future.set_exception(KeyboardInterrupt())
        else:
            future.set_result(fn(*args, **kwargs))
        return future


def test_an_interrupt_while_waiting_for_workers_keeps_the_finished_cells(garnet: rlrates.TabularMDP) -> None:
    with pytest.raises(rlrates.CheckInterrupted) as raised:
        rlrates.check(reference.plugin_q_pi, garnet, CLAIM, seed=3, executor=_InterruptedWhileWaiting())
    result = raised.value.result
    assert result.failure is not None and (result.failure.kind, result.failure.n, result.failure.replicate) == (
        "interrupted", 512, 0)
    assert len(result.table) > 0 and set(result.table["n"]) <= {128, 256}


def test_a_sparse_mdps_cells_split_by_their_support_counts_and_a_dense_ones_by_the_dense_block() -> None:
    # A block holds at most BLOCK_ELEMENTS counts: (replicates, S, A, S) for a dense MDP, but only
    # (replicates, S*A, k) for a sparse one, whose counts stay on each row's support.
    from rlrates.sampling import kernels_by_discount
    from rlrates.sweep import BLOCK_ELEMENTS, SweepPlan
    from rlrates.targets import solve_truth

    for sparse in (True, False):
        mdp = rlrates.gridworld(40, 40, walls=(), sparse=sparse)  # S = 1600: S*A*S = 10.24M > 8M
        truths = {0.5: solve_truth(mdp, 0.5, "q_pi")}
        plan = SweepPlan(reference.plugin_q_pi, truths, kernels_by_discount({0.5: mdp}), 0, "split")
        tasks = plan.tasks([128], 0, 24)
        width = kernels_by_discount({0.5: mdp})[0.5].probs.shape[1]
        expected = -(-24 // max(1, BLOCK_ELEMENTS // (mdp.states * 4 * (width if sparse else mdp.states))))
        assert len(tasks) == expected == (1 if sparse else 24), (sparse, len(tasks))


def test_a_cell_goes_to_a_worker_once_with_all_its_blocks_and_without_its_kernel() -> None:
    # A cell split into blocks (dense S = 1600: one replicate per block) is one submission, so its
    # MDP is pickled once per cell; the kernel, a function of the MDP, is rebuilt by the worker
    # (rlrates.sampling.cached_kernel) instead of travelling with every cell. Same rows either way.
    import pickle

    from rlrates.sweep import run_cell

    mdp = rlrates.gridworld(40, 40, walls=(), sparse=False)
    estimator = zoo.SyntheticPower(mdp, a=-0.5, b=1.0)
    design = {"n_grid": (256, 512, 1024), "gammas": (0.5, 0.9), "replicates": 4}
    with _RecordingPool() as pool:
        pooled = rlrates.check(estimator, mdp, CLAIM, seed=1, executor=pool, **design)
    assert pool.blocks and set(pool.blocks) == {4}  # every cell of every pass: one submission, 4 blocks
    serial = rlrates.check(estimator, mdp, CLAIM, seed=1, **design)
    pd.testing.assert_frame_equal(serial.table.drop(columns="seconds"), pooled.table.drop(columns="seconds"),
                                  check_exact=True)
    small = rlrates.garnet(10, 2, 3, seed=1)
    from rlrates.sampling import kernels_by_discount
    from rlrates.sweep import SweepPlan
    from rlrates.targets import solve_truth

    plan = SweepPlan(reference.plugin_q_pi, {0.5: solve_truth(small, 0.5, "q_pi")}, kernels_by_discount({0.5: small}),
                     0, "pickled")
    task = plan.tasks([128], 0, 6)[0]
    sent = pickle.loads(pickle.dumps(task))
    assert task.kernel is not None and sent.kernel is None and sent.truth._problem is None
    assert [row[:2] for row in run_cell(sent).rows] == [row[:2] for row in run_cell(task).rows]


def test_the_determinism_probe_rebuilds_a_generative_kernel_it_was_not_sent() -> None:
    # with a process or cluster executor the probe is sent without the kernel (rlrates.probes.run_probes)
    from rlrates.probes import determinism_probe
    from rlrates.sampling import mdp_kernel
    from rlrates.targets import solve_truth

    mdp = rlrates.garnet(10, 2, 3, seed=1)
    truth = solve_truth(mdp, 0.5, "q_pi")
    noisy = np.random.default_rng(0)

    def drifts(batch: Any, problem: Any) -> np.ndarray:  # not a function of its batch
        return reference.plugin_q_pi(batch, problem) + noisy.normal(0.0, 1e-3, (problem.states, problem.actions))

    with_kernel = determinism_probe(drifts, truth, mdp_kernel(mdp), 128, 4)
    rebuilt = determinism_probe(drifts, truth, None, 128, 4)
    assert with_kernel is not None and rebuilt is not None
    assert determinism_probe(reference.plugin_q_pi, truth, None, 128, 4) is None
