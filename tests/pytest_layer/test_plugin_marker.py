"""Tests of the ``rlrates`` marker: its arguments (pure), the suite it parametrises, errors at collection, the item stash.

End-to-end parts are real inner pytest runs through ``pytester`` (see ``plugin_runs``).
"""

from __future__ import annotations

import pytest
from plugin_runs import run_subprocess

from rlrates.claims import Claim
from rlrates.plugin.marker import MarkerError, merge_specs, parse_marker


# --------------------------------------------------------------------------- marker parsing (pure)


def test_marker_names_an_unknown_keyword_and_suggests_the_close_one() -> None:
    with pytest.raises(MarkerError, match=r"on t\.py::t: unknown keyword `taget` \(did you mean `target`\?\)"):
        parse_marker((), {"taget": "q_pi"}, "t.py::t")


@pytest.mark.parametrize(
    ("args", "kwargs", "pattern"),
    [
        ((), {"n": 0.5}, r"bad exponent: `n` exponent must be negative .* got 0\.5"),
        ((), {"n": "fast"}, r"bad exponent: `n` exponent must be a number or None, got 'fast'"),
        ((), {"target": "qpi"}, r"unknown `target` 'qpi'"),
        ((), {"budget": "fast"}, r"unknown `budget` 'fast'; choose one of ci, appendix"),
        ((), {"suite": ["garnets"]}, r"`suite`: unknown suite selector 'garnets'"),
        ((), {"suite": "chain", "mdps": []}, r"give `suite=` .* or `mdps=` .*, not both"),
        ((), {"mdps": []}, r"`mdps`: the list of MDPs is empty"),
        ((), {"mdps": ["chain"]}, r"`mdps`: entry 0 must be an rlrates.TabularMDP .* got str 'chain'"),
        ((Claim(n=-0.5),), {"n": -0.5}, r"give either `claim` or the exponents `n=`, not both"),
        ((Claim(n=-0.5),), {"claim": Claim(n=-0.5)}, r"the claim is given twice"),
        ((-0.5,), {}, r"`claim` must be an rlrates.Claim, got -0.5 of type float"),
        ((Claim(), Claim()), {}, r"at most one positional argument"),
    ],
)
def test_marker_rejects_bad_arguments_by_name(args: tuple[object, ...], kwargs: dict[str, object], pattern: str) -> None:
    with pytest.raises(MarkerError, match=pattern):
        parse_marker(args, kwargs, "t.py::t")


def test_marker_accepts_exponents_and_closest_marker_wins() -> None:
    function = parse_marker((), {"n": -0.5, "horizon": 2.0, "suite": "random"}, "t")
    module = parse_marker((Claim(n=-0.25),), {"target": "q_star", "budget": "appendix"}, "t")
    merged = merge_specs([function, module])
    assert merged.claim == Claim(n=-0.5, horizon=2.0)
    assert merged.target == "q_star" and merged.budget == "appendix"
    assert merged.members is not None and [m.name for m in merged.members][:1] == ["garnet-S10-A2-b3"]


# --------------------------------------------------------------------------- suite parametrisation


SUITE_TESTS = """
import pytest
import rlrates

def test_default(rlrates_mdp):
    pass

@pytest.mark.rlrates(suite=["chain", "exact"])
def test_narrowed(rlrates_mdp):
    pass

@pytest.mark.rlrates(suite="gamma-indexed")
def test_family(rlrates_mdp):
    assert callable(rlrates_mdp) and rlrates_mdp(0.9).states == 4

@pytest.mark.rlrates(mdps=[rlrates.garnet(6, 2, 2, seed=4), rlrates.garnet(6, 2, 2, seed=5)])
def test_own_list(rlrates_mdp):
    pass

@pytest.mark.rlrates(mdps={"tiny": rlrates.deterministic(3, 2)})
def test_own_dict(rlrates_mdp):
    assert rlrates_mdp.states == 3
"""


def test_rlrates_mdp_expands_over_the_suite_with_readable_ids(project: pytest.Pytester) -> None:
    project.makepyfile(test_inner_suite_ids=SUITE_TESTS)
    listed = project.runpytest("--collect-only", "-q").stdout.lines
    ids = [line.split("::", 1)[1] for line in listed if "::" in line]
    assert ids == [
        "test_default[garnet-S10-A2-b3]",
        "test_default[garnet-S20-A4-b5]",
        "test_default[garnet-S30-A3-b10]",
        "test_default[chain]",
        "test_default[grid]",
        "test_default[horizon-hard]",
        "test_narrowed[chain]",
        "test_narrowed[deterministic]",
        "test_family[horizon-hard]",
        "test_own_list[garnet-S6-A2-b2-seed4]",
        "test_own_list[garnet-S6-A2-b2-seed5]",
        "test_own_dict[tiny]",
    ]
    project.runpytest().assert_outcomes(passed=12)


def test_ini_key_narrows_the_default_suite_but_not_a_marked_test(project: pytest.Pytester) -> None:
    project.makepyfile(test_inner_suite_ids=SUITE_TESTS)
    project.makeini("[pytest]\nrlrates_suite = random deterministic\n")
    listed = project.runpytest("--collect-only", "-q").stdout.lines
    default = [line.split("::", 1)[1] for line in listed if "::test_default[" in line]
    assert default == [
        "test_default[garnet-S10-A2-b3]",
        "test_default[garnet-S20-A4-b5]",
        "test_default[garnet-S30-A3-b10]",
        "test_default[deterministic]",
    ]
    assert sum("::test_narrowed[" in line for line in listed) == 2


def test_suite_option_beats_the_ini_key_and_names_a_bad_selector(project: pytest.Pytester) -> None:
    project.makepyfile(test_inner_suite_ids=SUITE_TESTS)
    project.makeini("[pytest]\nrlrates_suite = random\n")
    listed = project.runpytest("--collect-only", "-q", "--rlrates-suite=chain, deterministic").stdout.lines
    default = [line.split("::", 1)[1] for line in listed if "::test_default[" in line]
    assert default == ["test_default[chain]", "test_default[deterministic]"]
    bad = project.runpytest("--collect-only", "--rlrates-suite=chian")
    assert bad.ret == pytest.ExitCode.USAGE_ERROR
    bad.stderr.fnmatch_lines(["*--rlrates-suite*chian*"])


def test_collection_builds_no_mdp_and_imports_no_numpy(project: pytest.Pytester) -> None:
    project.makepyfile(test_inner_lazy="""
        import pytest

        @pytest.mark.rlrates(n=-0.5, suite=["random", "chain"])
        def test_it(rlrates, rlrates_mdp):
            pass
    """)
    project.makeconftest("""
        import sys
        def pytest_collection_finish(session):
            print("numerics imported:", sorted({"numpy", "scipy", "pandas"} & set(sys.modules)))
    """)
    result = run_subprocess(project, "--collect-only", "-q", "-s")
    result.stdout.fnmatch_lines(["numerics imported: []", "*4 tests collected*"])


BAD_MARKERS = {
    "test_bad_typo": ("@pytest.mark.rlrates(n=-0.5, taget='q_pi')", "unknown keyword `taget` (did you mean `target`?)"),
    "test_bad_exponent": ("@pytest.mark.rlrates(n=0.5)", "bad exponent: `n` exponent must be negative"),
    "test_bad_target": ("@pytest.mark.rlrates(n=-0.5, target='v_star')", "unknown `target` 'v_star'"),
    "test_bad_suite": ("@pytest.mark.rlrates(n=-0.5, suite=['garnet'])", "`suite`: unknown suite selector 'garnet'"),
    "test_bad_budget": ("@pytest.mark.rlrates(n=-0.5, budget='slow')", "unknown `budget` 'slow'"),
}


def test_bad_marker_argument_errors_at_collection_before_any_estimator_runs(project: pytest.Pytester) -> None:
    for name, (marker, _) in BAD_MARKERS.items():
        fixtures = "rlrates, rlrates_mdp" if name == "test_bad_suite" else "rlrates"
        project.makepyfile(**{name: f"""
import pytest
import rlrates as rl
from estimators import leaves_a_trace

{marker}
def test_it({fixtures}):
    rlrates(leaves_a_trace, rl.garnet(10, 2, 3))
"""})
    result = project.runpytest("--continue-on-collection-errors")
    result.assert_outcomes(errors=len(BAD_MARKERS))
    output = result.stdout.str()
    for name, (_, expected) in BAD_MARKERS.items():
        assert output.count(f"@pytest.mark.rlrates on {name}.py::test_it: {expected}") == 1
    assert "Traceback" not in output and "exception occurred" not in output
    assert not (project.path / "estimator-ran.txt").exists()



# --------------------------------------------------------------------------- parsed once, kept in the item's stash


STASH_TESTS = """
import pytest
import rlrates

pytestmark = pytest.mark.rlrates(target="q_star")

@pytest.mark.rlrates(n=-0.5, suite=["chain", "exact"])
def test_marked(rlrates_mdp):
    pass

@pytest.mark.parametrize("x", [1, pytest.param(2, marks=pytest.mark.rlrates(horizon=1.0))])
def test_param(x):
    pass
"""

STASH_CONFTEST = """
from rlrates.plugin.marker import ITEM_SPEC

def pytest_collection_modifyitems(items):
    for item in items:
        spec = item.stash.get(ITEM_SPEC, None)
        print("stash:", item.name, None if spec is None else (spec.claim, spec.target, spec.members is not None))
"""


def test_collection_keeps_each_items_merged_spec_in_its_stash(project: pytest.Pytester) -> None:
    project.makepyfile(test_inner_stash=STASH_TESTS)
    project.makeconftest(STASH_CONFTEST)
    lines = [line for line in project.runpytest("--collect-only", "-q", "-s").stdout.lines if line.startswith("stash:")]
    assert lines == [
        "stash: test_marked[chain] (Claim(n=-0.5, horizon=None), 'q_star', True)",
        "stash: test_marked[deterministic] (Claim(n=-0.5, horizon=None), 'q_star', True)",
        "stash: test_param[1] (None, 'q_star', False)",
        "stash: test_param[2] (Claim(n=None, horizon=1.0), 'q_star', False)",
    ]


COUNTING_CONFTEST = """
import rlrates.plugin.marker as marker

calls = []
parse = marker.parse_marker

def counting_parse(args, kwargs, where):
    calls.append(where)
    return parse(args, kwargs, where)

marker.parse_marker = counting_parse

def pytest_sessionfinish(session):
    print(f"\\nmarkers parsed: {len(calls)}")
"""


def test_each_marker_is_parsed_once_per_session_not_again_by_the_fixture(project: pytest.Pytester) -> None:
    project.makepyfile(test_inner_once="""
        import pytest

        pytestmark = pytest.mark.rlrates(target="q_star")

        @pytest.mark.rlrates(n=-0.5, suite=["random"])
        def test_it(rlrates, rlrates_mdp):
            rlrates(None, rlrates_mdp, seed=3)  # reads the spec, then refuses the seed before any check runs
    """)
    project.makeconftest(COUNTING_CONFTEST)
    result = run_subprocess(project, "-s")
    result.assert_outcomes(failed=3)  # three Garnets; the claim came from the spec, so the seed is what fails
    assert result.stdout.str().count("`seed` is set by the session") == 3
    result.stdout.fnmatch_lines(["markers parsed: 2"])  # the module's and the function's marker, once each


def test_a_bad_marker_on_a_parameter_fails_that_test_with_the_marker_error(project: pytest.Pytester) -> None:
    project.makepyfile(test_inner_param="""
        import pytest
        from estimators import leaves_a_trace

        @pytest.mark.parametrize("x", [pytest.param(1, marks=pytest.mark.rlrates(n=0.5))])
        def test_it(rlrates, x):
            rlrates(leaves_a_trace, None)
    """)
    result = project.runpytest()
    result.assert_outcomes(failed=1)
    result.stdout.fnmatch_lines(["*@pytest.mark.rlrates on test_inner_param.py::test_it[[]1[]]: bad exponent: *"])
    assert "Traceback" not in result.stdout.str()
    assert not (project.path / "estimator-ran.txt").exists()


def test_the_fixture_reads_the_spec_from_the_items_stash(project: pytest.Pytester) -> None:
    project.makepyfile(test_inner_read="""
        import pytest

        @pytest.mark.rlrates(n=-0.5)
        def test_it(rlrates):
            rlrates(None, None, seed=3)
    """)
    project.makeconftest("""
        from rlrates.plugin.marker import ITEM_SPEC, MarkerSpec

        def pytest_collection_modifyitems(items):
            for item in items:
                item.stash[ITEM_SPEC] = MarkerSpec()  # what the fixture sees, whatever the marker says
    """)
    result = project.runpytest()
    result.assert_outcomes(failed=1)
    result.stdout.fnmatch_lines(["*rlrates: no claim to check in test_inner_read.py::test_it;*"])
