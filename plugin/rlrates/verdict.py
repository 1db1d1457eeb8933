"""Verdicts: turn the per-cell summary and a claim into pass, fail or "need more evidence".

:func:`decide` marks which cells enter the fits, fits the per-discount n-slopes
and the H-exponent (:mod:`rlrates.fitting`), runs the sub-tests
(:mod:`rlrates.subtests`) and combines them: a claim fails when a sub-test
fires, is ambiguous when one is unclear (and says whether more replicates or
larger n would settle it), and passes only when every sub-test is "ok". The
sub-tests share the budget's ``alpha`` (a Bonferroni split over the claimed
factors, the n-claim counting twice: rate and floor), and both ``alpha`` and
``pass_alpha`` are split over the budget's planned looks, so the error rates
hold for the whole escalation. In the fits, ``low`` is the fire-side bound and
``high`` the pass-side bound. No claimed factor passes without finite bounds.

Cells are left out of the fits when pre-asymptotic (n below
``min_n_per_horizon`` times H), saturated (mean error above ``saturation``
times the error scale) or below the fit window (only the ``window`` largest
usable n enter the n-fits). Saturated cells are excused only while the error
still falls: a discount still saturated at its largest n with a flat or rising
error fails (:func:`rlrates.subtests.stall_test`). Cells whose errors are zero
(to floating-point precision, or the user's zero level) are "faster than any
power": never clamped and fitted.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

from typing import Any

import numpy as np

from .claims import Claim
from .columns import Columns
from .fitting import Slope, fit_coverage, fit_discounts, fit_horizon, pooled_slope
from .budgets import Budget
from .result import Fit
from .subtests import (Levels, SubTest, coverage_test, floor_test, horizon_test, rate_test, reach_test,
                       short_discounts, stall_test)
from .vocabulary import Factor, FitVerdict, Need, Outcome

__all__ = ["Decision", "decide", "mark_cells", "levels_for"]


@dataclass(frozen=True)
class Decision:
    """The outcome of one decision pass."""

    status: Outcome
    fired: tuple[str, ...] = ()
    reasons: tuple[str, ...] = ()
    need: Need | None = None
    fits: tuple[Fit, ...] = ()
    slopes: tuple[dict[str, object], ...] = ()  # rows of the per-discount slopes (fitting.fit_discounts)
    cells: Columns = field(default_factory=lambda: Columns({}))
    notes: tuple[str, ...] = ()
    subtests: tuple[SubTest, ...] = ()
    exact: bool = False


def _window_rank(gamma: np.ndarray, n: np.ndarray, usable: np.ndarray) -> np.ndarray:
    """Per row, the rank of its n among the usable rows of its discount, largest first (ties in row order); inf if unusable.

    A summary has a few dozen cells at most: sorting them in Python is cheaper than numpy's call overheads.
    """
    rank = np.full(len(n), np.inf)
    rows = np.flatnonzero(usable)
    by_gamma: dict[float, list[tuple[float, int]]] = {}
    for row, g, value in zip(rows.tolist(), gamma[rows].tolist(), n[rows].tolist()):
        by_gamma.setdefault(g, []).append((-float(value), row))
    for members in by_gamma.values():
        members.sort()  # largest n first, ties in row order
        for position, (_, row) in enumerate(members, 1):
            rank[row] = position
    return rank


def mark_cells(summary: Columns | Any, budget: Budget, scale: dict[float, float], window: int) -> Columns:
    """The summary with ``usable`` (asymptotic and not saturated), ``fitted`` (in an n-fit) and ``left_out`` (why not).

    For logged data (an ``n_eff`` column: n times the smallest probability of a pair
    the target visits) a cell is pre-asymptotic when its least-visited pair expects
    fewer than ``min_n_per_horizon`` samples.
    """
    cells = Columns.of(summary)
    gamma = np.asarray(cells["gamma"], dtype=float)
    if "n_eff" in cells:
        early = np.asarray(cells["n_eff"] < budget.min_n_per_horizon, dtype=bool)
    else:
        early = np.asarray(cells["n"] < budget.min_n_per_horizon * cells["H"], dtype=bool)
    limit = np.array([scale.get(g, math.nan) for g in gamma.tolist()], dtype=float) * budget.saturation
    zero = np.asarray(cells["zero"], dtype=bool)
    saturated = ~zero & (cells["mean"] > limit)
    usable = ~(early | saturated)
    in_window = usable & (_window_rank(gamma, np.asarray(cells["n"]), usable) <= window)
    reasons = _left_out([early, saturated, ~in_window, zero],
                        (f"pre-asymptotic (n < {budget.min_n_per_horizon:g} H)",
                         f"saturated (mean error above {budget.saturation:g} of the error scale)",
                         "below the fit window", "zero error"))
    return cells.with_columns(early=early, saturated=saturated, usable=usable, fitted=in_window & ~zero,
                              left_out=reasons)


def _left_out(conditions: list[np.ndarray], texts: tuple[str, ...]) -> np.ndarray:
    """Per row the text of the first condition that holds, else "": ``numpy.select(conditions, texts, "")``,
    in its string dtype, without its overheads on a few dozen rows."""
    if not len(conditions[0]):
        return np.zeros(0, dtype=str)
    picked = [""] * len(conditions[0])
    for condition, text in zip(reversed(conditions), reversed(texts)):  # an earlier condition overwrites a later one
        for row in np.flatnonzero(condition).tolist():
            picked[row] = text
    return np.array(picked, dtype=f"<U{max(map(len, texts))}")


def levels_for(claim: Claim, budget: Budget) -> Levels:
    """The levels each sub-test uses: ``alpha`` split over the claimed factors (n counting twice), both
    ``alpha`` and ``pass_alpha`` split over the planned looks."""
    active = (claim.n is not None) * 2 + (claim.horizon is not None) + (claim.coverage is not None)
    return Levels(budget.alpha / max(active, 1) / budget.looks, budget.pass_alpha / budget.looks)


def _fit(factor: Factor, slope: Slope | None, claimed: float, tolerance: float, levels: Levels,
         verdict: FitVerdict) -> Fit:
    fire, passing = levels.fire, levels.passing
    if slope is None:
        return Fit(factor, math.nan, math.nan, math.nan, math.nan, 1 - fire, 1 - passing, claimed, tolerance,
                   math.nan, verdict)
    return Fit(factor, slope.estimate, slope.se, slope.lower(fire), slope.upper(passing), 1 - fire, 1 - passing,
               claimed, tolerance, slope.detectable(claimed + tolerance, fire), verdict)


def _combined(tests: list[SubTest]) -> FitVerdict:
    verdicts = {test.verdict for test in tests}
    return "violated" if "violated" in verdicts else "unclear" if "unclear" in verdicts else "ok"


def _exact(claim: Claim, budget: Budget, cells: Columns, levels: Levels) -> Decision:
    claimed: list[tuple[Factor, float | None, float]] = [
        ("n", claim.n, budget.n_tolerance), ("horizon", claim.horizon, budget.horizon_tolerance),
        ("coverage", claim.coverage, budget.coverage_tolerance)]
    fits = [_fit(factor, None, bound, tolerance, levels, "exact") for factor, bound, tolerance in claimed
            if bound is not None]
    return Decision(status="pass", exact=True, fits=tuple(fits), cells=cells,
                    reasons=("every error is zero to floating-point precision: the estimator is exact here",))


def decide(summary: Columns | Any, claim: Claim, budget: Budget, scale: dict[float, float], window: int,
           graded: Columns | Any | None = None) -> Decision:
    """Decide one pass. ``window`` is how many of the largest usable n values each n-fit uses.

    ``graded`` (logged data with a coverage claim) is the summary of every behaviour
    level; ``summary`` is that of level 0, the behaviour the n- and H-claims are tested on.
    """
    cells = mark_cells(summary, budget, scale, window)
    levels = levels_for(claim, budget)
    if bool(cells["zero"].all()):
        return _exact(claim, budget, cells, levels)
    # the fits read these columns only: a narrow table filters faster
    usable = cells.select("gamma", "n", "H", "zero", "replicates", "log_mean", "log_var")[cells["usable"]]
    gammas = sorted(set(cells["gamma"].tolist()))  # the distinct discounts (np.unique, without its overhead)
    slopes, per_discount = fit_discounts(usable, gammas, window)
    tests: list[SubTest] = []
    fits: list[Fit] = []
    if claim.n is not None:
        floor = floor_test(per_discount, claim.n, budget, levels)
        stall_view = cells.select("gamma", "n", "early", "zero", "saturated", "mean", "replicates", "log_mean", "log_var")
        n_tests = [stall_test(stall_view, claim.n, budget, levels, scale), floor,
                   rate_test(per_discount, claim.n, budget, levels, floor.verdict == "violated"),
                   reach_test(slopes)]
        pooled = pooled_slope([fit.whole for fit in per_discount]) if per_discount else None
        # the pooled slope is tested at half the fire-side level (the other half goes to the per-discount slopes)
        n_levels = Levels(levels.fire / 2, levels.passing)
        n_fit = _fit("n", pooled, claim.n, budget.n_tolerance, n_levels, _combined(n_tests))
        # no fitted discount and every test ok: the errors vanish at the largest n (faster than any power)
        fits.append(n_fit if pooled is None else _finite_or_unclear(n_fit))
        tests += n_tests
    if claim.horizon is not None:
        horizon_fit = fit_horizon(usable, gammas)
        horizon = horizon_test(horizon_fit, claim.horizon, budget, levels)
        fits.append(_finite_or_unclear(_fit("horizon", horizon_fit.slope, claim.horizon, budget.horizon_tolerance,
                                            levels, horizon.verdict)))
        tests.append(horizon)
    if claim.coverage is not None and graded is not None:
        graded_cells = mark_cells(graded, budget, scale, window)
        coverage_fit = fit_coverage(graded_cells.select("gamma", "behaviour", "C", "n", "zero", "replicates", "log_mean",
                                                        "log_var")[graded_cells["usable"]])
        coverage = coverage_test(coverage_fit, claim.coverage, budget, levels)
        fits.append(_finite_or_unclear(_fit("coverage", coverage_fit.slope, claim.coverage, budget.coverage_tolerance,
                                            levels, coverage.verdict)))
        tests.append(coverage)
    return _combine(tests, fits, slopes, cells, budget=budget)


def _finite_or_unclear(fit: Fit) -> Fit:
    """A factor is "ok" only on finite evidence: NaN or infinite bounds never pass."""
    if fit.verdict == "ok" and not (math.isfinite(fit.low) and math.isfinite(fit.high)):
        return replace(fit, verdict="unclear")
    return fit


def _advice(fit: Fit, replicates: int) -> tuple[str, bool]:
    """What would settle an unclear factor, estimated from its standard error, and whether any budget would."""
    limit = fit.limit
    interval = f"{fit.symbol}-exponent {fit.exponent:+.3f} [{fit.low:+.3f}, {fit.high:+.3f}]"
    if not (math.isfinite(fit.exponent) and math.isfinite(fit.se) and fit.se > 0):
        return f"the {fit.symbol}-exponent could not be measured: no budget of this design settles it", False
    if fit.high <= limit:
        return (f"{interval} is inside the tested limit {limit:+.3f}, but a sub-test is undecided (see the notes); "
                "more replicates or larger n would settle it"), True
    distance = abs(limit - fit.exponent)
    # the bound that must move: the pass-side one when the estimate is inside the limit, else the fire-side one
    z = ((fit.high - fit.exponent) if fit.exponent < limit else (fit.exponent - fit.low)) / fit.se
    needed = z * fit.se / max(distance, 1e-12)
    factor = needed**2
    head = f"{interval} straddles the tested limit {limit:+.3f} (claim {fit.claimed:g} + tolerance {fit.tolerance:g})"
    if distance < 0.01 or factor > 64:
        return (f"{head}; the estimate sits {distance:.3f} from the limit, so no practical budget would settle it "
                f"(about {factor:.0f}x the replicates)"), False
    more = max(int(math.ceil(replicates * factor)), replicates + 1)
    return f"{head}; about {more} replicates per cell (now {replicates}) would settle it", True


def _combine(tests: list[SubTest], fits: list[Fit], slopes: list[dict[str, object]], cells: Columns,
             budget: Budget) -> Decision:
    """One decision from the sub-tests: fail if any fired, ambiguous if any is unclear, else pass."""
    notes = [test.note for test in tests if test.note]
    dropped = int((~cells["usable"]).sum())
    if dropped:
        notes.insert(0, f"{dropped} pre-asymptotic cell(s) left out of the fits (n < {budget.min_n_per_horizon:g} H "
                        f"or mean error above {budget.saturation:g} of the error scale)")
    fired = tuple(test.name for test in tests if test.verdict == "violated")
    reasons = [test.reason for test in tests if test.verdict == "violated"]
    unclear = [fit for fit in fits if fit.verdict == "unclear"]
    status: Outcome = "pass"
    need: Need | None = None
    if fired:
        status = "fail"
    elif unclear:
        status = "ambiguous"
        needs = {test.need for test in tests if test.verdict == "unclear"}
        larger_n = bool(short_discounts(slopes)) or "larger_n" in needs
        replicates = int(cells["replicates"].min()) if len(cells) else 0
        undecided = [test.name for test in tests if test.verdict == "unclear"]
        if undecided:
            reasons.append(f"undecided sub-test(s): {', '.join(undecided)}")
        for fit in unclear:
            if not (math.isfinite(fit.low) and math.isfinite(fit.high)):
                reasons.append(f"the {fit.symbol}-exponent has no finite bounds (errors that overflow, or are not "
                               "numbers): a claim is never passed on such evidence")
        settles = []
        for fit in unclear:
            text, feasible = _advice(fit, replicates)
            reasons.append(text)
            settles.append(feasible)
        reasons.extend(test.reason for test in tests if test.verdict == "unclear" and test.reason)
        if "nothing" in needs or (not larger_n and settles and not any(settles)):
            need = "nothing"
        else:
            need = "larger_n" if larger_n else "replicates"
    return Decision(status=status, fired=fired, reasons=tuple(reasons), need=need, fits=tuple(fits), slopes=tuple(slopes),
                    cells=cells, notes=tuple(notes), subtests=tuple(tests))
