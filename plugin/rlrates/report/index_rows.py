"""What one row of the session index says about a check, in either dialect (Markdown or LaTeX).

The pieces :mod:`rlrates.report.index` (``index.md``) and
:mod:`rlrates.report.index_tex` (``index.tex``) share: the tally of verdicts,
the verdict in words (an xfail-marked check reads as an expected failure), and a
record's fit of one factor or why it has none. Pure: no pytest import.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Mapping, Sequence
from typing import Any

from ..result import Fit
from ..vocabulary import STATUSES, Factor
from .schema import record_fit

__all__ = ["Entry", "tally", "expected_fail", "verdict_words", "fit_or_reason"]

Entry = tuple[str, Mapping[str, Any]]  # (folder relative to the index, parsed check.json)


def tally(entries: Sequence[Entry]) -> str:
    """``3 check(s): 1 pass, 2 fail``."""
    counts = Counter(str(record["status"]) for _, record in entries)
    parts = [f"{counts[s]} {s}" for s in STATUSES if counts[s]]
    return f"{len(entries)} check(s): {', '.join(parts)}"


def expected_fail(record: Mapping[str, Any]) -> bool:
    """Whether the record says its test was marked xfail."""
    expected = record.get("expected")
    return isinstance(expected, Mapping) and expected.get("status") == "fail"


def verdict_words(record: Mapping[str, Any]) -> str:
    """The verdict of a record in words: ``fail (floor)``, or ``expected failure (floor)`` for an xfail test."""
    status = str(record["status"])
    fired = f" ({', '.join(map(str, record['fired']))})" if status == "fail" and record["fired"] else ""
    if expected_fail(record):
        if status == "fail":
            return f"expected failure{fired}"
        if status == "pass":
            return "pass, but expected to fail"
    return status + fired


#: The claim's factors and their symbols, in the order every index shows them.
CLAIM_SYMBOLS = (("n", "n"), ("horizon", "H"), ("coverage", "C"))


def fit_or_reason(record: Mapping[str, Any], factor: Factor) -> Fit | str | None:
    """The fit; ``None`` when not claimed; a reason when claimed but not fitted."""
    if record["claim"].get(factor) is None:  # records before the coverage factor have no such key
        return None
    fit = record_fit(record, factor)
    if fit is None:
        return "estimator error" if record["status"] == "error" else "no fit"
    return fit
