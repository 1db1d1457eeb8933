"""Tests of report folders: raw tables, provenance, figures, the session index and rebuilding.

Check results come from real quick-profile checks on a 10-state Garnet MDP (well
under a second each), computed once per module; every test that edits files
works on its own copy of the report.
"""

from __future__ import annotations

import importlib
import json
import os
import re
import shutil
import subprocess
import sys
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest

import rlrates
from rlrates import reference, report
from rlrates.__main__ import main
from rlrates import CheckResult
from rlrates.figures import build_figure, cell_means, horizon_cells, n_slopes
from rlrates.report import ReportError, ReportWarning, folder_name, read_check, rebuild, write_check, write_index
from rlrates.report_index import index_latex, index_markdown, latex_escape
from rlrates.sampling import draw_block, mdp_kernel
from rlrates.targets import estimate_error, solve_truth

PASS_ID = "tests/test_rates.py::test_plugin[garnet_10]"
FAIL_ID = "tests/test_rates.py::test_stale_buffer[garnet_10]"
ERROR_ID = "tests/test_rates.py::test_flaky[garnet_10]"
CLAIM = rlrates.Claim(n=-0.5, horizon=2.0)
TABLE_COLUMNS = ["gamma", "H", "n", "replicate", "error", "seconds"]
REPO = Path(__file__).resolve().parents[1]


def stale_buffer(batch: Any, problem: Any) -> np.ndarray:
    """A plug-in evaluator that keeps only the first 32 samples: its error stops falling."""
    S, A = problem.states, problem.actions
    kept = batch.next_states[:, :, :32]
    model = np.zeros((S, A, S))
    np.add.at(model, (np.arange(S)[:, None, None], np.arange(A)[None, :, None], kept), 1.0 / kept.shape[2])
    return reference.evaluate_arrays(model, problem.rewards, problem.gamma, problem.policy)


def flaky(batch: Any, problem: Any) -> np.ndarray:
    """Correct until n = 512 at the second discount, where it raises."""
    if batch.n >= 512 and problem.gamma > 0.6:
        raise RuntimeError(f"buffer overflow at n={batch.n}")
    return reference.plugin_q_pi(batch, problem)


@pytest.fixture(scope="module")
def garnet() -> rlrates.TabularMDP:
    return rlrates.garnet(10, 2, 3, seed=1)


@pytest.fixture(scope="module")
def passing(garnet: rlrates.TabularMDP) -> CheckResult:
    result = rlrates.check(reference.plugin_q_pi, garnet, CLAIM, profile="quick", seed=3, context=PASS_ID)
    assert result.status == "pass", result.message
    return result


@pytest.fixture(scope="module")
def failing(garnet: rlrates.TabularMDP) -> CheckResult:
    result = rlrates.check(stale_buffer, garnet, CLAIM, profile="quick", seed=3, context=FAIL_ID)
    assert result.status == "fail", result.message
    return result


@pytest.fixture(scope="module")
def erroring(garnet: rlrates.TabularMDP) -> CheckResult:
    result = rlrates.check(flaky, garnet, CLAIM, profile="quick", seed=3, context=ERROR_ID)
    assert result.status == "error", result.message
    return result


@pytest.fixture(scope="module")
def session(tmp_path_factory: pytest.TempPathFactory, passing: CheckResult, failing: CheckResult,
            erroring: CheckResult) -> Path:
    """A report directory as a session leaves it: three check folders with figures, then the index."""
    root = tmp_path_factory.mktemp("report")
    for result, test_id in ((failing, FAIL_ID), (passing, PASS_ID), (erroring, ERROR_ID)):
        write_check(result, root, test_id, extra={"worker": "gw0"})
    write_index(root)
    return root


@pytest.fixture()
def copy(session: Path, tmp_path: Path) -> Path:
    return Path(shutil.copytree(session, tmp_path / "report"))


@pytest.fixture()
def tables_only(tmp_path: Path, passing: CheckResult) -> Path:
    """One check folder without figures (cheap to corrupt)."""
    return write_check(passing, tmp_path / "report", PASS_ID, figures=False)


def load(folder: Path) -> dict[str, Any]:
    record: dict[str, Any] = json.loads((folder / "check.json").read_text(encoding="utf-8"))
    return record


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
    folder = session / folder_name(PASS_ID)
    assert sorted(p.name for p in folder.iterdir()) == ["check.json", "errors.csv", "figure.pdf", "figure.png"]
    assert (folder / "figure.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert (folder / "figure.pdf").read_bytes()[:5] == b"%PDF-"


def test_errors_csv_is_the_raw_table_repr_exact(session: Path, passing: CheckResult) -> None:
    saved = pd.read_csv(session / folder_name(PASS_ID) / "errors.csv")
    assert list(saved.columns) == TABLE_COLUMNS
    expected = passing.table[TABLE_COLUMNS].sort_values(["gamma", "n", "replicate"], ignore_index=True)
    pd.testing.assert_frame_equal(saved, expected, check_exact=True, check_dtype=False)
    assert (saved["error"].to_numpy() == expected["error"].to_numpy()).all()


def test_check_json_matches_the_result(session: Path, passing: CheckResult) -> None:
    record = load(session / folder_name(PASS_ID))
    assert record["schema"] == report.SCHEMA
    assert record["test_id"] == PASS_ID
    assert (record["status"], record["target"], record["norm"]) == ("pass", "q_pi", "sup")
    assert record["fired"] == passing.fired and record["reasons"] == passing.reasons
    assert record["notes"] == passing.notes
    assert (record["claim"]["n"], record["claim"]["horizon"]) == (-0.5, 2.0)
    assert record["seed"] == 3 and record["streams"]["master_seed"] == 3
    assert record["mdp"]["name"] == passing.mdp_name
    assert record["mdp"]["metadata"] == passing.mdp_metadata
    assert record["mdp"]["fingerprints"] == {repr(g): f for g, f in passing.fingerprints.items()}
    assert record["profile"]["name"] == "quick"
    assert record["profile"]["n_grid"] == list(passing.profile.n_grid)
    assert record["profile"]["alpha"] == passing.profile.alpha
    assert set(record["profile"]) == set(passing.profile.__dataclass_fields__)
    assert record["fits"] == passing.fits.to_dict("records")  # floats survive JSON exactly
    assert record["run"]["estimator_calls"] == len(passing.table) == record["data"]["rows"]
    assert record["failure"] is None
    assert record["extra"] == {"worker": "gw0"}
    assert record["reproducer"] == passing.reproducer and record["message"] == passing.message


def test_provenance_versions_platform_and_timestamps(session: Path, passing: CheckResult) -> None:
    record = load(session / folder_name(PASS_ID))
    versions = record["environment"]["versions"]
    assert versions["rlrates"] == rlrates.__version__
    imported = {name: importlib.import_module(name).__version__ for name in ("numpy", "scipy", "pandas", "pytest", "matplotlib")}
    assert {name: versions[name] for name in imported} == imported
    assert record["environment"]["platform"] and versions["python"] == ".".join(map(str, sys.version_info[:3]))
    started = datetime.fromisoformat(record["run"]["started"])
    finished = datetime.fromisoformat(record["run"]["finished"])
    assert started.utcoffset() == finished.utcoffset() == timezone.utc.utcoffset(None)
    assert abs((finished - started).total_seconds() - passing.elapsed) < 1e-5
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
    assert passing.passes == 1  # a single-pass check: its blocks are known without help from the check
    folder = session / folder_name(PASS_ID)
    record = load(folder)
    errors = pd.read_csv(folder / "errors.csv")
    row = errors[(errors["gamma"] == 0.9) & (errors["n"] == 512) & (errors["replicate"] == 5)].iloc[0]
    streams = record["streams"]
    stream = next(s for s in streams["per_gamma"] if s["gamma"] == row["gamma"])
    assert stream["fingerprint"] == garnet.fingerprint and stream["context"] == f"{PASS_ID}|{garnet.fingerprint}"
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
    folder = session / folder_name(ERROR_ID)
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
    allowed = {"check.json", "errors.csv", "figure.png", "figure.pdf", "index.md", "index.tex"}
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
    assert {p.name for p in tables_only.iterdir()} == set(before)
    assert {name: (tables_only / name).read_bytes() for name in before} == before


# --------------------------------------------------------------------------- index


def test_index_has_one_sorted_row_per_check_with_links(session: Path) -> None:
    text = (session / "index.md").read_text(encoding="utf-8")
    rows = [line for line in text.splitlines() if line.startswith("| `")]
    assert [re.match(r"\| `([^`]*)`", r).group(1) for r in rows] == sorted([PASS_ID, FAIL_ID, ERROR_ID])  # type: ignore[union-attr]
    by_id = dict(zip(sorted([PASS_ID, FAIL_ID, ERROR_ID]), rows))
    assert "| pass |" in by_id[PASS_ID] and "| fail (" in by_id[FAIL_ID] and "| error |" in by_id[ERROR_ID]
    assert "not fitted (estimator error)" in by_id[ERROR_ID]
    assert re.search(r"\| [+-]\d\.\d\d \[[+-]\d\.\d\d, [+-]\d\.\d\d\] \|", by_id[PASS_ID])
    for link in re.findall(r"\]\(([^)]+)\)", text):
        assert (session / link).is_file(), link
    assert "3 check(s): 1 pass, 1 fail, 1 error" in text


def test_latex_index_is_an_escaped_booktabs_tabular(session: Path) -> None:
    text = (session / "index.tex").read_text(encoding="utf-8")
    body = [line for line in text.splitlines() if not line.startswith("%")]
    assert body[0].startswith(r"\begin{tabular}") and body[-1] == r"\end{tabular}"
    assert [line for line in body if line in (r"\toprule", r"\midrule", r"\bottomrule")] == [r"\toprule", r"\midrule", r"\bottomrule"]
    assert "documentclass" not in text and r"\begin{document}" not in text
    rows = body[body.index(r"\midrule") + 1 : body.index(r"\bottomrule")]
    assert len(rows) == 3 and all(row.endswith(r" \\") and row.count(" & ") == 6 for row in rows)
    assert r"\texttt{tests/test\_rates.py::test\_plugin[garnet\_10]}" in text
    assert not re.search(r"(?<!\\)_", "\n".join(body).replace("$", ""))  # every underscore escaped


def test_latex_escape_covers_the_special_characters() -> None:
    assert latex_escape(r"a_b#c%d&e$f{g}h~i^j\k") == (
        r"a\_b\#c\%d\&e\$f\{g\}h\textasciitilde{}i\textasciicircum{}j\textbackslash{}k"
    )


def test_index_rows_of_a_hand_made_record() -> None:
    record = {
        "test_id": "t::a_b", "target": "q_pi", "mdp": {"name": "ring-S8"}, "status": "fail", "fired": ["rate", "floor"],
        "claim": {"n": -0.5, "horizon": None},
        "fits": [{"factor": "n", "exponent": -0.004, "low": -0.0611, "high": 0.0349, "claimed": -0.5, "verdict": "violated"}],
    }
    md_row = index_markdown([("t-a_b-00000000", record)]).splitlines()[-1]
    assert md_row == (
        "| `t::a_b` | q_pi | ring-S8 | +0.00 [-0.06, +0.03] | not claimed | n^-0.5 | fail (rate, floor) | "
        "[figure](t-a_b-00000000/figure.png) · [pdf](t-a_b-00000000/figure.pdf) · [data](t-a_b-00000000/check.json) |"
    )
    tex_row = index_latex([("t-a_b-00000000", record)]).splitlines()[-3]
    assert tex_row == (
        r"\texttt{t::a\_b} & $Q^{\pi}$ & ring-S8 & $+0.00$ [$-0.06$, $+0.03$] & --- & $n^{-0.5}$ & fail (rate, floor) \\"
    )


def test_markdown_escapes_the_cell_separator(tmp_path: Path, passing: CheckResult) -> None:
    write_check(passing, tmp_path, "tests/t.py::test_x[a|b]", figures=False)
    write_index(tmp_path)
    row = next(line for line in (tmp_path / "index.md").read_text(encoding="utf-8").splitlines() if "test_x" in line)
    assert "`tests/t.py::test_x[a\\|b]`" in row
    assert len(re.split(r"(?<!\\)\|", row)) == 10  # 8 cells between 9 separators


# --------------------------------------------------------------------------- rebuild


def test_rebuild_reproduces_index_and_figures(copy: Path) -> None:
    index = {name: (copy / name).read_bytes() for name in ("index.md", "index.tex")}
    figures = {p.relative_to(copy): p.read_bytes() for p in copy.rglob("figure.*")}
    assert len(figures) == 6
    for path in [*copy.glob("index.*"), *copy.rglob("figure.*")]:
        path.unlink()
    written = rebuild(copy)
    assert sorted(p.relative_to(copy) for p in written) == sorted([*figures, Path("index.md"), Path("index.tex")])
    assert {name: (copy / name).read_bytes() for name in index} == index
    # drawn from the saved CSV and JSON alone, so the same bytes again
    assert {p.relative_to(copy): p.read_bytes() for p in copy.rglob("figure.*")} == figures


def test_rebuild_of_an_empty_directory_is_an_error(tmp_path: Path) -> None:
    assert write_index(tmp_path) == []
    with pytest.raises(ReportError, match="no check folders"):
        rebuild(tmp_path)
    with pytest.raises(ReportError, match="not a directory"):
        rebuild(tmp_path / "missing")


# --------------------------------------------------------------------------- without matplotlib


def test_without_matplotlib_tables_are_written_with_one_line(monkeypatch: pytest.MonkeyPatch, tmp_path: Path,
                                                             passing: CheckResult) -> None:
    monkeypatch.setitem(sys.modules, "matplotlib", None)
    folder = tmp_path / folder_name(PASS_ID)
    folder.mkdir()
    (folder / "figure.png").write_bytes(b"stale figure of an older run")
    with pytest.warns(ReportWarning) as caught:
        assert write_check(passing, tmp_path, PASS_ID) == folder
    assert [str(w.message) for w in caught] == [report.FIGURES_SKIPPED]
    assert report.FIGURES_SKIPPED == "figures skipped: install pytest-rlrates[plot] (matplotlib) to get them"
    assert sorted(p.name for p in folder.iterdir()) == ["check.json", "errors.csv"]  # the stale figure is gone
    with pytest.warns(ReportWarning) as caught:
        written = rebuild(tmp_path)
    assert len(caught) == 1 and sorted(p.name for p in written) == ["index.md", "index.tex"]


# --------------------------------------------------------------------------- corrupt reports


def _truncate_json(folder: Path) -> None:
    path = folder / "check.json"
    path.write_text(path.read_text(encoding="utf-8")[:200], encoding="utf-8")


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


CORRUPTIONS = {
    "truncated json": (_truncate_json, r"check\.json: not valid JSON \(line \d+"),
    "json is a list": (lambda f: (f / "check.json").write_text("[]"), r"check\.json: expected a JSON object"),
    "missing claim": (_edit_json(lambda r: r.pop("claim")), r"check\.json: missing key 'claim'"),
    "missing nested key": (_edit_json(lambda r: r["profile"].pop("min_n_per_horizon")),
                           r"check\.json: missing key 'profile\.min_n_per_horizon'"),
    "missing fit bound": (_edit_json(lambda r: r["fits"][0].pop("low")), r"check\.json: missing key 'fits\[0\]\.low'"),
    "wrong type": (_edit_json(lambda r: r.update(seed="zero")), r"check\.json: key 'seed' has the wrong type"),
    "unknown status": (_edit_json(lambda r: r.update(status="passed")), r"check\.json: status 'passed' is not one of"),
    "other schema": (_edit_json(lambda r: r.update(schema="rlrates-check/0")), r"check\.json: schema 'rlrates-check/0'"),
    "missing csv": (lambda f: (f / "errors.csv").unlink(), r"errors\.csv: missing"),
    "missing column": (_edit_csv(lambda t: t.replace("error,seconds", "err,seconds", 1)),
                       r"errors\.csv: missing column\(s\) error; expected gamma, H, n, replicate, error, seconds"),
    "not a number": (_edit_csv(lambda t: t.replace("\n0.5,2,128,0,", "\n0.5,2,128,0,oops", 1)),
                     r"errors\.csv: line 2, column 'error': '.*' is not a finite number"),
    "fractional n": (_edit_csv(lambda t: t.replace("\n0.5,2,128,", "\n0.5,2,128.5,", 1)),
                     r"errors\.csv: line 2, column 'n'.*integer"),
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


# --------------------------------------------------------------------------- figures


def test_figure_data_are_exact_on_a_power_law() -> None:
    n = np.repeat([64, 128, 256, 512], 2)
    table = pd.concat([
        pd.DataFrame({"gamma": g, "H": 1 / (1 - g), "n": n, "replicate": np.tile([0, 1], 4),
                      "error": 3.0 * n ** -0.5 * (1 / (1 - g)) ** 1.5, "seconds": 0.0})
        for g in (0.5, 0.9)
    ], ignore_index=True)
    cells = cell_means(table)
    slopes = n_slopes(cells, min_n_per_horizon=8.0)  # gamma 0.9: n=64 < 80 is left out
    np.testing.assert_allclose(slopes.to_numpy(), [-0.5, -0.5], rtol=1e-12)
    at = horizon_cells(cells[cells["n"] < 512].iloc[:-1])  # drop (0.9, 256): 128 is the largest common n
    assert at["n"].unique().tolist() == [128] and at["gamma"].tolist() == [0.5, 0.9]


def test_figure_is_readable(session: Path) -> None:
    from matplotlib.lines import Line2D
    from matplotlib.text import Text

    saved = read_check(session / folder_name(FAIL_ID))
    figure = build_figure(saved.errors, saved.record)
    assert figure is not None
    figure.canvas.draw()
    renderer = figure.canvas.get_renderer()  # type: ignore[attr-defined]
    assert tuple(figure.get_size_inches()) == (7.0, 2.8)
    texts = [t for t in figure.findobj(Text) if isinstance(t, Text) and t.get_text() and t.get_visible()]
    assert len(texts) > 20 and min(float(t.get_fontsize()) for t in texts) >= 8
    (legend,) = figure.legends
    labels = [t.get_text() for t in legend.get_texts()]
    slopes = n_slopes(cell_means(saved.errors), 8.0)
    for gamma, slope in slopes.items():
        assert any(f"={gamma:g}," in label and f"{abs(slope):.2f}" in label for label in labels)
    assert any("claimed $n^{-0.5}$" in label for label in labels)
    assert any("claimed $H^{2}$" in label for label in labels)
    discounts = [h for h in legend.legend_handles if isinstance(h, Line2D) and h.get_marker() not in ("None", "")
                 and h.get_linestyle() != "None"]
    assert len(discounts) == len({h.get_color() for h in discounts}) == len({h.get_marker() for h in discounts}) == 3
    boxes = [ax.get_tightbbox(renderer) for ax in figure.axes] + [legend.get_window_extent(renderer)]
    for i, first in enumerate(boxes):
        for second in boxes[i + 1:]:
            assert first is not None and second is not None and not first.overlaps(second), "panels and legend overlap"
    assert all(box is not None and box.x0 >= -1 and box.x1 <= figure.bbox.width + 1 for box in boxes), "cut off"


# --------------------------------------------------------------------------- command line


def test_cli_rebuilds_and_prints_what_it_wrote(session: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    folder = shutil.copytree(session / folder_name(ERROR_ID), tmp_path / "one" / folder_name(ERROR_ID),
                             ignore=shutil.ignore_patterns("figure.*"))
    assert main(["report", str(tmp_path / "one")]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out == [f"wrote {folder / 'figure.png'}", f"wrote {folder / 'figure.pdf'}",
                   f"wrote {tmp_path / 'one' / 'index.md'}", f"wrote {tmp_path / 'one' / 'index.tex'}"]
    assert all((folder / name).is_file() for name in ("figure.png", "figure.pdf"))


def test_cli_reports_a_corrupt_folder_in_one_line(tables_only: Path) -> None:
    _truncate_json(tables_only)
    done = subprocess.run([sys.executable, "-m", "rlrates", "report", str(tables_only.parent)],
                          capture_output=True, text=True, timeout=120)
    assert done.returncode == 2
    assert done.stdout == ""
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in done.stderr
    assert lines[0].startswith("rlrates report: error: ") and str(tables_only / "check.json") in lines[0]


def test_cli_missing_directory(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["report", str(tmp_path / "nowhere")]) == 2
    assert capsys.readouterr().err.strip() == f"rlrates report: error: {tmp_path / 'nowhere'}: not a directory"
