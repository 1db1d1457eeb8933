"""Did a refactor change any verdict? Record every zoo check's outcome, then compare two recordings.

    python benchmarks/verdict_identity.py record before.json --seeds 10 --logged-seeds 3
    ... change the code ...
    python benchmarks/verdict_identity.py record after.json --seeds 10 --logged-seeds 3
    python benchmarks/verdict_identity.py compare before.json after.json

``record`` runs every member of both zoos (tests/engine/zoo.py and zoo_logged.py)
under the given master seeds and budgets, and writes per check: the status, the
sub-tests that fired, what an unclear verdict needs, the number of passes, every
fitted factor (exponent, standard error, both bounds, verdict), the reasons and
notes, the message without its timing line, and the sha256 of the table without
its ``seconds`` column. ``compare`` prints every check whose status, fired
sub-tests, passes or table differ (these must be none for a change that claims
identical verdicts), the largest relative difference of any fitted number, and
how many messages differ in their text. Exit 1 when any verdict or table differs.

It is the before/after evidence for changes that must keep verdicts and tables
identical (speed work, refactors), cheaper than a full calibration rerun.
"""

from __future__ import annotations

import argparse
import hashlib
import json
import math
import sys
import time
import warnings
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path
from typing import Any

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests" / "engine"))

import rlrates  # noqa: E402
import zoo  # noqa: E402
import zoo_logged  # noqa: E402

ZOOS = {"generative": zoo.members, "logged": zoo_logged.logged_members}


def _record(job: tuple[str, int, int, str]) -> dict[str, Any]:
    which, index, seed, budget = job
    member = ZOOS[which]()[index]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", rlrates.RatesWarning)
        result = rlrates.check(member.estimator, member.mdp, member.claim, target=member.target, budget=budget,
                               seed=seed, data=member.data)
    table = result.table.drop(columns=["seconds"]).to_csv(index=False)
    message = "\n".join(line for line in result.message.splitlines() if not line.startswith("budget:"))
    return {
        "check": f"{which}/{member.name}/{budget}/seed={seed}",
        "status": result.status, "fired": list(result.fired), "passes": result.run.passes,
        "fits": [[f.factor, f.exponent, f.se, f.low, f.high, f.verdict] for f in result.factors],
        "reasons": list(result.reasons), "notes": list(result.notes), "message": message,
        "table_sha256": hashlib.sha256(table.encode()).hexdigest(),
    }


def record(path: Path, seeds: int, logged_seeds: int, budgets: list[str], workers: int,
           zoos: tuple[str, ...] = ("generative", "logged")) -> None:
    jobs = []
    for budget in budgets:
        scale = 1 if budget == "ci" else 4  # an appendix check costs several ci checks
        for which, count in (("generative", seeds), ("logged", logged_seeds)):
            if which not in zoos:
                continue
            for index, member in enumerate(ZOOS[which]()):
                per = max(1, (count // 3 if member.slow else count) // scale)
                jobs.extend((which, index, seed, budget) for seed in range(per))
    started = time.perf_counter()
    with ProcessPoolExecutor(max_workers=workers) as pool:
        records = list(pool.map(_record, jobs, chunksize=2))
    path.write_text(json.dumps(records, indent=1) + "\n")
    print(f"{len(records)} checks recorded in {time.perf_counter() - started:.0f} s to {path}")


def _relative(a: Any, b: Any) -> float:
    if a is None or b is None or (isinstance(a, float) and isinstance(b, float) and math.isnan(a) and math.isnan(b)):
        return 0.0 if a == b or (a is not None and b is not None) else math.inf
    if a == b:
        return 0.0
    return abs(a - b) / max(abs(a), abs(b))


def compare(before: Path, after: Path, only: tuple[str, ...] = ()) -> int:
    old = {r["check"]: r for r in json.loads(before.read_text()) if all(part in r["check"] for part in only)}
    new = {r["check"]: r for r in json.loads(after.read_text()) if all(part in r["check"] for part in only)}
    if old.keys() != new.keys():
        print(f"the recordings hold different checks: {len(old.keys() ^ new.keys())} not in both")
        return 1
    changed, worst, messages = [], 0.0, 0
    for key, a in old.items():
        b = new[key]
        for field in ("status", "fired", "passes", "table_sha256"):
            if a[field] != b[field]:
                changed.append(f"{key}: {field} {a[field]!r} -> {b[field]!r}")
        if len(a["fits"]) != len(b["fits"]) or any(x[0] != y[0] or x[5] != y[5] for x, y in zip(a["fits"], b["fits"])):
            changed.append(f"{key}: fitted factors or their verdicts changed")
        else:
            for x, y in zip(a["fits"], b["fits"]):
                worst = max([worst] + [_relative(u, v) for u, v in zip(x[1:5], y[1:5])])
        messages += a["message"] != b["message"]
    print(f"{len(old)} checks compared")
    print(f"verdicts, fired sub-tests, passes or tables that differ: {len(changed)}")
    print("\n".join("  " + line for line in changed))
    print(f"largest relative difference of a fitted exponent, standard error or bound: {worst:.3g}")
    print(f"messages whose text differs (timing line left out): {messages}")
    return 1 if changed else 0


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    sub = parser.add_subparsers(dest="command", required=True)
    rec = sub.add_parser("record", help="run the zoos and write their outcomes")
    rec.add_argument("path", type=Path)
    rec.add_argument("--seeds", type=int, default=10, help="master seeds per generative member (a third for slow ones)")
    rec.add_argument("--logged-seeds", type=int, default=3, help="master seeds per logged-data member")
    rec.add_argument("--budget", action="append", choices=sorted(rlrates.BUDGETS),
                     help="budget(s) to run (default ci; appendix runs a quarter of the seeds)")
    rec.add_argument("--workers", type=int, default=1)
    rec.add_argument("--zoo", action="append", choices=sorted(ZOOS), help="zoo(s) to run (default both)")
    cmp = sub.add_parser("compare", help="compare two recordings")
    cmp.add_argument("before", type=Path)
    cmp.add_argument("after", type=Path)
    cmp.add_argument("--only", action="append", default=[],
                     help="compare only the checks whose name contains this (repeatable), e.g. logged/ or /ci/")
    args = parser.parse_args()
    if args.command == "record":
        record(args.path, args.seeds, args.logged_seeds, args.budget or ["ci"], args.workers,
               tuple(args.zoo or ZOOS))
        return 0
    return compare(args.before, args.after, tuple(args.only))


if __name__ == "__main__":
    raise SystemExit(main())
