"""Exponent fits with confidence bounds that come from the replicates.

Each (gamma, n) cell is summarised by the mean error over its replicates. Its
log has standard error ``sd / (sqrt(R) * mean)`` by the delta method (Casella
and Berger, Statistical Inference, 2nd ed., section 5.5.4). A slope is the
ordinary least-squares slope of log(mean error) on log(n) (or log(H)); being a
fixed linear combination ``sum_j w_j log m_j`` of independent cells, its
variance is ``sum_j w_j^2 se_j^2``. The interval therefore measures replicate
noise only; it does not shrink or widen with the curvature of the profile, which
is what makes it usable for a verdict (residual-based t-intervals treat
curvature as noise and lose power on curved profiles).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike
from scipy import stats

__all__ = ["Slope", "fit_slope", "summarise_cells"]


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
