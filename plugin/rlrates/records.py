"""Check records: the short, JSON-safe account of one check that travels on a pytest report.

The pytest layer turns each :class:`~rlrates.rate_check.CheckResult` into a
:class:`CheckRecord`, attaches it to the test item as the user property
``("rlrates", json)`` (so it crosses pytest-xdist and lands in JUnit XML), and
formats all records of a session into the terminal summary with
:func:`format_summary`. Pure: no pytest, no numpy at import time.
"""

from __future__ import annotations

import json
import math
from collections import Counter
from collections.abc import Iterable, Mapping
from dataclasses import asdict, dataclass
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:  # pragma: no cover
    from .rate_check import CheckResult

__all__ = ["PROPERTY_NAME", "FitRecord", "CheckRecord", "format_summary"]

#: The name of the user property (and JUnit XML property) that carries a record.
PROPERTY_NAME = "rlrates"


def _as_float(value: Any) -> float:
    return float(value)


def _finite_or_none(value: Any) -> float | None:
    number = _as_float(value)
    return number if math.isfinite(number) else None


@dataclass(frozen=True)
class FitRecord:
    """One fitted factor: exponent with its one-sided bounds, the claimed bound and the verdict."""

    factor: str
    exponent: float | None
    low: float | None
    high: float | None
    claimed: float
    verdict: str

    def describe(self) -> str:
        label = "n" if self.factor == "n" else "H"
        if self.exponent is None or self.low is None or self.high is None:
            seen = "not measurable"
        else:
            seen = f"{self.exponent:+.3f} in [{self.low:+.3f}, {self.high:+.3f}]"
        return f"{label} {seen}, claimed <= {self.claimed:+g}: {self.verdict}"


@dataclass(frozen=True)
class CheckRecord:
    """What the session summary shows about one check."""

    test: str
    status: str
    target: str
    mdp: str
    claim: str
    fits: tuple[FitRecord, ...]
    fired: tuple[str, ...]
    seconds: float
    seed: int
    profile: str
    passes: int
    calls: int

    @classmethod
    def from_result(cls, result: "CheckResult", test: str) -> "CheckRecord":
        fits = tuple(
            FitRecord(
                str(row.factor),
                _finite_or_none(row.exponent),
                _finite_or_none(row.low),
                _finite_or_none(row.high),
                _as_float(row.claimed),
                str(row.verdict),
            )
            for row in result.fits.itertuples(index=False)
        )
        return cls(
            test=test,
            status=result.status,
            target=result.target,
            mdp=result.mdp_name,
            claim=result.claim.describe(),
            fits=fits,
            fired=tuple(result.fired),
            seconds=float(result.elapsed),
            seed=int(result.seed),
            profile=result.profile.name,
            passes=int(result.passes),
            calls=int(len(result.table)),
        )

    def to_json(self) -> str:
        return json.dumps(asdict(self), sort_keys=True, allow_nan=False)

    @classmethod
    def from_json(cls, text: str) -> "CheckRecord":
        data: dict[str, Any] = json.loads(text)
        if not isinstance(data, Mapping):
            raise ValueError(f"a check record must be a JSON object, got {text[:60]!r}")
        fits = tuple(FitRecord(**fit) for fit in data.pop("fits", []))
        fired = tuple(data.pop("fired", []))
        return cls(fits=fits, fired=fired, **data)


def _verdict_word(record: CheckRecord) -> str:
    word = record.status.upper()
    if record.status == "fail" and record.fired:
        word += f" ({', '.join(record.fired)})"
    return word


def format_summary(records: Iterable[CheckRecord]) -> list[str] | None:
    """The lines of the terminal summary, sorted by test id; ``None`` when there were no checks.

    One heading line per check (verdict, seconds, target, MDP, test id), then one
    indented line per fitted factor.
    """
    ordered = sorted(records, key=lambda r: r.test)
    if not ordered:
        return None
    words = [_verdict_word(r) for r in ordered]
    verdict_width = max(len("verdict"), *(len(w) for w in words))
    target_width = max(len("target"), *(len(r.target) for r in ordered))
    mdp_width = max(len("mdp"), *(len(r.mdp) for r in ordered))
    lines = [f"{'verdict':<{verdict_width}}  {'seconds':>7}  {'target':<{target_width}}  {'mdp':<{mdp_width}}  test"]
    indent = " " * (verdict_width + 11)
    for record, word in zip(ordered, words):
        lines.append(
            f"{word:<{verdict_width}}  {record.seconds:>7.2f}  {record.target:<{target_width}}  "
            f"{record.mdp:<{mdp_width}}  {record.test}"
        )
        for fit in record.fits:
            lines.append(f"{indent}{fit.describe()}")
    counts = Counter(r.status for r in ordered)
    tally = ", ".join(f"{counts[s]} {s}" for s in ("pass", "fail", "inconclusive", "error") if counts[s])
    total = sum(r.seconds for r in ordered)
    lines.append(f"{len(ordered)} check(s): {tally}; {total:.2f} s in checks")
    return lines
