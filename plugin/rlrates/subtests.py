"""The sub-tests of a verdict, each a small pure function returning a :class:`SubTest`.

* :func:`stall_test`: at some discount the error is still large (saturated) at
  the largest n and does not fall: the strongest evidence of a bug, never
  excused as pre-asymptotic.
* :func:`floor_test`: for some discount the slope over the upper part of the n
  grid is confidently above ``claim.n + floor_tolerance`` (the error stops
  falling: a bias). Bonferroni over discounts: pooling alone hides floors (a
  curve flat at one discount and steep at another can average to a good slope).
* :func:`rate_test`: the n-exponent, averaged over discounts and at each
  discount (Bonferroni over discounts), is confidently above
  ``claim.n + n_tolerance`` (the error falls too slowly), unless no floor fired
  and that curve is still bending toward steeper slopes (a burn-in: ask for
  larger n instead).
* :func:`reach_test`: every discount had at least three asymptotic points,
  so the n-claim was tested at every discount.
* :func:`horizon_test`: the H-exponent is confidently above
  ``claim.horizon + horizon_tolerance``.
* :func:`coverage_test` (logged data): the C-exponent, fitted over behaviour
  policies of graded coverage, is confidently above
  ``claim.coverage + coverage_tolerance``.

Each sub-test fires ("violated") when its fire-side bound, at level
``1 - levels.fire``, clears its limit; it is "ok" only when its pass-side bound,
at level ``1 - levels.passing``, lies inside the limit; anything between is
"unclear" and names the evidence that would settle it.
"""

from __future__ import annotations

from dataclasses import dataclass

from collections.abc import Sequence

import numpy as np

from .budgets import Budget
from .columns import Columns
from .fitting import CoverageFit, DiscountFit, HorizonFit, Slope, fit_cells, pooled_slope, rows_of
from .vocabulary import Need, SubTestName, SubTestVerdict

__all__ = ["Levels", "SubTest", "stall_test", "floor_test", "rate_test", "reach_test", "horizon_test", "coverage_test",
           "short_discounts"]


@dataclass(frozen=True)
class Levels:
    """One-sided error rates of a sub-test: ``fire`` (false alarm) and ``passing`` (miss), already split."""

    fire: float
    passing: float


@dataclass(frozen=True)
class SubTest:
    """The answer of one sub-test: its verdict, why it fired, a remark, and what would settle it."""

    name: SubTestName
    verdict: SubTestVerdict
    reason: str = ""
    note: str = ""
    need: Need | None = None


def _errors_in_words(cells: Columns) -> str:
    means = np.asarray(cells["mean"], dtype=float)
    if means.max() <= 1.5 * means.min():
        return f"about {float(np.median(means)):.3g} at every n"
    ns = cells["n"]
    return f"{float(means[0]):.3g} at n={int(ns[0])} and {float(means[-1]):.3g} at n={int(ns[-1])}"


def stall_test(cells: Columns, claim_n: float, budget: Budget, levels: Levels,
               scale: dict[float, float]) -> SubTest:
    """Is the error, at some discount, still saturated at the largest n and not falling?

    ``cells`` are all marked cells (:func:`rlrates.verdict.mark_cells`). Saturated
    cells are left out of the fits only while the error is falling toward the
    asymptotic regime; a discount whose error is saturated at its largest n and
    whose slope over its cells is confidently above ``claim_n + floor_tolerance``
    fails here.
    """
    if not bool(np.logical_or.reduce(cells["saturated"])):  # a stall needs a saturated cell at some largest n
        return SubTest("stall", "ok")
    limit = claim_n + budget.floor_tolerance
    gammas = sorted(set(cells["gamma"].tolist()))
    level = levels.fire / max(len(gammas), 1)
    stalled: list[str] = []
    ordered = cells.sort("gamma", "n")  # each discount's cells a slice, in n order
    for gamma in gammas:
        own = rows_of(ordered, gamma)
        own = own[~own["early"] & ~own["zero"]]
        if len(own) < 3 or not bool(own["saturated"][-1]):
            continue
        slope = fit_cells(own)
        if slope.finite and slope.lower(level) > limit:
            stalled.append(
                f"gamma={gamma:g}: {_errors_in_words(own)} (n^{slope.estimate:+.2f}, lower bound "
                f"{slope.lower(level):+.2f}), close to the error scale {scale.get(gamma, float('nan')):.3g}"
            )
    if stalled:
        return SubTest("stall", "violated", reason=(
            "the error does not fall: " + "; ".join(stalled)
            + f". A large error that stays flat or rises over the whole grid is a bug, not a pre-asymptotic "
            f"regime (the tested limit is n^{limit:+.2f}: claim {claim_n:g} + floor tolerance "
            f"{budget.floor_tolerance:g})"
        ))
    return SubTest("stall", "ok")


def floor_test(fits: list[DiscountFit], claim_n: float, budget: Budget, levels: Levels) -> SubTest:
    """Does the error stop falling over the largest n at some discount?"""
    if not fits:
        return SubTest("floor", "ok")
    limit = claim_n + budget.floor_tolerance
    level = levels.fire / len(fits)
    floors = [fit for fit in fits if fit.upper.lower(level) > limit]
    if floors:
        where = ", ".join(
            f"gamma={fit.gamma:g} (n^{fit.upper.estimate:+.2f}, lower bound {fit.upper.lower(level):+.2f})"
            for fit in floors
        )
        return SubTest("floor", "violated", reason=(
            f"error floor: over the largest n the error stops falling at {where}; the tested limit is "
            f"n^{limit:+.2f} (claim {claim_n:g} + floor tolerance {budget.floor_tolerance:g}): a bias the data "
            "cannot remove"
        ))
    if any(fit.upper.upper(levels.passing) > limit for fit in fits):
        return SubTest("floor", "unclear", need="replicates")
    return SubTest("floor", "ok")


def _bending(steepening: Slope, level: float) -> bool:
    """Concave in log-log: the slope over the larger n is confidently steeper than over the smaller n."""
    return steepening.upper(level) < 0.0


def rate_test(fits: list[DiscountFit], claim_n: float, budget: Budget, levels: Levels, floor_fired: bool) -> SubTest:
    """Does the error fall more slowly than claimed, averaged over discounts or at any one discount?

    The fire-side level is split in two: half for the pooled slope, half shared
    (Bonferroni) by the per-discount slopes, so a slow rate at one discount
    cannot hide behind a fast one.
    """
    if not fits:
        return SubTest("rate", "ok")
    pooled = pooled_slope([fit.whole for fit in fits])
    limit = claim_n + budget.n_tolerance
    pooled_level = levels.fire / 2
    each_level = levels.fire / (2 * len(fits))
    tested = f"the tested limit is n^{limit:+.2f} (claim {claim_n:g} + tolerance {budget.n_tolerance:g})"
    slow = [fit for fit in fits if fit.whole.lower(each_level) > limit
            and (floor_fired or not _bending(fit.steepening, each_level))]
    pooled_slow = pooled.lower(pooled_level) > limit
    pooled_bending = _bending(pooled_slope([fit.steepening for fit in fits]), pooled_level)
    if slow or (pooled_slow and (floor_fired or not pooled_bending)):
        parts = []
        if pooled_slow:
            parts.append(f"averaged over discounts the n-exponent is {pooled.estimate:+.2f} "
                         f"(lower bound {pooled.lower(pooled_level):+.2f})")
        if slow:
            parts.append("at " + ", ".join(
                f"gamma={fit.gamma:g} it is {fit.whole.estimate:+.2f} (lower bound {fit.whole.lower(each_level):+.2f})"
                for fit in slow))
        return SubTest("rate", "violated", reason=f"rate too slow: {'; '.join(parts)}; {tested}")
    if pooled_slow:
        fast_mean = float(np.mean([fit.upper.estimate for fit in fits]))
        return SubTest("rate", "unclear", need="larger_n", note=(
            f"not yet asymptotic: over the whole window the n-exponent is {pooled.estimate:.2f}, but over "
            f"the largest n it is {fast_mean:.2f}; the curve is still bending toward steeper slopes"
        ))
    if pooled.upper(levels.passing) > limit:
        return SubTest("rate", "unclear", need="replicates")
    return SubTest("rate", "ok")


def short_discounts(slopes: Sequence[dict[str, object]]) -> list[float]:
    """The discounts with fewer than three asymptotic points (slopes rows of :func:`rlrates.fitting.fit_discounts`)."""
    return [float(row["gamma"]) for row in slopes if row["state"] == "too few asymptotic points"]  # type: ignore[arg-type]


def reach_test(slopes: Sequence[dict[str, object]]) -> SubTest:
    """Was the n-claim tested at every discount?"""
    short = short_discounts(slopes)
    if short:
        return SubTest("reach", "unclear", need="larger_n", note=(
            "fewer than 3 asymptotic points at gamma=" + ", ".join(f"{g:g}" for g in short)
            + ": the n-claim is untested there"
        ))
    if len(slopes) and not any(row["state"] == "fitted" for row in slopes):
        return SubTest("reach", "ok",
                       note="errors vanish at the largest n for every discount: faster than any power of n")
    return SubTest("reach", "ok")


def _horizon_note(fit: HorizonFit) -> str:
    parts = []
    if fit.slope is not None:
        ns = fit.n_values
        where = f"n={ns[0]}" if len(ns) == 1 else f"{len(ns)} values of n from {ns[0]} to {ns[-1]}"
        parts.append(f"H-exponent pooled over {where}")
    for gamma, why in fit.left_out.items():
        parts.append(f"gamma={gamma:g} left out of the H-fit: {why}")
    return "; ".join(parts)


def coverage_test(fit: CoverageFit, claim_c: float, budget: Budget, levels: Levels) -> SubTest:
    """Does the error grow faster in the concentrability C than claimed? (:func:`rlrates.fitting.fit_coverage`)."""
    shown = ", ".join(f"C={c:.3g}" for _, c in sorted(fit.coverage.items()))
    note = f"behaviours of graded coverage: {shown}" if shown else ""
    if fit.left_out:
        note += "; left out of the C-fit: " + ", ".join(f"behaviour {b} ({why})" for b, why in sorted(fit.left_out.items()))
    slope = fit.slope
    if slope is None:
        return SubTest("coverage", "unclear", need="larger_n", note=(
            note + "; the C-exponent is not measurable: no (discount, n) has a usable non-zero error at two "
            "behaviour levels").lstrip("; "))
    if not slope.finite:
        return SubTest("coverage", "unclear", need="nothing", note=note, reason=(
            "the C-exponent has no finite estimate or bound (errors overflow or are not numbers): untested"))
    limit = claim_c + budget.coverage_tolerance
    if slope.lower(levels.fire) > limit:
        return SubTest("coverage", "violated", note=note, reason=(
            f"coverage dependence too steep: the error grows like C^{slope.estimate:.2f} (lower bound "
            f"{slope.lower(levels.fire):.2f}) over behaviours with {shown}; the tested limit is C^{limit:g} "
            f"(claim {claim_c:g} + tolerance {budget.coverage_tolerance:g})"))
    if slope.upper(levels.passing) > limit:
        return SubTest("coverage", "unclear", note=note, need="replicates")
    return SubTest("coverage", "ok", note=note)


def horizon_test(fit: HorizonFit, claim_h: float, budget: Budget, levels: Levels) -> SubTest:
    """Does the error grow faster in H than claimed? The H-exponent comes from :func:`rlrates.fitting.fit_horizon`."""
    note = _horizon_note(fit)
    slope = fit.slope
    if slope is None:
        if len(fit.discounts) < 2:
            vanished = all("zero error" in why for why in fit.left_out.values())
            return SubTest("horizon", "unclear", need="nothing" if vanished else "larger_n", note=(
                note + "; the H-exponent is not measurable: fewer than two discounts have usable non-zero errors"
            ).lstrip("; "))
        return SubTest("horizon", "unclear", need="larger_n", note=(
            note + "; no n is in the asymptotic range for every measurable discount: need larger n for the H-exponent"
        ).lstrip("; "))
    if not slope.finite:
        return SubTest("horizon", "unclear", need="nothing", note=note, reason=(
            "the H-exponent has no finite estimate or bound (errors overflow or are not numbers): untested"
        ))
    limit = claim_h + budget.horizon_tolerance
    if slope.lower(levels.fire) > limit:
        return SubTest("horizon", "violated", note=note, reason=(
            f"horizon growth too steep: the error grows like H^{slope.estimate:.2f} (lower bound "
            f"{slope.lower(levels.fire):.2f}); the tested limit is H^{limit:g} (claim {claim_h:g} + tolerance "
            f"{budget.horizon_tolerance:g})"
        ))
    if slope.upper(levels.passing) > limit:
        return SubTest("horizon", "unclear", note=note, need="replicates")
    return SubTest("horizon", "ok", note=note)
