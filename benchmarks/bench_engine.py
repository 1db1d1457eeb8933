"""Engine speed: the plugin's own work against a competent vectorised hand loop and the sampling floor.

    python benchmarks/bench_engine.py                # S = 20 (b = 5), S = 100 (b = 5 and dense b = 100)
    python benchmarks/bench_engine.py --large        # also S = 1000 (b = 5), a ci-budget check of several seconds
    python benchmarks/bench_engine.py --repeats 5

Every row runs the ci budget's first pass (3 discounts x 5 sample sizes x 24
replicates = 360 calls of ``reference.plugin_q_pi``) three ways, and prints the
"own work" of each (wall time minus the time inside the estimator), best of
``--repeats``:

* **plugin**: ``rlrates.check(...)`` with ``Claim(n=-0.5)`` (one pass when it passes;
  a row with more passes is scaled to one pass and marked);
* **hand loop**: what a careful user writes without the plugin: per discount one
  ``numpy.linalg.solve`` for the exact Q^pi, per (gamma, n) cell one
  ``Generator.multinomial`` call drawing every replicate and every (s, a) row at once,
  the estimator per replicate, the sup-norm error, and one ``numpy.polyfit`` of the
  log mean error on log n per discount;
* **floor**: the least any harness must do: the cheaper of the hand loop's multinomial
  draws and the plugin's chain of binomials over each row's support (counts only),
  plus the exact solves.

Printed: own work in ms and the ratios plugin / hand loop and plugin / floor (the
issue's targets: <= 1.0 against the loop and <= 1.5 against the floor at S = 20,
<= 1.3 against the loop at dense S = 100). BLAS threads are pinned to 1. On a shared
machine the numbers move with the neighbours' load; the load average is printed.
"""

from __future__ import annotations

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
import time  # noqa: E402
from typing import Any  # noqa: E402

import numpy as np  # noqa: E402

import rlrates  # noqa: E402
from rlrates import reference  # noqa: E402
from rlrates.budgets import BUDGETS  # noqa: E402
from rlrates.sampling import mdp_kernel  # noqa: E402

CLAIM = rlrates.Claim(n=-0.5)
BUDGET = BUDGETS["ci"]


class _CountsBatch:
    def __init__(self, counts: np.ndarray, n: int) -> None:
        self.counts, self.n = counts, n


def _exact_q(mdp: rlrates.TabularMDP, gamma: float, policy: np.ndarray) -> np.ndarray:
    S = mdp.states
    P_pi = np.einsum("sa,sat->st", policy, mdp.P)
    values = np.linalg.solve(np.eye(S) - gamma * P_pi, (policy * mdp.R).sum(axis=1))
    return mdp.R + gamma * mdp.P @ values


def hand_loop(mdp: rlrates.TabularMDP, estimator: Any, seed: int) -> tuple[float, float]:
    """The vectorised harness: wall seconds and seconds inside the estimator."""
    S, A = mdp.states, mdp.actions
    policy = np.full((S, A), 1.0 / A)
    flat = mdp.P.reshape(S * A, S)
    rng = np.random.default_rng(seed)
    started = time.perf_counter()
    inside = 0.0
    for gamma in BUDGET.gammas:
        truth = _exact_q(mdp, gamma, policy)
        problem = rlrates.Problem(S, A, mdp.R, gamma, policy, "q_pi")
        means = []
        for n in BUDGET.n_grid:
            counts = rng.multinomial(n, flat, size=(BUDGET.replicates, S * A)).reshape(BUDGET.replicates, S, A, S)
            errors = np.empty(BUDGET.replicates)
            for r in range(BUDGET.replicates):
                t0 = time.perf_counter()
                estimate = estimator(_CountsBatch(counts[r], n), problem)
                inside += time.perf_counter() - t0
                errors[r] = np.abs(estimate - truth).max()
            means.append(errors.mean())
        np.polyfit(np.log(BUDGET.n_grid), np.log(means), 1)
    return time.perf_counter() - started, inside


def floor(mdp: rlrates.TabularMDP, seed: int) -> float:
    """Seconds for the draws alone (the cheaper sampler) plus one exact solve per discount."""
    S, A = mdp.states, mdp.actions
    flat = mdp.P.reshape(S * A, S)
    policy = np.full((S, A), 1.0 / A)
    kernel = mdp_kernel(mdp)
    timings = []
    for sampler in ("multinomial", "support"):
        rng = np.random.default_rng(seed)
        started = time.perf_counter()
        for _ in BUDGET.gammas:
            for n in BUDGET.n_grid:
                if sampler == "multinomial":
                    rng.multinomial(n, flat, size=(BUDGET.replicates, S * A))
                else:
                    kernel.sample_support(rng, n, BUDGET.replicates)
        timings.append(time.perf_counter() - started)
    started = time.perf_counter()
    for gamma in BUDGET.gammas:
        _exact_q(mdp, gamma, policy)
    return min(timings) + time.perf_counter() - started


def plugin_own(mdp: rlrates.TabularMDP, seed: int) -> tuple[float, int]:
    """Own work (s) of one check per pass, and its passes."""
    result = rlrates.check(reference.plugin_q_pi, mdp, CLAIM, seed=seed)
    return (result.run.elapsed - result.run.estimator_seconds) / result.run.passes, result.run.passes


def row(label: str, mdp: rlrates.TabularMDP, repeats: int) -> str:
    plugin_own(mdp, 999)  # warm-up: imports, caches
    ours = [plugin_own(mdp, seed) for seed in range(repeats)]
    own = min(o for o, _ in ours)
    passes = max(p for _, p in ours)
    loops = [hand_loop(mdp, reference.plugin_q_pi, seed) for seed in range(repeats)]
    loop_own = min(total - inside for total, inside in loops)
    bottom = min(floor(mdp, seed) for seed in range(repeats))
    mark = "" if passes == 1 else f"  (up to {passes} passes, per pass)"
    return (f"{label:<26s}{own * 1e3:12.1f}{loop_own * 1e3:15.1f}{bottom * 1e3:11.1f}"
            f"{own / loop_own:14.2f}{own / bottom:15.2f}{mark}")


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--repeats", type=int, default=3, help="best of this many runs (default 3)")
    parser.add_argument("--large", action="store_true", help="also S = 1000, b = 5")
    args = parser.parse_args(argv)
    cases = [("garnet(20, 4, 5)", rlrates.garnet(20, 4, 5, seed=0)),
             ("garnet(100, 4, 5)", rlrates.garnet(100, 4, 5, seed=0)),
             ("garnet(100, 4, 100) dense", rlrates.garnet(100, 4, 100, seed=0))]
    if args.large:
        cases.append(("garnet(1000, 4, 5)", rlrates.garnet(1000, 4, 5, seed=0)))
    print("ci-budget first pass, reference.plugin_q_pi: own work (wall minus estimator), best of "
          f"{args.repeats}")
    print(f"{'MDP':<26s}{'plugin ms':>12s}{'hand loop ms':>15s}{'floor ms':>11s}{'plugin/loop':>14s}{'plugin/floor':>15s}")
    for label, mdp in cases:
        print(row(label, mdp, args.repeats), flush=True)
    print(f"cores: {os.cpu_count()}, load average at the end: {', '.join(f'{x:.1f}' for x in os.getloadavg())}")


if __name__ == "__main__":
    main()
