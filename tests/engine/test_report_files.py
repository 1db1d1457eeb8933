"""Tests of check folders: the raw table, check.json and its provenance, atomic writes, corrupt folders.

Check results and report directories come from real ci-budget checks
(tests/engine/report_checks.py and conftest.py), computed once per module; every test that edits files
works on its own folder. The index, rebuilding and the command line are tested
in test_report_index.py, the figures in test_report_figures.py.
"""

from __future__ import annotations

import importlib
import json
import os
import re
import subprocess
import sys
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest
from report_checks import ERROR_ID, FAIL_ID, PASS_ID, load, truncate_json

import rlrates
from rlrates import CheckResult, reference, report
from rlrates.report import ReportError, ReportWarning, check_folder_name, folder_name, read_check, rebuild, write_check
from rlrates.result import FIT_KEYS, Fit
from rlrates.sampling import draw_block, mdp_kernel, stream_context
from rlrates.targets import estimate_error, solve_truth

TABLE_COLUMNS = ["gamma", "H", "n", "replicate", "error", "seconds"]
REPO = Path(__file__).resolve().parents[2]


# --------------------------------------------------------------------------- folder contents


def test_folder_names_are_safe_readable_and_distinct() -> None:
    name = folder_name("tests/test_a.py::test_b[x|y z/..]")
    assert re.fullmatch(r"[A-Za-z0-9._=+-]+", name)
    assert name.startswith("tests-test_a.py-test_b-x-y-z")
    assert re.search(r"-[0-9a-f]{8}$", name)
    # the same slug from different ids still gives different folders
    assert folder_name("tests/a::b") != folder_name("tests/a-b")
    assert len(folder_name("t" * 500)) <= 69
    assert folder_name("") .startswith("check-")


def test_check_folder_holds_tables_and_figures(session: Path) -> None:
    folder = session / check_folder_name(PASS_ID)
    assert sorted(p.name for p in folder.iterdir()) == [".rlrates-files", "check.json", "errors.csv", "figure.pdf", "figure.png"]
    assert (folder / ".rlrates-files").read_text().splitlines() == ["check.json", "errors.csv", "figure.pdf", "figure.png"]
    assert (folder / "figure.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert (folder / "figure.pdf").read_bytes()[:5] == b"%PDF-"


def test_errors_csv_is_the_raw_table_repr_exact(session: Path, passing: CheckResult) -> None:
    saved = pd.read_csv(session / check_folder_name(PASS_ID) / "errors.csv")
    assert list(saved.columns) == TABLE_COLUMNS
    expected = passing.table[TABLE_COLUMNS].sort_values(["gamma", "n", "replicate"], ignore_index=True)
    pd.testing.assert_frame_equal(saved, expected, check_exact=True, check_dtype=False)
    assert (saved["error"].to_numpy() == expected["error"].to_numpy()).all()


def test_check_json_matches_the_result(session: Path, passing: CheckResult) -> None:
    record = load(session / check_folder_name(PASS_ID))
    assert record["schema"] == report.SCHEMA
    assert record["test_id"] == PASS_ID
    assert (record["status"], record["target"], record["norm"]) == ("pass", "q_pi", "sup")
    assert record["fired"] == list(passing.fired) and record["reasons"] == list(passing.reasons)
    assert record["notes"] == list(passing.notes)
    assert (record["claim"]["n"], record["claim"]["horizon"]) == (-0.5, 2.0)
    assert record["seed"] == passing.seed and record["streams"]["master_seed"] == passing.seed
    assert record["mdp"]["name"] == passing.mdp.name
    assert record["mdp"]["metadata"] == passing.mdp.metadata
    assert record["mdp"]["fingerprints"] == {repr(g): f for g, f in passing.mdp.fingerprints.items()}
    assert record["mdp"]["scales"] == {repr(g): s for g, s in passing.mdp.scales.items()}
    assert record["budget"]["name"] == "ci"
    assert record["budget"]["n_grid"] == list(passing.budget.n_grid)
    assert record["budget"]["alpha"] == passing.budget.alpha
    assert set(record["budget"]) == set(passing.budget.__dataclass_fields__)
    assert [list(fit) for fit in record["fits"]] == [list(FIT_KEYS)] * len(passing.factors) == [list(FIT_KEYS)] * 2
    assert tuple(Fit.from_dict(fit) for fit in record["fits"]) == passing.factors  # floats survive JSON exactly
    assert record["run"]["estimator_calls"] == len(passing.table) == record["data"]["rows"]
    assert record["failure"] is None
    assert record["extra"] == {"worker": "gw0"}
    assert record["reproducer"] == passing.run.reproducer and record["message"] == passing.message


def test_check_json_records_the_fitted_cells_and_slopes(session: Path, failing: CheckResult) -> None:
    """``cells`` and ``slopes`` are the check's own summary and n-slopes, one entry per cell and per discount."""
    record = load(session / check_folder_name(FAIL_ID))
    summary = failing.evidence.summary
    assert len(record["cells"]) == len(summary) == len(failing.table.groupby(["gamma", "n"])) > 0
    for cell, (_, row) in zip(record["cells"], summary.iterrows()):
        assert list(cell) == ["gamma", "n", "replicates", "mean", "usable", "zero", "fitted", "left_out"]
        assert (cell["gamma"], cell["n"], cell["replicates"], cell["mean"]) == (row["gamma"], row["n"], row["replicates"], row["mean"])
        assert (cell["fitted"], cell["left_out"]) == (bool(row["fitted"]), row["left_out"])
        assert (cell["left_out"] == "") == cell["fitted"]
    slopes = failing.evidence.slopes
    assert [entry["gamma"] for entry in record["slopes"]] == slopes["gamma"].tolist() == sorted(failing.mdp.fingerprints)
    for entry, (_, row) in zip(record["slopes"], slopes.iterrows()):
        assert entry["state"] == row["state"]
        assert entry["slope"] == row["slope"] if row["state"] == "fitted" else entry.get("slope") is None


def test_provenance_versions_platform_and_timestamps(session: Path, passing: CheckResult) -> None:
    record = load(session / check_folder_name(PASS_ID))
    versions = record["environment"]["versions"]
    assert versions["rlrates"] == rlrates.__version__
    imported = {name: importlib.import_module(name).__version__ for name in ("numpy", "scipy", "pandas", "pytest", "matplotlib")}
    assert {name: versions[name] for name in imported} == imported
    assert record["environment"]["platform"] and versions["python"] == ".".join(map(str, sys.version_info[:3]))
    started = datetime.fromisoformat(record["run"]["started"])
    finished = datetime.fromisoformat(record["run"]["finished"])
    assert started.utcoffset() == finished.utcoffset() == timezone.utc.utcoffset(None)
    assert abs((finished - started).total_seconds() - passing.run.elapsed) < 1e-5
    assert abs((datetime.now(timezone.utc) - finished).total_seconds()) < 600


def test_git_commit_inside_a_repository_and_none_outside(monkeypatch: pytest.MonkeyPatch, tmp_path: Path,
                                                         passing: CheckResult) -> None:
    monkeypatch.chdir(tmp_path)
    assert load(write_check(passing, tmp_path / "a", PASS_ID, figures=False))["environment"]["git_commit"] is None
    try:
        head = subprocess.run(["git", "rev-parse", "HEAD"], cwd=REPO, capture_output=True, text=True, timeout=10)
    except (OSError, subprocess.SubprocessError):
        pytest.skip("git is not available")
    if head.returncode != 0:
        pytest.skip("the tests are not running from a git checkout with a commit")
    monkeypatch.chdir(REPO)
    recorded = load(write_check(passing, tmp_path / "b", PASS_ID, figures=False))["environment"]["git_commit"]
    assert recorded == head.stdout.strip()


def test_recorded_streams_rebuild_a_replicate_exactly(session: Path, garnet: rlrates.TabularMDP,
                                                     passing: CheckResult) -> None:
    """check.json alone (seed, context, spawn keys, blocks) redraws a replicate and reproduces its error bit for bit."""
    assert passing.run.passes == 1  # a single-pass check: its blocks are known without help from the check
    folder = session / check_folder_name(PASS_ID)
    record = load(folder)
    errors = pd.read_csv(folder / "errors.csv")
    row = errors[(errors["gamma"] == 0.9) & (errors["n"] == 512) & (errors["replicate"] == 5)].iloc[0]
    streams = record["streams"]
    stream = next(s for s in streams["per_gamma"] if s["gamma"] == row["gamma"])
    assert stream["fingerprint"] == garnet.fingerprint and stream["context"] == stream_context(PASS_ID, garnet.fingerprint)
    (block,) = [b for b in streams["blocks"] if (b["gamma"], b["n"]) == (row["gamma"], row["n"])
                and b["start"] <= row["replicate"] < b["stop"]]
    seed = np.random.SeedSequence(streams["master_seed"],
                                  spawn_key=(*stream["spawn_key_prefix"], block["n"], block["start"], block["stop"]))
    kernel = mdp_kernel(garnet)
    batch = draw_block(kernel, block["n"], block["stop"] - block["start"], seed)[int(row["replicate"]) - block["start"]]
    truth = solve_truth(garnet, float(row["gamma"]), "q_pi")
    assert estimate_error(reference.plugin_q_pi(batch, truth.problem()), truth) == row["error"]
    assert len(streams["blocks"]) == len(errors.groupby(["gamma", "n"]))


def test_erroring_check_keeps_its_rows_and_the_failure(session: Path, erroring: CheckResult) -> None:
    folder = session / check_folder_name(ERROR_ID)
    saved = read_check(folder)
    assert len(saved.errors) == len(erroring.table) > 0
    pd.testing.assert_frame_equal(saved.errors, erroring.table[TABLE_COLUMNS].reset_index(drop=True), check_exact=True)
    failure = saved.record["failure"]
    assert erroring.failure is not None
    assert (failure["gamma"], failure["n"], failure["replicate"], failure["kind"]) == (
        erroring.failure.gamma, erroring.failure.n, erroring.failure.replicate, "raised")
    assert failure["message"] == "RuntimeError: buffer overflow at n=512"
    assert "raise RuntimeError" in failure["traceback"]
    assert saved.record["status"] == "error" and saved.record["fits"] == []


def test_no_temporary_files_are_left(session: Path) -> None:
    allowed = {"check.json", "errors.csv", "figure.png", "figure.pdf", "index.md", "index.tex", ".rlrates-files"}
    names = {p.name for p in session.rglob("*") if p.is_file()}
    assert names == allowed


def test_an_interrupted_write_keeps_the_previous_files(monkeypatch: pytest.MonkeyPatch, tables_only: Path,
                                                       failing: CheckResult) -> None:
    before = {name: (tables_only / name).read_bytes() for name in ("errors.csv", "check.json")}

    def full_disk(source: str, target: str) -> None:
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(os, "replace", full_disk)
    with pytest.raises(OSError, match="No space left"):
        write_check(failing, tables_only.parent, PASS_ID, figures=False)
    assert {p.name for p in tables_only.iterdir()} == set(before) | {".rlrates-files"}
    assert {name: (tables_only / name).read_bytes() for name in before} == before


# --------------------------------------------------------------------------- without matplotlib


def test_without_matplotlib_tables_are_written_with_one_line(monkeypatch: pytest.MonkeyPatch, tmp_path: Path,
                                                             passing: CheckResult) -> None:
    monkeypatch.setitem(sys.modules, "matplotlib", None)
    folder = tmp_path / check_folder_name(PASS_ID)
    folder.mkdir()
    report.files.write_text(folder / "figure.png", "stale figure of an older run")  # written by the plugin
    with pytest.warns(ReportWarning) as caught:
        assert write_check(passing, tmp_path, PASS_ID) == folder
    assert [str(w.message) for w in caught] == [report.FIGURES_SKIPPED]
    assert report.FIGURES_SKIPPED == "figures skipped: install pytest-rlrates[plot] (matplotlib) to get them"
    assert sorted(p.name for p in folder.iterdir()) == [".rlrates-files", "check.json", "errors.csv"]  # the stale figure is gone
    with pytest.warns(ReportWarning) as caught:
        written = rebuild(tmp_path)
    assert len(caught) == 1 and sorted(p.name for p in written) == ["index.md", "index.tex"]


# --------------------------------------------------------------------------- corrupt reports


def _edit_json(change: Any) -> Any:
    def edit(folder: Path) -> None:
        record = load(folder)
        change(record)
        (folder / "check.json").write_text(json.dumps(record), encoding="utf-8")
    return edit


def _edit_csv(change: Any) -> Any:
    def edit(folder: Path) -> None:
        path = folder / "errors.csv"
        path.write_text(change(path.read_text(encoding="utf-8")), encoding="utf-8")
    return edit



def _first_row(pattern: str, replacement: str) -> Any:
    """Edit the table's first data row: the regular expression ``pattern`` becomes ``replacement``."""
    return _edit_csv(lambda text: re.sub("\n" + pattern, "\n" + replacement, text, count=1))


def _out_of_range(column: str, value: str, rule: str) -> str:
    return rf"errors\.csv: line 2, column '{column}': '{value}' is out of range; {rule}"

CORRUPTIONS = {
    "truncated json": (truncate_json, r"check\.json: not valid JSON \(line \d+"),
    "json is a list": (lambda f: (f / "check.json").write_text("[]"), r"check\.json: expected a JSON object"),
    "missing claim": (_edit_json(lambda r: r.pop("claim")), r"check\.json: missing key 'claim'"),
    "missing nested key": (_edit_json(lambda r: r["mdp"].pop("name")), r"check\.json: missing key 'mdp\.name'"),
    "missing fit bound": (_edit_json(lambda r: r["fits"][0].pop("low")), r"check\.json: missing key 'fits\[0\]\.low'"),
    "fit bound not a number": (_edit_json(lambda r: r["fits"][0].update(high="0.3")),
                               r"check\.json: fits\[0\]: fit key 'high' must be a number or null, got '0\.3'"),
    "unknown fit verdict": (_edit_json(lambda r: r["fits"][0].update(verdict="fine")),
                            r"check\.json: fits\[0\]: fit key 'verdict' must be one of ok, violated"),
    "missing cell mark": (_edit_json(lambda r: r["cells"][0].pop("fitted")),
                          r"check\.json: missing key 'cells\[0\]\.fitted'"),
    "cell mark not a bool": (_edit_json(lambda r: r["cells"][0].update(fitted=1)),
                             r"check\.json: cells\[0\]\.fitted has the wrong type \(1\)"),
    "slope not a number": (_edit_json(lambda r: r["slopes"][0].update(slope="steep")),
                           r"check\.json: slopes\[0\] needs a number gamma and a number \(or null\) slope"),
    "wrong type": (_edit_json(lambda r: r.update(seed="zero")), r"check\.json: key 'seed' has the wrong type"),
    "unknown status": (_edit_json(lambda r: r.update(status="passed")), r"check\.json: status 'passed' is not one of"),
    "other schema": (_edit_json(lambda r: r.update(schema="rlrates-check/0")), r"check\.json: schema 'rlrates-check/0'"),
    "target word": (_edit_json(lambda r: r.update(target="v_pi")), r"check\.json: target is 'v_pi'; choose one of q_pi"),
    "norm word": (_edit_json(lambda r: r.update(norm="l2")), r"check\.json: norm is 'l2'; choose one of sup, mean"),
    "fired word": (_edit_json(lambda r: r.update(fired=[r"\input{x}"])),
                   r"check\.json: fired\[0\] is '\\\\input\{x\}'; a sub-test is one of rate, floor"),
    "negative seed": (_edit_json(lambda r: r.update(seed=-3)), r"check\.json: seed is -3; the master seed is an integer >= 0"),
    "positive claim": (_edit_json(lambda r: r["claim"].update(n=0.5)),
                       r"check\.json: claim\.n is 0\.5; a claimed n-exponent is a negative number, at least -100"),
    "infinite claim": (lambda f: (f / "check.json").write_text(json.dumps({**load(f), "claim": {**load(f)["claim"], "n": "BIG"}}).replace(
                       '"BIG"', "-1e400")), r"check\.json: claim\.n is -inf; a claimed n-exponent is a negative number"),
    "no claim": (_edit_json(lambda r: r["claim"].update(n=None, horizon=None)),
                 r"check\.json: claim is .*; a claim has an n-, an H- or a C-exponent"),
    "coverage claim text": (_edit_json(lambda r: r["claim"].update(coverage="half")),
                            r"check\.json: claim\.coverage is 'half'; a claimed C-exponent is a number from -100"),
    "fit claims another": (_edit_json(lambda r: r["fits"][0].update(claimed=-1.0)),
                           r"check\.json: fits\[0\]\.claimed is -1\.0; it must be the claim's n-exponent, -0\.5"),
    "fit exponent huge": (_edit_json(lambda r: r["fits"][0].update(exponent=1e308)),
                          r"check\.json: fits\[0\]\.exponent is 1e\+308; an exponent is a number from -100 to 100"),
    "failure without cell": (_edit_json(lambda r: r.update(failure={"kind": "raised", "message": "x"})),
                             r"check\.json: failure\.gamma is None; failure must be null, or an object"),
    "cell discount": (_edit_json(lambda r: r["cells"][0].update(gamma=1.0)),
                      r"check\.json: cells\[0\]\.gamma is 1\.0; a discount lies in \(0, 1\)"),
    "cell n": (_edit_json(lambda r: r["cells"][0].update(n=0)), r"check\.json: cells\[0\]\.n is 0; n is a whole number"),
    "cell mean": (_edit_json(lambda r: r["cells"][0].update(mean=-1.0)),
                  r"check\.json: cells\[0\]\.mean is -1\.0; a mean error is a number from 0 to 1e\+150"),
    "slope discount": (_edit_json(lambda r: r["slopes"][0].update(gamma=0)), r"check\.json: slopes\[0\]\.gamma is 0"),
    "json constant": (lambda f: (f / "check.json").write_text((f / "check.json").read_text().replace(
                      '"seed": ', '"seed": Infinity, "was": ', 1)), r"check\.json: not valid JSON \(Infinity is not a JSON number"),
    "json too deep": (lambda f: (f / "check.json").write_text('{"a": ' + "[" * 100_000 + "]" * 100_000 + "}"),
                      r"check\.json: not valid JSON \(nested too deeply\)"),
    "missing csv": (lambda f: (f / "errors.csv").unlink(), r"errors\.csv: missing"),
    "missing column": (_edit_csv(lambda t: t.replace("error,seconds", "err,seconds", 1)),
                       r"errors\.csv: missing column\(s\) error; expected gamma, H, n, replicate, error, seconds"),
    "not a number": (_edit_csv(lambda t: t.replace("\n0.5,2,128,0,", "\n0.5,2,128,0,oops", 1)),
                     r"errors\.csv: line 2, column 'error': '.*' is not a finite number"),
    "fractional n": (_edit_csv(lambda t: t.replace("\n0.5,2,128,", "\n0.5,2,128.5,", 1)),
                     r"errors\.csv: line 2, column 'n'.*integer"),
    "discount in csv": (_first_row("0.5,2,128,", "1.5,2,128,"), _out_of_range("gamma", r"1\.5", r"a discount lies in \(0, 1\)")),
    "horizon in csv": (_first_row("0.5,2,128,", "0.5,3,128,"), _out_of_range("H", "3", "H is the effective horizon")),
    "n zero in csv": (_first_row("0.5,2,128,", "0.5,2,0,"), _out_of_range("n", "0", "n is a whole number")),
    "negative replicate": (_first_row("0.5,2,128,0,", "0.5,2,128,-1,"), _out_of_range("replicate", "-1", "a replicate")),
    "huge error": (_first_row(r"0.5,2,128,0,[^,]*,", "0.5,2,128,0,1e308,"),
                   _out_of_range("error", "1e308", r"an error is a number from 0 to 1e\+150")),
    "negative time": (_first_row(r"(0.5,2,128,0,[^,]*),", r"\1,-"), _out_of_range("seconds", "-.*", "a time in seconds is >= 0")),
    "edited value": (_edit_csv(lambda t: t.replace("\n0.5,2,128,0,0", "\n0.5,2,128,0,1", 1)),
                     r"errors\.csv: contents differ from the sha256 recorded in .*check\.json"),
}


@pytest.mark.parametrize("corrupt, pattern", CORRUPTIONS.values(), ids=CORRUPTIONS.keys())
def test_corrupt_reports_raise_a_report_error_naming_the_file(tables_only: Path, corrupt: Any, pattern: str) -> None:
    corrupt(tables_only)
    with pytest.raises(ReportError, match=pattern) as raised:
        rebuild(tables_only.parent)
    assert str(tables_only) in str(raised.value)
    assert isinstance(raised.value, ValueError)
    assert not (tables_only.parent / "index.md").exists()  # nothing written from a corrupt report


def test_a_clean_copy_of_the_csv_reads_back(tables_only: Path) -> None:
    """The control for the corruption cases: the untouched folder reads without complaint."""
    assert len(read_check(tables_only).errors) > 0


# --------------------------------------------------------------------------- whose files (common practice: a tool
# only removes what it can show it wrote, and never follows a symbolic link out of its directory)


def test_a_hand_written_file_is_never_overwritten(tmp_path: Path, passing: CheckResult) -> None:
    (tmp_path / "index.md").write_text("# my own notes\n")
    folder = tmp_path / check_folder_name(PASS_ID)
    folder.mkdir()
    (folder / "check.json").write_text("{}")  # someone's file where a check would go
    with pytest.raises(report.files.ForeignFiles, match=r"check\.json.*refusing to overwrite check\.json"):
        write_check(passing, tmp_path, PASS_ID, figures=False)
    assert (folder / "check.json").read_text() == "{}"
    with pytest.raises(report.files.ForeignFiles, match=r"index\.md.*refusing to overwrite index\.md"):
        report.files.write_text(tmp_path / "index.md", "replaced")
    assert (tmp_path / "index.md").read_text() == "# my own notes\n"


def test_a_symlinked_check_folder_is_not_written_through(tmp_path: Path, passing: CheckResult) -> None:
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    (tmp_path / "report").mkdir()
    (tmp_path / "report" / check_folder_name(PASS_ID)).symlink_to(elsewhere, target_is_directory=True)
    with pytest.raises(report.files.ForeignFiles, match="symbolic link"):
        write_check(passing, tmp_path / "report", PASS_ID, figures=False)
    assert list(elsewhere.iterdir()) == []


def test_clear_own_removes_only_what_the_plugin_wrote(tmp_path: Path, passing: CheckResult) -> None:
    write_check(passing, tmp_path, PASS_ID, figures=False)
    rlrates.report.write_index(tmp_path)
    removed = report.files.clear_own(tmp_path)
    assert sorted(p.name for p in removed) == ["check.json", "errors.csv", "index.md", "index.tex"]
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize("intruder", ["top-level file", "file in a check folder", "folder with a check.json",
                                      "hand-written index", "symlink"])
def test_clear_own_refuses_a_directory_with_foreign_files_and_removes_nothing(tmp_path: Path, passing: CheckResult,
                                                                              intruder: str) -> None:
    folder = write_check(passing, tmp_path, PASS_ID, figures=False)
    outside = tmp_path.parent / f"{tmp_path.name}-outside"
    outside.mkdir(exist_ok=True)
    (outside / "keep.txt").write_text("mine")
    foreign = {
        "top-level file": tmp_path / "NOTES.txt",
        "file in a check folder": folder / "NOTES.txt",
        "folder with a check.json": tmp_path / "api" / "check.json",
        "hand-written index": tmp_path / "index.md",
        "symlink": tmp_path / "linked",
    }[intruder]
    if intruder == "symlink":
        foreign.symlink_to(outside, target_is_directory=True)
    else:
        foreign.parent.mkdir(exist_ok=True)
        foreign.write_text("a user's file")
    shown = foreign.parent if intruder == "folder with a check.json" else foreign
    before = sorted(p for p in tmp_path.rglob("*"))
    with pytest.raises(report.files.ForeignFiles) as raised:
        report.files.clear_own(tmp_path)
    assert raised.value.paths == [shown] and str(shown) in str(raised.value)
    assert sorted(p for p in tmp_path.rglob("*")) == before
    assert (outside / "keep.txt").read_text() == "mine"



# --------------------------------------------------------------------------- figures are drawn after the tests, not in them

LATE_FIGURES = '''
import os
from pathlib import Path

import pytest
import rlrates as rl
from rlrates import reference


def _folder(name):
    (folder,) = [p.parent for p in Path("out").glob("*/check.json") if name in p.parent.name]
    return folder


@pytest.mark.rlrates(n=-0.5)
def test_first(rlrates):
    rlrates(reference.plugin_q_pi, rl.chain(8))


def test_second_sees_no_figure_yet():
    folder = _folder("test_first")
    assert (folder / "errors.csv").is_file() and not (folder / "figure.png").exists()
'''


def test_a_check_writes_its_figure_after_the_tests_not_while_its_test_runs(pytester: pytest.Pytester) -> None:
    """Issue 15: the figure (about 0.5 s) is off each test's critical path; it is there when the session ends."""
    pytester.makepyfile(test_inner=LATE_FIGURES)
    result = pytester.runpytest_subprocess("--rlrates-report=out", "-p", "no:cacheprovider")
    result.assert_outcomes(passed=2)
    (folder,) = [p.parent for p in (pytester.path / "out").glob("*/check.json")]
    assert (folder / "figure.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert (folder / "figure.pdf").read_bytes()[:5] == b"%PDF-"


def test_a_figure_that_cannot_be_drawn_at_the_end_is_a_warning_naming_the_check(pytester: pytest.Pytester) -> None:
    """ENOSPC injected into the figure moves only (common practice for testing full disks without a tmpfs)."""
    pytester.makepyfile(test_inner=LATE_FIGURES.replace("def test_second_sees_no_figure_yet():", '''def test_second_fills_the_disk():
    import errno
    replace = os.replace

    def no_space(source, target):
        if os.path.basename(target).startswith("figure."):
            raise OSError(errno.ENOSPC, "No space left on device", os.fspath(target))
        return replace(source, target)

    os.replace = no_space  # left in place: the disk stays full for the figures at the end


def test_third_sees_no_figure_yet():'''))
    result = pytester.runpytest_subprocess("--rlrates-report=out", "-p", "no:cacheprovider")
    result.assert_outcomes(passed=3, warnings=1)
    assert not re.search("Traceback|INTERNALERROR", result.stdout.str() + result.stderr.str())
    warning = ("*ReportWarning: rlrates: the figure of test_inner.py::test_first was not drawn in *out*test_first*: "
               "No space left on device; the test keeps its verdict")
    result.stdout.fnmatch_lines([warning, "rlrates report: 1 check(s) under *out (index.md, index.tex)",
                                 "rlrates report: 1 figure(s) missing (could not be drawn): test_inner.py::test_first",
                                 "*rate checks (rlrates), budget ci*"])
    (folder,) = [p.parent for p in (pytester.path / "out").glob("*/check.json")]
    assert sorted(p.name for p in folder.iterdir()) == [".rlrates-files", "check.json", "errors.csv"]


def test_an_interrupted_session_leaves_its_figures_to_the_report_command(pytester: pytest.Pytester) -> None:
    """Ctrl-C ends the session without half a minute of drawing; the summary says how to draw them later."""
    pytester.makepyfile(test_inner=LATE_FIGURES.replace("def test_second_sees_no_figure_yet():",
                                                        "def test_second_is_interrupted():\n    raise KeyboardInterrupt\n\n\n"
                                                        "def test_third_sees_no_figure_yet():"))
    result = pytester.runpytest_subprocess("--rlrates-report=out", "-p", "no:cacheprovider")
    assert result.ret == pytest.ExitCode.INTERRUPTED
    result.stdout.fnmatch_lines(["rlrates report: figures not drawn (the session was interrupted); "
                                 "draw them with python -m rlrates report *out"])
    (folder,) = [p.parent for p in (pytester.path / "out").glob("*/check.json")]
    assert not (folder / "figure.png").exists()
    subprocess.run([sys.executable, "-m", "rlrates", "report", str(pytester.path / "out")], check=True,
                   capture_output=True)
    assert (folder / "figure.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
