"""Unit tests of the pure modules behind the pytest layer: the standard suite and check records."""

from __future__ import annotations

import json
import math
import subprocess
import sys
from typing import Any

import pandas as pd
import pytest

import rlrates
from rlrates.budgets import BUDGETS
from rlrates.plugin.records import CheckRecord, format_summary
from rlrates.plugin.runner import reproduce_command
from rlrates.plugin.settings import BUDGET_NAMES
from rlrates.result import Fit
from rlrates.suite import STANDARD_SUITE, SuiteError, custom_members, member_names, select_members, suite_tags

# --------------------------------------------------------------------------- suite


def test_standard_members_have_the_documented_ids_and_tags() -> None:
    assert member_names() == [
        "garnet-S10-A2-b3", "garnet-S20-A4-b5", "garnet-S30-A3-b10", "chain", "grid", "horizon-hard", "deterministic",
    ]
    assert suite_tags() == ["exact", "gamma-indexed", "random", "stochastic", "structured"]
    tags = {m.name: set(m.tags) for m in STANDARD_SUITE}
    assert tags["horizon-hard"] == {"structured", "stochastic", "gamma-indexed"}
    assert tags["deterministic"] == {"exact"}  # in no default selection: it tests no rate


def test_members_build_what_their_names_say() -> None:
    built: dict[str, Any] = {m.name: m.build() for m in STANDARD_SUITE}
    for name in ("garnet-S10-A2-b3", "garnet-S20-A4-b5", "garnet-S30-A3-b10"):
        _, states, actions, branching = name.split("-")
        mdp = built[name]
        assert (mdp.states, mdp.actions) == (int(states[1:]), int(actions[1:]))
        assert ((mdp.P > 0).sum(axis=2) == int(branching[1:])).all()
    assert built["garnet-S20-A4-b5"] == rlrates.garnet(20, 4, 5, seed=2)  # the seed is part of the definition
    assert built["chain"].metadata["family"] == "chain"
    assert built["grid"].metadata["family"] == "gridworld"
    family = built["horizon-hard"]
    assert callable(family) and family(0.9).metadata["family"] == "horizon_hard"
    assert set(built["deterministic"].P.ravel()) == {0.0, 1.0}


def test_importing_the_suite_builds_nothing_and_loads_no_numpy() -> None:
    code = (
        "import sys; from rlrates.suite import select_members; select_members('all'); "
        "print(sorted({'numpy', 'scipy', 'pandas'} & set(sys.modules)))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True, timeout=60)
    assert out.stdout.strip() == "[]"


@pytest.mark.parametrize(
    ("selection", "expected"),
    [
        (None, ["garnet-S10-A2-b3", "garnet-S20-A4-b5", "garnet-S30-A3-b10", "chain", "grid", "horizon-hard"]),  # the default: stochastic members
        ("all", ["garnet-S10-A2-b3", "garnet-S20-A4-b5", "garnet-S30-A3-b10", "chain", "grid", "horizon-hard", "deterministic"]),
        (["random"], ["garnet-S10-A2-b3", "garnet-S20-A4-b5", "garnet-S30-A3-b10"]),
        ("deterministic, chain", ["chain", "deterministic"]),  # suite order, not the order asked
        (["gamma-indexed", "horizon-hard"], ["horizon-hard"]),  # no duplicates
        ("structured", ["chain", "grid", "horizon-hard"]),
    ],
)
def test_selection_is_a_union_in_suite_order(selection: object, expected: list[str]) -> None:
    assert [m.name for m in select_members(selection)] == expected


@pytest.mark.parametrize(
    ("selection", "pattern"),
    [
        (["random", "garnet"], r"^where: unknown suite selector 'garnet'; use a member name \(garnet-S10-A2-b3, .*\), "
                               r"a tag \(exact, gamma-indexed, random, stochastic, structured\) or 'all'$"),
        ([], r"^where: the suite selection is empty"),
        ("  ", r"^where: the suite selection is empty"),
        ([3], r"^where: suite selectors must be strings .* got 3$"),
        (42, r"^where: a suite selection must be a string or a list of strings, got 42$"),
    ],
)
def test_bad_selection_names_the_selector_and_the_place(selection: object, pattern: str) -> None:
    with pytest.raises(SuiteError, match=pattern):
        select_members(selection, where="where")


def test_custom_members_take_ids_from_names_or_keys() -> None:
    a, b = rlrates.garnet(5, 2, 2, seed=1), rlrates.garnet(5, 2, 2, seed=1)
    family = rlrates.horizon_hard(3)
    members = custom_members([a, b, family, lambda gamma: a])
    assert [m.name for m in members] == ["garnet-S5-A2-b2-seed1", "garnet-S5-A2-b2-seed1-2", "horizon-hard-A3", "mdp3"]
    assert members[0].build() is a and not members[0].standard and members[0].tags == {"custom"}
    keyed = custom_members({"left": a, "right": family})
    assert [(m.name, m.build()) for m in keyed] == [("left", a), ("right", family)]


@pytest.mark.parametrize(
    ("mdps", "pattern"),
    [
        ([], r"^`mdps`: the list of MDPs is empty"),
        ({}, r"^`mdps`: the list of MDPs is empty"),
        ("garnet", r"^`mdps`: give a list of MDPs or a dict \{id: mdp\}, got str$"),
        ({"": rlrates.chain()}, r"^`mdps`: MDP ids must be non-empty strings, got ''$"),
        ([rlrates.chain(), "grid"], r"^`mdps`: entry 1 must be an rlrates.TabularMDP or a gamma-indexed family .* got str 'grid'$"),
        ({"x": 3}, r"^`mdps`: entry 'x' must be .* got int 3$"),
    ],
)
def test_bad_custom_mdps_are_named(mdps: object, pattern: str) -> None:
    with pytest.raises(SuiteError, match=pattern):
        custom_members(mdps, where="`mdps`")


# --------------------------------------------------------------------------- records


def test_budget_names_shown_by_help_are_the_budgets() -> None:
    assert BUDGET_NAMES == tuple(BUDGETS)


def _fit(factor: str, exponent: float, low: float, high: float, claimed: float, verdict: str) -> Fit:
    return Fit(factor=factor, exponent=exponent, se=0.02, low=low, high=high, low_level=0.99,  # type: ignore[arg-type]
               high_level=0.95, claimed=claimed, tolerance=0.05, detectable=math.nan, verdict=verdict)  # type: ignore[arg-type]


def _record(test: str, status: str, fits: tuple[Fit, ...], fired: tuple[str, ...] = ()) -> CheckRecord:
    return CheckRecord(test=test, label=test.rsplit("::", 1)[-1], status=status, target="q_pi",
                       mdp="chain-S10-slip0.1", claim="error <~ n^-0.5", fits=fits, fired=fired, seconds=0.25, seed=5,
                       budget="ci", passes=1, calls=240, rerun=f"pytest {test}", problem="")


def test_record_from_a_result_survives_json_with_nan_as_null() -> None:
    from types import SimpleNamespace

    fits = (_fit("n", -0.51, -0.56, -0.47, -0.5, "ok"), _fit("horizon", math.nan, math.nan, math.nan, 2.0, "unclear"))
    result = SimpleNamespace(  # the attributes CheckRecord.from_result reads
        status="pass", target="q_pi", mdp=SimpleNamespace(name="grid"), fired=("floor",), seed=3,
        run=SimpleNamespace(elapsed=1.5, passes=2, label=""), claim=rlrates.Claim(n=-0.5, horizon=2.0),
        budget=BUDGETS["ci"], table=pd.DataFrame({"error": [0.1] * 7}), factors=fits, estimator_calls=7,
        failure=None,
    )
    record = CheckRecord.from_result(result, "t.py::t")  # type: ignore[arg-type]
    text = record.to_json()
    assert json.loads(text)["fits"][1]["exponent"] is None  # strict JSON: no NaN
    again = CheckRecord.from_json(text)
    assert again.to_json() == text and again.fits[0] == fits[0] and math.isnan(again.fits[1].exponent)
    assert (record.calls, record.seconds, record.passes, record.mdp) == (7, 1.5, 2, "grid")
    assert record.fired == ("floor",) and record.claim == "error <~ n^-0.5 * H^2"


@pytest.mark.parametrize("text", ['["rlrates"]', '{"test": "t"}', '{"fits": [{"factor": "n"}]}', "not json"])
def test_a_property_that_is_no_record_is_refused(text: str) -> None:
    with pytest.raises((ValueError, TypeError)):
        CheckRecord.from_json(text)


def test_summary_lists_each_check_sorted_with_fits_and_a_tally() -> None:
    ok = _fit("n", -0.516, -0.565, -0.466, -0.5, "ok")
    bad = _fit("n", 0.013, -0.044, 0.048, -0.5, "violated")
    flat = _fit("horizon", math.nan, math.nan, math.nan, 2.0, "unclear")
    lines = format_summary([
        _record("t.py::test_b", "fail", (bad, flat), ("floor", "rate")),
        _record("t.py::test_a", "pass", (ok,)),
    ])
    # grouped by verdict, failures first, one line per check in words, a rerun line under a failure
    assert lines[0] == "failed (1):"
    assert lines[1].startswith("  test_b: q_pi on chain-S10-slip0.1 (floor, rate fired): ")
    assert "tested limit" in lines[1]
    assert lines[2] == "      rerun alone: pytest t.py::test_b"
    assert lines[3] == "passed (1):" and lines[4].startswith("  test_a: q_pi on chain-S10-slip0.1: ")
    assert lines[5].startswith("2 rate check(s) in all: 1 pass, 1 fail")
    assert not any("seconds" in line for line in lines)  # no timing column
    assert format_summary([]) is None


@pytest.mark.parametrize(
    ("cwd", "nodeid", "expected"),
    [
        ("", "tests/test_x.py::test_y", "pytest tests/test_x.py::test_y --rlrates-seed=3 --rlrates-budget=appendix"),
        ("tests", "tests/test_x.py::test_y[chain]", "pytest 'test_x.py::test_y[chain]' --rlrates-seed=3 --rlrates-budget=appendix"),
        ("other", "tests/test_x.py::C::test_y[a b]", "pytest '../tests/test_x.py::C::test_y[a b]' --rlrates-seed=3 --rlrates-budget=appendix"),
    ],
)
def test_reproducer_is_relative_to_where_pytest_was_invoked(
    tmp_path: object, cwd: str, nodeid: str, expected: str
) -> None:
    from pathlib import Path
    from types import SimpleNamespace

    root = Path(str(tmp_path))
    config = SimpleNamespace(rootpath=root, invocation_params=SimpleNamespace(dir=root / cwd))
    assert reproduce_command(config, nodeid, 3, "appendix") == expected  # type: ignore[arg-type]
