"""Budgets: the sweep grid, replicate counts, escalation allowance and test levels of a check.

``ci`` is sized for CI (seconds for a vectorised estimator on a 20-state MDP);
``appendix`` for a paper appendix (minutes). Both can be overridden per call, e.g.
``check(..., n_grid=(256, 512, 1024), gammas=(0.6, 0.9))``.

Decision rules (see :mod:`rlrates.verdict`): each sub-test fires when its
one-sided confidence bound clears the claim plus a tolerance (the *tested
limit*), and passes only when the opposite bound is inside it. The sub-tests
share ``alpha`` (a Bonferroni split), and both ``alpha`` and ``pass_alpha`` are
spent over the planned looks of the escalation (:attr:`Budget.looks`), so a
correct estimator is failed with probability at most about ``alpha`` over the
whole check, and a violator gets no extra chances to pass from repeated looks.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Any

__all__ = ["Budget", "BUDGETS", "resolve_budget"]


@dataclass(frozen=True)
class Budget:
    """A sweep design and its decision parameters.

    Attributes
    ----------
    n_grid: samples per state-action pair, increasing (at least three values).
    gammas: discounts, increasing, each in (0, 1).
    replicates: independent draws per (gamma, n) cell in the first pass.
    more_replicates: escalation step 1 multiplies the replicates by this (1 = skip).
    n_doublings: escalation step 2 doubles the largest n this many times, one per pass.
    alpha: total one-sided false-alarm budget, split over the three sub-tests
        (and, for the floor test, over the discounts).
    pass_alpha: one-sided level of the far bound that must lie inside the
        tolerance before a sub-test counts as passed (the miss-rate side; not split).
    n_tolerance: slack on the n-exponent (pooled and per discount) before "rate too slow" fires.
    floor_tolerance: slack on each discount's upper-grid slope before "error floor" fires.
    horizon_tolerance: slack on the H-exponent before "horizon growth too steep" fires.
    coverage_tolerance: slack on the C-exponent (logged data) before "coverage dependence too steep" fires.
    zero_level: absolute error at or below which an error counts as zero (default 0: only
        floating-point zero, relative to the value scale, counts). Set it to the stopping
        tolerance of an iterative solver when that floor is acceptable.
    min_n_per_horizon: cells with n below this multiple of H are pre-asymptotic and not fitted.
    saturation: cells whose mean error exceeds this fraction of the error scale
        (the value range, or 2 for L1 model errors) are saturated and not fitted.
    policy_resolution: for the "policy" target, a mean suboptimality below this
        fraction of the value range counts as zero. Near-tied actions make the
        suboptimality a small plateau over a range of n (until n exceeds the
        inverse square of the gap): a power law does not describe it. Rate
        claims on policies are therefore only meaningful on MDPs whose action
        gaps are clear at the budget's n; check the planner's Q (target
        "q_star") for the rate itself.
    """

    name: str
    n_grid: tuple[int, ...]
    gammas: tuple[float, ...]
    replicates: int
    more_replicates: int = 2
    n_doublings: int = 2
    alpha: float = 0.01
    pass_alpha: float = 0.05
    n_tolerance: float = 0.08
    floor_tolerance: float = 0.25
    horizon_tolerance: float = 0.3
    coverage_tolerance: float = 0.3
    zero_level: float = 0.0
    min_n_per_horizon: float = 8.0
    saturation: float = 0.5
    policy_resolution: float = 1e-3

    def __post_init__(self) -> None:
        grid = tuple(self.n_grid)
        for n in grid:
            if isinstance(n, bool) or not isinstance(n, int) and not (hasattr(n, "__index__")):
                raise ValueError(f"`n_grid` must hold positive integers, got {n!r}")
            if int(n) < 1:
                raise ValueError(f"`n_grid` must hold positive integers, got {n!r}")
        grid = tuple(sorted({int(n) for n in grid}))
        if len(grid) < 3:
            raise ValueError(f"`n_grid` needs at least three distinct values to fit a slope, got {tuple(self.n_grid)}")
        gammas: list[float] = []
        for g in self.gammas:
            if isinstance(g, bool) or not isinstance(g, (int, float)) and not hasattr(g, "__float__"):
                raise ValueError(f"`gammas` must hold numbers in (0, 1), got {g!r}")
            value = float(g)
            if not 0.0 < value < 1.0:
                raise ValueError(f"`gammas` must lie in (0, 1), got {g!r}")
            gammas.append(value)
        if not gammas:
            raise ValueError("`gammas` must hold at least one discount")
        if int(self.replicates) < 4:
            raise ValueError(f"`replicates` must be at least 4 for a confidence interval, got {self.replicates!r}")
        for level in ("alpha", "pass_alpha"):
            if not 0.0 < float(getattr(self, level)) < 0.5:
                raise ValueError(f"`{level}` must lie in (0, 0.5), got {getattr(self, level)!r}")
        for name in ("n_tolerance", "floor_tolerance", "horizon_tolerance", "coverage_tolerance", "zero_level", "saturation",
                     "min_n_per_horizon", "policy_resolution"):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, (int, float)) or not 0.0 <= float(value) < float("inf"):
                raise ValueError(f"`{name}` must be a finite number >= 0, got {value!r}")
        for name in ("more_replicates", "n_doublings"):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, int) or value < (1 if name == "more_replicates" else 0):
                raise ValueError(f"`{name}` must be an integer >= {1 if name == 'more_replicates' else 0}, got {value!r}")
        object.__setattr__(self, "n_grid", grid)
        object.__setattr__(self, "gammas", tuple(sorted(set(gammas))))
        object.__setattr__(self, "replicates", int(self.replicates))

    @property
    def looks(self) -> int:
        """How many times the verdict may be decided: the first pass plus each planned escalation step."""
        return 1 + (self.more_replicates > 1) + self.n_doublings

    def with_overrides(self, **overrides: Any) -> "Budget":
        """A copy with some fields replaced (unknown names raise ``TypeError``)."""
        known = set(self.__dataclass_fields__)
        unknown = sorted(set(overrides) - known)
        if unknown:
            raise TypeError(f"unknown budget setting(s) {', '.join(unknown)}; known: {', '.join(sorted(known))}")
        return replace(self, **{k: v for k, v in overrides.items() if v is not None})


BUDGETS: dict[str, Budget] = {
    # CI: 3 discounts x 5 sample sizes x 24 replicates = 360 estimator calls per pass.
    "ci": Budget(
        name="ci",
        n_grid=(128, 256, 512, 1024, 2048),
        gammas=(0.5, 0.75, 0.9),
        replicates=24,
    ),
    # Paper appendix: 5 discounts x 7 sample sizes x 48 replicates = 1680 calls per pass.
    "appendix": Budget(
        name="appendix",
        n_grid=(256, 512, 1024, 2048, 4096, 8192, 16384),
        gammas=(0.5, 0.7, 0.8, 0.9, 0.95),
        replicates=48,
        n_doublings=2,
        alpha=0.005,
        n_tolerance=0.05,
        horizon_tolerance=0.2,
        coverage_tolerance=0.2,
    ),
}


def resolve_budget(budget: object, **overrides: Any) -> Budget:
    """A :class:`Budget` from a name or an instance, with per-call overrides applied."""
    if isinstance(budget, Budget):
        base = budget
    elif isinstance(budget, str) and budget in BUDGETS:
        base = BUDGETS[budget]
    else:
        raise ValueError(f"unknown `budget` {budget!r}; choose one of {', '.join(BUDGETS)} or pass a Budget")
    if all(value is None for value in overrides.values()) and overrides.keys() <= base.__dataclass_fields__.keys():
        return base  # overrides left at None change nothing: the (frozen) budget is used as it is, not rebuilt
    return base.with_overrides(**overrides)
