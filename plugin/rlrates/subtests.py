"""The sub-tests of a verdict, each a small pure function returning a :class:`SubTest`.

* :func:`floor_test`: for some discount the slope over the upper part of the n
  grid is confidently above ``claim.n + floor_tolerance`` (the error stops
  falling: a bias). Bonferroni over discounts: pooling alone hides floors (a
  curve flat at one discount and steep at another can average to a good slope).
* :func:`rate_test`: the n-exponent averaged over discounts is confidently above
  ``claim.n + n_tolerance`` (the error falls too slowly), unless no floor fired
  and the curve is still bending toward steeper slopes (a burn-in: ask for
  larger n instead).
* :func:`coverage_test`: every discount had at least three asymptotic points,
  so the n-claim was tested at every discount.
* :func:`horizon_test`: the H-exponent is confidently above
  ``claim.horizon + horizon_tolerance``.

Each sub-test fires ("violated") when its fire-side bound, at level
``1 - alpha``, clears its limit; it is "ok" only when its pass-side bound, at
level ``1 - pass_alpha``, lies inside the limit; anything between is "unclear"
and names the evidence that would settle it.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from .fitting import DiscountFit, Slope, pooled_slope
from .budgets import Budget
from .vocabulary import Need, SubTestName, SubTestVerdict

__all__ = ["SubTest", "floor_test", "rate_test", "coverage_test", "horizon_test", "short_discounts"]


@dataclass(frozen=True)
class SubTest:
    """The answer of one sub-test: its verdict, why it fired, a remark, and what would settle it."""

    name: SubTestName
    verdict: SubTestVerdict
    reason: str = ""
    note: str = ""
    need: Need | None = None


def floor_test(fits: list[DiscountFit], claim_n: float, budget: Budget, alpha: float) -> SubTest:
    """Does the error stop falling over the largest n at some discount?"""
    if not fits:
        return SubTest("floor", "ok")
    limit = claim_n + budget.floor_tolerance
    level = alpha / len(fits)
    floors = [fit for fit in fits if fit.upper.lower(level) > limit]
    if floors:
        where = ", ".join(
            f"gamma={fit.gamma:g} (n^{fit.upper.estimate:+.2f}, lower bound {fit.upper.lower(level):+.2f})"
            for fit in floors
        )
        return SubTest("floor", "violated", reason=(
            f"error floor: over the largest n the error stops falling at {where}; the claim allows at most "
            f"n^{claim_n:g} plus tolerance {budget.floor_tolerance:g} (a bias the data cannot remove)"
        ))
    if any(fit.upper.upper(budget.pass_alpha) > limit for fit in fits):
        return SubTest("floor", "unclear", need="replicates")
    return SubTest("floor", "ok")


def rate_test(fits: list[DiscountFit], claim_n: float, budget: Budget, alpha: float, floor_fired: bool) -> SubTest:
    """Does the error fall more slowly than claimed, averaged over discounts?"""
    if not fits:
        return SubTest("rate", "ok")
    pooled = pooled_slope([fit.whole for fit in fits])
    limit = claim_n + budget.n_tolerance
    if pooled.lower(alpha) > limit:
        # Concave in log-log (the slope is still getting steeper): pre-asymptotic, not slow.
        bending = pooled_slope([fit.steepening for fit in fits]).upper(alpha) < 0.0
        if bending and not floor_fired:
            fast_mean = float(np.mean([fit.upper.estimate for fit in fits]))
            return SubTest("rate", "unclear", need="larger_n", note=(
                f"not yet asymptotic: over the whole window the n-exponent is {pooled.estimate:.2f}, but over "
                f"the largest n it is {fast_mean:.2f}; the curve is still bending toward steeper slopes"
            ))
        return SubTest("rate", "violated", reason=(
            f"rate too slow: the n-exponent is {pooled.estimate:.2f} (lower bound {pooled.lower(alpha):.2f}), "
            f"above the claimed {claim_n:g} plus tolerance {budget.n_tolerance:g}"
        ))
    if pooled.upper(budget.pass_alpha) > limit:
        return SubTest("rate", "unclear", need="replicates")
    return SubTest("rate", "ok")


def short_discounts(slopes: pd.DataFrame) -> list[float]:
    """The discounts with fewer than three asymptotic points (from :func:`rlrates.fitting.fit_discounts`)."""
    if not len(slopes):
        return []
    return [float(g) for g in slopes.loc[slopes["state"] == "too few asymptotic points", "gamma"]]


def coverage_test(slopes: pd.DataFrame) -> SubTest:
    """Was the n-claim tested at every discount?"""
    short = short_discounts(slopes)
    if short:
        return SubTest("coverage", "unclear", need="larger_n", note=(
            "fewer than 3 asymptotic points at gamma=" + ", ".join(f"{g:g}" for g in short)
            + ": the n-claim is untested there"
        ))
    if len(slopes) and not (slopes["state"] == "fitted").any():
        return SubTest("coverage", "ok",
                       note="errors vanish at the largest n for every discount: faster than any power of n")
    return SubTest("coverage", "ok")


def horizon_test(slope: Slope | None, n_star: int | None, some_zero: bool, claim_h: float, budget: Budget,
                 alpha: float) -> SubTest:
    """Does the error grow faster in H than claimed? ``slope`` is the H-exponent fitted at ``n_star``."""
    if slope is None:
        if some_zero:
            return SubTest("horizon", "ok",
                           note="some errors vanish at every usable n: the H-exponent is not measurable there")
        return SubTest("horizon", "unclear", need="larger_n",
                       note="no n is in the asymptotic range for every discount: need larger n for the H-exponent")
    note = f"H-exponent fitted at n={n_star}"
    limit = claim_h + budget.horizon_tolerance
    if slope.lower(alpha) > limit:
        return SubTest("horizon", "violated", note=note, reason=(
            f"horizon growth too steep: the error grows like H^{slope.estimate:.2f} (lower bound "
            f"{slope.lower(alpha):.2f}), above the claimed H^{claim_h:g} plus tolerance {budget.horizon_tolerance:g}"
        ))
    if slope.upper(budget.pass_alpha) > limit:
        return SubTest("horizon", "unclear", note=note, need="replicates")
    return SubTest("horizon", "ok", note=note)
