"""Operating characteristic of each budget: how often a check fails, by the size of the shortfall.

    python benchmarks/operating_characteristic.py --budget ci --seeds 100 --workers 2 \
        --markdown docs/operating-characteristic-ci.md --figure docs/operating-characteristic-ci.png

Synthetic estimators of known exponents (exact Q^pi plus an error of size
0.05 n^a H^b with log-normal noise, ``tests/engine/zoo.py``'s ``SyntheticPower``) on
Garnet(20, 4, 5) are checked against the claim n^-1/2 H^2 with a shortfall added
to one exponent at a time: a = -0.5 + d (the n-exponent falls too slowly by d) or
b = 2 + d (the error grows too fast in H by d). Printed per shortfall: the share of
fail / pass / inconclusive verdicts over the master seeds, with Clopper-Pearson 95%
intervals (scipy.stats.binomtest).
"""

from __future__ import annotations

import argparse
import sys
import time
import warnings
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import pandas as pd
from scipy import stats

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests" / "engine"))

import rlrates  # noqa: E402
import zoo  # noqa: E402
from calibrate import markdown_table  # noqa: E402

SHORTFALLS = {"n": (0.0, 0.05, 0.08, 0.1, 0.12, 0.15, 0.2), "horizon": (0.0, 0.1, 0.2, 0.3, 0.4, 0.5, 0.6)}
CLAIM = rlrates.Claim(n=-0.5, horizon=2.0)


def _run(job: tuple[str, float, int, str]) -> tuple[str, float, str]:
    factor, shortfall, seed, budget = job
    mdp = rlrates.garnet(states=20, actions=4, branching=5, seed=7)
    a, b = (-0.5 + shortfall, 1.0) if factor == "n" else (-0.5, 2.0 + shortfall)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", rlrates.RatesWarning)
        status = rlrates.check(zoo.SyntheticPower(mdp, a, b), mdp, CLAIM, budget=budget, seed=seed).status
    return factor, shortfall, status


def _share(k: int, n: int) -> tuple[float, float, float]:
    ci = stats.binomtest(k, n).proportion_ci(confidence_level=0.95, method="exact")
    return k / n, ci.low, ci.high


def characteristic(budget: str, seeds: int, workers: int) -> pd.DataFrame:
    jobs = [(factor, d, seed, budget) for factor, ds in SHORTFALLS.items() for d in ds for seed in range(seeds)]
    with ProcessPoolExecutor(max_workers=workers) as pool:
        outcomes = pd.DataFrame(pool.map(_run, jobs, chunksize=4), columns=["factor", "shortfall", "status"])
    rows = []
    for (factor, shortfall), group in outcomes.groupby(["factor", "shortfall"], sort=False):
        count = len(group)
        row: dict[str, object] = {"factor": factor, "shortfall": shortfall, "checks": count}
        for status in ("fail", "pass", "inconclusive"):
            share, low, high = _share(int((group["status"] == status).sum()), count)
            row[status] = share
            row[f"{status} [95% CI]"] = f"{share:.2f} [{low:.2f}, {high:.2f}]"
        rows.append(row)
    return pd.DataFrame(rows)


def _figure(table: pd.DataFrame, budget: str, path: Path) -> None:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, axes = plt.subplots(1, 2, figsize=(6.5, 2.6), sharey=True, constrained_layout=True)
    tolerance = {"n": rlrates.BUDGETS[budget].n_tolerance, "horizon": rlrates.BUDGETS[budget].horizon_tolerance}
    for ax, factor, label in zip(axes, ("n", "horizon"), ("n-exponent shortfall", "H-exponent shortfall")):
        part = table[table["factor"] == factor]
        ax.plot(part["shortfall"], part["fail"], "o-", color="#b2182b", label="fail")
        ax.plot(part["shortfall"], part["pass"], "s--", color="#2166ac", label="pass")
        ax.plot(part["shortfall"], part["inconclusive"], "^:", color="#666666", label="inconclusive")
        ax.axvline(tolerance[factor], color="#999999", lw=0.8)
        ax.text(tolerance[factor], 0.5, " tolerance", fontsize=7, color="#555555", rotation=90, va="center")
        ax.set_xlabel(label, fontsize=8)
        ax.tick_params(labelsize=7)
        ax.set_ylim(-0.03, 1.03)
    axes[0].set_ylabel("share of checks", fontsize=8)
    axes[0].legend(fontsize=7, frameon=False)
    fig.suptitle(f"budget {budget}: verdicts against the claim n^-1/2 H^2", fontsize=9)
    fig.savefig(path, dpi=150, metadata={"Software": None})
    plt.close(fig)


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--budget", default="ci", choices=sorted(rlrates.BUDGETS))
    parser.add_argument("--seeds", type=int, default=50)
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--markdown", type=Path)
    parser.add_argument("--figure", type=Path)
    args = parser.parse_args()
    started = time.perf_counter()
    table = characteristic(args.budget, args.seeds, args.workers)
    shown = table[["factor", "shortfall", "checks", "fail [95% CI]", "pass [95% CI]", "inconclusive [95% CI]"]]
    header = f"budget {args.budget}: {int(table['checks'].sum())} checks in {time.perf_counter() - started:.0f} s"
    print(shown.to_string(index=False))
    print(header)
    if args.markdown:
        args.markdown.write_text("\n".join([f"`{header}`", "", markdown_table(shown), ""]))
    if args.figure:
        _figure(table, args.budget, args.figure)
    return 0


if __name__ == "__main__":
    sys.exit(main())
