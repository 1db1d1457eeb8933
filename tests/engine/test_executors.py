"""Executors: thread pools, process pools and a dask cluster give the serial numbers bit for bit,
and an estimator that cannot travel to another process is refused up front with the reason."""

from __future__ import annotations

from concurrent.futures import ProcessPoolExecutor, ThreadPoolExecutor
from typing import Any

import numpy as np
import pandas as pd
import pytest

import rlrates
from rlrates import reference

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
        n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1", dashboard_address=None,
    ) as cluster, distributed.Client(cluster) as client:
        executor = client.get_executor()
        clustered = rlrates.check(reference.plugin_q_pi, garnet, CLAIM, seed=3, executor=executor)
    pd.testing.assert_frame_equal(_numbers(serial), _numbers(clustered), check_exact=True)
    assert clustered.status == serial.status


class _RecordingPool(ThreadPoolExecutor):
    """A one-thread pool that notes the size (n x replicates) of each cell in the order it is submitted."""

    def __init__(self) -> None:
        super().__init__(max_workers=1)
        self.sizes: list[int] = []

    def submit(self, fn: Any, /, *args: Any, **kwargs: Any) -> Any:
        task = args[0]
        self.sizes.append(task.n * (task.stop - task.start))
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
