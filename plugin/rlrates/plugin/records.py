"""Check records: the short, JSON-safe account of one check that travels on a pytest report.

The pytest layer turns each :class:`~rlrates.result.CheckResult` into a
:class:`CheckRecord`, attaches it to the test item as the user property
``(PROPERTY_NAME, json)`` (so it crosses pytest-xdist and lands in JUnit XML), and
formats all records of a session into the terminal summary with
:func:`format_summary`. No pytest import; imported only once a check has run
(its fits are :class:`~rlrates.result.Fit` records, whose module loads pandas).
"""

from __future__ import annotations

import json
from collections import Counter
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, fields
from typing import TYPE_CHECKING, Any

from ..result import Fit
from ..vocabulary import STATUSES

if TYPE_CHECKING:  # pragma: no cover
    from ..result import CheckResult

__all__ = ["CheckRecord", "format_summary"]


@dataclass(frozen=True)
class CheckRecord:
    """What the session summary shows about one check."""

    test: str
    status: str
    target: str
    mdp: str
    claim: str
    fits: tuple[Fit, ...]
    fired: tuple[str, ...]
    seconds: float
    seed: int
    budget: str
    passes: int
    calls: int

    @classmethod
    def from_result(cls, result: CheckResult, test: str) -> CheckRecord:
        return cls(
            test=test,
            status=result.status,
            target=result.target,
            mdp=result.mdp.name,
            claim=result.claim.describe(),
            fits=tuple(result.factors),
            fired=tuple(result.fired),
            seconds=float(result.run.elapsed),
            seed=int(result.seed),
            budget=result.budget.name,
            passes=int(result.run.passes),
            calls=int(len(result.table)),
        )

    def to_json(self) -> str:
        data = {item.name: getattr(self, item.name) for item in fields(self)}
        data["fits"] = [fit.to_dict() for fit in self.fits]
        data["fired"] = list(self.fired)
        return json.dumps(data, sort_keys=True, allow_nan=False)

    @classmethod
    def from_json(cls, text: str) -> CheckRecord:
        """The inverse of :meth:`to_json`; raise ``ValueError`` or ``TypeError`` on text that is no check record."""
        data: dict[str, Any] = json.loads(text)
        if not isinstance(data, Mapping):
            raise ValueError(f"a check record must be a JSON object, got {text[:60]!r}")
        fits = tuple(Fit.from_dict(fit) for fit in data.pop("fits", []))
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
    tally = ", ".join(f"{counts[s]} {s}" for s in STATUSES if counts[s])
    total = sum(r.seconds for r in ordered)
    lines.append(f"{len(ordered)} check(s): {tally}; {total:.2f} s in checks")
    return lines
