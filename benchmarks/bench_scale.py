"""Scaling out: a appendix-budget check serial vs a process pool, memory at S=500, sparse 10^4 states, own overhead.

    python benchmarks/bench_scale.py                 # overhead + serial vs process pool
    python benchmarks/bench_scale.py --large         # also the S=500 appendix-budget check with peak memory
    python benchmarks/bench_scale.py --states 300 --workers 2
    python benchmarks/bench_scale.py --grid 100       # only: a ci-budget check on a sparse 10^4-state gridworld

Three measurements, printed as one table at the end:

1. **Overhead**: a ci-budget check of ``reference.plugin_q_pi`` on garnet(20, 4, 5), best of 3;
   the plugin's own work is ``elapsed - estimator_seconds`` (sampling, exact solves,
   fits, verdict), shown as a fraction of the check's wall time.
2. **Process pool**: one appendix-budget check (5 discounts x 7 sample sizes x 48
   replicates) of ``reference.plugin_q_pi`` on garnet(S, 4, 10), S = 400 by default
   (about 10 s or more serially), once serially and once with
   ``ProcessPoolExecutor(workers)``, twice: with a cold pool (its workers import numpy,
   scipy, pandas and rlrates while the check runs, as in a one-off script) and with a
   warm pool (started, imports done, before the clock starts; that start-up is printed
   separately). All tables are asserted identical apart from the timing column.
   Target: a speed-up of 1.7x or more on 2 cores. CPU times are printed too (the main
   process's, and the workers' without their start-up imports): on a busy machine the
   wall-clock speed-up says more about the neighbours than about the pool, while
   ``serial CPU / max(main CPU, workers' CPU / workers)`` estimates the speed-up on free cores.
3. **Large** (``--large``, a minute or more): the same appendix-budget check on garnet(500, 4, 10),
   serially, with the peak of traced allocations (``tracemalloc``) and the process's
   peak resident size (``resource.getrusage``). The estimator reads only
   ``batch.counts``; a wrapper counts the batches whose (S, A, n) ``next_states``
   array was built (expected: none; at n = 16384 one such array would take
   S * A * n * 8 bytes = 262 MB).
4. **Sparse grid** (``--grid SIDE``, alone): a ci-budget check of the plug-in evaluator on a
   SIDE x SIDE gridworld built with ``sparse=True`` (SIDE = 100: 10^4 states, where a dense
   P alone would take 3.2 GB), with wall time, time per estimator call (a sparse LU
   solve of the plug-in model), and the peak resident size.

BLAS threads are pinned to 1 (``OPENBLAS_NUM_THREADS`` and friends, unless already
set) so that the serial run does not quietly use every core for its linear solves,
which would make the comparison with a process pool meaningless. Other processes on
the machine lower the measured speed-up; the load average is printed with the results,
and so is a control: the speed-up the same pool gives on plain Python busy loops
(close to the number of workers on an idle machine).
"""

from __future__ import annotations

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
import resource  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
import tracemalloc  # noqa: E402
from concurrent.futures import ProcessPoolExecutor  # noqa: E402
from typing import Any  # noqa: E402

import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402

import rlrates  # noqa: E402
from rlrates import reference  # noqa: E402

CLAIM = rlrates.Claim(n=-0.5, horizon=2.0)


class CountingEstimator:
    """``reference.plugin_q_pi``, counting the calls whose batch had built its ``next_states`` view."""

    def __init__(self) -> None:
        self.calls = 0
        self.built = 0

    def __call__(self, batch: Any, problem: Any) -> np.ndarray:
        estimate = reference.plugin_q_pi(batch, problem)
        self.calls += 1
        if getattr(batch, "_next_states", None) is not None:
            self.built += 1
        return estimate


def _import_rlrates() -> None:
    """Pool initializer: pay the worker's imports (numpy, scipy, pandas, rlrates) before timing."""
    import rlrates.rate_check  # noqa: F401
    import rlrates.sweep  # noqa: F401


def _pause(seconds: float) -> float:
    time.sleep(seconds)
    return seconds


def _busy_loop(iterations: int) -> int:
    total = 0
    for i in range(iterations):
        total += i * i
    return total


def machine_parallelism(workers: int, iterations: int = 10_000_000) -> float:
    """Speed-up of ``workers`` busy loops in a warm process pool over running them one after another.

    A control for the pool measurement: on an idle machine it is close to ``workers``;
    when other processes hold the cores it shows how much parallelism is left to gain.
    """
    started = time.perf_counter()
    for _ in range(workers):
        _busy_loop(iterations)
    serial = time.perf_counter() - started
    with ProcessPoolExecutor(max_workers=workers) as pool:
        list(pool.map(_pause, [0.3] * workers))
        started = time.perf_counter()
        list(pool.map(_busy_loop, [iterations] * workers))
        parallel = time.perf_counter() - started
    return serial / parallel


def _numbers(result: rlrates.CheckResult) -> pd.DataFrame:
    return result.table.drop(columns=["seconds"])


def overhead() -> list[tuple[str, str]]:
    mdp = rlrates.garnet(states=20, actions=4, branching=5, seed=0)
    rlrates.check(reference.plugin_q_pi, mdp, CLAIM, seed=99)  # warm-up: imports, caches
    best = min((rlrates.check(reference.plugin_q_pi, mdp, CLAIM, seed=s) for s in range(3)), key=lambda r: r.run.elapsed)
    own = best.run.elapsed - best.run.estimator_seconds
    return [
        ("ci-budget check, garnet(20, 4, 5): wall s", f"{best.run.elapsed:.3f}"),
        ("  estimator s / calls", f"{best.run.estimator_seconds:.3f} / {len(best.table)}"),
        ("  plugin's own work s (fraction of wall)", f"{own:.3f} ({own / best.run.elapsed:.0%})"),
    ]


def _children_cpu() -> float:
    """CPU seconds of the finished (joined) child processes so far."""
    usage = resource.getrusage(resource.RUSAGE_CHILDREN)
    return usage.ru_utime + usage.ru_stime


def _warm_pool(workers: int) -> ProcessPoolExecutor:
    pool = ProcessPoolExecutor(max_workers=workers, initializer=_import_rlrates)
    list(pool.map(_pause, [0.5] * workers))  # overlapping sleeps make every worker start
    return pool


def process_pool(states: int, workers: int) -> list[tuple[str, str]]:
    mdp = rlrates.garnet(states=states, actions=4, branching=10, seed=0)
    started, cpu = time.perf_counter(), time.process_time()
    serial = rlrates.check(reference.plugin_q_pi, mdp, CLAIM, budget="appendix", seed=0)
    serial_wall, serial_cpu = time.perf_counter() - started, time.process_time() - cpu
    # cold: a fresh pool whose workers import everything while the check runs
    started = time.perf_counter()
    with ProcessPoolExecutor(max_workers=workers) as pool:
        cold = rlrates.check(reference.plugin_q_pi, mdp, CLAIM, budget="appendix", seed=0, executor=pool)
        cold_wall = time.perf_counter() - started
    # the CPU a warm pool's start-up costs (imports), to subtract below
    before = _children_cpu()
    _warm_pool(workers).shutdown(wait=True)
    startup_cpu = _children_cpu() - before
    # warm: workers started and imports done before the clock starts
    before = _children_cpu()
    spawn_started = time.perf_counter()
    with _warm_pool(workers) as pool:
        spawn = time.perf_counter() - spawn_started
        started, cpu = time.perf_counter(), time.process_time()
        parallel = rlrates.check(reference.plugin_q_pi, mdp, CLAIM, budget="appendix", seed=0, executor=pool)
        parallel_wall, main_cpu = time.perf_counter() - started, time.process_time() - cpu
    workers_cpu = _children_cpu() - before - startup_cpu
    pd.testing.assert_frame_equal(_numbers(serial), _numbers(cold), check_exact=True)
    pd.testing.assert_frame_equal(_numbers(serial), _numbers(parallel), check_exact=True)
    cells = serial.table.groupby(["gamma", "n"]).ngroups
    control = machine_parallelism(workers)
    # if every process had a core of its own, the slowest of (main process, a worker) would set the pace
    free_cores = serial_cpu / max(main_cpu, workers_cpu / workers)
    return [
        (f"appendix-budget check, garnet({states}, 4, 10): calls / cells", f"{len(serial.table)} / {cells} (status {serial.status})"),
        ("  serial: wall s, CPU s (estimator s)", f"{serial_wall:.2f}, {serial_cpu:.2f} ({serial.run.estimator_seconds:.2f})"),
        (f"  ProcessPoolExecutor({workers}), cold pool: wall s", f"{cold_wall:.2f} (speed-up {serial_wall / cold_wall:.2f}x)"),
        (f"  ProcessPoolExecutor({workers}), warm pool: wall s", f"{parallel_wall:.2f} (+ {spawn:.2f} start-up and imports)"),
        ("  speed-up, warm pool (target >= 1.7 on 2 cores)", f"{serial_wall / parallel_wall:.2f}x"),
        ("  warm pool CPU s: main process, workers", f"{main_cpu:.2f}, {workers_cpu:.2f}"),
        ("  speed-up the CPU times allow on free cores", f"{free_cores:.2f}x (serial CPU / max(main, workers / {workers}))"),
        ("  tables identical (timing column aside)", "yes"),
        (f"  control: {workers} busy loops, pool vs one after another", f"{control:.2f}x (the parallelism the machine had)"),
    ]


def _timed_check(estimator: Any, mdp: rlrates.TabularMDP, budget: str) -> tuple[rlrates.CheckResult, float, float]:
    """One check: the result, its wall seconds and the process's peak resident size in MB so far."""
    started = time.perf_counter()
    result = rlrates.check(estimator, mdp, CLAIM, budget=budget, seed=0)
    wall = time.perf_counter() - started
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss  # KiB on Linux
    return result, wall, rss / 1024 if sys.platform != "darwin" else rss / 2**20


def large(states: int) -> list[tuple[str, str]]:
    mdp = rlrates.garnet(states=states, actions=4, branching=10, seed=0)
    estimator = CountingEstimator()
    tracemalloc.start()
    result, wall, rss_mb = _timed_check(estimator, mdp, "appendix")
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    assert estimator.built == 0, f"{estimator.built} batches built next_states"
    one_view = states * 4 * max(result.table["n"]) * 8 / 1e6
    return [
        (f"appendix-budget check, garnet({states}, 4, 10): wall s (estimator s)", f"{wall:.1f} ({result.run.estimator_seconds:.1f}), status {result.status}"),
        ("  peak traced allocations MB (tracemalloc)", f"{peak / 1e6:.0f}"),
        ("  peak resident size MB (ru_maxrss, whole process)", f"{rss_mb:.0f}"),
        ("  calls / batches that built next_states", f"{estimator.calls} / {estimator.built}"),
        ("  one (S, A, n_max) next_states view would be MB", f"{one_view:.0f}"),
    ]


def sparse_grid(side: int) -> list[tuple[str, str]]:
    """A ci-budget check of the plug-in on a side x side gridworld, stored sparse (10^4 states at 100).

    Memory is the process's peak resident size (tracemalloc is left off here: it slowed this
    check about 2.5x, allocations being most of the plug-in's sparse work).
    """
    started = time.perf_counter()
    mdp = rlrates.gridworld(side, side, walls=(), sparse=True)
    built = time.perf_counter() - started
    estimator = CountingEstimator()
    result, wall, rss_mb = _timed_check(estimator, mdp, "ci")
    dense_gb = 8 * mdp.states * mdp.actions * mdp.states / 1e9
    run = result.run
    measured = {
        f"ci-budget check, gridworld({side}, {side}) sparse: states, nonzeros of P": f"{mdp.states}, {mdp.P.nnz}",
        "  building the MDP s": f"{built:.2f}",
        "  check wall s (estimator s), passes, status": f"{wall:.1f} ({run.estimator_seconds:.1f}), {run.passes}, {result.status}",
        "  per estimator call ms (sparse LU of the plug-in model)": f"{1e3 * run.estimator_seconds / len(result.table):.1f}",
        "  plugin's own work s": f"{run.elapsed - run.estimator_seconds:.1f}",
        "  peak resident MB (ru_maxrss, whole process)": f"{rss_mb:.0f}",
        "  a dense (S, A, S) P alone would be GB": f"{dense_gb:.1f}",
        "  batches that built next_states": f"{estimator.built} of {estimator.calls}",
    }
    return list(measured.items())


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--states", type=int, default=400, help="garnet size for the serial vs pool run (default 400)")
    parser.add_argument("--workers", type=int, default=2, help="process-pool workers (default 2)")
    parser.add_argument("--large", action="store_true", help="also run the S=500 appendix-budget check with peak memory")
    parser.add_argument("--large-states", type=int, default=500, help="garnet size for --large (default 500)")
    parser.add_argument("--grid", type=int, default=0, metavar="SIDE",
                        help="only the sparse gridworld: a ci-budget check on SIDE x SIDE states (100 for 10^4)")
    args = parser.parse_args(argv)
    if args.grid:
        rows = sparse_grid(args.grid)
    else:
        rows = overhead()
        rows += process_pool(args.states, args.workers)
    if args.large:
        rows += large(args.large_states)
    width = max(len(label) for label, _ in rows) + 2
    print(f"cores: {os.cpu_count()}, load average at the end: {', '.join(f'{x:.1f}' for x in os.getloadavg())}, "
          f"BLAS threads: {os.environ['OPENBLAS_NUM_THREADS']}")
    for label, value in rows:
        print(f"{label:<{width}s}{value}")


if __name__ == "__main__":
    main()
