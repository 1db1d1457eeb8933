"""The figures of docs/logged-data.md: error against n per data regime, and error against C.

    python benchmarks/logged_figures.py --out docs

Runs the reference certainty-equivalence estimator (rlrates.reference_logged) under the
ci budget on Garnet(10, 2, 3) from i.i.d. transitions and from trajectories, and with a
coverage claim over behaviours of graded coverage; draws mean error (with the replicates'
standard error) against n per discount, and against C per n. Prints each check's fitted
exponents.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import matplotlib
import matplotlib.ticker

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402

import rlrates  # noqa: E402
from rlrates.reference_logged import logged_plugin_q_pi  # noqa: E402


def _means(table, by):
    grouped = table.groupby(by)["error"]
    return grouped.mean(), grouped.sem()


def _against_n(result, title: str, path: Path) -> None:
    fig, ax = plt.subplots(figsize=(3.4, 2.6), constrained_layout=True)
    mean, sem = _means(result.table, ["gamma", "n"])
    for gamma in sorted(result.table["gamma"].unique()):
        m, s = mean.loc[gamma], sem.loc[gamma]
        ax.errorbar(m.index, m.to_numpy(), yerr=s.to_numpy(), marker="o", ms=3, capsize=2, label=f"gamma={gamma:g}")
    n = result.table["n"].unique()
    first = mean.xs(sorted(result.table["gamma"].unique())[0], level="gamma")
    ax.plot(n, first.iloc[0] * (n / n.min()) ** -0.5, "k--", lw=0.8, label="n^-1/2")
    ax.set(xscale="log", yscale="log", xlabel="n (logged transitions)", ylabel="mean sup-norm error")
    ax.set_title(title, fontsize=8)
    ax.set_xticks(sorted(n), [f"{v:,}" for v in sorted(n)], fontsize=6)
    ax.xaxis.set_minor_locator(matplotlib.ticker.NullLocator())
    ax.legend(fontsize=6)
    fig.savefig(path, dpi=150)
    plt.close(fig)


def _against_c(result, path: Path) -> None:
    fig, ax = plt.subplots(figsize=(3.4, 2.6), constrained_layout=True)
    mean, sem = _means(result.table, ["n", "C"])
    for n in sorted(result.table["n"].unique()):
        m, s = mean.loc[n], sem.loc[n]
        ax.errorbar(m.index, m.to_numpy(), yerr=s.to_numpy(), marker="o", ms=3, capsize=2, label=f"n={n}")
    fit = result.fit("coverage")
    ax.set(xscale="log", yscale="log", xlabel="concentrability C of the data", ylabel="mean sup-norm error")
    ax.set_title(f"C-exponent {fit.exponent:+.2f} (claim <= +0.5)", fontsize=8)
    coverages = sorted(result.table["C"].unique())
    ax.set_xticks(coverages, [f"{c:.3g}" for c in coverages])
    ax.xaxis.set_minor_locator(matplotlib.ticker.NullLocator())
    ax.legend(fontsize=6)
    fig.savefig(path, dpi=150)
    plt.close(fig)


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", type=Path, default=Path("docs"))
    args = parser.parse_args()
    mdp = rlrates.garnet(states=10, actions=2, branching=3, seed=0)
    for data in ("transitions", "trajectories"):
        result = rlrates.check(logged_plugin_q_pi, mdp, rlrates.Claim(n=-0.5), data=data)
        print(data, result.status, [fit.describe() for fit in result.factors])
        _against_n(result, f"plug-in from {data}: {result.status}", args.out / f"logged-data-{data}.png")
    coverage = rlrates.check(logged_plugin_q_pi, mdp, rlrates.Claim(n=-0.5, coverage=0.5), data="transitions")
    print("coverage", coverage.status, [fit.describe() for fit in coverage.factors])
    _against_c(coverage, args.out / "logged-data-coverage.png")
    return 0


if __name__ == "__main__":
    sys.exit(main())
