"""Exponent fits with confidence bounds that come from the replicates.

Each (gamma, n) cell is summarised by the mean error over its replicates. Its
log has standard error ``sd / (sqrt(R) * mean)`` by the delta method (Casella
and Berger, Statistical Inference, 2nd ed., section 5.5.4). A slope is the
ordinary least-squares slope of log(mean error) on log(n) (or log(H)); being a
fixed linear combination ``sum_j w_j log m_j`` of independent cells, its
variance is ``sum_j w_j^2 se_j^2``. The interval therefore measures replicate
noise only; it does not shrink or widen with the curvature of the error curve, which
is what makes it usable for a verdict (residual-based t-intervals treat
curvature as noise and lose power on curved error curves).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike
from scipy import stats

__all__ = ["Slope", "fit_slope", "pooled_slope", "summarise_cells", "DiscountFit", "fit_discounts", "fit_horizon"]


@dataclass(frozen=True)
class Slope:
    """A fitted exponent with its standard error and degrees of freedom."""

    estimate: float
    se: float
    df: float
    points: int

    def lower(self, alpha: float) -> float:
        """One-sided lower confidence bound at level ``1 - alpha``."""
        return self.estimate - self._quantile(alpha) * self.se

    def upper(self, alpha: float) -> float:
        """One-sided upper confidence bound at level ``1 - alpha``."""
        return self.estimate + self._quantile(alpha) * self.se

    def detectable(self, limit: float, alpha: float, power: float = 0.95) -> float:
        """The smallest true exponent whose lower bound at level ``1 - alpha`` clears ``limit`` with probability ``power``.

        With the estimate distributed about the true exponent with this standard
        error and degrees of freedom: ``limit + (q_{1-alpha} + q_{power}) * se``.
        """
        return limit + (self._quantile(alpha) + self._quantile(1.0 - power)) * self.se

    def _quantile(self, alpha: float) -> float:
        if math.isinf(self.df):
            return float(stats.norm.ppf(1.0 - alpha))
        return float(stats.t.ppf(1.0 - alpha, self.df))


def fit_slope(x: ArrayLike, y: ArrayLike, variance: ArrayLike, df: float = math.inf) -> Slope:
    """Least-squares slope of ``y`` on ``x`` with variance from independent ``y`` variances."""
    x_arr = np.asarray(x, dtype=float)
    y_arr = np.asarray(y, dtype=float)
    var = np.asarray(variance, dtype=float)
    if x_arr.size < 2:
        raise ValueError(f"a slope needs at least two points, got {x_arr.size}")
    centred = x_arr - x_arr.mean()
    sxx = float(centred @ centred)
    if sxx <= 0:
        raise ValueError("a slope needs at least two distinct x values")
    weights = centred / sxx
    return Slope(float(weights @ y_arr), float(math.sqrt(weights**2 @ var)), df, int(x_arr.size))


def pooled_slope(slopes: list[Slope]) -> Slope:
    """The mean of independent slopes, with its standard error."""
    estimate = float(np.mean([s.estimate for s in slopes]))
    se = math.sqrt(sum(s.se**2 for s in slopes)) / len(slopes)
    return Slope(estimate, se, min(s.df for s in slopes), sum(s.points for s in slopes))


def _df(cells: pd.DataFrame) -> float:
    return float(max(cells["replicates"].min() - 1, 1))


def _fit_cells(cells: pd.DataFrame, x_column: str = "n") -> Slope:
    x = np.log(cells[x_column].to_numpy(float))
    return fit_slope(x, cells["log_mean"], cells["log_var"], _df(cells))


@dataclass(frozen=True)
class DiscountFit:
    """The n-slopes of one discount: over the whole window, over its upper and lower parts."""

    gamma: float
    whole: Slope
    upper: Slope
    steepening: Slope  # upper-part slope minus lower-part slope


def fit_discounts(cells: pd.DataFrame, gammas: list[float], window: int) -> tuple[pd.DataFrame, list[DiscountFit]]:
    """Per discount, the n-slopes over the ``window`` largest fitted cells.

    ``cells`` are the usable cells (asymptotic, not saturated) of the discounts ``gammas``. Returns the slopes
    table (one row per discount: gamma, H, points, state, and for fitted discounts
    n_min, n_max, slope, slope_se, upper_slope, upper_se) and the fitted discounts.
    ``state`` is "fitted", "vanished" (zero error at the largest n) or "too few
    asymptotic points" (under 3 non-zero cells).
    """
    rows: list[dict[str, object]] = []
    fitted: list[DiscountFit] = []
    for gamma in gammas:
        window_cells = cells[cells["gamma"] == gamma].sort_values("n").tail(window)
        row: dict[str, object] = {"gamma": gamma, "H": 1.0 / (1.0 - gamma), "points": len(window_cells)}
        positive = window_cells[~window_cells["zero"]]
        if len(window_cells) and bool(window_cells["zero"].iloc[-1]):
            row["state"] = "vanished"
        elif len(positive) < 3:
            row["state"] = "too few asymptotic points"
        else:
            k = max(3, math.ceil(len(positive) / 2))
            whole, upper, lower = _fit_cells(positive), _fit_cells(positive.tail(k)), _fit_cells(positive.head(k))
            fitted.append(DiscountFit(float(gamma), whole, upper, Slope(
                upper.estimate - lower.estimate, math.hypot(upper.se, lower.se), upper.df, k)))
            row.update(state="fitted", n_min=int(positive["n"].min()), n_max=int(positive["n"].max()),
                       slope=whole.estimate, slope_se=whole.se, upper_slope=upper.estimate, upper_se=upper.se)
        rows.append(row)
    return pd.DataFrame(rows), fitted


def fit_horizon(cells: pd.DataFrame, discounts: int) -> tuple[Slope | None, int | None]:
    """The H-exponent at the largest n where all ``discounts`` have a usable, non-zero cell.

    Returns the slope and that n, or ``(None, None)`` when no n qualifies.
    """
    positive = cells[~cells["zero"]]
    counts = positive.groupby("n")["gamma"].nunique()
    common = counts[counts == discounts].index
    if len(common) == 0:
        return None, None
    n_star = int(max(common))
    return _fit_cells(positive[positive["n"] == n_star].sort_values("gamma"), "H"), n_star


def summarise_cells(table: pd.DataFrame, zero_tolerance: dict[float, float] | None = None) -> pd.DataFrame:
    """Per (gamma, n): replicates, mean and sd of the error, log mean and its delta-method variance.

    ``zero_tolerance`` maps gamma to the error below which a cell counts as
    exactly zero (floating-point noise of an exact estimator).
    """
    grouped = table.groupby(["gamma", "n"], sort=True)["error"]
    summary = grouped.agg(replicates="count", mean="mean", sd="std").reset_index()
    summary["sd"] = summary["sd"].fillna(0.0)
    summary["H"] = 1.0 / (1.0 - summary["gamma"])
    tolerance = summary["gamma"].map(zero_tolerance or {}).fillna(0.0)
    summary["zero"] = summary["mean"] <= tolerance
    positive = ~summary["zero"]
    summary["log_mean"] = np.where(positive, np.log(summary["mean"].where(positive, 1.0)), -np.inf)
    rel = summary["sd"] / summary["mean"].where(positive, 1.0)
    summary["log_var"] = np.where(positive, rel**2 / summary["replicates"], 0.0)
    return summary
