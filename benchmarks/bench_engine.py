"""Engine speed: a ci-budget check of the plug-in evaluator vs a straightforward hand-written harness.

    python benchmarks/bench_engine.py

Both run the same grid (the ci budget's first pass: 3 discounts x 5 sample
sizes x 24 replicates) with the same estimator. The hand-written harness samples
with one ``Generator.choice`` call per (s, a), solves the target by value
iteration to 1e-10 once per discount, and fits slopes with
``scipy.stats.linregress``. Printed: wall time, time inside the estimator, and
the rest ("own work"), with the ratio of own work. Targets (issue: rate engine):
a ci-budget check in about 1 s, own work at least 20x below the harness's.
"""

from __future__ import annotations

import time
from typing import Any

import numpy as np
from scipy import stats

import rlrates
from rlrates import reference
from rlrates.budgets import BUDGETS


class _CountsBatch:
    def __init__(self, counts: np.ndarray, n: int) -> None:
        self.counts, self.n = counts, n


def hand_written_harness(mdp: rlrates.TabularMDP, estimator: Any) -> tuple[float, float]:
    budget = BUDGETS["ci"]
    S, A = mdp.states, mdp.actions
    policy = np.full((S, A), 1.0 / A)
    rng = np.random.default_rng(0)
    started = time.perf_counter()
    in_estimator = 0.0
    for gamma in budget.gammas:
        q = np.zeros((S, A))
        while True:  # value iteration to 1e-10
            updated = mdp.R + gamma * mdp.P @ (policy * q).sum(axis=1)
            if np.max(np.abs(updated - q)) < 1e-10:
                break
            q = updated
        problem = rlrates.Problem(S, A, mdp.R, gamma, policy, "q_pi")
        means = []
        for n in budget.n_grid:
            errors = []
            for _ in range(budget.replicates):
                counts = np.zeros((S, A, S), dtype=np.int64)
                for s in range(S):
                    for a in range(A):
                        draws = rng.choice(S, size=n, p=mdp.P[s, a])
                        counts[s, a] = np.bincount(draws, minlength=S)
                t0 = time.perf_counter()
                estimate = estimator(_CountsBatch(counts, n), problem)
                in_estimator += time.perf_counter() - t0
                errors.append(np.max(np.abs(estimate - updated)))
            means.append(np.mean(errors))
        stats.linregress(np.log(budget.n_grid), np.log(means))
    return time.perf_counter() - started, in_estimator


def main() -> None:
    mdp = rlrates.garnet(states=20, actions=4, branching=5, seed=0)
    claim = rlrates.Claim(n=-0.5, horizon=2.0)
    rlrates.check(reference.plugin_q_pi, mdp, claim, seed=99)  # warm-up: imports, caches
    best = min(
        (rlrates.check(reference.plugin_q_pi, mdp, claim, seed=seed) for seed in range(3)),
        key=lambda r: r.elapsed,
    )
    first_pass = best.table[best.table["replicate"] < BUDGETS["ci"].replicates]
    own = best.elapsed - best.estimator_seconds
    harness_total, harness_estimator = min(hand_written_harness(mdp, reference.plugin_q_pi) for _ in range(2))
    harness_own = harness_total - harness_estimator
    print(f"ci-budget check, plug-in q_pi, garnet S=20 A=4 b=5 ({best.passes} pass(es), {len(best.table)} calls; "
          f"first pass {len(first_pass)} calls)")
    print(f"{'':28s}{'wall s':>10s}{'estimator s':>14s}{'own work s':>12s}")
    print(f"{'rlrates.check':28s}{best.elapsed:10.3f}{best.estimator_seconds:14.3f}{own:12.3f}")
    print(f"{'hand-written harness':28s}{harness_total:10.3f}{harness_estimator:14.3f}{harness_own:12.3f}")
    per_call_ours = own / len(best.table)
    per_call_theirs = harness_own / len(first_pass)
    print(f"own work per estimator call: {per_call_ours * 1e3:.3f} ms vs {per_call_theirs * 1e3:.3f} ms "
          f"-> ratio {per_call_theirs / per_call_ours:.1f}x (target >= 20x)")
    print(f"ci-budget check wall time {best.elapsed:.2f} s (target about 1 s)")


if __name__ == "__main__":
    main()
