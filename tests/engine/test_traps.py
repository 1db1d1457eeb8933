"""The known traps of rate checking, one test each, plus the fitting arithmetic they rest on."""

from __future__ import annotations

import hashlib
import re
import warnings
from typing import Any

import numpy as np
import pandas as pd
import pytest
from scipy import stats

import rlrates
from rlrates import reference
from rlrates.rate_check import RatesWarning
from rlrates.fitting import fit_slope, summarise_cells
from rlrates.budgets import BUDGETS

import zoo

CLAIM = rlrates.Claim(n=-0.5, horizon=2.0)


@pytest.fixture(scope="module")
def garnet() -> rlrates.TabularMDP:
    return rlrates.garnet(states=12, actions=3, branching=4, seed=5)


class ShapedError:
    """Exact Q^pi plus an error of a chosen deterministic size budget times log-normal noise."""

    def __init__(self, mdp: rlrates.TabularMDP, size: Any, sigma: float = 0.2) -> None:
        self.mdp, self.size, self.sigma = mdp, size, sigma
        self.truth: dict[float, np.ndarray] = {}

    def __call__(self, batch: Any, problem: Any) -> np.ndarray:
        if problem.gamma not in self.truth:
            self.truth[problem.gamma] = rlrates.q_pi(self.mdp, problem.gamma, problem.policy)
        digest = hashlib.blake2b(batch.counts.tobytes(), digest_size=8).digest()
        rng = np.random.default_rng(int.from_bytes(digest, "little"))
        noise = rng.lognormal(0.0, self.sigma, size=problem.rewards.shape)
        return self.truth[problem.gamma] + self.size(batch.n, 1.0 / (1.0 - problem.gamma)) * noise


# ---------------------------------------------------------------------------------------------
# fitting arithmetic


def test_fit_slope_matches_least_squares_and_propagates_cell_variances() -> None:
    x = np.log([128, 256, 512, 1024, 2048.0])
    y = -0.5 * x + 0.1 * np.sin(3 * x)
    variance = np.array([0.01, 0.02, 0.01, 0.03, 0.02])
    slope = fit_slope(x, y, variance)
    assert slope.estimate == pytest.approx(stats.linregress(x, y).slope, abs=1e-12)  # scipy reference
    # Monte Carlo of the same linear combination of independent normal cells (seeded; the 5%
    # relative tolerance is about 7 standard errors of the sample sd with 20000 draws)
    rng = np.random.default_rng(20261202)
    draws = y + rng.normal(size=(20000, 5)) * np.sqrt(variance)
    simulated = np.array([np.polyfit(x, row, 1)[0] for row in draws[:2000]])
    weights = (x - x.mean()) / ((x - x.mean()) ** 2).sum()
    assert slope.se == pytest.approx(np.sqrt(weights**2 @ variance), rel=1e-12)
    assert slope.se == pytest.approx(simulated.std(ddof=1), rel=0.08)


def test_slope_bounds_use_student_t_quantiles() -> None:
    slope = fit_slope([0.0, 1.0, 2.0], [0.0, -0.5, -1.0], [0.01, 0.01, 0.01], df=9)
    assert slope.upper(0.05) - slope.estimate == pytest.approx(stats.t.ppf(0.95, 9) * slope.se)
    assert slope.estimate - slope.lower(0.01) == pytest.approx(stats.t.ppf(0.99, 9) * slope.se)


def test_cell_summary_uses_the_delta_method() -> None:
    table = pd.DataFrame({"gamma": 0.5, "H": 2.0, "n": 100, "replicate": range(4), "error": [1.0, 2.0, 3.0, 4.0], "seconds": 0.0})
    row = summarise_cells(table).row(0)
    assert row["mean"] == 2.5 and row["log_mean"] == pytest.approx(np.log(2.5))
    # Var(log mean) ~ sd^2 / (R mean^2) (Casella and Berger, section 5.5.4)
    assert row["log_var"] == pytest.approx(np.var([1, 2, 3, 4], ddof=1) / (4 * 2.5**2))


# ---------------------------------------------------------------------------------------------
# trap: pre-asymptotic points


def test_a_grid_that_starts_pre_asymptotic_warns_and_those_cells_are_left_out() -> None:
    hard = rlrates.horizon_hard()
    with pytest.warns(RatesWarning, match=r"starts at n=8, below 8 H for gamma in 0.5, 0.75, 0.9"):
        result = rlrates.check(reference.plugin_q_pi, hard, rlrates.Claim(n=-0.5, horizon=1.5),
                               n_grid=(8, 16, 32, 64, 128, 256, 512, 1024, 2048), seed=2)
    assert result.status == "pass", result.message
    assert "pre-asymptotic cell(s) left out" in result.message


def test_the_budget_grids_start_in_the_asymptotic_range() -> None:
    for budget in BUDGETS.values():
        assert budget.n_grid[0] >= budget.min_n_per_horizon / (1 - max(budget.gammas))


def test_saturated_small_n_errors_do_not_fail_a_correct_rate(garnet: rlrates.TabularMDP) -> None:
    # error = min(0.35 H, 6 H / sqrt(n)) times noise whose sup over 36 entries is about 1.5:
    # above half the value range (saturated) for n <= 256, then n^-1/2
    estimator = ShapedError(garnet, lambda n, H: min(0.35 * H, 6.0 * H / np.sqrt(n)))
    result = rlrates.check(estimator, garnet, CLAIM, seed=0)
    assert result.status == "pass", result.message
    assert "pre-asymptotic cell(s) left out" in result.message


def test_a_still_bending_curve_is_not_yet_asymptotic_rather_than_failed(garnet: rlrates.TabularMDP) -> None:
    # error ~ 1/sqrt(n + n0): flat for n << n0, slope -1/2 for n >> n0 (common practice: a burn-in)
    estimator = ShapedError(garnet, lambda n, H: 0.5 * H / np.sqrt(n + 600.0), sigma=0.05)
    result = rlrates.check(estimator, garnet, rlrates.Claim(n=-0.5), seed=0, budget=BUDGETS["ci"].with_overrides(n_doublings=0))
    assert result.status == "inconclusive", result.message
    assert "not yet asymptotic" in result.message
    # with the budget to go to larger n, it settles without ever failing
    settled = rlrates.check(estimator, garnet, rlrates.Claim(n=-0.5), seed=0,
                            budget=BUDGETS["ci"].with_overrides(n_doublings=4))
    assert settled.status == "pass", settled.message


# ---------------------------------------------------------------------------------------------
# trap: exact estimators and exactly-zero cells


def test_an_exact_estimator_passes_without_fitting() -> None:
    mdp = rlrates.deterministic(states=8, actions=3, seed=0)  # one-hot rows: the plug-in model is P
    with pytest.warns(RatesWarning, match="is deterministic .* the rate is untested here"):
        result = rlrates.check(reference.plugin_q_pi, mdp, CLAIM, seed=0)
    assert result.status == "pass", result.message
    assert "the rate is untested here" in result.message
    assert set(result.fits["verdict"]) == {"exact"}
    assert result.fits["exponent"].isna().all()  # never clamped and fitted
    assert "exact here" in result.message


def test_cells_that_become_exactly_zero_are_faster_than_any_power(garnet: rlrates.TabularMDP) -> None:
    estimator = ShapedError(garnet, lambda n, H: 0.1 * H / np.sqrt(n) if n < 1024 else 0.0)
    result = rlrates.check(estimator, garnet, CLAIM, seed=0)
    assert result.status == "pass", result.message
    assert "errors vanish at the largest n" in result.message


def test_a_greedy_policy_that_becomes_exactly_optimal_passes() -> None:
    mdp = rlrates.garnet(states=20, actions=4, branching=5, seed=0)
    result = rlrates.check(reference.plugin_policy, mdp, rlrates.Claim(n=-0.5), target="policy", seed=0)
    assert (result.table.groupby("n")["error"].mean().iloc[-1]) < 1e-3
    assert result.status == "pass", result.message


# ---------------------------------------------------------------------------------------------
# trap: residual t-intervals on curved budgets; nonlinear floor fits on biased estimators


def test_curvature_is_not_mistaken_for_noise(garnet: rlrates.TabularMDP) -> None:
    # A wavy but correct budget with little replicate noise. A residual-based t-interval of
    # the slope (scipy.stats.linregress) is wide here; the replicate-based one is narrow, so
    # the check decides in one pass.
    estimator = ShapedError(garnet, lambda n, H: 0.05 * H * n**-0.5 * (1 + 0.35 * np.sin(2.2 * np.log(n))), sigma=0.05)
    result = rlrates.check(estimator, garnet, rlrates.Claim(n=-0.5), seed=0)
    assert result.status == "pass" and result.run.passes == 1, result.message
    means = result.table.groupby(["gamma", "n"])["error"].mean().loc[0.9]
    fit = stats.linregress(np.log(means.index.to_numpy(float)), np.log(means.to_numpy()))
    residual_halfwidth = stats.t.ppf(0.995, len(means) - 2) * fit.stderr
    replicate_halfwidth = float(result.fits["high"].iloc[0] - result.fits["exponent"].iloc[0])
    assert residual_halfwidth > 3 * replicate_halfwidth


def test_a_slightly_biased_but_correct_estimator_is_not_called_a_floor(garnet: rlrates.TabularMDP) -> None:
    # Laplace smoothing adds an O(1/n) bias: a fit of a n^-b + c would report c > 0 (a "floor");
    # the slope tests do not (common practice: bias below the noise is harmless).
    result = rlrates.check(zoo.laplace_smoothed_q_pi, garnet, CLAIM, seed=1)
    assert result.status == "pass", result.message
    assert "floor" not in result.fired


def test_pooling_alone_would_hide_a_floor_at_one_discount(garnet: rlrates.TabularMDP) -> None:
    estimator = zoo.SyntheticPower(garnet, -0.5, 1.0, floor=0.02, floor_at=0.5)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        result = rlrates.check(estimator, garnet, CLAIM, seed=0)
    assert result.status == "fail"
    assert "floor" in result.fired
    assert re.search(r"error floor: .* stops falling at gamma=0.5 \(n\^", result.message)


def test_a_discount_without_enough_asymptotic_points_is_not_passed_unseen(garnet: rlrates.TabularMDP) -> None:
    # n from 32 to 128: at gamma = 0.9 (8 H = 80) only n = 128 is asymptotic, so that discount
    # cannot be fitted; the other two can. Without the budget to go to larger n, no pass.
    budget = BUDGETS["ci"].with_overrides(n_doublings=0)
    with pytest.warns(RatesWarning, match="below 8 H for gamma in 0.9"):
        result = rlrates.check(reference.plugin_q_pi, garnet, rlrates.Claim(n=-0.5), seed=0, budget=budget,
                               n_grid=(32, 64, 128))
    assert result.status == "inconclusive", result.message
    assert "fewer than 3 asymptotic points at gamma=0.9" in result.message
    # with doublings, larger n covers gamma = 0.9 too and the check settles (three doublings: the
    # tested limit -0.42 needs n up to 1024 on this short grid)
    with pytest.warns(RatesWarning):
        settled = rlrates.check(reference.plugin_q_pi, garnet, rlrates.Claim(n=-0.5), seed=0, n_grid=(32, 64, 128),
                                budget=BUDGETS["ci"].with_overrides(n_doublings=3))
    assert settled.status == "pass", settled.message


def test_a_budget_with_every_override_unset_is_the_budget_itself_and_unknown_names_still_raise() -> None:
    # the check passes n_grid=None, gammas=None, ... on every call: those change nothing, and are not rebuilt
    from rlrates.budgets import resolve_budget

    assert resolve_budget("ci", n_grid=None, gammas=None, replicates=None, zero_level=None) is BUDGETS["ci"]
    assert resolve_budget("ci", replicates=8).replicates == 8
    with pytest.raises(TypeError, match="unknown budget setting"):
        resolve_budget("ci", n_gird=None)
