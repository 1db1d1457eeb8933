"""Checks on logged data: the regime's design, its coverage factor, its errors, and its determinism.

The verdicts of the logged zoo (correct estimators pass, refactors fail) are in
test_calibration.py; the samplers and exact quantities in tests/numerics/test_logged.py.
"""

from __future__ import annotations

from concurrent.futures import ProcessPoolExecutor
from typing import Any

import numpy as np
import pandas as pd
import pytest

import rlrates
from rlrates.reference_logged import logged_plugin_q_pi, trajectory_is


@pytest.fixture(scope="module")
def garnet() -> rlrates.TabularMDP:
    return rlrates.garnet(states=10, actions=2, branching=3, seed=0)


@pytest.fixture(scope="module")
def coverage_result(garnet: rlrates.TabularMDP) -> rlrates.CheckResult:
    return rlrates.check(logged_plugin_q_pi, garnet, rlrates.Claim(n=-0.5, coverage=0.5), data="transitions")


def test_a_coverage_claim_fits_the_c_exponent_over_graded_behaviours(coverage_result: rlrates.CheckResult) -> None:
    result = coverage_result
    assert result.status == "pass", result.message
    fit = result.fit("coverage")
    assert fit is not None and fit.measured and fit.symbol == "C" and fit.high <= fit.limit
    table = result.table
    assert {"behaviour", "C"} <= set(table.columns)
    coverages = table.drop_duplicates("behaviour").sort_values("behaviour")["C"].to_numpy()
    assert len(coverages) == 4 and np.allclose(np.diff(np.log2(coverages)), 1.0, atol=1e-6)
    for c in coverages:  # every behaviour's C is reported in the message
        assert f"{c:.3g}" in result.message
    assert "C^0.5" in result.message and "C         +" in result.message
    assert result.data_regime == "transitions" and "i.i.d. logged transitions" in result.message


def test_logged_n_counts_transitions_and_the_default_grid_scales_with_the_pairs(garnet: rlrates.TabularMDP,
                                                                                coverage_result: rlrates.CheckResult) -> None:
    pairs = garnet.states * garnet.actions
    assert sorted(coverage_result.table["n"].unique()) == [n * pairs for n in rlrates.BUDGETS["ci"].n_grid]
    seen: list[int] = []

    def spy(batch: Any, problem: Any) -> np.ndarray:
        seen.append(batch.n)
        assert batch.states.shape == (batch.n,) and problem.behaviour.shape == (10, 2)
        return logged_plugin_q_pi(batch, problem)

    rlrates.check(spy, garnet, rlrates.Claim(n=-0.5), data="transitions", n_grid=(400, 800, 1600), gammas=(0.5, 0.6),
                  replicates=4)
    assert {400, 800, 1600} <= set(seen)  # n as given (escalation may add larger n)


def test_trajectories_hold_whole_episodes_of_the_stated_length(garnet: rlrates.TabularMDP) -> None:
    shapes: set[tuple[int, ...]] = set()

    def spy(batch: Any, problem: Any) -> float:
        shapes.add(batch.states.shape)
        assert problem.episode_length == batch.episode_length == 5
        return trajectory_is(batch, problem)

    rlrates.check(spy, garnet, rlrates.Claim(n=-0.5), target="value", data="trajectories", episode_length=5,
                  n_grid=(50, 100, 200), gammas=(0.5, 0.6), replicates=4)
    # n // 5 episodes of 5 steps (escalation may add larger n: still whole episodes)
    assert {(10, 5), (20, 5), (40, 5)} <= shapes and all(length == 5 for _, length in shapes)


def test_the_generative_default_is_unchanged_by_the_data_argument(garnet: rlrates.TabularMDP) -> None:
    from rlrates.reference import plugin_q_pi

    default = rlrates.check(plugin_q_pi, garnet, rlrates.Claim(n=-0.5))
    explicit = rlrates.check(plugin_q_pi, garnet, rlrates.Claim(n=-0.5), data="generative")
    pd.testing.assert_frame_equal(default.table.drop(columns="seconds"), explicit.table.drop(columns="seconds"))
    assert list(default.table.columns) == ["gamma", "H", "n", "replicate", "error", "seconds"]


def test_logged_tables_do_not_depend_on_the_executor(garnet: rlrates.TabularMDP) -> None:
    args = (logged_plugin_q_pi, garnet, rlrates.Claim(n=-0.5))
    options: dict[str, Any] = dict(data="trajectories", n_grid=(256, 512, 1024), gammas=(0.5, 0.75), replicates=4)
    serial = rlrates.check(*args, **options)
    with ProcessPoolExecutor(max_workers=2) as pool:
        pooled = rlrates.check(*args, executor=pool, **options)
    pd.testing.assert_frame_equal(serial.table.drop(columns="seconds"), pooled.table.drop(columns="seconds"))


@pytest.mark.parametrize(("kwargs", "match"), [
    ({"data": "offline"}, "unknown `data` 'offline'"),
    ({"behaviour": np.full((10, 2), 0.5)}, "`behaviour` needs logged data"),
    ({"episode_length": 8}, "`episode_length` needs logged data"),
    ({"data": "transitions", "episode_length": 8}, "`episode_length` needs data='trajectories'"),
    ({"data": "trajectories", "episode_length": 0}, "`episode_length` must be a positive integer"),
    ({"data": "transitions", "target": "q_star"}, "target 'q_star' is not available with data='transitions'"),
    ({"data": "transitions", "behaviour": np.full((10, 2), 0.7)}, "behaviour"),
    ({"data": "transitions", "behaviour": np.tile([1.0, 0.0], (10, 1))}, "concentrability coefficient is infinite"),
])
def test_logged_arguments_that_cannot_describe_a_check_are_refused(garnet: rlrates.TabularMDP, kwargs: dict[str, Any],
                                                                   match: str) -> None:
    def never(batch: Any, problem: Any) -> None:
        raise AssertionError("must not run")

    with pytest.raises((TypeError, ValueError), match=match):
        rlrates.check(never, garnet, rlrates.Claim(n=-0.5), **kwargs)


def test_a_coverage_claim_needs_logged_data(garnet: rlrates.TabularMDP) -> None:
    with pytest.raises(ValueError, match="a `coverage` claim needs logged data"):
        rlrates.check(logged_plugin_q_pi, garnet, rlrates.Claim(n=-0.5, coverage=0.5))


def test_an_estimator_that_writes_into_the_mdp_gets_an_error(garnet: rlrates.TabularMDP) -> None:
    victim = rlrates.garnet(states=6, actions=2, branching=2, seed=3)

    def vandal(batch: Any, problem: Any) -> np.ndarray:
        from rlrates.reference import plugin_q_pi

        rewards = victim.R
        rewards.setflags(write=True)  # the MDP's own array: writable again by its owner
        rewards[0, 0] += 1e-3
        return plugin_q_pi(batch, problem)

    result = rlrates.check(vandal, victim, rlrates.Claim(n=-0.5), n_grid=(64, 128, 256), gammas=(0.5, 0.6),
                           replicates=4)
    assert result.status == "error" and "changed during the check" in result.message


def test_the_reproducer_names_the_regime(garnet: rlrates.TabularMDP, coverage_result: rlrates.CheckResult) -> None:
    assert "data='transitions'" in coverage_result.run.reproducer
    assert "coverage=0.5" in coverage_result.run.reproducer


def test_the_readme_logged_example_runs_and_prints_what_it_shows(capsys: pytest.CaptureFixture[str]) -> None:
    import re
    from pathlib import Path

    readme = (Path(__file__).resolve().parents[2] / "README.md").read_text()
    block = next(b for b in re.findall(r"```python\n(.*?)```", readme, flags=re.DOTALL) if "reference_logged" in b)
    exec(compile(block, "README.md", "exec"), {})
    shown = re.search(r"# (C .*)$", block, flags=re.MULTILINE)
    assert shown is not None and capsys.readouterr().out.strip() == shown.group(1)


def test_the_value_target_works_on_the_generative_model_too(garnet: rlrates.TabularMDP) -> None:
    from rlrates.reference_logged import logged_plugin_value

    result = rlrates.check(logged_plugin_value, garnet, rlrates.Claim(n=-0.5), target="value", gammas=(0.5, 0.75))
    assert result.status == "pass", result.message
    assert result.budget.replicates == 4 * rlrates.BUDGETS["ci"].replicates  # a scalar's error: 4x the replicates


def test_an_estimator_that_is_not_a_function_of_its_logged_batch_is_warned_about(garnet: rlrates.TabularMDP) -> None:
    """The determinism probe runs on a logged batch too (common practice: a rerun must reproduce the table)."""
    noisy = np.random.default_rng(5)

    def jittery(batch: Any, problem: Any) -> np.ndarray:
        return logged_plugin_q_pi(batch, problem) + 1e-6 * noisy.random((problem.states, problem.actions))

    with pytest.warns(rlrates.RatesWarning, match="not a function of its batch"):
        result = rlrates.check(jittery, garnet, rlrates.Claim(n=-0.5), data="transitions", gammas=(0.5, 0.6),
                               n_grid=(800, 1600, 3200), replicates=4)
    assert any("not a function of its batch" in note for note in result.notes)
