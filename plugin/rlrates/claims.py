"""Claims: the error rate an estimator promises, as upper bounds on exponents.

``Claim(n=-0.5, horizon=2.0)`` reads "error <~ C n^-0.5 H^2": the error falls at
least as fast as n^-1/2 in the number n of samples per state-action pair, and
grows at most like H^2 in the effective horizon H = 1 / (1 - gamma).
``Claim(n=-0.5, coverage=0.5)`` reads "error <~ n^-1/2 C^1/2" for logged data, C
being the concentrability coefficient of the data distribution (the largest ratio
of the target policy's occupancy to the data's, over state-action pairs).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

__all__ = ["Claim", "MAX_EXPONENT"]

#: The largest claimed exponent in absolute value (the report format refuses steeper ones too).
MAX_EXPONENT = 100.0


def _exponent(value: object, name: str) -> float | None:
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, (int, float)) and not hasattr(value, "__float__"):
        raise TypeError(f"`{name}` exponent must be a number or None, got {value!r} of type {type(value).__name__}")
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise TypeError(f"`{name}` exponent must be a number or None, got {value!r}") from None
    if not math.isfinite(number):
        raise ValueError(f"`{name}` exponent must be finite, got {number!r}")
    if abs(number) > MAX_EXPONENT:
        raise ValueError(f"`{name}` exponent must lie in [-{MAX_EXPONENT:g}, {MAX_EXPONENT:g}] (a rate claim, as "
                         f"reports read it back), got {number:g}")
    return number


@dataclass(frozen=True)
class Claim:
    """Upper bounds on the exponents of ``error ~ C * n^n * H^horizon``.

    Parameters
    ----------
    n:
        Claimed exponent of the sample size; must be negative (the error must
        fall with more data), typically -0.5. ``None`` leaves the n-rate untested.
    horizon:
        Claimed exponent of H = 1/(1 - gamma), e.g. 2.0 (simulation lemma) or 1.5
        (variance-aware plug-in analyses). ``None`` leaves H-growth untested.
    coverage:
        Claimed exponent of the concentrability coefficient C (logged data only:
        ``data="transitions"`` or ``"trajectories"``), e.g. 0.5 for "error <~
        sqrt(C / n)". The check sweeps behaviour policies of graded coverage and
        fits the C-exponent at fixed n. ``None`` leaves it untested.
    """

    n: float | None = -0.5
    horizon: float | None = None
    coverage: float | None = None

    def __post_init__(self) -> None:
        n = _exponent(self.n, "n")
        horizon = _exponent(self.horizon, "horizon")
        coverage = _exponent(self.coverage, "coverage")
        if n is None and horizon is None and coverage is None:
            raise ValueError("a Claim needs at least one factor: give an `n`, a `horizon` or a `coverage` exponent")
        if n is not None and n >= 0:
            raise ValueError(f"`n` exponent must be negative (error falling with more samples), got {n:g}")
        object.__setattr__(self, "n", n)
        object.__setattr__(self, "horizon", horizon)
        object.__setattr__(self, "coverage", coverage)

    def __repr__(self) -> str:
        coverage = f", coverage={self.coverage!r}" if self.coverage is not None else ""
        return f"Claim(n={self.n!r}, horizon={self.horizon!r}{coverage})"

    def describe(self) -> str:
        """Human-readable form, e.g. ``error <~ n^-0.5 * H^2``."""
        parts = []
        if self.n is not None:
            parts.append(f"n^{self.n:g}")
        if self.horizon is not None:
            parts.append(f"H^{self.horizon:g}")
        if self.coverage is not None:
            parts.append(f"C^{self.coverage:g}")
        return "error <~ " + " * ".join(parts)

    def as_call(self) -> str:
        """Python source that rebuilds this claim."""
        extra = f", coverage={self.coverage!r}" if self.coverage is not None else ""
        return f"rlrates.Claim(n={self.n!r}, horizon={self.horizon!r}{extra})"
