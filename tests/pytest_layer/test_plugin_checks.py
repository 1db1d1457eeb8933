"""End-to-end tests of checks run through the ``rlrates`` fixture: verdicts, messages, reproducers, summary, xdist.

Real inner pytest runs through ``pytester`` (see ``plugin_runs``); every inner
check is seeded, so each verdict asserted here is deterministic.
"""

from __future__ import annotations

import json
import re
import shlex
import xml.etree.ElementTree as ET

import pytest
from plugin_runs import HEADER_LINE, failure_section, run_subprocess, seeded_lines, summary_lines


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
    first_32 = failure_section(output, "test_first_32")
    assert first_32.lstrip().startswith("rlrates FAIL (")
    assert "error floor: over the largest n the error stops falling at gamma=" in first_32
    assert "reproduce: pytest test_inner_verdicts.py::test_first_32 --rlrates-seed=0 --rlrates-budget=ci" in first_32
    squared = failure_section(output, "test_squared_discount")
    assert squared.lstrip().startswith("rlrates FAIL (")
    assert "claimed:   error <~ n^-0.5 * H^2" in squared
    assert "Traceback" not in first_32 + squared  # pytrace=False: the message only
    summary = summary_lines(output)
    # grouped by verdict, failures first, one line per check in words, each failure followed by its rerun command
    assert summary[0] == "failed (2):"
    assert summary[1].startswith("  test_first_32: q_pi on garnet-S10-A2-b3-seed1 (floor, rate fired): fails: n-exponent ")
    assert re.search(r"fails: n-exponent [+-]\d\.\d\d \[[+-]\d\.\d\d at 99\.\d+%, [+-]\d\.\d\d at 98\.75%\], "
                     r"tested limit -0\.42 \(claim -0\.5 \+ 0\.08\), would catch [+-]\d\.\d\d or above ", summary[1])
    assert summary[2] == "      rerun alone: pytest test_inner_verdicts.py::test_first_32 --rlrates-seed=0 --rlrates-budget=ci"
    assert summary[3].startswith("  test_squared_discount: ") and "H-exponent" in summary[3]
    assert summary[5:7] == ["passed (1):", summary[6]] and summary[6].startswith("  test_plug_in: q_pi on ")
    assert "holds: n-exponent " in summary[6] and len(summary) == 9  # a pass needs no rerun line
    assert summary[7].startswith("3 rate check(s) in all: 1 pass, 2 fail; exponents are given as fitted [lower bound")
    assert summary[8].startswith("Each command above reruns that check alone")
    assert "seconds" not in "\n".join(summary)  # no timing column
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
        "pytest 'test_inner_repro.py::test_repro[garnet-S10-A2-b3]' --rlrates-seed=7 --rlrates-budget=ci",
        "pytest 'test_inner_repro.py::test_repro[chain]' --rlrates-seed=7 --rlrates-budget=ci",
    ]
    message = failure_section(output, "test_repro[garnet-S10-A2-b3]")
    again = project.runpytest(*shlex.split(commands[0])[1:])
    again.assert_outcomes(failed=1)
    rerun = failure_section(again.stdout.str(), "test_repro[garnet-S10-A2-b3]")
    assert seeded_lines(rerun) == seeded_lines(message)
    assert "mean error by n:" in rerun
    # and the seed matters: another master seed gives other numbers (same verdict)
    other = project.runpytest(*shlex.split(commands[0].replace("seed=7", "seed=8"))[1:])
    other_message = failure_section(other.stdout.str(), "test_repro[garnet-S10-A2-b3]")
    assert other_message.lstrip().startswith("rlrates FAIL (")
    assert seeded_lines(other_message) != seeded_lines(message)


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
    section = failure_section(result.stdout.str(), "test_breaks")
    assert section.lstrip().startswith("rlrates ERROR (the estimator failed)")
    assert "the estimator raised at gamma=0.5, n=512, replicate=0: RuntimeError: scratch buffer sized for 256" in section
    assert "estimator traceback:" in section
    assert re.search(r'File ".*estimators\.py", line \d+, in breaks_at_512', section)
    summary = summary_lines(result.stdout.str())
    assert summary[0] == "estimator errors (1):"
    assert summary[1].startswith("  test_breaks: q_pi on garnet-S10-A2-b3-seed1: the estimator raised at gamma=0.5, n=512")


INCONCLUSIVE_TESTS = """
import pytest
import rlrates as rl
from estimators import very_noisy

TINY = rl.Budget(name="tiny", n_grid=(256, 512, 1024), gammas=(0.5, 0.75), replicates=4,
                       more_replicates=1, n_doublings=0)

@pytest.mark.rlrates(n=-0.5, budget=TINY)
def test_noisy(rlrates):
    rlrates(very_noisy, rl.garnet(10, 2, 3, seed=1))
"""


def test_inconclusive_fails_by_default_and_can_skip_but_never_pass(project: pytest.Pytester) -> None:
    project.makepyfile(test_inner_noisy=INCONCLUSIVE_TESTS)
    default = project.runpytest()
    default.assert_outcomes(failed=1)
    assert failure_section(default.stdout.str(), "test_noisy").lstrip().startswith("rlrates INCONCLUSIVE")
    for flags in (["--rlrates-inconclusive=skip"], ["-o", "rlrates_inconclusive=skip"]):
        skipped = project.runpytest("-rs", *flags)
        skipped.assert_outcomes(skipped=1)
        skipped.stdout.fnmatch_lines([
            "SKIPPED *rlrates inconclusive within the 'tiny' budget: target q_pi on garnet-S10-A2-b3-seed1 (unclear: n-exponent *tested limit -0.42 (claim -0.5 + 0.08)*",
        ])
        assert summary_lines(skipped.stdout.str())[0] == "inconclusive (1):"
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
    spread = run_subprocess(project, "-n", "2", "--rlrates-seed=random", "--junitxml=junit.xml")
    header = re.search(r"rlrates: budget ci, master seed (\d+) \(rerun with --rlrates-seed=\1\)", spread.stdout.str())
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
    assert summary_lines(single.stdout.str()) == summary_lines(spread.stdout.str())
    for test in ("test_first_32[garnet-S10-A2-b3]", "test_first_32[chain]"):
        assert seeded_lines(failure_section(single.stdout.str(), test)) == seeded_lines(failure_section(spread.stdout.str(), test))


def test_worker_processes_do_not_change_thenumbers(project: pytest.Pytester) -> None:
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
    assert seeded_lines(failure_section(pooled.stdout.str(), name)) == seeded_lines(failure_section(alone.stdout.str(), name))


REPORT_TESTS = """
import pytest
import rlrates as rl
from estimators import first_32, plug_in

@pytest.mark.rlrates(n=-0.5, suite=["random"])
def test_plug_in_on_the_garnets(rlrates, rlrates_mdp):
    rlrates(plug_in, rlrates_mdp, replicates=16)

@pytest.mark.xfail(strict=True, reason="kept regression")
@pytest.mark.rlrates(n=-0.5, label="first-32 buffer")
def test_kept_regression(rlrates):
    rlrates(first_32, rl.garnet(10, 2, 3, seed=1))
"""


def test_report_rows_have_short_labels_expected_failures_and_distinct_folders(project: pytest.Pytester) -> None:
    project.makepyfile(test_inner_report=REPORT_TESTS)
    project.makeini("[pytest]\nrlrates_figure_width = column\n")
    result = project.runpytest("--rlrates-report=report")
    result.assert_outcomes(passed=3, xfailed=1)
    report = project.path / "report"
    folders = sorted(path.name for path in report.iterdir() if path.is_dir())
    readable = sorted(name.rsplit("-", 1)[0] for name in folders)
    # the three Garnets of the suite differ only at the end of their ids; their folders differ at a glance
    assert readable == ["first-32-buffer", "test_plug_in_on_the_garnets-garnet-S10-A2-b3",
                        "test_plug_in_on_the_garnets-garnet-S20-A4-b5", "test_plug_in_on_the_garnets-garnet-S30-A3-b10"]
    records = {name: json.loads((report / name / "check.json").read_text()) for name in folders}
    kept = next(r for r in records.values() if r["label"] == "first-32 buffer")
    assert kept["expected"] == {"status": "fail", "strict": True, "reason": "kept regression"}
    index = (report / "index.md").read_text(encoding="utf-8")
    assert "| first-32 buffer | `test_inner_report.py::test_kept_regression` |" in index
    assert "| expected failure (floor, rate) |" in index
    tex = (report / "index.tex").read_text(encoding="utf-8")
    assert r"first-\allowbreak{}32 buffer & " in tex and "expected failure (floor, rate)" in tex
    assert "test_inner_report.py" not in tex.split(r"\begin{table}")[1]  # only in the comments above the float
    # the ini key sized the figures for one column
    matplotlib_image = pytest.importorskip("matplotlib.image")
    (png,) = (report / name / "figure.png" for name in folders if name.startswith("first-32"))
    height, width = matplotlib_image.imread(png).shape[:2]
    assert width == 3.4 * 200  # inches times the report's 200 dpi
    summary = summary_lines(result.stdout.str())
    assert summary[0] == "failed as expected (xfail) (1):" and summary[1].startswith("  first-32 buffer: q_pi on ")
    assert summary[2] == "passed (3):"
    assert summary[3].startswith("  test_plug_in_on_the_garnets[garnet-S10-A2-b3]: q_pi on garnet-S10-A2-b3-seed1: holds: ")
    # in the paper's table the label loses the [MDP] id, which the MDP column shows
    assert r"test\_\allowbreak{}plug\_\allowbreak{}in\_\allowbreak{}on\_\allowbreak{}the\_\allowbreak{}garnets & garnet-" in tex


def test_bad_figure_width_and_label_are_refused_by_name(project: pytest.Pytester) -> None:
    bad_width = project.runpytest("--rlrates-figure-width=huge")
    assert bad_width.ret == pytest.ExitCode.USAGE_ERROR
    bad_width.stderr.fnmatch_lines(["*--rlrates-figure-width: figure width 'huge' must be 'column', 'page' or a number of inches*"])
    project.makepyfile(test_inner_label="""
        import pytest
        from estimators import plug_in

        @pytest.mark.rlrates(n=-0.5, label=3)
        def test_bad(rlrates):
            pass
    """)
    bad_label = project.runpytest()
    bad_label.stdout.fnmatch_lines(["*@pytest.mark.rlrates on test_inner_label.py::test_bad: `label` must be a non-empty string, got 3*"])
