"""End-to-end tests of the pytest layer's options and settings: start-up cost, usage errors, ini keys, isolation.

Real inner pytest runs through ``pytester`` (see ``plugin_runs``).
"""

from __future__ import annotations

import re
import subprocess
import sys

import pytest
from plugin_runs import run_subprocess


# --------------------------------------------------------------------------- import cost


def test_importing_the_plugin_loads_no_numerics() -> None:
    code = "import sys, rlrates.plugin; print(sorted({'numpy', 'scipy', 'pandas'} & set(sys.modules)))"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True, timeout=60)
    assert out.stdout.strip() == "[]"


# --------------------------------------------------------------------------- usage errors


@pytest.mark.parametrize(
    ("args", "expected"),
    [
        (["--rlrates-budget=fast"], "argument --rlrates-budget: unknown budget 'fast'; choose one of ci, appendix"),
        (["--rlrates-seed=-1"], "argument --rlrates-seed: the master seed must be an integer >= 0, got '-1'"),
        (["--rlrates-seed=x1"], "argument --rlrates-seed: the master seed must be an integer >= 0 or 'random', got 'x1'"),
        (["--rlrates-workers=0"], "argument --rlrates-workers: the number of worker processes must be an integer >= 1, got '0'"),
        (["--rlrates-inconclusive=pass"], "argument --rlrates-inconclusive: an inconclusive check can fail or skip its test, got 'pass'"),
        (["-o", "rlrates_budget=fast"], "ini key rlrates_budget = 'fast': unknown budget 'fast'"),
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
    project.makeini("[pytest]\nrlrates_budget = appendix\nrlrates_seed = 11\nrlrates_report = reports/rates\n")
    project.makeconftest("""
        from rlrates.plugin import session_settings

        def pytest_report_header(config):
            return f"settings seen by a conftest: {session_settings(config)!r}"
    """)
    project.makepyfile(test_inner_plain="def test_plain():\n    pass\n")
    from_ini = project.runpytest().stdout.str()
    assert (f"rlrates: budget appendix, master seed 11 (rerun with --rlrates-seed=11); "
            f"reports to {project.path / 'reports' / 'rates'}") in from_ini
    assert "settings seen by a conftest: RatesSettings(budget='appendix', seed=11, workers=1" in from_ini
    from_options = project.runpytest("--rlrates-budget=ci", "--rlrates-seed=4", "--rlrates-report=elsewhere")
    assert (f"rlrates: budget ci, master seed 4 (rerun with --rlrates-seed=4); "
            f"reports to {project.path / 'elsewhere'}") in from_options.stdout.str()
    assert "rate checks (rlrates)" not in from_options.stdout.str()  # no check ran: no summary section


# --------------------------------------------------------------------------- listings and isolation


def test_fixtures_and_marker_are_documented(project: pytest.Pytester) -> None:
    fixtures = project.runpytest("--fixtures").stdout.str()
    assert re.search(r"^rlrates -- .*plugin[/\\]__init__\.py:\d+\n    Check an estimator's error rate: ", fixtures, re.M)
    assert re.search(r"^rlrates_mdp -- .*\n    One MDP of the rlrates suite; a test that asks for it runs once", fixtures, re.M)
    markers = project.runpytest("--markers").stdout.str()
    assert "@pytest.mark.rlrates(claim=None, *, n=None, horizon=None, coverage=None, target=None, budget=None, " in markers


def test_disabling_the_plugin_leaves_other_tests_alone(project: pytest.Pytester) -> None:
    project.makepyfile(test_inner_plain="def test_plain():\n    assert 1 + 1 == 2\n")
    enabled_help = run_subprocess(project, "--help").stdout.str()
    assert "--rlrates-seed" in enabled_help  # so the next assertion can fail
    disabled_help = run_subprocess(project, "-p", "no:rlrates", "--help").stdout.str()
    assert "rlrates" not in disabled_help
    run = run_subprocess(project, "-p", "no:rlrates", "--strict-markers", "-W", "error")
    run.assert_outcomes(passed=1)
    assert "rlrates" not in run.stdout.str()



# --------------------------------------------------------------------------- projects with nested conftest files


def test_a_project_with_nested_conftest_files_runs(project: pytest.Pytester) -> None:
    """pytest hashes registered plugins when it hides a subfolder's conftest from other folders
    (pluggy's subset_hook_caller); the session object must be hashable (by identity) for that."""
    project.mkpydir("lab")
    project.path.joinpath("lab", "conftest.py").write_text("import pytest\n\n@pytest.fixture\ndef lab_seed():\n    return 1\n")
    project.path.joinpath("lab", "test_lab.py").write_text("def test_uses_lab(lab_seed):\n    assert lab_seed == 1\n")
    project.mkpydir("other")
    project.path.joinpath("other", "test_other.py").write_text("def test_plain():\n    pass\n")
    result = project.runpytest("-p", "no:cacheprovider")
    result.assert_outcomes(passed=2)
    xdist = run_subprocess(project, "-n", "2", "-p", "no:cacheprovider")
    assert xdist.ret == 0, xdist.stdout.str()
