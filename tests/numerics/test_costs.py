"""The memory estimates of rlrates.costs, against what Python's own ``tracemalloc`` measures
(numpy reports its allocations to it) and against the arrays' ``nbytes``.

An estimate is for refusing up front what cannot fit, so it must not be below the
measured peak, and should not be far above it (a factor of 4 here).
"""

from __future__ import annotations

import tracemalloc
from collections.abc import Callable
from pathlib import Path

import pytest

import rlrates
from rlrates import costs


def _peak(build: Callable[[], object]) -> int:
    tracemalloc.start()
    try:
        tracemalloc.reset_peak()
        build()
        return tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


@pytest.mark.parametrize("build, estimate", [
    (lambda: rlrates.garnet(8_000, 4, 10, sparse=True), costs.sparse_kernel_cost("", 8_000, 4, 10)),
    (lambda: rlrates.garnet(1_500, 4, 10, sparse=False), costs.dense_kernel_cost("", 1_500, 4)),
    (lambda: rlrates.chain(200_000, sparse=True), costs.sparse_kernel_cost("", 200_000, 2, 2)),
    (lambda: rlrates.ring(1_000, sparse=False), costs.dense_kernel_cost("", 1_000, 3)),
    (lambda: rlrates.gridworld(300, 300, walls=(), sparse=True), costs.sparse_kernel_cost("", 90_000, 4, 5)),
], ids=["garnet-sparse", "garnet-dense", "chain-sparse", "ring-dense", "grid-sparse"])
def test_a_family_estimate_covers_the_measured_peak(build: Callable[[], object], estimate: costs.Cost) -> None:
    measured = _peak(build)
    assert measured <= estimate.bytes <= 4 * measured


def test_a_sweep_estimate_matches_the_views_a_batch_builds() -> None:
    mdp = rlrates.garnet(30, 3, 4, seed=1)
    cost = costs.sweep_cost(mdp, (64, 128, 256), replicates=8, gammas=(0.5, 0.9))
    batch = rlrates.draw(mdp, 256, seed=0)
    assert cost.counts_bytes == batch.counts.nbytes  # (S, A, S) int64
    assert cost.next_states_bytes == 2 * batch.next_states.nbytes  # sorted and shuffled (S, A, n) int64
    assert cost.support_bytes == 8 * 8 * 30 * 3 * 4  # 8 replicates in one block of (S*A, k) int64, k = 4
    assert cost.solve_bytes == 3 * 8 * 30 * 30
    assert cost.calls == 2 * 3 * 8 and cost.samples == 2 * 8 * 30 * 3 * (64 + 128 + 256)
    assert costs.sweep_cost(mdp, (64, 128, 256), 8, 2, workers=3).peak_bytes == 3 * cost.cell_bytes


def test_a_sweep_beyond_the_machine_is_refused_naming_its_parts() -> None:
    mdp = rlrates.garnet(50, 4, 5, seed=0)
    cost = costs.sweep_cost(mdp, (2**20, 2**21, 2**22), replicates=10, gammas=3)
    # the largest cell's next_states alone: 16 bytes x 50 x 4 x 2**22 = 12.5 GiB
    with pytest.raises(costs.TooLargeError, match=r"the sweep makes 90 estimator calls drawing [0-9,]+ samples, "
                       r"and its largest cell needs about 12.5 GiB .*batch.next_states 12.5 GiB.*more than the 8 GiB"):
        cost.refuse_beyond(memory=8 * 2**30)
    cost.refuse_beyond(memory=16 * 2**30)  # fits: nothing happens


def test_a_sparse_sweep_counts_only_the_stored_entries() -> None:
    mdp = rlrates.ring(500, sparse=True)  # 4 stored successors per row at most (stay, two steps, slip)
    cost = costs.sweep_cost(mdp, (8, 16, 32), replicates=4, gammas=1)
    assert cost.counts_bytes == 12 * 500 * 3 * 3  # ring rows hold 3 distinct successors
    assert cost.support_bytes == 8 * 4 * 500 * 3 * 3


def test_machine_memory_is_the_physical_memory_of_proc_meminfo() -> None:
    meminfo = Path("/proc/meminfo")
    if not meminfo.exists():
        pytest.skip("no /proc/meminfo on this system")
    total_kib = int(meminfo.read_text().split("MemTotal:")[1].split()[0])
    found = costs.machine_memory()
    assert found is not None
    assert found <= total_kib * 1024 * 1.001  # a cgroup limit may only lower it


def test_gib_reads_well() -> None:
    assert costs.gib(2**30 * 74.54) == "74.5 GiB"
    assert costs.gib(2**30 * 1788.4) == "1,788 GiB"
    assert costs.gib(2**29) == "0.5 GiB"


def test_nothing_is_refused_when_the_machine_memory_is_unknown(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(costs, "machine_memory", lambda: None)
    costs.require_memory(costs.Cost("a huge thing", 10**18, "made up"), "")
