"""Timings of the numerical foundation: generative-model draws and an exact solve.

Run with ``python benchmarks/bench_foundation.py``. Prints best-of-3 wall times
(time.perf_counter) for

* drawing the (S, A, S) counts with :func:`rlrates.draw`, S=100, A=5, n=10 000;
* building the (S, A, n) next-state array from those counts;
* a naive loop of one ``Generator.choice`` call per (s, a) producing the same
  (S, A, n) array, and the ratio naive / rlrates;
* one exact ``q_pi`` solve on a garnet with S=1000, A=5, branching 10.
"""

from __future__ import annotations

import time
from collections.abc import Callable

import numpy as np

import rlrates
from rlrates.exact import q_pi

REPEATS = 3


def best_of(fn: Callable[[], object], repeats: int = REPEATS) -> float:
    """Smallest wall time of ``repeats`` calls, in seconds."""
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return min(times)


def naive_next_states(mdp: rlrates.TabularMDP, n: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    out = np.empty((mdp.states, mdp.actions, n), dtype=np.int64)
    for s in range(mdp.states):
        for a in range(mdp.actions):
            out[s, a] = rng.choice(mdp.states, size=n, p=mdp.P[s, a])
    return out


def main() -> None:
    S, A, n = 100, 5, 10_000
    mdp = rlrates.garnet(S, A, branching=10, seed=0)

    t_counts = best_of(lambda: rlrates.draw(mdp, n, seed=1).counts)
    t_both = best_of(lambda: rlrates.draw(mdp, n, seed=1).next_states)
    t_naive = best_of(lambda: naive_next_states(mdp, n, seed=1))

    big = rlrates.garnet(1000, 5, branching=10, seed=0)
    t_solve = best_of(lambda: q_pi(big, 0.99))

    rows = [
        (f"draw counts (S={S}, A={A}, n={n})", t_counts, t_naive / t_counts),
        ("draw + next_states array", t_both, t_naive / t_both),
        ("naive Generator.choice per (s, a)", t_naive, 1.0),
        ("exact q_pi, garnet S=1000 A=5 b=10", t_solve, None),
    ]
    width = max(len(label) for label, _, _ in rows)
    print(f"best of {REPEATS}; numpy {np.__version__}")
    print(f"{'task':<{width}}  {'time [ms]':>10}  {'naive / this':>12}")
    print(f"{'-' * width}  {'-' * 10}  {'-' * 12}")
    for label, seconds, ratio in rows:
        ratio_text = f"{ratio:>11.1f}x" if ratio is not None else f"{'':>12}"
        print(f"{label:<{width}}  {seconds * 1e3:>10.2f}  {ratio_text}")


if __name__ == "__main__":
    main()
