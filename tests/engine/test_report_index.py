"""Tests of a report directory's session index (index.md, index.tex), of rebuilding it, and of the command line.

The report directories come from tests/engine/report_checks.py and conftest.py.
"""

from __future__ import annotations

import re
import shutil
import subprocess
import sys
from pathlib import Path

import pytest
from report_checks import ERROR_ID, FAIL_ID, PASS_ID, truncate_json

from rlrates import CheckResult
from rlrates.__main__ import main
from rlrates.report import ReportError, folder_name, rebuild, write_check, write_index
from rlrates.report.index import index_latex, index_markdown, latex_escape
from rlrates.result import Fit


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
        "fits": [Fit("n", exponent=-0.004, se=0.02, low=-0.0611, high=0.0349, low_level=0.9875, high_level=0.8,
                     claimed=-0.5, tolerance=0.1, detectable=-0.1, verdict="violated").to_dict()],
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
    truncate_json(tables_only)
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
