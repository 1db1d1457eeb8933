"""Verdicts: turn the per-cell summary and a claim into pass, fail or "need more evidence".

Three sub-tests, each one-sided at its share of the profile's ``alpha``:

* **rate**: the n-exponent averaged over discounts is confidently above
  ``claim.n + n_tolerance`` (the error falls too slowly);
* **floor**: for some discount, the slope over the upper part of the n grid is
  confidently above ``claim.n + floor_tolerance`` (the error stops falling; a
  bias). Bonferroni over discounts. Pooling alone hides floors: a curve that is
  flat at one discount and steep at another can average to a good slope;
* **horizon**: the H-exponent at the largest common n is confidently above
  ``claim.horizon + horizon_tolerance``.

A claim passes only when no sub-test fires *and* every interval is narrow enough
to have caught a violation of the tolerance's size: its upper bound at level
``1 - pass_alpha`` lies inside the claim plus tolerance. Anything else is
ambiguous and asks for more replicates or larger n. In ``fits``, ``low`` is the
fire-side bound (level ``1 - alpha`` share) and ``high`` the pass-side bound.

Cells are left out of the fits when pre-asymptotic (n below ``min_n_per_horizon``
times H, or mean error above ``saturation`` times the error scale). Cells whose
errors are floating-point zero are "faster than any power": never clamped and
fitted. If the rate test fires but the slope over the largest n is confidently steeper
than over the smallest n (a curve still bending down in log-log, as a burn-in
does), the answer is "not yet asymptotic": escalate to larger n (the fit window
slides up), and "inconclusive" if the budget runs out, never "fail".
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .claims import Claim
from .fitting import Slope, fit_slope
from .profiles import Profile

__all__ = ["Decision", "decide", "FITS_COLUMNS"]

FITS_COLUMNS = ["factor", "exponent", "low", "high", "claimed", "verdict"]


@dataclass
class Decision:
    """The outcome of one decision pass."""

    status: str  # "pass" | "fail" | "ambiguous"
    fired: list[str] = field(default_factory=list)  # "rate", "floor", "horizon"
    reasons: list[str] = field(default_factory=list)
    need: str | None = None  # "replicates" | "larger_n" when ambiguous
    fits: pd.DataFrame = field(default_factory=lambda: pd.DataFrame(columns=FITS_COLUMNS))
    slopes: pd.DataFrame = field(default_factory=pd.DataFrame)
    notes: list[str] = field(default_factory=list)
    exact: bool = False


def _usable(summary: pd.DataFrame, profile: Profile, scale: dict[float, float]) -> pd.Series:
    early = summary["n"] < profile.min_n_per_horizon * summary["H"]
    limit = summary["gamma"].map(scale) * profile.saturation
    saturated = ~summary["zero"] & (summary["mean"] > limit)
    return ~(early | saturated)


def _df(cells: pd.DataFrame) -> float:
    return float(max(cells["replicates"].min() - 1, 1))


def _pooled(slopes: list[Slope]) -> Slope:
    estimate = float(np.mean([s.estimate for s in slopes]))
    se = math.sqrt(sum(s.se**2 for s in slopes)) / len(slopes)
    return Slope(estimate, se, min(s.df for s in slopes), sum(s.points for s in slopes))


def decide(summary: pd.DataFrame, claim: Claim, profile: Profile, scale: dict[float, float], window: int) -> Decision:
    """Decide one pass. ``window`` is how many of the largest usable n values each fit uses."""
    decision = Decision(status="ambiguous")
    if bool(summary["zero"].all()):
        decision.status, decision.exact = "pass", True
        decision.reasons.append("every error is zero to floating-point precision: the estimator is exact here")
        decision.fits = _fits_rows(claim, None, None, "exact")
        return decision

    usable_mask = _usable(summary, profile, scale)
    dropped = summary[~usable_mask]
    if len(dropped):
        decision.notes.append(
            f"{len(dropped)} pre-asymptotic cell(s) left out of the fits (n < {profile.min_n_per_horizon:g} H "
            f"or mean error above {profile.saturation:g} of the error scale)"
        )
    usable = summary[usable_mask]
    active = (claim.n is not None) * 2 + (claim.horizon is not None)
    alpha = profile.alpha / max(active, 1)
    gammas = sorted(summary["gamma"].unique())
    per_gamma: list[dict[str, object]] = []
    full: list[Slope] = []
    upper: list[tuple[float, Slope]] = []
    steepening: list[Slope] = []  # upper-part slope minus lower-part slope, per discount
    need_larger_n = False
    for gamma in gammas:
        cells = usable[usable["gamma"] == gamma].sort_values("n").tail(window)
        row: dict[str, object] = {"gamma": gamma, "H": 1.0 / (1.0 - gamma), "points": len(cells)}
        if len(cells) and bool(cells["zero"].iloc[-1]):
            row["state"] = "vanished"
        else:
            positive = cells[~cells["zero"]]
            if len(positive) < 3:
                row["state"] = "too few asymptotic points"
                need_larger_n = True
            else:
                x = np.log(positive["n"].to_numpy(float))
                whole = fit_slope(x, positive["log_mean"], positive["log_var"], _df(positive))
                k = max(3, math.ceil(len(positive) / 2))
                top = positive.tail(k)
                fast = fit_slope(np.log(top["n"].to_numpy(float)), top["log_mean"], top["log_var"], _df(top))
                bottom = positive.head(k)
                slow = fit_slope(np.log(bottom["n"].to_numpy(float)), bottom["log_mean"], bottom["log_var"], _df(bottom))
                full.append(whole)
                upper.append((gamma, fast))
                steepening.append(Slope(fast.estimate - slow.estimate, math.hypot(fast.se, slow.se), fast.df, k))
                row.update(state="fitted", n_min=int(positive["n"].min()), n_max=int(positive["n"].max()),
                           slope=whole.estimate, slope_se=whole.se, upper_slope=fast.estimate, upper_se=fast.se)
        per_gamma.append(row)
    decision.slopes = pd.DataFrame(per_gamma)

    fires: list[str] = []
    unclear: list[str] = []
    pooled: Slope | None = None
    horizon: Slope | None = None
    n_verdict = h_verdict = "not claimed"
    if claim.n is not None:
        n_verdict = "ok"
        if full:
            pooled = _pooled(full)
            limit = claim.n + profile.n_tolerance
            floor_limit = claim.n + profile.floor_tolerance
            floor_alpha = alpha / len(upper)
            floors = [(g, s) for g, s in upper if s.lower(floor_alpha) > floor_limit]
            rate_fire = pooled.lower(alpha) > limit
            fast_mean = float(np.mean([s.estimate for _, s in upper]))
            # Concave in log-log (the slope is still getting steeper): pre-asymptotic, not slow.
            bending = _pooled(steepening).upper(alpha) < 0.0
            if floors:
                fires.append("floor")
                where = ", ".join(
                    f"gamma={g:g} (n^{s.estimate:+.2f}, lower bound {s.lower(floor_alpha):+.2f})" for g, s in floors
                )
                decision.reasons.append(
                    f"error floor: over the largest n the error stops falling at {where}; the claim allows at most "
                    f"n^{claim.n:g} plus tolerance {profile.floor_tolerance:g} (a bias the data cannot remove)"
                )
            if rate_fire and not floors and bending:
                need_larger_n = True
                unclear.append("n")
                decision.notes.append(
                    f"not yet asymptotic: over the whole window the n-exponent is {pooled.estimate:.2f}, but over "
                    f"the largest n it is {fast_mean:.2f}; the curve is still bending toward steeper slopes"
                )
            elif rate_fire:
                fires.append("rate")
                decision.reasons.append(
                    f"rate too slow: the n-exponent is {pooled.estimate:.2f} (lower bound {pooled.lower(alpha):.2f}), "
                    f"above the claimed {claim.n:g} plus tolerance {profile.n_tolerance:g}"
                )
            elif pooled.upper(profile.pass_alpha) > limit or any(
                s.upper(profile.pass_alpha) > floor_limit for _, s in upper
            ):
                unclear.append("n")
            short_gammas = [row["gamma"] for row in per_gamma if row["state"] == "too few asymptotic points"]
            if short_gammas and not fires and "n" not in unclear:
                unclear.append("n")  # a discount the fits could not cover cannot count as passed
                decision.notes.append(
                    "fewer than 3 asymptotic points at gamma="
                    + ", ".join(f"{g:g}" for g in short_gammas) + ": the n-claim is untested there"
                )
            if floors or (rate_fire and "rate" in fires):
                n_verdict = "violated"
            elif "n" in unclear:
                n_verdict = "unclear"
        elif need_larger_n:
            unclear.append("n")
            n_verdict = "unclear"
        else:
            decision.notes.append("errors vanish at the largest n for every discount: faster than any power of n")
    if claim.horizon is not None:
        horizon, note, short = _horizon_slope(summary, usable_mask, gammas)
        if note:
            decision.notes.append(note)
        need_larger_n = need_larger_n or short
        h_verdict = "ok"
        if horizon is not None:
            limit = claim.horizon + profile.horizon_tolerance
            if horizon.lower(alpha) > limit:
                fires.append("horizon")
                h_verdict = "violated"
                decision.reasons.append(
                    f"horizon growth too steep: the error grows like H^{horizon.estimate:.2f} (lower bound "
                    f"{horizon.lower(alpha):.2f}), above the claimed H^{claim.horizon:g} plus tolerance "
                    f"{profile.horizon_tolerance:g}"
                )
            elif horizon.upper(profile.pass_alpha) > limit:
                unclear.append("horizon")
                h_verdict = "unclear"
        elif short:
            unclear.append("horizon")
            h_verdict = "unclear"
    decision.fits = _fits_rows(claim, pooled, horizon, None, (alpha, profile.pass_alpha), n_verdict, h_verdict)
    decision.fired = fires
    if fires:
        decision.status = "fail"
    elif unclear:
        decision.status = "ambiguous"
        decision.need = "larger_n" if need_larger_n else "replicates"
        decision.reasons.append(
            "the evidence is not yet decisive: "
            + ", ".join(f"the {u}-exponent interval still straddles the claim plus tolerance" for u in unclear)
        )
    else:
        decision.status = "pass"
    return decision


def _horizon_slope(summary: pd.DataFrame, usable: pd.Series, gammas: list[float]) -> tuple[Slope | None, str, bool]:
    """H-exponent at the largest n where every discount has a usable, non-zero cell."""
    cells = summary[usable & ~summary["zero"]]
    counts = cells.groupby("n")["gamma"].nunique()
    common = counts[counts == len(gammas)].index
    if len(common) == 0:
        if bool(summary["zero"].any()):
            return None, "some errors vanish at every usable n: the H-exponent is not measurable there", False
        return None, "no n is in the asymptotic range for every discount: need larger n for the H-exponent", True
    n_star = int(max(common))
    at = cells[cells["n"] == n_star].sort_values("gamma")
    slope = fit_slope(np.log(at["H"].to_numpy(float)), at["log_mean"], at["log_var"], _df(at))
    return slope, f"H-exponent fitted at n={n_star}", False


def _fits_rows(
    claim: Claim,
    pooled: Slope | None,
    horizon: Slope | None,
    fixed: str | None,
    levels: tuple[float, float] = (0.01, 0.05),
    n_verdict: str = "ok",
    h_verdict: str = "ok",
) -> pd.DataFrame:
    rows = []
    for factor, bound, slope, verdict in (("n", claim.n, pooled, n_verdict), ("horizon", claim.horizon, horizon, h_verdict)):
        if bound is None:
            continue
        if slope is None:
            rows.append((factor, math.nan, math.nan, math.nan, bound, fixed or verdict))
        else:
            low, high = slope.lower(levels[0]), slope.upper(levels[1])
            rows.append((factor, slope.estimate, low, high, bound, fixed or verdict))
    return pd.DataFrame(rows, columns=FITS_COLUMNS)
