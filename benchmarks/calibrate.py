"""Calibration: how often is a check wrong? Runs the zoo under many master seeds.

    python benchmarks/calibrate.py --seeds 300 --slow-seeds 40 --budget ci --workers 2 \
        --markdown docs/calibration.md
    python benchmarks/calibrate.py --zoo logged --seeds 50 --budget ci --markdown docs/calibration-logged-ci.md

For every zoo member (tests/engine/zoo.py, or with ``--zoo logged`` the logged-data
zoo of tests/engine/zoo_logged.py) and master seed it runs one whole check and
tallies pass / fail / inconclusive / error. Printed per member: the share of each
verdict with Clopper-Pearson 95% intervals (scipy.stats.binomtest), and the mean
time per check. Summary lines: the false-alarm rate (correct members that
failed) and the lowest detection rate (broken members that failed).
"""

from __future__ import annotations

import argparse
import sys
import time
import warnings
from collections import Counter
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import pandas as pd
from scipy import stats

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests" / "engine"))

import rlrates  # noqa: E402
import zoo  # noqa: E402
import zoo_logged  # noqa: E402

ZOOS = {"generative": zoo.members, "logged": zoo_logged.logged_members}


def _run(job: tuple[int, int, str, str]) -> tuple[int, str, float]:
    index, seed, budget, which = job
    member = ZOOS[which]()[index]
    started = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", rlrates.RatesWarning)
        try:
            status = rlrates.check(member.estimator, member.mdp, member.claim, target=member.target, budget=budget,
                                   seed=seed, data=member.data).status
        except Exception as exc:  # a crash of the check itself is a finding: tally it, keep calibrating
            print(f"{member.name}, seed {seed}: check raised {type(exc).__name__}: {exc}", file=sys.stderr)
            status = "crash"
    return index, status, time.perf_counter() - started


def _interval(k: int, n: int) -> str:
    if n == 0:
        return "n/a"
    ci = stats.binomtest(k, n).proportion_ci(confidence_level=0.95, method="exact")
    return f"{k / n:.3f} [{ci.low:.3f}, {ci.high:.3f}]"


def calibrate(seeds: int, slow_seeds: int, budget: str, workers: int, which: str = "generative") -> pd.DataFrame:
    members = ZOOS[which]()
    jobs = [
        (i, seed, budget, which)
        for i, member in enumerate(members)
        for seed in range(slow_seeds if member.slow else seeds)
    ]
    tallies: dict[int, Counter[str]] = {i: Counter() for i in range(len(members))}
    seconds: dict[int, float] = {i: 0.0 for i in range(len(members))}
    with ProcessPoolExecutor(max_workers=workers) as pool:
        for index, status, spent in pool.map(_run, jobs, chunksize=4):
            tallies[index][status] += 1
            seconds[index] += spent
    rows = []
    for i, member in enumerate(members):
        count = sum(tallies[i].values())
        expected = member.expects(budget)
        if expected == "pass":
            wrong = tallies[i]["fail"] + tallies[i]["error"]
        elif expected == "error":
            wrong = count - tallies[i]["error"]
        else:  # "fail", or "not pass" inside the indifference zone
            wrong = tallies[i]["pass"] + (tallies[i]["error"] if expected == "fail" else 0)
        rows.append({
            "member": member.name,
            "target": member.target if member.data == "generative" else f"{member.target} ({member.data})",
            "expected": expected,
            "checks": count,
            "fails": tallies[i]["fail"],
            "inconclusives": tallies[i]["inconclusive"],
            "fail share [95% CI]": _interval(tallies[i]["fail"], count),
            "pass share [95% CI]": _interval(tallies[i]["pass"], count),
            "inconclusive": _interval(tallies[i]["inconclusive"], count),
            "errors": tallies[i]["error"] + tallies[i]["crash"],
            "wrong verdicts": wrong,
            "s/check": round(seconds[i] / max(count, 1), 3),
            "why": member.source,
        })
    return pd.DataFrame(rows)


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seeds", type=int, default=50, help="master seeds per fast member")
    parser.add_argument("--slow-seeds", type=int, default=10, help="master seeds per slow (Q-learning) member")
    parser.add_argument("--budget", default="ci", choices=sorted(rlrates.BUDGETS))
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--zoo", default="generative", choices=sorted(ZOOS), help="which zoo to calibrate")
    parser.add_argument("--markdown", type=Path, help="also write the table as Markdown here")
    args = parser.parse_args()
    started = time.perf_counter()
    table = calibrate(args.seeds, args.slow_seeds, args.budget, args.workers, args.zoo)
    correct = table[table["expected"] == "pass"]
    broken = table[table["expected"] == "fail"]
    zone = table[table["expected"] == "not pass"]
    detection = broken["fails"] / broken["checks"]
    weakest = broken.loc[detection.idxmin(), "member"]
    total = int(table["checks"].sum())
    passes = int((correct["checks"] - correct["fails"] - correct["inconclusives"] - correct["errors"]).sum())
    summary = [
        f"{args.zoo} zoo, budget {args.budget}: {total} checks in {time.perf_counter() - started:.0f} s on {args.workers} worker(s)",
        f"false alarms on correct estimators: {_interval(int(correct['fails'].sum()), int(correct['checks'].sum()))}",
        f"passes of correct estimators: {_interval(passes, int(correct['checks'].sum()))}",
        f"lowest detection rate on broken estimators: {detection.min():.3f} ({weakest})",
        f"wrong verdicts on gross bugs that must be errors: {int(table.loc[table['expected'] == 'error', 'wrong verdicts'].sum())}",
        f"passes inside the indifference zone: {int(zone['wrong verdicts'].sum())} of {int(zone['checks'].sum())}",
        f"inconclusive share over all checks: {_interval(int(table['inconclusives'].sum()), total)}",
    ]
    table = table.drop(columns=["fails", "inconclusives"])
    with pd.option_context("display.max_colwidth", 60, "display.width", 250):
        print(table.drop(columns="why").to_string(index=False))
    print("\n".join(summary))
    if args.markdown:
        args.markdown.parent.mkdir(parents=True, exist_ok=True)
        text = "\n".join(["```", *summary, "```", "", markdown_table(table), ""])
        args.markdown.write_text(text)
    return 0


def markdown_table(table: pd.DataFrame) -> str:
    header = "| " + " | ".join(table.columns) + " |"
    rule = "|" + "|".join("---" for _ in table.columns) + "|"
    body = ["| " + " | ".join(str(v) for v in row) + " |" for row in table.itertuples(index=False)]
    return "\n".join([header, rule, *body])


if __name__ == "__main__":
    sys.exit(main())
