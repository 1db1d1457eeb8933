"""A 10^5-state sparse gridworld, appendix budget, on a dask cluster of local processes.

    python benchmarks/bench_cluster_grid.py                 # 316 x 316 (99,856 states), 2 workers
    python benchmarks/bench_cluster_grid.py --side 60 --budget ci   # a quick rehearsal
    python benchmarks/bench_cluster_grid.py --serial        # the same check without a cluster

One ``rlrates.check`` of ``reference.plugin_q_pi`` (one sparse LU solve per call) on
``gridworld(side, side, walls=(), sparse=True)`` through ``client.get_executor()`` of a
``LocalCluster(n_workers, threads_per_worker=1)``, started (and its workers' imports
done) before the clock starts. Printed: the wall time, the verdict, the calls, the
estimator seconds summed over every call (measured inside the workers), the
process's peak resident size, and the speed-up's lower bound: a serial run takes at
least the summed estimator seconds, so ``summed / wall`` bounds the speed-up from below
(the serial run itself, about as long as the summed cell work, is not repeated here).
dask's nanny ``MALLOC_TRIM_THRESHOLD_`` is unset in the workers (see bench_engine.py).
"""

from __future__ import annotations

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
import logging  # noqa: E402
import resource  # noqa: E402
import time  # noqa: E402

import rlrates  # noqa: E402
from rlrates import reference  # noqa: E402


def _import_rlrates() -> None:
    import rlrates.rate_check  # noqa: F401
    import rlrates.sweep  # noqa: F401


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--side", type=int, default=316, help="grid side (default 316: 99,856 states)")
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--budget", default="appendix", choices=sorted(rlrates.BUDGETS))
    parser.add_argument("--serial", action="store_true", help="run the same check serially instead (the speed-up's base)")
    args = parser.parse_args(argv)
    if args.serial:
        return _serial(args.side, args.budget)
    try:
        import dask
        from dask.distributed import Client, LocalCluster
    except ImportError:
        print("dask.distributed is not installed (pip install 'pytest-rlrates[cluster]')")
        return 1
    started = time.perf_counter()
    mdp = rlrates.gridworld(args.side, args.side, walls=(), sparse=True)
    print(f"gridworld({args.side}, {args.side}) sparse: {mdp.states} states, {mdp.P.nnz} nonzeros, "
          f"built in {time.perf_counter() - started:.1f} s", flush=True)
    started = time.perf_counter()
    with dask.config.set({"distributed.nanny.pre-spawn-environ.MALLOC_TRIM_THRESHOLD_": None}), \
            LocalCluster(n_workers=args.workers, threads_per_worker=1, processes=True, dashboard_address=None,
                         silence_logs=logging.ERROR) as cluster, Client(cluster) as client:
        client.run(_import_rlrates)
        start_up = time.perf_counter() - started
        started = time.perf_counter()
        result = rlrates.check(reference.plugin_q_pi, mdp, rlrates.Claim(n=-0.5), budget=args.budget, seed=0,
                               executor=client.get_executor())
        wall = time.perf_counter() - started
        worker_peaks = client.run(lambda: resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024)
    summed = result.run.estimator_seconds
    print(f"{args.budget}-budget check on LocalCluster({args.workers} workers; start-up {start_up:.1f} s): "
          f"{wall:.0f} s wall, status {result.status}, {result.run.passes} pass(es), {result.estimator_calls} calls")
    print(f"estimator seconds summed over the calls: {summed:.0f} s; speed-up over a serial run at least "
          f"{summed / wall:.2f}x")
    print(f"peak resident size: this process {resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024:.0f} MB; "
          f"workers {', '.join(f'{peak:.0f}' for peak in worker_peaks.values())} MB")
    print(f"cores: {os.cpu_count()}, load average at the end: {', '.join(f'{x:.1f}' for x in os.getloadavg())}")
    print(result.message.splitlines()[0])
    return 0


def _serial(side: int, budget: str) -> int:
    mdp = rlrates.gridworld(side, side, walls=(), sparse=True)
    started = time.perf_counter()
    result = rlrates.check(reference.plugin_q_pi, mdp, rlrates.Claim(n=-0.5), budget=budget, seed=0)
    wall = time.perf_counter() - started
    print(f"{budget}-budget check, serial: {wall:.0f} s wall, status {result.status}, {result.run.passes} pass(es), "
          f"{result.estimator_calls} calls, {result.run.estimator_seconds:.0f} s in the estimator; peak resident size "
          f"{resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024:.0f} MB")
    print(f"cores: {os.cpu_count()}, load average at the end: {', '.join(f'{x:.1f}' for x in os.getloadavg())}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
