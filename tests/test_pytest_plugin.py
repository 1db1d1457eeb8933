"""End-to-end tests of the pytest layer: real inner pytest runs through ``pytester``.

Every inner check is seeded (master seed + test id), so each verdict asserted
here is deterministic. The inner MDPs are small (10 states, 2 actions) and the
profile is ``quick`` or smaller, so a run costs about a second. Runs that need
plugin isolation (pytest-xdist, ``-p no:rlrates``, import-time checks) use a
subprocess; the rest run in-process.
"""

from __future__ import annotations

import json
import re
import shlex
import subprocess
import sys
import xml.etree.ElementTree as ET

import pytest

import rlrates.rate_check  # noqa: F401  (loads numpy, scipy, pandas before pytester snapshots sys.modules)
from rlrates.claims import Claim
from rlrates.marker_spec import MarkerError, merge_specs, parse_marker

# The inner projects' estimators: vectorised numpy, each one a common kind of bug or its fix.
ESTIMATORS = '''
from pathlib import Path

import numpy as np


def evaluate(P, problem, gamma):
    """Q^pi of the model P: one linear solve over state-action pairs."""
    S, A = problem.states, problem.actions
    p_pi = np.einsum("sat,tb->satb", P, problem.policy).reshape(S * A, S * A)
    q = np.linalg.solve(np.eye(S * A) - gamma * p_pi, problem.rewards.ravel())
    return q.reshape(S, A)


def plug_in(batch, problem):
    """Correct: policy evaluation in the empirical model counts / n."""
    return evaluate(batch.counts / batch.n, problem, problem.gamma)


def first_32(batch, problem):
    """Bug: only the first 32 samples of each pair are used, whatever n."""
    head = batch.next_states[:, :, :32]
    P = (head[..., None] == np.arange(problem.states)).mean(axis=2)
    return evaluate(P, problem, problem.gamma)


def squared_discount(batch, problem):
    """Bug: discounts with gamma ** 2."""
    return evaluate(batch.counts / batch.n, problem, problem.gamma ** 2)


def very_noisy(batch, problem):
    """Right rate on average, but a log-normal factor with sigma 6 swamps any fit."""
    seed = int(np.dot(batch.counts.ravel(), np.arange(batch.counts.size)) % 2**32)
    rng = np.random.default_rng(seed)
    return plug_in(batch, problem) + rng.lognormal(0.0, 6.0) / np.sqrt(batch.n)


def breaks_at_512(batch, problem):
    if batch.n >= 512:
        raise RuntimeError("scratch buffer sized for 256 samples")
    return plug_in(batch, problem)


def leaves_a_trace(batch, problem):
    """Records that it ran, so a test can assert it did not."""
    Path(__file__).with_name("estimator-ran.txt").write_text("yes")
    return plug_in(batch, problem)
'''

HEADER_LINE = "rlrates: profile quick, master seed 0 (rerun with --rlrates-seed=0)"


@pytest.fixture
def project(pytester: pytest.Pytester, monkeypatch: pytest.MonkeyPatch) -> pytest.Pytester:
    """A pytester project with the inner estimators importable as ``estimators``.

    Inner runs leave out Hypothesis's plugin: its terminal summary would import
    Hypothesis afresh in every in-process run (pytester restores sys.modules).
    They also run as outside CI: with ``CI`` set, pytest prints each failure message
    a second time in the short summary, which would double every line counted here.
    """
    monkeypatch.setenv("PYTEST_ADDOPTS", "-p no:hypothesispytest")
    monkeypatch.delenv("CI", raising=False)
    monkeypatch.delenv("BUILD_NUMBER", raising=False)
    pytester.makepyfile(estimators=ESTIMATORS)
    return pytester


def _section(output: str, test_name: str) -> str:
    """The text of one test's failure section in pytest's output."""
    match = re.search(rf"^_+ {re.escape(test_name)} _+$(.*?)(?=^_{{3,}} |^=+ |^-+ generated xml file)", output, re.M | re.S)
    assert match, f"no failure section for {test_name} in:\n{output}"
    return match.group(1)


def _numbers(message: str) -> list[str]:
    """The lines of a check message that carry numbers fixed by the seed (not timings)."""
    keep = []
    for line in message.splitlines():
        if line.startswith(("profile:", "reproduce:", "[gw")) or not line.strip():
            continue  # timings, the command, xdist's worker banner
        keep.append(line.rstrip())
    return keep


def _summary(output: str) -> list[str]:
    """The rlrates summary section with the timing column removed."""
    match = re.search(r"^=+ rlrates checks: .*?=+$(.*?)(?=^=+ )", output, re.M | re.S)
    assert match, f"no rlrates summary in:\n{output}"
    return [re.sub(r"\s+\d+\.\d\d\s+", "  <s>  ", line).rstrip() for line in match.group(1).strip().splitlines()
            if "s in checks" not in line]


def _subprocess(pytester: pytest.Pytester, *args: str) -> pytest.RunResult:
    return pytester.run(sys.executable, "-m", "pytest", "-p", "no:cacheprovider", *args, timeout=120)


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
        ((), {"profile": "fast"}, r"unknown `profile` 'fast'; choose one of quick, full"),
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
    module = parse_marker((Claim(n=-0.25),), {"target": "q_star", "profile": "full"}, "t")
    merged = merge_specs([function, module])
    assert merged.claim == Claim(n=-0.5, horizon=2.0)
    assert merged.target == "q_star" and merged.profile == "full"
    assert merged.members is not None and [m.name for m in merged.members][:1] == ["garnet-S10-A2-b3"]


# --------------------------------------------------------------------------- import cost


def test_importing_the_plugin_loads_no_numerics() -> None:
    code = "import sys, rlrates.pytest_plugin; print(sorted({'numpy', 'scipy', 'pandas'} & set(sys.modules)))"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True, timeout=60)
    assert out.stdout.strip() == "[]"


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
        "test_default[deterministic]",
        "test_narrowed[chain]",
        "test_narrowed[deterministic]",
        "test_family[horizon-hard]",
        "test_own_list[garnet-S6-A2-b2-seed4]",
        "test_own_list[garnet-S6-A2-b2-seed5]",
        "test_own_dict[tiny]",
    ]
    project.runpytest().assert_outcomes(passed=13)


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
    result = _subprocess(project, "--collect-only", "-q", "-s")
    result.stdout.fnmatch_lines(["numerics imported: []", "*4 tests collected*"])


# --------------------------------------------------------------------------- verdicts and messages


VERDICT_TESTS = """
import pytest
import rlrates as rl
from estimators import plug_in, first_32, squared_discount

MDP = rl.garnet(10, 2, 3, seed=1)

@pytest.mark.rlrates(n=-0.5)
def test_plug_in(rlrates):
    result = rlrates(plug_in, MDP, replicates=32)
    assert result.passed and result.seed == 0

def test_first_32(rlrates):
    rlrates(first_32, MDP, rl.Claim(n=-0.5))

@pytest.mark.rlrates(n=-0.5, horizon=2.0)
def test_squared_discount(rlrates):
    rlrates(squared_discount, MDP)
"""


def test_correct_estimator_passes_and_two_bugs_fail_with_reasons(project: pytest.Pytester) -> None:
    project.makepyfile(test_inner_verdicts=VERDICT_TESTS)
    result = project.runpytest("--strict-markers", "-W", "error", "--junitxml=junit.xml")
    result.assert_outcomes(passed=1, failed=2)
    output = result.stdout.str()
    assert HEADER_LINE in output
    assert "warning" not in output.lower()
    first_32 = _section(output, "test_first_32")
    assert first_32.lstrip().startswith("rlrates FAIL (")
    assert "error floor: over the largest n the error stops falling at gamma=" in first_32
    assert "reproduce: pytest test_inner_verdicts.py::test_first_32 --rlrates-seed=0 --rlrates-profile=quick" in first_32
    squared = _section(output, "test_squared_discount")
    assert squared.lstrip().startswith("rlrates FAIL (")
    assert "claimed:   error <~ n^-0.5 * H^2" in squared
    assert "Traceback" not in first_32 + squared  # pytrace=False: the message only
    summary = _summary(output)
    assert summary[0].split() == ["verdict", "seconds", "target", "mdp", "test"]
    heads = [line.split() for line in summary if "test_inner_verdicts.py::" in line]
    assert [(h[0], h[-1]) for h in heads] == [
        ("FAIL", "test_inner_verdicts.py::test_first_32"),
        ("PASS", "test_inner_verdicts.py::test_plug_in"),
        ("FAIL", "test_inner_verdicts.py::test_squared_discount"),
    ]
    assert "3 check(s): 1 pass, 2 fail;" in output
    # the same records reach JUnit XML as properties
    properties = {
        case.get("name"): json.loads(prop.get("value", "{}"))
        for case in ET.parse(project.path / "junit.xml").getroot().iter("testcase")
        for prop in case.iter("property") if prop.get("name") == "rlrates"
    }
    assert {name: record["status"] for name, record in properties.items()} == {
        "test_plug_in": "pass", "test_first_32": "fail", "test_squared_discount": "fail",
    }
    assert {f["factor"] for f in properties["test_squared_discount"]["fits"]} == {"n", "horizon"}


def test_printed_reproducer_reruns_the_same_check(project: pytest.Pytester, monkeypatch: pytest.MonkeyPatch) -> None:
    project.makeini("[pytest]\n")
    sub = project.mkpydir("sub")
    (sub / "test_inner_repro.py").write_text(
        "import pytest\n"
        "from estimators import first_32, plug_in\n"
        "@pytest.mark.rlrates(n=-0.5, suite=['garnet-S10-A2-b3', 'chain'])\n"
        "def test_repro(rlrates, rlrates_mdp):\n"
        "    rlrates(plug_in, rlrates_mdp, replicates=32)\n"
        "    rlrates(first_32, rlrates_mdp)\n"
    )
    monkeypatch.chdir(sub)  # invoked from a subdirectory of the rootdir: the command must say test_inner_repro.py
    monkeypatch.syspath_prepend(project.path)
    first = project.runpytest("--rlrates-seed=7")
    first.assert_outcomes(failed=2)
    output = first.stdout.str()
    commands = re.findall(r"^reproduce: (pytest .+)$", output, re.M)
    assert commands == [
        "pytest 'test_inner_repro.py::test_repro[garnet-S10-A2-b3]' --rlrates-seed=7 --rlrates-profile=quick",
        "pytest 'test_inner_repro.py::test_repro[chain]' --rlrates-seed=7 --rlrates-profile=quick",
    ]
    message = _section(output, "test_repro[garnet-S10-A2-b3]")
    again = project.runpytest(*shlex.split(commands[0])[1:])
    again.assert_outcomes(failed=1)
    rerun = _section(again.stdout.str(), "test_repro[garnet-S10-A2-b3]")
    assert _numbers(rerun) == _numbers(message)
    assert "mean error by n:" in rerun
    # and the seed matters: another master seed gives other numbers (same verdict)
    other = project.runpytest(*shlex.split(commands[0].replace("seed=7", "seed=8"))[1:])
    other_message = _section(other.stdout.str(), "test_repro[garnet-S10-A2-b3]")
    assert other_message.lstrip().startswith("rlrates FAIL (")
    assert _numbers(other_message) != _numbers(message)


def test_estimator_exception_fails_with_its_traceback_and_the_cell(project: pytest.Pytester) -> None:
    project.makepyfile(test_inner_raises="""
        import pytest
        import rlrates as rl
        from estimators import breaks_at_512

        @pytest.mark.rlrates(n=-0.5)
        def test_breaks(rlrates):
            rlrates(breaks_at_512, rl.garnet(10, 2, 3, seed=1))
    """)
    result = project.runpytest()
    result.assert_outcomes(failed=1)
    section = _section(result.stdout.str(), "test_breaks")
    assert section.lstrip().startswith("rlrates ERROR (the estimator failed)")
    assert "the estimator raised at gamma=0.5, n=512, replicate=0: RuntimeError: scratch buffer sized for 256" in section
    assert "estimator traceback:" in section
    assert re.search(r'File ".*estimators\.py", line \d+, in breaks_at_512', section)
    assert "ERROR" in _summary(result.stdout.str())[1]


INCONCLUSIVE_TESTS = """
import pytest
import rlrates as rl
from estimators import very_noisy

TINY = rl.Profile(name="tiny", n_grid=(256, 512, 1024), gammas=(0.5, 0.75), replicates=4,
                       more_replicates=1, n_doublings=0)

@pytest.mark.rlrates(n=-0.5, profile=TINY)
def test_noisy(rlrates):
    rlrates(very_noisy, rl.garnet(10, 2, 3, seed=1))
"""


def test_inconclusive_fails_by_default_and_can_skip_but_never_pass(project: pytest.Pytester) -> None:
    project.makepyfile(test_inner_noisy=INCONCLUSIVE_TESTS)
    default = project.runpytest()
    default.assert_outcomes(failed=1)
    assert _section(default.stdout.str(), "test_noisy").lstrip().startswith("rlrates INCONCLUSIVE")
    for flags in (["--rlrates-inconclusive=skip"], ["-o", "rlrates_inconclusive=skip"]):
        skipped = project.runpytest("-rs", *flags)
        skipped.assert_outcomes(skipped=1)
        skipped.stdout.fnmatch_lines([
            "SKIPPED *rlrates inconclusive within the 'tiny' budget: target q_pi on garnet-S10-A2-b3-seed1 (n *, claimed <= -0.5: *",
        ])
        assert "INCONCLUSIVE" in _summary(skipped.stdout.str())[1]
        assert "inconclusive checks skip" in skipped.stdout.str()
    explicit = project.runpytest("--rlrates-inconclusive=fail", "-o", "rlrates_inconclusive=skip")
    explicit.assert_outcomes(failed=1)  # the command line beats the ini key


def test_missing_claim_and_session_owned_options_fail_before_the_estimator(project: pytest.Pytester) -> None:
    project.makepyfile(test_inner_misuse="""
        import rlrates as rl
        from estimators import leaves_a_trace

        def test_no_claim(rlrates):
            rlrates(leaves_a_trace, rl.garnet(10, 2, 3))

        def test_own_seed(rlrates):
            rlrates(leaves_a_trace, rl.garnet(10, 2, 3), rl.Claim(), seed=3)

        def test_bad_target(rlrates):
            rlrates(leaves_a_trace, rl.garnet(10, 2, 3), rl.Claim(), target="v")
    """)
    result = project.runpytest()
    result.assert_outcomes(failed=3)
    assert "exception occurred" not in result.stdout.str()
    result.stdout.fnmatch_lines([
        "*rlrates: no claim to check in test_inner_misuse.py::test_no_claim; pass one to the fixture*",
        "*rlrates: `seed` is set by the session and cannot be passed to the fixture in test_inner_misuse.py::test_own_seed*",
        "*rlrates: the check in test_inner_misuse.py::test_bad_target could not run: ValueError: unknown `target` 'v'*",
    ])
    assert not (project.path / "estimator-ran.txt").exists()


# --------------------------------------------------------------------------- usage errors


@pytest.mark.parametrize(
    ("args", "expected"),
    [
        (["--rlrates-profile=fast"], "argument --rlrates-profile: unknown profile 'fast'; choose one of quick, full"),
        (["--rlrates-seed=-1"], "argument --rlrates-seed: the master seed must be an integer >= 0, got '-1'"),
        (["--rlrates-seed=x1"], "argument --rlrates-seed: the master seed must be an integer >= 0 or 'random', got 'x1'"),
        (["--rlrates-workers=0"], "argument --rlrates-workers: the number of worker processes must be an integer >= 1, got '0'"),
        (["--rlrates-inconclusive=pass"], "argument --rlrates-inconclusive: an inconclusive check can fail or skip its test, got 'pass'"),
        (["-o", "rlrates_profile=fast"], "ini key rlrates_profile = 'fast': unknown profile 'fast'"),
        (["-o", "rlrates_seed=-3"], "ini key rlrates_seed = '-3': the master seed must be an integer >= 0, got '-3'"),
        (["-o", "rlrates_suite=random garnets"], "ini key rlrates_suite: unknown suite selector 'garnets'"),
    ],
)
def test_bad_option_values_are_usage_errors_naming_the_value(
    project: pytest.Pytester, args: list[str], expected: str
) -> None:
    project.makepyfile("def test_plain():\n    pass\n")
    result = project.runpytest(*args)
    assert result.ret == pytest.ExitCode.USAGE_ERROR
    assert expected in result.stderr.str()


def test_settings_come_from_options_over_ini_keys(project: pytest.Pytester) -> None:
    project.makeini("[pytest]\nrlrates_profile = full\nrlrates_seed = 11\nrlrates_report = reports/rates\n")
    project.makeconftest("""
        from rlrates.pytest_plugin import session_settings

        def pytest_report_header(config):
            return f"settings seen by a conftest: {session_settings(config)!r}"
    """)
    project.makepyfile(test_inner_plain="def test_plain():\n    pass\n")
    from_ini = project.runpytest().stdout.str()
    assert (f"rlrates: profile full, master seed 11 (rerun with --rlrates-seed=11); "
            f"reports to {project.path / 'reports' / 'rates'}") in from_ini
    assert "settings seen by a conftest: RatesSettings(profile='full', seed=11, workers=1" in from_ini
    from_options = project.runpytest("--rlrates-profile=quick", "--rlrates-seed=4", "--rlrates-report=elsewhere")
    assert (f"rlrates: profile quick, master seed 4 (rerun with --rlrates-seed=4); "
            f"reports to {project.path / 'elsewhere'}") in from_options.stdout.str()
    assert "rlrates checks" not in from_options.stdout.str()  # no check ran: no summary section


BAD_MARKERS = {
    "test_bad_typo": ("@pytest.mark.rlrates(n=-0.5, taget='q_pi')", "unknown keyword `taget` (did you mean `target`?)"),
    "test_bad_exponent": ("@pytest.mark.rlrates(n=0.5)", "bad exponent: `n` exponent must be negative"),
    "test_bad_target": ("@pytest.mark.rlrates(n=-0.5, target='value')", "unknown `target` 'value'"),
    "test_bad_suite": ("@pytest.mark.rlrates(n=-0.5, suite=['garnet'])", "`suite`: unknown suite selector 'garnet'"),
    "test_bad_profile": ("@pytest.mark.rlrates(n=-0.5, profile='slow')", "unknown `profile` 'slow'"),
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


# --------------------------------------------------------------------------- listings and isolation


def test_fixtures_and_marker_are_documented(project: pytest.Pytester) -> None:
    fixtures = project.runpytest("--fixtures").stdout.str()
    assert re.search(r"^rlrates -- .*pytest_plugin\.py:\d+\n    Check an estimator's error rate: ", fixtures, re.M)
    assert re.search(r"^rlrates_mdp -- .*\n    One MDP of the rlrates suite; a test that asks for it runs once", fixtures, re.M)
    markers = project.runpytest("--markers").stdout.str()
    assert "@pytest.mark.rlrates(claim=None, *, n=None, horizon=None, target=None, profile=None, suite=None, " in markers


def test_disabling_the_plugin_leaves_other_tests_alone(project: pytest.Pytester) -> None:
    project.makepyfile(test_inner_plain="def test_plain():\n    assert 1 + 1 == 2\n")
    enabled_help = _subprocess(project, "--help").stdout.str()
    assert "--rlrates-seed" in enabled_help  # so the next assertion can fail
    disabled_help = _subprocess(project, "-p", "no:rlrates", "--help").stdout.str()
    assert "rlrates" not in disabled_help
    run = _subprocess(project, "-p", "no:rlrates", "--strict-markers", "-W", "error")
    run.assert_outcomes(passed=1)
    assert "rlrates" not in run.stdout.str()


XDIST_TESTS = """
import pytest
import rlrates
from estimators import first_32, plug_in

@pytest.mark.rlrates(n=-0.5, suite=["garnet-S10-A2-b3", "chain"])
def test_plug_in(rlrates, rlrates_mdp, record_property, worker_id):
    record_property("worker", worker_id)
    rlrates(plug_in, rlrates_mdp, replicates=32)

@pytest.mark.rlrates(n=-0.5, suite=["garnet-S10-A2-b3", "chain"])
def test_first_32(rlrates, rlrates_mdp, record_property, worker_id):
    record_property("worker", worker_id)
    rlrates(first_32, rlrates_mdp)
"""


def test_xdist_gives_the_same_verdicts_numbers_and_summary(project: pytest.Pytester) -> None:
    project.makepyfile(test_inner_spread=XDIST_TESTS)
    # A drawn seed, so that only the controller's hand-over can make the workers agree. The
    # assertions below hold for any seed: both runs must agree, and a subsampler that stops at
    # 32 samples fails at every seed (its error does not fall at all).
    spread = _subprocess(project, "-n", "2", "--rlrates-seed=random", "--junitxml=junit.xml")
    header = re.search(r"rlrates: profile quick, master seed (\d+) \(rerun with --rlrates-seed=\1\)", spread.stdout.str())
    assert header, spread.stdout.str()
    seed = int(header.group(1))
    # the controller's seed reached both workers
    cases = list(ET.parse(project.path / "junit.xml").getroot().iter("testcase"))
    props = [{p.get("name"): p.get("value") for p in case.iter("property")} for case in cases]
    assert {p["worker"] for p in props} == {"gw0", "gw1"}
    assert {json.loads(str(p["rlrates"]))["seed"] for p in props} == {seed}
    # one process, same seed: same verdicts, same numbers, same summary
    single = project.runpytest(f"--rlrates-seed={seed}")
    outcomes = {k: v for k, v in single.parseoutcomes().items() if k in ("passed", "failed")}
    assert outcomes == {k: v for k, v in spread.parseoutcomes().items() if k in ("passed", "failed")}
    assert sum(outcomes.values()) == 4
    single.stdout.fnmatch_lines(["FAILED *test_first_32[[]garnet-S10-A2-b3[]]*", "FAILED *test_first_32[[]chain[]]*"])
    assert _summary(single.stdout.str()) == _summary(spread.stdout.str())
    for test in ("test_first_32[garnet-S10-A2-b3]", "test_first_32[chain]"):
        assert _numbers(_section(single.stdout.str(), test)) == _numbers(_section(spread.stdout.str(), test))


def test_worker_processes_do_not_change_the_numbers(project: pytest.Pytester) -> None:
    project.makepyfile(test_inner_pool="""
        import pytest
        import rlrates
        from estimators import first_32

        @pytest.mark.rlrates(n=-0.5, suite=["garnet-S10-A2-b3"])
        def test_pool(rlrates, rlrates_mdp):
            rlrates(first_32, rlrates_mdp)
    """)
    alone = project.runpytest()
    pooled = project.runpytest("--rlrates-workers=2")
    assert "2 worker processes per check" in pooled.stdout.str()
    name = "test_pool[garnet-S10-A2-b3]"
    assert _numbers(_section(pooled.stdout.str(), name)) == _numbers(_section(alone.stdout.str(), name))
