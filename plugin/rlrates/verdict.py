"""Verdicts: turn the per-cell summary and a claim into pass, fail or "need more evidence".

:func:`decide` marks which cells enter the fits, fits the per-discount n-slopes
and the H-exponent (:mod:`rlrates.fitting`), runs the sub-tests
(:mod:`rlrates.subtests`) and combines them: a claim fails when a sub-test
fires, is ambiguous when one is unclear (and says whether more replicates or
larger n would settle it), and passes only when every sub-test is "ok". The
sub-tests share the budget's ``alpha`` (a Bonferroni split over the claimed
factors, the n-claim counting twice: rate and floor). In the fits, ``low`` is
the fire-side bound and ``high`` the pass-side bound.

Cells are left out of the fits when pre-asymptotic (n below
``min_n_per_horizon`` times H), saturated (mean error above ``saturation``
times the error scale) or below the fit window (only the ``window`` largest
usable n enter the n-fits). Cells whose errors are floating-point zero are
"faster than any power": never clamped and fitted.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .claims import Claim
from .fitting import Slope, fit_discounts, fit_horizon, pooled_slope
from .budgets import Budget
from .result import Fit
from .subtests import SubTest, coverage_test, floor_test, horizon_test, rate_test, short_discounts
from .vocabulary import Factor, FitVerdict, Need, Outcome

__all__ = ["Decision", "decide", "mark_cells"]


@dataclass(frozen=True)
class Decision:
    """The outcome of one decision pass."""

    status: Outcome
    fired: tuple[str, ...] = ()
    reasons: tuple[str, ...] = ()
    need: Need | None = None
    fits: tuple[Fit, ...] = ()
    slopes: pd.DataFrame = field(default_factory=pd.DataFrame)
    cells: pd.DataFrame = field(default_factory=pd.DataFrame)
    notes: tuple[str, ...] = ()
    subtests: tuple[SubTest, ...] = ()
    exact: bool = False


def mark_cells(summary: pd.DataFrame, budget: Budget, scale: dict[float, float], window: int) -> pd.DataFrame:
    """The summary with ``usable`` (asymptotic and not saturated), ``fitted`` (in an n-fit) and ``left_out`` (why not)."""
    cells = summary.copy()
    early = (cells["n"] < budget.min_n_per_horizon * cells["H"]).to_numpy()
    limit = cells["gamma"].map(scale).to_numpy(float) * budget.saturation
    saturated = (~cells["zero"] & (cells["mean"] > limit)).to_numpy()
    usable = ~(early | saturated)
    rank = cells["n"].where(usable).groupby(cells["gamma"]).rank(ascending=False, method="first")
    in_window = usable & (rank.fillna(np.inf).to_numpy() <= window)
    zero = cells["zero"].to_numpy(bool)
    reasons = np.select(
        [early, saturated, ~in_window, zero],
        [f"pre-asymptotic (n < {budget.min_n_per_horizon:g} H)",
         f"saturated (mean error above {budget.saturation:g} of the error scale)",
         "below the fit window", "zero error"],
        default="",
    )
    cells["usable"] = usable
    cells["fitted"] = in_window & ~zero
    cells["left_out"] = reasons
    return cells


def _alpha(claim: Claim, budget: Budget) -> float:
    active = (claim.n is not None) * 2 + (claim.horizon is not None)
    return budget.alpha / max(active, 1)


def _fit(factor: Factor, slope: Slope | None, claimed: float, tolerance: float, levels: tuple[float, float],
         verdict: FitVerdict) -> Fit:
    fire, passing = levels
    if slope is None:
        return Fit(factor, math.nan, math.nan, math.nan, math.nan, 1 - fire, 1 - passing, claimed, tolerance,
                   math.nan, verdict)
    return Fit(factor, slope.estimate, slope.se, slope.lower(fire), slope.upper(passing), 1 - fire, 1 - passing,
               claimed, tolerance, slope.detectable(claimed + tolerance, fire), verdict)


def _combined(tests: list[SubTest]) -> FitVerdict:
    verdicts = {test.verdict for test in tests}
    return "violated" if "violated" in verdicts else "unclear" if "unclear" in verdicts else "ok"


def _exact(claim: Claim, budget: Budget, cells: pd.DataFrame, levels: tuple[float, float]) -> Decision:
    claimed: list[tuple[Factor, float | None, float]] = [
        ("n", claim.n, budget.n_tolerance), ("horizon", claim.horizon, budget.horizon_tolerance)]
    fits = [_fit(factor, None, bound, tolerance, levels, "exact") for factor, bound, tolerance in claimed
            if bound is not None]
    return Decision(status="pass", exact=True, fits=tuple(fits), cells=cells,
                    reasons=("every error is zero to floating-point precision: the estimator is exact here",))


def decide(summary: pd.DataFrame, claim: Claim, budget: Budget, scale: dict[float, float], window: int) -> Decision:
    """Decide one pass. ``window`` is how many of the largest usable n values each n-fit uses."""
    cells = mark_cells(summary, budget, scale, window)
    alpha = _alpha(claim, budget)
    levels = (alpha, budget.pass_alpha)
    if bool(summary["zero"].all()):
        return _exact(claim, budget, cells, levels)
    usable = cells[cells["usable"]]
    gammas = sorted(float(g) for g in summary["gamma"].unique())
    slopes, per_discount = fit_discounts(usable, gammas, window)
    tests: list[SubTest] = []
    fits: list[Fit] = []
    if claim.n is not None:
        floor = floor_test(per_discount, claim.n, budget, alpha)
        n_tests = [floor, rate_test(per_discount, claim.n, budget, alpha, floor.verdict == "violated"),
                   coverage_test(slopes)]
        pooled = pooled_slope([fit.whole for fit in per_discount]) if per_discount else None
        fits.append(_fit("n", pooled, claim.n, budget.n_tolerance, levels, _combined(n_tests)))
        tests += n_tests
    if claim.horizon is not None:
        slope, n_star = fit_horizon(usable, len(gammas))
        horizon = horizon_test(slope, n_star, bool(summary["zero"].any()), claim.horizon, budget, alpha)
        fits.append(_fit("horizon", slope, claim.horizon, budget.horizon_tolerance, levels, horizon.verdict))
        tests.append(horizon)
    return _combine(tests, fits, slopes, cells, dropped=int((~cells["usable"]).sum()), budget=budget)


def _combine(tests: list[SubTest], fits: list[Fit], slopes: pd.DataFrame, cells: pd.DataFrame, dropped: int,
             budget: Budget) -> Decision:
    """One decision from the sub-tests: fail if any fired, ambiguous if any is unclear, else pass."""
    notes = [test.note for test in tests if test.note]
    if dropped:
        notes.insert(0, f"{dropped} pre-asymptotic cell(s) left out of the fits (n < {budget.min_n_per_horizon:g} H "
                        f"or mean error above {budget.saturation:g} of the error scale)")
    fired = tuple(test.name for test in tests if test.verdict == "violated")
    reasons = [test.reason for test in tests if test.verdict == "violated"]
    unclear = [fit.factor for fit in fits if fit.verdict == "unclear"]
    status: Outcome = "pass"
    need: Need | None = None
    if fired:
        status = "fail"
    elif unclear:
        status = "ambiguous"
        larger_n = bool(short_discounts(slopes)) or any(test.need == "larger_n" for test in tests)
        need = "larger_n" if larger_n else "replicates"
        reasons.append("the evidence is not yet decisive: " + ", ".join(
            f"the {u}-exponent interval still straddles the claim plus tolerance" for u in unclear))
    return Decision(status=status, fired=fired, reasons=tuple(reasons), need=need, fits=tuple(fits), slopes=slopes,
                    cells=cells, notes=tuple(notes), subtests=tuple(tests))
