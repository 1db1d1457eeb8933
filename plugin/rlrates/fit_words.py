"""The words every report uses for a fit: the exponent, its bounds at their levels, the limit tested.

One place for the phrases that the session summary, ``index.md``, ``index.tex``
and the figure titles share, so each states the same limit (the claim plus its
tolerance, :attr:`rlrates.result.Fit.limit`) and the same confidence levels
(``low_level``, ``high_level``). Functions take the numbers of a
:class:`~rlrates.result.Fit`; pure text, no imports beyond the standard library.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

if TYPE_CHECKING:  # pragma: no cover
    from .result import Fit

__all__ = ["BOUNDS_NOTE", "FIT_VERDICT_WORDS", "signed", "percent", "limit_words", "bounds_words", "detectable_words", "fit_words"]

#: What the brackets of :func:`bounds_words` hold, said once per report.
BOUNDS_NOTE = ("exponents are given as fitted [lower bound at its confidence level, upper bound at its level]; "
               "the lower bound decides a failure, the upper one a pass")
#: A fit's verdict as a word of a sentence ("fails: n-exponent ...").
FIT_VERDICT_WORDS = {"ok": "holds", "violated": "fails", "unclear": "unclear", "exact": "exact"}


def signed(value: float, places: int = 2) -> str:
    """``+0.52`` / ``-0.47``; a value that rounds to zero is ``+0.00``."""
    text = f"{value:+.{places}f}"
    return text.replace("-", "+", 1) if float(text) == 0.0 else text


def percent(level: float) -> str:
    """A confidence level as a percentage: ``0.995`` -> ``99.5%``."""
    return f"{100.0 * level:.4g}%"


def limit_words(fit: "Fit") -> str:
    """``tested limit -0.35 (claim -0.5 + 0.15)``; without a tolerance, ``tested limit -0.5 (the claim)``."""
    if fit.tolerance == 0.0:
        return f"tested limit {fit.limit:+g} (the claim)"
    sign = "+" if fit.tolerance > 0 else "-"
    return f"tested limit {fit.limit:+.4g} (claim {fit.claimed:+g} {sign} {abs(fit.tolerance):g})"


def bounds_words(fit: "Fit") -> str:
    """``[-0.60 at 99.5%, -0.52 at 95%]``: the fire-side lower and pass-side upper bound, with their levels."""
    return f"[{signed(fit.low)} at {percent(fit.low_level)}, {signed(fit.high)} at {percent(fit.high_level)}]"


def detectable_words(fit: "Fit") -> str:
    """``would catch -0.27 or above (95%)``: true exponents this check fails with 95% probability; ``""`` if unknown."""
    if not math.isfinite(fit.detectable):
        return ""
    return f"would catch {signed(fit.detectable)} or above (95%)"


def fit_words(fit: "Fit", *, verdict: bool = True) -> str:
    """One fit in words, e.g. ``fails: n-exponent -0.01 (bounds ...), tested limit -0.35 (claim -0.5 + 0.15), ...``."""
    head = f"{FIT_VERDICT_WORDS[fit.verdict]}: " if verdict else ""
    name = f"{fit.symbol}-exponent"
    if fit.verdict == "exact":
        return f"{head}{name} not fitted, the error is zero (exact); {limit_words(fit)}"
    if not fit.measured:
        return f"{head}{name} not measurable; {limit_words(fit)}"
    parts = [f"{head}{name} {signed(fit.exponent)} {bounds_words(fit)}", limit_words(fit)]
    catch = detectable_words(fit)
    return ", ".join(parts + ([catch] if catch else []))
