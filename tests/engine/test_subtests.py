"""Each sub-test of a verdict on its own, with slopes built by hand, and how decide() combines them.

Expected bounds are computed with scipy.stats' normal quantile (the reference for
Slope's bounds at infinite degrees of freedom); the decision rules are the ones
documented in rlrates.subtests.
"""

from __future__ import annotations

import math

import pandas as pd
import pytest
from scipy import stats

import rlrates
from rlrates.fitting import DiscountFit, HorizonFit, Slope
from rlrates.budgets import BUDGETS
from rlrates.subtests import Levels, reach_test, floor_test, horizon_test, rate_test, short_discounts, stall_test
from rlrates.verdict import decide, levels_for, mark_cells

CI_BUDGET = BUDGETS["ci"]
# an n and H claim: the n-claim counts twice (rate and floor); both levels spread over the planned looks
ALPHA = Levels(CI_BUDGET.alpha / 3 / CI_BUDGET.looks, CI_BUDGET.pass_alpha / CI_BUDGET.looks)


def slope(estimate: float, se: float = 0.02) -> Slope:
    return Slope(estimate, se, math.inf, 5)


def discount(gamma: float, whole: float, upper: float | None = None, steepening: float = 0.0, se: float = 0.02) -> DiscountFit:
    return DiscountFit(gamma, slope(whole, se), slope(whole if upper is None else upper, se), slope(steepening, se))


def test_slope_bounds_use_the_normal_quantile_at_infinite_df() -> None:
    s = slope(-0.5, 0.1)
    z = stats.norm.ppf(1 - 0.01)
    assert s.lower(0.01) == pytest.approx(-0.5 - z * 0.1, abs=1e-12)
    assert s.upper(0.01) == pytest.approx(-0.5 + z * 0.1, abs=1e-12)


def test_detectable_is_the_exponent_caught_with_95_percent_power() -> None:
    # A true exponent d gives estimates ~ N(d, se); the lower bound clears the limit when
    # estimate > limit + z_{1-alpha} se, which has probability 95% at d = limit + (z_{1-alpha} + z_0.95) se.
    s = slope(-0.5, 0.05)
    d = s.detectable(-0.35, 0.01)
    assert d == pytest.approx(-0.35 + (stats.norm.ppf(0.99) + stats.norm.ppf(0.95)) * 0.05, abs=1e-12)
    power = 1 - stats.norm.cdf(-0.35 + stats.norm.ppf(0.99) * 0.05, loc=d, scale=0.05)
    assert power == pytest.approx(0.95, abs=1e-9)


# ------------------------------------------------------------------------------------ rate


def test_rate_test_passes_a_slope_well_inside_the_tolerance() -> None:
    result = rate_test([discount(0.5, -0.5), discount(0.9, -0.52)], -0.5, CI_BUDGET, ALPHA, floor_fired=False)
    assert (result.name, result.verdict, result.need) == ("rate", "ok", None)


def test_rate_test_fires_on_a_slope_confidently_above_claim_plus_tolerance() -> None:
    result = rate_test([discount(0.5, -0.1), discount(0.9, -0.12)], -0.5, CI_BUDGET, ALPHA, floor_fired=False)
    assert result.verdict == "violated"
    assert "rate too slow: averaged over discounts the n-exponent is -0.11" in result.reason
    assert "tested limit is n^-0.42 (claim -0.5 + tolerance 0.08)" in result.reason


def test_rate_test_finds_a_slow_rate_at_one_discount_behind_a_fast_one() -> None:
    # A constant-step TD: n^-1/4 at two discounts, a start-up bias decaying like n^-1.1 at the third.
    # The average, -0.53, is inside the claim; the per-discount test (Bonferroni over 3) is not fooled.
    fits = [discount(0.5, -0.25), discount(0.75, -0.25), discount(0.9, -1.1)]
    result = rate_test(fits, -0.5, CI_BUDGET, ALPHA, floor_fired=False)
    assert result.verdict == "violated"
    assert "at gamma=0.5 it is -0.25" in result.reason and "gamma=0.9" not in result.reason
    assert "averaged over discounts" not in result.reason


def test_rate_test_asks_for_larger_n_while_the_curve_still_steepens() -> None:
    bending = [discount(0.5, -0.1, upper=-0.4, steepening=-0.4), discount(0.9, -0.1, upper=-0.4, steepening=-0.4)]
    result = rate_test(bending, -0.5, CI_BUDGET, ALPHA, floor_fired=False)
    assert (result.verdict, result.need) == ("unclear", "larger_n")
    assert result.note.startswith("not yet asymptotic")
    # ... but a floor that fired takes the excuse away
    assert rate_test(bending, -0.5, CI_BUDGET, ALPHA, floor_fired=True).verdict == "violated"


def test_rate_test_is_unclear_when_the_interval_straddles_the_limit() -> None:
    result = rate_test([discount(0.5, -0.35, se=0.1)], -0.5, CI_BUDGET, ALPHA, floor_fired=False)
    assert (result.verdict, result.need) == ("unclear", "replicates")


# ------------------------------------------------------------------------------------ floor


def test_floor_test_fires_at_the_discount_whose_upper_slope_flattens() -> None:
    result = floor_test([discount(0.5, -0.5), discount(0.9, -0.4, upper=0.0)], -0.5, CI_BUDGET, ALPHA)
    assert result.verdict == "violated"
    assert "gamma=0.9" in result.reason and "gamma=0.5" not in result.reason


def test_floor_test_is_ok_on_steady_slopes_and_unclear_on_wide_ones() -> None:
    assert floor_test([discount(0.5, -0.5), discount(0.9, -0.5)], -0.5, CI_BUDGET, ALPHA).verdict == "ok"
    assert floor_test([discount(0.5, -0.5, upper=-0.3, se=0.1)], -0.5, CI_BUDGET, ALPHA).verdict == "unclear"
    assert floor_test([], -0.5, CI_BUDGET, ALPHA).verdict == "ok"


# ------------------------------------------------------------------------------------ reach


def _slopes(*states: str) -> list[dict[str, object]]:
    return [{"gamma": gamma, "state": state} for gamma, state in zip([0.5, 0.75, 0.9], states)]


def test_reach_test_names_the_discounts_without_enough_points() -> None:
    result = reach_test(_slopes("fitted", "too few asymptotic points", "fitted"))
    assert (result.verdict, result.need) == ("unclear", "larger_n")
    assert "gamma=0.75" in result.note
    assert short_discounts(_slopes("fitted", "too few asymptotic points")) == [0.75]


def test_reach_test_notes_errors_that_vanish_everywhere() -> None:
    result = reach_test(_slopes("vanished", "vanished"))
    assert result.verdict == "ok" and "faster than any power" in result.note
    assert reach_test(_slopes("fitted", "vanished")) .note == ""


# ------------------------------------------------------------------------------------ horizon


def horizon(estimate: float | None, se: float = 0.02, left_out: dict[float, str] | None = None) -> HorizonFit:
    measured = (0.5, 0.75, 0.9) if left_out is None else tuple(g for g in (0.5, 0.75, 0.9) if g not in left_out)
    fitted = None if estimate is None else slope(estimate, se)
    return HorizonFit(fitted, (1024, 2048) if fitted else (), measured, left_out or {})


def test_horizon_test_fires_passes_and_waits() -> None:
    assert horizon_test(horizon(3.0), 2.0, CI_BUDGET, ALPHA).verdict == "violated"
    ok = horizon_test(horizon(1.5), 2.0, CI_BUDGET, ALPHA)
    assert ok.verdict == "ok" and ok.note == "H-exponent pooled over 2 values of n from 1024 to 2048"
    assert horizon_test(horizon(2.1, se=0.2), 2.0, CI_BUDGET, ALPHA).need == "replicates"
    missing = horizon_test(horizon(None), 2.0, CI_BUDGET, ALPHA)
    assert (missing.verdict, missing.need) == ("unclear", "larger_n")


def test_horizon_test_never_passes_an_untested_or_non_finite_exponent() -> None:
    vanished = horizon(None, left_out={0.5: "zero error at every usable n", 0.75: "zero error at every usable n"})
    result = horizon_test(vanished, 2.0, CI_BUDGET, ALPHA)
    assert (result.verdict, result.need) == ("unclear", "nothing") and "not measurable" in result.note
    assert horizon_test(horizon(math.nan, se=math.nan), 2.0, CI_BUDGET, ALPHA).verdict == "unclear"
    one_left_out = horizon_test(horizon(1.0, left_out={0.5: "zero error at every usable n"}), 2.0, CI_BUDGET, ALPHA)
    assert one_left_out.verdict == "ok" and "gamma=0.5 left out of the H-fit: zero error" in one_left_out.note


def test_levels_are_spent_over_factors_and_planned_looks() -> None:
    # Bonferroni: 3 factor slots (n twice, H once) and 1 + 1 + 2 looks (first pass, replicates, two doublings)
    levels = levels_for(rlrates.Claim(n=-0.5, horizon=2.0), CI_BUDGET)
    assert CI_BUDGET.looks == 4
    assert levels.fire == pytest.approx(0.01 / 3 / 4) and levels.passing == pytest.approx(0.05 / 4)
    single = CI_BUDGET.with_overrides(more_replicates=1, n_doublings=0)
    assert levels_for(rlrates.Claim(n=-0.5), single) == Levels(0.01 / 2, 0.05)


# ------------------------------------------------------------------------------------ decide


def _summary(slope_n: float, horizon: float, zero: bool = False, size: float = 0.05) -> pd.DataFrame:
    """Cells of an exact power law ``size n^slope_n H^horizon`` with 1% relative sd over 24 replicates."""
    rows = []
    for gamma in (0.5, 0.75, 0.9):
        H = 1 / (1 - gamma)
        for n in (128, 256, 512, 1024, 2048):
            mean = 0.0 if zero else size * n**slope_n * H**horizon
            rows.append({"gamma": gamma, "n": n, "replicates": 24, "mean": mean, "sd": 0.01 * mean, "H": H,
                         "zero": zero, "log_mean": math.log(mean) if mean else -math.inf,
                         "log_var": (0.01**2) / 24 if mean else 0.0})
    return pd.DataFrame(rows)


SCALE = {0.5: 2.0, 0.75: 4.0, 0.9: 10.0}


def test_decide_combines_sub_tests_into_one_decision() -> None:
    claim = rlrates.Claim(n=-0.5, horizon=2.0)
    passing = decide(_summary(-0.5, 1.5), claim, CI_BUDGET, SCALE, window=5)
    assert passing.status == "pass"
    assert [s.name for s in passing.subtests] == ["stall", "floor", "rate", "reach", "horizon"]
    assert [fit.verdict for fit in passing.fits] == ["ok", "ok"]
    assert passing.fits[0].exponent == pytest.approx(-0.5, abs=1e-9)  # an exact power law, fitted exactly
    failing = decide(_summary(-0.1, 3.0, size=1e-4), claim, CI_BUDGET, SCALE, window=5)  # 1e-4 H^3 stays unsaturated
    assert failing.status == "fail" and failing.fired == ("floor", "rate", "horizon")
    assert [fit.verdict for fit in failing.fits] == ["violated", "violated"]


def test_decide_marks_the_cells_that_entered_the_fits() -> None:
    decision = decide(_summary(-0.5, 1.5), rlrates.Claim(n=-0.5), CI_BUDGET, SCALE, window=5)
    cells = decision.cells.to_frame().set_index(["gamma", "n"])
    # n < 8 H is pre-asymptotic: at gamma=0.9 (H=10) n=128 < 80 is not, so every cell is fitted here
    assert cells["fitted"].all() and (cells["left_out"] == "").all()
    small_window = decide(_summary(-0.5, 1.5), rlrates.Claim(n=-0.5), CI_BUDGET, SCALE, window=4).cells.to_frame()
    assert set(small_window.loc[~small_window["fitted"], "n"]) == {128}
    assert set(small_window.loc[~small_window["fitted"], "left_out"]) == {"below the fit window"}


def test_decide_on_exact_errors_passes_without_fitting() -> None:
    decision = decide(_summary(-0.5, 1.0, zero=True), rlrates.Claim(n=-0.5, horizon=1.0), CI_BUDGET, SCALE, window=5)
    assert decision.status == "pass" and decision.exact
    assert [fit.verdict for fit in decision.fits] == ["exact", "exact"]
    assert all(math.isnan(fit.exponent) for fit in decision.fits)


def test_a_large_flat_error_fails_instead_of_being_excused_as_saturated() -> None:
    # An evaluator stuck at one discount: the error is 4.6 at every n at gamma=0.5, above half the
    # value range (scale 2 here), so every cell is saturated. Saturation may not excuse a flat curve.
    summary = _summary(-0.5, 1.0)
    stuck = summary["gamma"] == 0.5
    summary.loc[stuck, "mean"] = 4.6
    summary.loc[stuck, "sd"] = 0.046
    summary.loc[stuck, "log_mean"] = math.log(4.6)
    decision = decide(summary, rlrates.Claim(n=-0.5, horizon=2.0), CI_BUDGET, SCALE, window=5)
    assert decision.status == "fail" and decision.fired[0] == "stall"
    assert "the error does not fall: gamma=0.5: about 4.6 at every n" in decision.reasons[0]
    # while a saturated curve that still falls steeply is only left out of the fits (no stall)
    falling = _summary(-0.5, 1.0, size=30.0)
    cells = mark_cells(falling, CI_BUDGET, SCALE, window=5)
    assert cells["saturated"].any()
    assert stall_test(cells, -0.5, CI_BUDGET, ALPHA, SCALE).verdict == "ok"


def test_non_finite_bounds_never_pass() -> None:
    summary = _summary(-0.5, 1.5)
    summary.loc[summary["n"] == 2048, "log_var"] = math.nan  # a NaN variance (overflowing errors)
    decision = decide(summary, rlrates.Claim(n=-0.5, horizon=2.0), CI_BUDGET, SCALE, window=5)
    assert decision.status != "pass"
    assert all(fit.verdict != "ok" for fit in decision.fits)


def test_an_unclear_factor_names_the_interval_the_limit_and_the_replicates_that_would_settle_it() -> None:
    summary = _summary(-0.44, 1.0)
    summary["log_var"] = 0.3**2 / 24  # 30% relative sd: a wide interval around -0.44, tested limit -0.42
    decision = decide(summary, rlrates.Claim(n=-0.5), CI_BUDGET, SCALE, window=5)
    assert decision.status == "ambiguous" and decision.need == "replicates"
    text = " ".join(decision.reasons)
    assert "undecided sub-test(s): rate" in text
    assert "straddles the tested limit -0.420 (claim -0.5 + tolerance 0.08)" in text
    assert "replicates per cell (now 24) would settle it" in text


# ------------------------------------------------------------------------------------ cell marks


def test_left_out_reasons_are_what_numpy_select_picks_in_its_dtype() -> None:
    # numpy.select is the reference: the first condition that holds names the reason, "" when none does
    import numpy as np

    from rlrates.verdict import _left_out

    texts = ("pre-asymptotic (n < 10 H)", "saturated (mean error above 0.5 of the error scale)",
             "below the fit window", "zero error")
    for seed in range(100):
        rng = np.random.default_rng(seed)
        rows = int(rng.integers(1, 40))
        conditions = [rng.random(rows) < rng.random() for _ in texts]
        expected = np.select(conditions, texts, default="")
        got = _left_out(conditions, texts)
        assert got.dtype == expected.dtype and got.tolist() == expected.tolist()


def test_window_ranks_order_each_discounts_usable_n_largest_first_ties_in_row_order() -> None:
    # reference: numpy.lexsort on (row, -n, gamma), ranks counted within each discount (common practice)
    import numpy as np

    from rlrates.verdict import _window_rank

    for seed in range(100):
        rng = np.random.default_rng(seed)
        rows = int(rng.integers(1, 30))
        gamma = rng.choice([0.5, 0.75, 0.9], size=rows)
        n = rng.choice([64, 128, 256, 512], size=rows)
        usable = rng.random(rows) < 0.7
        expected = np.full(rows, np.inf)
        kept = np.flatnonzero(usable)
        order = kept[np.lexsort((kept, -n[kept].astype(float), gamma[kept]))]
        for g in np.unique(gamma[order]):
            members = order[gamma[order] == g]
            expected[members] = np.arange(1, len(members) + 1)
        np.testing.assert_array_equal(_window_rank(gamma, n, usable), expected)
