"""Faults and determinism in real pytest sessions: test order, failing neighbours, interrupts, reports.

Each test runs a real inner test file in a subprocess with ``pytester``.
"""

from __future__ import annotations

import json
import re
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest

ESTIMATORS = '''
import numpy as np

def plug_in(batch, problem):
    model = batch.counts / batch.n
    P_pi = np.einsum("sa,sat->st", problem.policy, model)
    r_pi = (problem.policy * problem.rewards).sum(axis=1)
    v = np.linalg.solve(np.eye(problem.states) - problem.gamma * P_pi, r_pi)
    return problem.rewards + problem.gamma * model @ v

def raises(batch, problem):
    raise RuntimeError("broken estimator")

def interrupted_at_large_n(batch, problem):
    if batch.n >= 512:
        raise KeyboardInterrupt
    return plug_in(batch, problem)

def exits_at_large_n(batch, problem):
    if batch.n >= 512:
        import os
        os._exit(3)
    return plug_in(batch, problem)

def terminated_at_large_n(batch, problem):
    """SIGTERM to the session's main process (this one, or the parent of a pool worker) at n = 512."""
    if batch.n >= 512:
        import os
        import signal
        from pathlib import Path
        main = os.getpid() if Path("serial.flag").exists() else os.getppid()
        with open("workers.txt", "a") as pids:
            pids.write(f"{os.getpid()}\\n")
        try:
            open("sent.flag", "x").close()  # one SIGTERM only: a second one ends a process at once
        except FileExistsError:
            return plug_in(batch, problem)
        os.kill(main, signal.SIGTERM)
    return plug_in(batch, problem)

def system_exit_at_large_n(batch, problem):
    if batch.n >= 512:
        raise SystemExit(2)
    return plug_in(batch, problem)
'''

TESTS = {
    "a": '''
@pytest.mark.rlrates(n=-0.5, horizon=2.0)
def test_a(rlrates):
    rlrates(plug_in, rl.garnet(10, 2, 3, seed=1))
''',
    "b": '''
@pytest.mark.rlrates(n=-0.5)
def test_b(rlrates):
    rlrates(plug_in, rl.chain(8))
''',
    "broken": '''
@pytest.mark.rlrates(n=-0.5)
def test_broken(rlrates):
    rlrates(raises, rl.garnet(10, 2, 3, seed=1))
''',
}

def _garnet_test(name: str, estimator: str) -> str:
    """An inner test that checks ``estimator`` on a 10-state Garnet against the claim n^-0.5."""
    return f"\n@pytest.mark.rlrates(n=-0.5)\ndef {name}(rlrates):\n    rlrates({estimator}, rl.garnet(10, 2, 3, seed=1))\n"


HEADER = ("import pytest\nimport rlrates as rl\n"
          "from estimators import plug_in, raises, interrupted_at_large_n, exits_at_large_n, system_exit_at_large_n, "
          "terminated_at_large_n\n")


@pytest.fixture
def project(pytester: pytest.Pytester) -> pytest.Pytester:
    pytester.makepyfile(estimators=ESTIMATORS)
    pytester.makeini("[pytest]\naddopts = -p no:cacheprovider\n")
    return pytester


def _properties(junit: Path) -> dict[str, str]:
    """Test name -> the rlrates record it carried in the JUnit XML."""
    found = {}
    for case in ET.parse(junit).getroot().iter("testcase"):
        for prop in case.iter("property"):
            if prop.get("name") == "rlrates":
                found[case.get("name", "")] = prop.get("value", "")
    return found


def _numbers(record: str) -> object:
    data = json.loads(record)
    data.pop("seconds", None)
    return data


def test_test_order_and_failing_neighbours_do_not_change_the_numbers(project: pytest.Pytester) -> None:
    # order a, b
    project.makepyfile(test_inner=HEADER + TESTS["a"] + TESTS["b"])
    first = project.runpytest_subprocess("--junitxml=first.xml")
    first.assert_outcomes(passed=2)
    # order b, broken, a: reordered, with a failing estimator in between
    project.makepyfile(test_inner=HEADER + TESTS["b"] + TESTS["broken"] + TESTS["a"])
    second = project.runpytest_subprocess("--junitxml=second.xml")
    second.assert_outcomes(passed=2, failed=1)
    one = _properties(project.path / "first.xml")
    two = _properties(project.path / "second.xml")
    assert set(one) == {"test_a", "test_b"}
    for name in ("test_a", "test_b"):
        assert _numbers(one[name]) == _numbers(two[name])


def test_an_unwritable_report_directory_is_a_usage_error(project: pytest.Pytester) -> None:
    project.makepyfile(test_inner=HEADER + TESTS["b"])
    (project.path / "occupied").write_text("a file, not a folder")
    result = project.runpytest_subprocess("--rlrates-report=occupied/reports")
    assert result.ret == pytest.ExitCode.USAGE_ERROR
    result.stderr.fnmatch_lines(["*--rlrates-report: cannot write to the report directory*occupied*reports*"])


def test_an_erroring_check_still_writes_its_raw_table(project: pytest.Pytester) -> None:
    project.makepyfile(test_inner=HEADER + TESTS["a"] + TESTS["broken"])
    result = project.runpytest_subprocess("--rlrates-report=out")
    result.assert_outcomes(passed=1, failed=1)
    folders = {json.loads(p.read_text())["test_id"]: p.parent for p in (project.path / "out").glob("*/check.json")}
    broken = folders["test_inner.py::test_broken"]
    record = json.loads((broken / "check.json").read_text())
    assert record["status"] == "error"
    assert "broken estimator" in record["failure"]["traceback"]
    assert (broken / "errors.csv").read_text().startswith("gamma,H,n,replicate,error,seconds")
    assert "test_inner.py::test_a" in (project.path / "out" / "index.md").read_text()


def test_an_interrupt_mid_sweep_keeps_the_rows_on_disk_and_ends_cleanly(project: pytest.Pytester) -> None:
    project.makepyfile(test_inner=HEADER + _garnet_test("test_interrupted", "interrupted_at_large_n"))
    result = project.runpytest_subprocess("--rlrates-report=out")
    assert result.ret == pytest.ExitCode.INTERRUPTED
    result.stdout.fnmatch_lines(["*KeyboardInterrupt*"])
    (folder,) = [p.parent for p in (project.path / "out").glob("*/check.json")]
    record = json.loads((folder / "check.json").read_text())
    assert record["failure"]["kind"] == "interrupted"
    rows = (folder / "errors.csv").read_text().strip().splitlines()[1:]
    assert len(rows) >= 2 * 24  # the cells at n = 128 and 256 of the first discount were finished
    assert {int(re.split(",", row)[2]) for row in rows} <= {128, 256}


# --------------------------------------------------------------------------- whose files, one session at a time
# (common practice: a tool removes only what it can show it wrote, and never follows a link out of its directory)


def test_a_report_directory_with_someone_elses_files_is_refused_and_left_alone(project: pytest.Pytester) -> None:
    project.makepyfile(test_inner=HEADER + TESTS["b"])
    docs = project.path / "docs"
    (docs / "api").mkdir(parents=True)
    (docs / "api" / "check.json").write_text('{"an": "API example"}')
    (docs / "api" / "NOTES.txt").write_text("my notes")
    (docs / "index.md").write_text("# Hand-written docs\n")
    before = {p: p.read_bytes() for p in docs.rglob("*") if p.is_file()}
    result = project.runpytest_subprocess("--rlrates-report=docs")
    assert result.ret == pytest.ExitCode.USAGE_ERROR
    result.stderr.fnmatch_lines(["*--rlrates-report: not written by rlrates*docs/api, *docs/index.md; *"])
    assert "INTERNALERROR" not in result.stderr.str() + result.stdout.str()
    assert {p: p.read_bytes() for p in docs.rglob("*") if p.is_file()} == before


def test_a_symlinked_folder_in_the_report_directory_is_a_usage_error(project: pytest.Pytester) -> None:
    project.makepyfile(test_inner=HEADER + TESTS["b"])
    first = project.runpytest_subprocess("--rlrates-report=out")
    first.assert_outcomes(passed=1)
    elsewhere = project.path / "elsewhere"
    elsewhere.mkdir()
    (elsewhere / "check.json").write_text("{}")
    (project.path / "out" / "linked").symlink_to(elsewhere, target_is_directory=True)
    result = project.runpytest_subprocess("--rlrates-report=out")
    assert result.ret == pytest.ExitCode.USAGE_ERROR
    result.stderr.fnmatch_lines(["*not written by rlrates*out/linked*"])
    assert "INTERNALERROR" not in result.stderr.str() + result.stdout.str()
    assert (elsewhere / "check.json").read_text() == "{}"


def test_a_second_run_replaces_only_its_own_earlier_checks(project: pytest.Pytester) -> None:
    project.makepyfile(test_inner=HEADER + TESTS["a"] + TESTS["b"])
    project.runpytest_subprocess("--rlrates-report=out").assert_outcomes(passed=2)
    project.makepyfile(test_inner=HEADER + TESTS["b"])
    project.runpytest_subprocess("--rlrates-report=out").assert_outcomes(passed=1)
    ids = {json.loads(p.read_text())["test_id"] for p in (project.path / "out").glob("*/check.json")}
    assert ids == {"test_inner.py::test_b"}  # test_a's folder was the plugin's own: removed
    # a file a user drops into one of the plugin's folders makes the next run refuse, naming it
    (folder,) = [p.parent for p in (project.path / "out").glob("*/check.json")]
    (folder / "NOTES.txt").write_text("my reading of the figure")
    result = project.runpytest_subprocess("--rlrates-report=out")
    assert result.ret == pytest.ExitCode.USAGE_ERROR
    result.stderr.fnmatch_lines([f"*not written by rlrates*{folder.name}/NOTES.txt*"])
    assert (folder / "NOTES.txt").read_text() == "my reading of the figure"


def test_a_report_directory_locked_by_a_live_session_is_refused_naming_its_pid(project: pytest.Pytester) -> None:
    import os
    import subprocess
    import sys

    project.makepyfile(test_inner=HEADER + TESTS["b"])
    (project.path / "out").mkdir()
    lock = project.path / "out" / ".rlrates-lock"
    lock.write_text(f"{os.getpid()} other-session\n")  # this outer process is alive
    result = project.runpytest_subprocess("--rlrates-report=out")
    assert result.ret == pytest.ExitCode.USAGE_ERROR
    result.stderr.fnmatch_lines([f"*in use by another rlrates session (pid {os.getpid()}*"])
    assert lock.read_text() == f"{os.getpid()} other-session\n"
    # a lock whose process has exited is stale: taken over, and released at the end of the session
    gone = subprocess.Popen([sys.executable, "-c", "pass"])
    gone.wait()
    lock.write_text(f"{gone.pid} crashed-session\n")
    project.runpytest_subprocess("--rlrates-report=out").assert_outcomes(passed=1)
    assert not lock.exists()
    assert len(list((project.path / "out").glob("*/check.json"))) == 1


def test_two_sessions_at_once_on_one_report_directory(project: pytest.Pytester) -> None:
    """The second session is refused up front; the first writes its whole report."""
    import subprocess
    import sys
    import time

    project.makepyfile(test_slow=HEADER + '''
import time

def slow_plug_in(batch, problem):
    time.sleep(0.002)
    return plug_in(batch, problem)

@pytest.mark.rlrates(n=-0.5)
def test_slow(rlrates):
    rlrates(slow_plug_in, rl.chain(8))
''')
    project.makepyfile(test_quick=HEADER + TESTS["b"])
    command = [sys.executable, "-m", "pytest", "-p", "no:cacheprovider", "--rlrates-report=out"]
    first = subprocess.Popen([*command, "test_slow.py"], cwd=project.path, stdout=subprocess.PIPE, stderr=subprocess.STDOUT)
    lock = project.path / "out" / ".rlrates-lock"
    deadline = time.monotonic() + 60
    while not lock.exists() and time.monotonic() < deadline:
        time.sleep(0.05)
    second = subprocess.run([*command, "test_quick.py"], cwd=project.path, capture_output=True, text=True, timeout=120)
    output, _ = first.communicate(timeout=180)
    assert second.returncode == pytest.ExitCode.USAGE_ERROR, second.stdout + second.stderr
    assert f"pid {first.pid}" in second.stderr
    assert first.returncode == 0, output.decode()
    ids = {json.loads(p.read_text())["test_id"] for p in (project.path / "out").glob("*/check.json")}
    assert ids == {"test_slow.py::test_slow"} and (project.path / "out" / "index.md").is_file()


# --------------------------------------------------------------------------- estimators that take their process down


def _check_folders(root: Path) -> dict[str, Path]:
    return {json.loads(p.read_text())["test_id"]: p.parent for p in root.glob("*/check.json")}


def test_a_dead_worker_is_an_error_naming_its_cell_and_the_next_check_gets_a_new_pool(project: pytest.Pytester) -> None:
    project.makepyfile(test_inner=HEADER + _garnet_test("test_dies", "exits_at_large_n") + TESTS["b"])
    result = project.runpytest_subprocess("--rlrates-workers=2", "--rlrates-report=out")
    result.assert_outcomes(passed=1, failed=1)
    output = result.stdout.str()
    # the pool's own plumbing is not shown as if it were the estimator's traceback (with or
    # without pytest's untruncated CI summary)
    assert "Traceback" not in output and "concurrent/futures" not in output, output
    result.stdout.fnmatch_lines(["*the cell at gamma=0.5, n=512, replicate=0 never finished*worker process running it died*"])
    folders = _check_folders(project.path / "out")
    record = json.loads((folders["test_inner.py::test_dies"] / "check.json").read_text())
    assert (record["status"], record["failure"]["kind"], record["failure"]["n"]) == ("error", "crashed", 512)
    assert record["data"]["rows"] > 0  # the cells at n = 128 and 256 were kept
    assert json.loads((folders["test_inner.py::test_b"] / "check.json").read_text())["status"] == "pass"


def test_system_exit_in_an_estimator_is_an_estimator_error(project: pytest.Pytester) -> None:
    project.makepyfile(test_inner=HEADER + _garnet_test("test_exits", "system_exit_at_large_n") + TESTS["b"])
    result = project.runpytest_subprocess("--rlrates-report=out")
    result.assert_outcomes(passed=1, failed=1)
    result.stdout.fnmatch_lines(["*the estimator raised at gamma=0.5, n=512, replicate=0: SystemExit: 2*"])
    result.stdout.fnmatch_lines(["*rate checks (rlrates)*", "estimator errors (1):", "  test_exits: *SystemExit*"])
    record = json.loads((_check_folders(project.path / "out")["test_inner.py::test_exits"] / "check.json").read_text())
    assert record["status"] == "error" and record["data"]["rows"] > 0


# --------------------------------------------------------------------------- a full disk

FULL_DISK = '''
import errno
import os

import pytest

_replace = os.replace


def _no_space(source, target):
    if "out" in os.fspath(target):
        raise OSError(errno.ENOSPC, "No space left on device", os.fspath(target))
    return _replace(source, target)


@pytest.fixture(autouse=True)
def full_disk_for_full_tests(request, monkeypatch):
    if "full" in request.node.name:
        monkeypatch.setattr(os, "replace", _no_space)


@pytest.hookimpl(tryfirst=True)
def pytest_terminal_summary():
    os.replace = _no_space  # the disk is still full when the index is written
'''


def test_a_full_disk_is_a_warning_and_the_summary_says_which_reports_are_missing(project: pytest.Pytester) -> None:
    """ENOSPC is injected into every file move under out/ (common practice for testing full disks without a tmpfs)."""
    project.makeconftest(FULL_DISK)
    project.makepyfile(test_inner=HEADER + TESTS["b"] + '''
@pytest.mark.rlrates(n=-0.5)
def test_full(rlrates):
    rlrates(plug_in, rl.chain(8))
''')
    result = project.runpytest_subprocess("--rlrates-report=out")
    result.assert_outcomes(passed=2)
    output = result.stdout.str()
    assert "Traceback" not in output and "INTERNALERROR" not in output + result.stderr.str()
    result.stdout.fnmatch_lines([
        "*ReportWarning: rlrates: the report of test_inner.py::test_full was not written to *out: "
        "No space left on device; the test keeps its verdict",
    ])
    result.stdout.fnmatch_lines([
        "rlrates report: index not written under *out: No space left on device",
        "rlrates report: 1 report(s) missing (could not be written): test_inner.py::test_full",
        "*rate checks (rlrates), budget ci*",
        "passed (2):",
        "  test_b: *",
        "  test_full: *",
        "2 rate check(s) in all: 2 pass*",
        "*2 passed*",
    ])
    assert _check_folders(project.path / "out").keys() == {"test_inner.py::test_b"}


def test_more_workers_than_the_machine_can_run_is_a_usage_error_at_start_up(project: pytest.Pytester) -> None:
    import os

    project.makepyfile(test_inner=HEADER + TESTS["b"])
    limit = 4 * (os.cpu_count() or 1)
    result = project.runpytest_subprocess(f"--rlrates-workers={limit + 1}")
    assert result.ret == pytest.ExitCode.USAGE_ERROR
    result.stderr.fnmatch_lines([f"*--rlrates-workers*{limit + 1} worker processes is more than this machine can run "
                                 f"usefully: at most {limit} (4 per CPU*"])
    project.makeini(f"[pytest]\naddopts = -p no:cacheprovider\nrlrates_workers = {limit + 1}\n")
    from_ini = project.runpytest_subprocess()
    assert from_ini.ret == pytest.ExitCode.USAGE_ERROR
    from_ini.stderr.fnmatch_lines([f"*ini key rlrates_workers = '{limit + 1}'*at most {limit}*"])


# --------------------------------------------------------------------------- SIGTERM


@pytest.mark.parametrize("workers", [1, 2], ids=["serial", "two-workers"])
def test_sigterm_keeps_the_check_in_flight_writes_the_reports_and_leaves_no_orphans(project: pytest.Pytester,
                                                                                     workers: int) -> None:
    import os
    import time

    project.makepyfile(test_inner=HEADER + TESTS["b"] + _garnet_test("test_terminated", "terminated_at_large_n")
                       + TESTS["a"])
    if workers == 1:
        (project.path / "serial.flag").write_text("")
    result = project.runpytest_subprocess("--rlrates-report=out", "--junitxml=junit.xml", f"--rlrates-workers={workers}")
    assert result.ret == pytest.ExitCode.INTERRUPTED
    # serially the interrupt lands in the cell at n = 512; with workers, in the cell the session was waiting for
    # (cells go to the pool largest first but are read in plan order, so that may be a small one)
    interrupted_n = "512" if workers == 1 else "(128|256|512)"
    result.stdout.re_match_lines([rf".*interrupted \(Terminated\) at gamma=0.5, n={interrupted_n}, replicate=0; "
                                  "the rows finished before it are kept.*"])
    folders = _check_folders(project.path / "out")
    assert set(folders) == {"test_inner.py::test_b", "test_inner.py::test_terminated"}  # test_a never ran
    record = json.loads((folders["test_inner.py::test_terminated"] / "check.json").read_text())
    assert (record["failure"]["kind"], record["failure"]["message"]) == ("interrupted", "Terminated")
    assert record["failure"]["n"] == 512 if workers == 1 else record["failure"]["n"] in (128, 256, 512)
    assert record["data"]["rows"] >= (record["failure"]["n"] // 256) * 24  # every cell before the interrupted one
    assert "test_inner.py::test_terminated" in (project.path / "out" / "index.md").read_text()
    assert "test_b" in _properties(project.path / "junit.xml")
    deadline = time.monotonic() + 10
    pids = {int(line) for line in (project.path / "workers.txt").read_text().split()}
    while time.monotonic() < deadline and any(_running(pid) for pid in pids):
        time.sleep(0.1)
    assert not any(_running(pid) for pid in pids)  # no pool process outlives the session


def _running(pid: int) -> bool:
    import os

    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    return True


# --------------------------------------------------------------------------- the start directory


def test_without_an_ini_file_the_numbers_do_not_depend_on_the_start_directory(pytester: pytest.Pytester) -> None:
    """No ini file: pytest's rootdir (so the node id) follows the start directory; the streams must not."""
    import subprocess
    import sys

    lab = pytester.path / "lab"
    (lab / "tests").mkdir(parents=True)
    (lab / "tests" / "test_lab.py").write_text(HEADER.split("from estimators")[0] + ESTIMATORS + TESTS["a"])
    command = [sys.executable, "-m", "pytest", "-p", "no:cacheprovider", "-p", "no:hypothesispytest"]
    inner = subprocess.run([*command, "test_lab.py::test_a", "--junitxml=../inner.xml"], cwd=lab / "tests",
                           capture_output=True, text=True, timeout=120)
    outer = subprocess.run([*command, "tests/test_lab.py::test_a", "--junitxml=outer.xml"], cwd=lab,
                           capture_output=True, text=True, timeout=120)
    assert inner.returncode == outer.returncode == 0, inner.stdout + outer.stdout
    assert "rootdir: " + str(lab / "tests") in inner.stdout and "rootdir: " + str(lab) in outer.stdout  # two node ids
    one, two = (json.loads(_properties(lab / name)["test_a"]) for name in ("inner.xml", "outer.xml"))
    assert (one.pop("test"), two.pop("test")) == ("test_lab.py::test_a", "tests/test_lab.py::test_a")
    assert one.pop("rerun") != two.pop("rerun")  # the rerun command is relative to where pytest started
    one.pop("seconds"), two.pop("seconds")
    assert one["fits"] and one == two  # the same fitted exponents and bounds, to the last bit


def test_a_marker_on_a_test_that_checks_nothing_warns(project: pytest.Pytester) -> None:
    project.makepyfile(test_inner=HEADER + '''
@pytest.mark.rlrates(n=-0.5)
def test_forgot_the_fixture():
    plug_in  # the claim above is never checked
''' + TESTS["b"])
    result = project.runpytest_subprocess()
    result.assert_outcomes(passed=2, warnings=1)
    result.stdout.fnmatch_lines(["*MarkerUnusedWarning: @pytest.mark.rlrates on test_inner.py::test_forgot_the_fixture, "
                                 "which uses neither the `rlrates` nor the `rlrates_mdp` fixture*"])
