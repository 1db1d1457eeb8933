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
from functools import lru_cache
from typing import Any

import numpy as np
from numpy.typing import ArrayLike
from scipy import special

from .columns import Columns, group_rows, group_stats

__all__ = ["Slope", "fit_slope", "fit_cells", "pooled_slope", "summarise_cells", "DiscountFit", "fit_discounts", "rows_of",
           "HorizonFit", "fit_horizon", "CoverageFit", "fit_coverage"]


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
        return _quantile(self.df, alpha)

    @property
    def finite(self) -> bool:
        return math.isfinite(self.estimate) and math.isfinite(self.se)


@lru_cache(maxsize=256)
def _quantile(df: float, alpha: float) -> float:
    """The upper ``alpha`` quantile of Student's t with ``df`` degrees of freedom (normal for infinite ``df``).

    scipy.special's inverse CDFs: the same numbers as scipy.stats' ppf, without its
    import cost; a verdict asks for the same few levels many times, hence the cache.
    """
    if math.isinf(df):
        return float(special.ndtri(1.0 - alpha))
    return float(special.stdtrit(df, 1.0 - alpha))


def fit_slope(x: ArrayLike, y: ArrayLike, variance: ArrayLike, df: float = math.inf) -> Slope:
    """Least-squares slope of ``y`` on ``x`` with variance from independent ``y`` variances."""
    x_arr = np.asarray(x, dtype=float)
    y_arr = np.asarray(y, dtype=float)
    var = np.asarray(variance, dtype=float)
    if x_arr.size < 2:
        raise ValueError(f"a slope needs at least two points, got {x_arr.size}")
    centred = x_arr - np.add.reduce(x_arr) / x_arr.size  # x_arr.mean(), without its Python-level wrapper
    sxx = float(centred @ centred)
    if sxx <= 0:
        raise ValueError("a slope needs at least two distinct x values")
    weights = centred / sxx
    return Slope(float(weights @ y_arr), float(math.sqrt(weights**2 @ var)), df, int(x_arr.size))


def pooled_slope(slopes: list[Slope]) -> Slope:
    """The mean of independent slopes, with its standard error."""
    estimate = float(np.add.reduce(np.array([s.estimate for s in slopes])) / len(slopes))  # their np.mean
    se = math.sqrt(sum(s.se**2 for s in slopes)) / len(slopes)
    return Slope(estimate, se, min(s.df for s in slopes), sum(s.points for s in slopes))


def _df(cells: Columns) -> float:
    return float(max(int(cells["replicates"].min()) - 1, 1))


def fit_cells(cells: Columns, x_column: str = "n") -> Slope:
    x = np.log(np.asarray(cells[x_column], dtype=float))
    return fit_slope(x, cells["log_mean"], cells["log_var"], _df(cells))


@dataclass(frozen=True)
class DiscountFit:
    """The n-slopes of one discount: over the whole window, over its upper and lower parts."""

    gamma: float
    whole: Slope
    upper: Slope
    steepening: Slope  # upper-part slope minus lower-part slope


def rows_of(ordered: Columns, gamma: float) -> Columns:
    """The rows of discount ``gamma`` in a table sorted by gamma first (a slice: no copy)."""
    column = ordered["gamma"]
    return ordered[int(np.searchsorted(column, gamma, side="left")):int(np.searchsorted(column, gamma, side="right"))]


def fit_discounts(cells: Columns, gammas: list[float], window: int) -> tuple[list[dict[str, object]],
                                                                              list[DiscountFit]]:
    """Per discount, the n-slopes over the ``window`` largest fitted cells.

    ``cells`` are the usable cells (asymptotic, not saturated) of the discounts ``gammas``. Returns the slopes
    rows (one per discount: gamma, H, points, state, and for fitted discounts
    n_min, n_max, slope, slope_se, upper_slope, upper_se) and the fitted discounts.
    ``state`` is "fitted", "vanished" (zero error at the largest n) or "too few
    asymptotic points" (under 3 non-zero cells).
    """
    rows: list[dict[str, object]] = []
    fitted: list[DiscountFit] = []
    # one sort by (gamma, n); each discount's cells are then a slice, in the order a filter and a sort by n give
    # (plain arrays: a summary has a few dozen cells, where a table's per-operation overheads dominate)
    order = np.lexsort((cells["n"], cells["gamma"])) if len(cells) else np.zeros(0, dtype=np.int64)
    gamma_of, n_of, zero_of = cells["gamma"][order], cells["n"][order], cells["zero"][order]
    replicates_of, log_mean_of, log_var_of = cells["replicates"][order], cells["log_mean"][order], cells["log_var"][order]
    for gamma in gammas:
        stop = int(gamma_of.searchsorted(gamma, side="right"))
        start = max(int(gamma_of.searchsorted(gamma, side="left")), stop - window)  # the window's cells
        row: dict[str, object] = {"gamma": gamma, "H": 1.0 / (1.0 - gamma), "points": stop - start}
        positive = ~zero_of[start:stop]
        count = int(np.add.reduce(positive))
        if stop > start and bool(zero_of[stop - 1]):
            row["state"] = "vanished"
        elif count < 3:
            row["state"] = "too few asymptotic points"
        else:
            k = max(3, math.ceil(count / 2))
            n = n_of[start:stop][positive]
            x, y, var = np.log(np.asarray(n, dtype=float)), log_mean_of[start:stop][positive], log_var_of[start:stop][positive]
            replicates = replicates_of[start:stop][positive]
            whole, upper, lower = (fit_slope(x[part], y[part], var[part],
                                             float(max(int(np.minimum.reduce(replicates[part])) - 1, 1)))
                                   for part in (slice(None), slice(count - k, None), slice(None, k)))
            fitted.append(DiscountFit(float(gamma), whole, upper, Slope(
                upper.estimate - lower.estimate, math.hypot(upper.se, lower.se), upper.df, k)))
            row.update(state="fitted", n_min=int(n.min()), n_max=int(n.max()),
                       slope=whole.estimate, slope_se=whole.se, upper_slope=upper.estimate, upper_se=upper.se)
        rows.append(row)
    return rows, fitted


@dataclass(frozen=True)
class HorizonFit:
    """The H-exponent pooled over every n at which all measurable discounts have a usable, non-zero cell.

    ``left_out`` maps each discount that is not in the fit to the reason.
    """

    slope: Slope | None
    n_values: tuple[int, ...]
    discounts: tuple[float, ...]
    left_out: dict[float, str]


def _common(kept: Columns, by: list[str], what: str, measured: list[Any]) -> list[tuple[Any, ...]]:
    """The values of ``by`` at which every one of ``measured`` (values of column ``what``) has a row."""
    if not len(kept):
        return []
    pairs = group_rows(kept, [*by, what]).keys  # the distinct (by..., what) combinations
    per = group_rows(pairs, by)  # how many values of `what` each value of `by` has
    return [tuple(per.keys[name][i].item() for name in by) for i in np.flatnonzero(per.counts == len(measured))]


def fit_horizon(cells: Columns, gammas: list[float]) -> HorizonFit:
    """The H-exponent over the discounts where it is measurable, pooled over their common n.

    ``cells`` are the usable cells. A discount is measurable when it has at least
    one usable cell with non-zero error; the others are left out, with the
    reason. The H-slope at each common n is a least-squares slope of log mean
    error on log H; the slopes at different n use disjoint cells, so the pooled
    mean has the variance of a mean of independent slopes.
    """
    positive = cells[~cells["zero"]]
    left_out: dict[float, str] = {}
    for gamma in gammas:
        if not (cells["gamma"] == gamma).any():
            left_out[gamma] = "no usable cell (pre-asymptotic or saturated at every n)"
        elif not (positive["gamma"] == gamma).any():
            left_out[gamma] = "zero error at every usable n"
    measured = [g for g in gammas if g not in left_out]
    if len(measured) < 2:
        return HorizonFit(None, (), tuple(measured), left_out)
    kept = positive[np.isin(positive["gamma"], measured)]
    common = sorted(int(n) for (n,) in _common(kept, ["n"], "gamma", measured))
    if not common:
        return HorizonFit(None, (), tuple(measured), left_out)
    slopes = [fit_cells(kept[kept["n"] == n].sort("gamma"), "H") for n in common]
    return HorizonFit(pooled_slope(slopes), tuple(common), tuple(measured), left_out)


@dataclass(frozen=True)
class CoverageFit:
    """The C-exponent pooled over every (discount, n) at which every behaviour level has a usable, non-zero cell.

    ``coverage`` maps each level to its concentrability coefficient (at the first
    discount fitted); ``points`` lists the (gamma, n) pairs the fit pooled.
    """

    slope: Slope | None
    points: tuple[tuple[float, int], ...]
    coverage: dict[int, float]
    left_out: dict[int, str]


def fit_coverage(cells: Columns) -> CoverageFit:
    """The C-exponent: per (gamma, n), the least-squares slope of log mean error on log C over the behaviour levels.

    ``cells`` are the usable cells of every level (columns gamma, behaviour, C, n,
    zero, log_mean, log_var, replicates). Slopes at different (gamma, n) use
    disjoint cells, so their mean has the variance of a mean of independent slopes.
    """
    behaviours = np.asarray(cells["behaviour"], dtype=np.int64) if len(cells) else np.zeros(0, np.int64)
    levels = sorted(int(b) for b in np.unique(behaviours))
    first = {int(b): i for i, b in reversed(list(enumerate(behaviours)))}
    coverage = {level: float(cells["C"][first[level]]) for level in sorted(first, key=first.__getitem__)}
    positive = cells[~cells["zero"]]
    left_out = {level: "zero error or no usable cell at every n" for level in levels
                if not (positive["behaviour"] == level).any()}
    measured = [level for level in levels if level not in left_out]
    if len(measured) < 2:
        return CoverageFit(None, (), coverage, left_out)
    kept = positive[np.isin(positive["behaviour"], measured)]
    common = sorted((float(g), int(n)) for g, n in _common(kept, ["gamma", "n"], "behaviour", measured))
    if not common:
        return CoverageFit(None, (), coverage, left_out)
    slopes = []
    for gamma, n in common:
        at = kept[(kept["gamma"] == gamma) & (kept["n"] == n)].sort("C")
        if len(np.unique(at["C"])) < 2:
            continue
        slopes.append(fit_cells(at, "C"))
    if not slopes:
        return CoverageFit(None, (), coverage, left_out)
    return CoverageFit(pooled_slope(slopes), tuple(common), coverage, left_out)


def summarise_cells(table: Columns | Any, zero_tolerance: dict[float, float] | None = None,
                    exact_tolerance: dict[float, float] | None = None) -> Columns:
    """Per (gamma, n): replicates, mean, median and sd of the error, log mean and its delta-method variance.

    For logged data (a ``behaviour`` column) per (gamma, behaviour, C, n). ``table``
    is the error table (:class:`~rlrates.columns.Columns`, or a DataFrame).
    ``zero_tolerance`` maps gamma to the mean error at or below which a cell counts
    as zero (floating-point noise of an exact estimator, or the user's zero
    level). With ``exact_tolerance`` a cell also needs most of its replicates
    (its median) at or below that level: a small mean from estimates that are
    all slightly wrong is not zero. ``constant`` marks non-zero cells whose
    replicates all gave the same error.
    """
    table = Columns.of(table)
    keys = ["gamma", "behaviour", "C", "n"] if "behaviour" in table else ["gamma", "n"]
    groups = group_rows(table, keys, within="error")
    stats = group_stats(table["error"], groups)
    gamma = np.asarray(groups.keys["gamma"], dtype=float)
    mean, replicates = stats["mean"], stats["count"]
    tolerance = np.array([(zero_tolerance or {}).get(g, 0.0) for g in gamma.tolist()], dtype=float)
    zero = mean <= tolerance
    if exact_tolerance is not None:
        zero &= stats["median"] <= np.array([exact_tolerance.get(g, 0.0) for g in gamma.tolist()], dtype=float)
    constant = ~zero & (replicates > 1) & (stats["high"] == stats["low"])
    positive = ~zero
    safe_mean = np.where(positive, mean, 1.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        log_mean = np.where(positive, np.log(safe_mean), -np.inf)
        rel = stats["sd"] / safe_mean
    log_var = np.where(positive, rel**2 / replicates, 0.0)
    data = {name: groups.keys[name] for name in keys}
    data.update(replicates=replicates, mean=mean, median=stats["median"], sd=stats["sd"], high=stats["high"],
                low=stats["low"], H=1.0 / (1.0 - gamma), zero=zero, constant=constant, log_mean=log_mean,
                log_var=log_var)
    return Columns(data, len(groups))
