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

from ..fit_words import BOUNDS_NOTE, fit_words
from ..result import Fit
from ..vocabulary import STATUSES

if TYPE_CHECKING:  # pragma: no cover
    from ..result import CheckResult

__all__ = ["CheckRecord", "SUMMARY_GROUPS", "check_line", "format_summary"]


@dataclass(frozen=True)
class CheckRecord:
    """What the session summary shows about one check."""

    test: str
    label: str
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
    rerun: str
    problem: str
    expected_fail: bool = False

    @classmethod
    def from_result(cls, result: CheckResult, test: str, rerun: str = "", expected_fail: bool = False) -> CheckRecord:
        return cls(
            test=test,
            label=result.run.label or test.rsplit("::", 1)[-1],
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
            calls=int(result.estimator_calls),
            rerun=rerun,
            problem=result.failure.describe() if result.failure is not None else "",
            expected_fail=expected_fail,
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


#: The groups of the summary, in order (failures first), with their headings.
SUMMARY_GROUPS = (("fail", "failed"), ("error", "estimator errors"), ("inconclusive", "inconclusive"),
                  ("expected", "failed as expected (xfail)"), ("pass", "passed"))


def _group(record: CheckRecord) -> str:
    return "expected" if record.expected_fail and record.status == "fail" else record.status


def check_line(record: CheckRecord) -> str:
    """One check in words: its label, what ran on what, then each fit's verdict, exponent, bounds and tested limit."""
    head = f"{record.label}: {record.target} on {record.mdp}"
    if record.status == "error":
        return f"{head}: {record.problem or 'the estimator failed'} (after {record.calls} estimator call(s))"
    fired = f" ({', '.join(record.fired)} fired)" if record.fired else ""
    words = "; ".join(fit_words(fit) for fit in record.fits) or "nothing fitted"
    return f"{head}{fired}: {words}"


def format_summary(records: Iterable[CheckRecord]) -> list[str] | None:
    """The lines of the terminal summary, grouped by verdict (failures first); ``None`` when there were no checks.

    Each group has a heading with its count, then one line per check in words;
    a check that did not pass is followed by the command that reruns it alone.
    """
    ordered = sorted(records, key=lambda r: r.test)
    if not ordered:
        return None
    lines: list[str] = []
    for status, heading in SUMMARY_GROUPS:
        group = [r for r in ordered if _group(r) == status]
        if not group:
            continue
        lines.append(f"{heading} ({len(group)}):")
        for record in group:
            lines.append(f"  {check_line(record)}")
            if status not in ("pass", "expected") and record.rerun:
                lines.append(f"      rerun alone: {record.rerun}")
    counts = Counter(r.status for r in ordered)
    tally = ", ".join(f"{counts[s]} {s}" for s in STATUSES if counts[s])
    lines.append(f"{len(ordered)} rate check(s) in all: {tally}; {BOUNDS_NOTE}.")
    if any(_group(r) not in ("pass", "expected") for r in ordered):
        lines.append("Each command above reruns that check alone with the same streams; another master seed "
                     "gives an independent retest.")
    return lines
