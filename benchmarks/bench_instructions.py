"""Own work in instructions: the plugin, the hand loop and the sampling floor counted by valgrind, not timed.

    python benchmarks/bench_instructions.py               # Garnet(20, 4, 5), 6 checks per column (about 4 min)
    python benchmarks/bench_instructions.py --checks 10

``bench_engine.py`` times the same three columns, and on a shared virtual machine its
ratios move with the neighbours: in a noisy spell the interpreter-heavy own work slows
down about twice as much as the floor's draws (a tight C loop), so the plugin /
floor ratio of one run can read 1.43 and of the next 1.76 for the same code. Instruction
counts do not depend on the neighbours (repeat runs agree to about 2%), so this script
is the one to compare two versions of the engine with; the timed script stays the
measure of the issue's targets, which are about seconds.

Each column runs in its own process under ``valgrind --tool=callgrind`` twice, with 0 and
with ``--checks`` repetitions after the same set-up and warm-up; the difference divided
by the repetitions is the cost of one repetition:

* **plugin**: one ``rlrates.check`` of ``reference.plugin_q_pi`` (ci budget, seeds 10, 11, ...);
* **hand loop**: ``bench_engine.hand_loop`` (one multinomial over all S columns per cell);
  both call the estimator through ``bench_engine``'s clock, so both carry its instructions;
* **floor**: the plugin's support multinomial for the 15 cells plus the three exact solves
  (``bench_engine.floor``'s cheaper sampler at this size);
* **estimator**: ``reference.plugin_q_pi`` on 360 fixed count arrays, which gives the
  estimator's instructions per call; the plugin's and the hand loop's own work are their
  counts minus that per call times their calls (the plugin's two probe calls included).

Instructions are not seconds: the floor's draws retire about four instructions a
nanosecond here and interpreted Python fewer, so an instruction ratio understates the
timed one. Needs ``valgrind`` on the PATH (not a project dependency).
"""

from __future__ import annotations

import argparse
import os
import re
import shutil
import subprocess
import sys
import tempfile
from concurrent.futures import ThreadPoolExecutor

_COLUMNS = ("plugin", "loop", "floor", "estimator")


def _child(column: str, repeats: int) -> None:
    """Set up, warm up, then repeat one column ``repeats`` times (run under valgrind)."""
    sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
    import numpy as np

    import bench_engine as be
    import rlrates
    from rlrates import reference
    from rlrates.sampling import mdp_kernel

    mdp = rlrates.garnet(20, 4, 5, seed=0)
    budget = be.BUDGET
    if column == "plugin":
        def once(seed: int) -> None:  # behind the same clock as the hand loop's estimator (bench_engine)
            result = rlrates.check(be._OnReadyCounts(reference.plugin_q_pi).call, mdp, be.CLAIM, seed=seed)
            if seed >= 10:  # the rows (read without building a DataFrame) and the probe's two calls
                print(f"calls {len(result.evidence.rows) + 2}", flush=True)
    elif column == "loop":
        def once(seed: int) -> None:
            be.hand_loop(mdp, reference.plugin_q_pi, seed)
    elif column == "floor":
        kernel = mdp_kernel(mdp)
        policy = np.full((mdp.states, mdp.actions), 1.0 / mdp.actions)

        def once(seed: int) -> None:
            rng = np.random.default_rng(seed)
            for _ in budget.gammas:
                for n in budget.n_grid:
                    kernel.sample_support(rng, n, budget.replicates)
            for gamma in budget.gammas:
                be._exact_q(mdp, gamma, policy)
    else:
        rng = np.random.default_rng(0)
        flat = np.asarray(mdp.P).reshape(mdp.states * mdp.actions, mdp.states)
        batches = [be._CountsBatch(rng.multinomial(n, flat).reshape(mdp.P.shape), n)
                   for _ in budget.gammas for n in budget.n_grid for _ in range(budget.replicates)]
        uniform = np.full((mdp.states, mdp.actions), 1.0 / mdp.actions)
        problems = [rlrates.Problem(mdp.states, mdp.actions, mdp.R, gamma, uniform, "q_pi") for gamma in budget.gammas]

        def once(seed: int) -> None:
            for index, batch in enumerate(batches):
                reference.plugin_q_pi(batch, problems[index % len(problems)])
    for seed in range(2):  # warm-up: imports, caches
        once(seed)
    for seed in range(10, 10 + repeats):
        once(seed)


def _instructions(column: str, repeats: int, folder: str) -> tuple[int, str]:
    out = os.path.join(folder, f"{column}-{repeats}.out")
    done = subprocess.run(["valgrind", "--tool=callgrind", f"--callgrind-out-file={out}", sys.executable,
                           os.path.abspath(__file__), "--child", column, str(repeats)],
                          capture_output=True, text=True, env={**os.environ, "PYTHONHASHSEED": "0"}, check=True)
    found = re.search(r"Collected\s*:\s*(\d+)", done.stderr)
    if found is None:
        raise RuntimeError(f"no instruction count in valgrind's output for {column}:\n{done.stderr[-2000:]}")
    return int(found.group(1)), done.stdout


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--checks", type=int, default=6, help="repetitions per column (default 6)")
    parser.add_argument("--child", nargs=2, metavar=("COLUMN", "REPEATS"), help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.checks < 1:
        parser.error(f"--checks must be at least 1, got {args.checks}")
    if args.child:
        _child(args.child[0], int(args.child[1]))
        return
    if shutil.which("valgrind") is None:
        sys.exit("valgrind is not on the PATH: this benchmark counts instructions with callgrind")
    with tempfile.TemporaryDirectory(prefix="rlrates-instructions-") as folder, \
            ThreadPoolExecutor(max_workers=os.cpu_count() or 1) as pool:
        runs = {(column, k): pool.submit(_instructions, column, k, folder)
                for column in _COLUMNS for k in (0, args.checks)}
        per = {column: (runs[column, args.checks].result()[0] - runs[column, 0].result()[0]) / args.checks
               for column in _COLUMNS}
        calls = [int(line.split()[1]) for line in runs["plugin", args.checks].result()[1].split("\n")
                 if line.startswith("calls ")]
    from rlrates.budgets import BUDGETS  # the grid bench_engine.BUDGET runs (imports no numpy)

    ci = BUDGETS["ci"]
    budget_calls = len(ci.gammas) * len(ci.n_grid) * ci.replicates  # the estimator column's batches, the loop's calls
    per_call = per["estimator"] / budget_calls
    plugin = per["plugin"] - per_call * sum(calls) / len(calls)
    loop = per["loop"] - per_call * budget_calls
    floor = per["floor"]
    print(f"garnet(20, 4, 5), ci budget, {args.checks} repetitions per column; millions of instructions per check")
    print(f"{'plugin own':>12s}{'hand loop own':>15s}{'floor':>9s}{'estimator/call':>16s}{'plugin/loop':>13s}"
          f"{'plugin/floor':>14s}")
    print(f"{plugin / 1e6:12.2f}{loop / 1e6:15.2f}{floor / 1e6:9.2f}{per_call / 1e3:15.1f}k{plugin / loop:13.3f}"
          f"{plugin / floor:14.3f}")


if __name__ == "__main__":
    main()
