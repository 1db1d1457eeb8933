"""Tests of a report directory's session index (index.md, index.tex), of rebuilding it, and of the command line.

The report directories come from tests/engine/report_checks.py and conftest.py.
"""

from __future__ import annotations

import re
import shutil
import subprocess
import sys
from pathlib import Path
from typing import Any

import pytest
from report_checks import ERROR_ID, FAIL_ID, NEEDS_PDFLATEX, PASS_ID, assert_paper_fits, truncate_json

from rlrates import CheckResult
from rlrates.__main__ import main
from rlrates.report import ReportError, check_folder_name, rebuild, write_check, write_index
from rlrates.report.index import ROWS_PER_FLOAT, index_latex, index_markdown, latex_escape
from rlrates.result import Fit


# --------------------------------------------------------------------------- index


def test_index_has_one_sorted_row_per_check_with_links(session: Path) -> None:
    text = (session / "index.md").read_text(encoding="utf-8")
    rows = [line for line in text.splitlines() if line.startswith("| test_")]
    ids = [re.match(r"\| [^|]+ \| `([^`]*)`", r).group(1) for r in rows]  # type: ignore[union-attr]
    assert ids == sorted([PASS_ID, FAIL_ID, ERROR_ID])
    by_id = dict(zip(ids, rows))
    assert by_id[PASS_ID].startswith("| test_plugin[garnet_10] | `")  # the short label: the function, no path
    assert "| pass |" in by_id[PASS_ID] and "| fail (" in by_id[FAIL_ID] and "| error |" in by_id[ERROR_ID]
    assert "not fitted (estimator error)" in by_id[ERROR_ID]
    assert re.search(r"\| holds: n-exponent [+-]\d\.\d\d \[[+-]\d\.\d\d at 99\.96%, [+-]\d\.\d\d at 98\.75%\], "
                     r"tested limit -0\.42 \(claim -0\.5 \+ 0\.08\), would catch [+-]\d\.\d\d or above \(95%\)", by_id[PASS_ID])
    for link in re.findall(r"\]\(([^)]+)\)", text):
        assert (session / link).is_file(), link
    assert "3 check(s): 1 pass, 1 fail, 1 error" in text


def _floats(text: str) -> list[list[str]]:
    """The body lines of each float of an index.tex."""
    return [block.split("\n") for block in re.findall(r"\\begin\{table\*?\}\[tbp\]\n(.*?)\n\\end\{table", text, re.S)]


def test_latex_index_is_a_captioned_one_column_booktabs_table(session: Path) -> None:
    text = (session / "index.tex").read_text(encoding="utf-8")
    (body,) = _floats(text)
    assert body[1].startswith(r"\caption{Rate checks (3 check(s): 1 pass, 1 fail, 1 error)")
    # the n and H bounds are at different levels here (alpha split over factors), so the caption names none
    assert "lower (fire-side) and upper (pass-side) bounds at the levels given" in body[1]
    assert body[2] == r"\label{tab:rlrates}" and body[3].startswith(r"\begin{tabular}{@{}")
    assert [line for line in body if line in (r"\toprule", r"\midrule", r"\bottomrule")] == [r"\toprule", r"\midrule", r"\bottomrule"]
    assert body[body.index(r"\toprule") + 1] == r"Check & MDP & $n$-exponent & $H$-exponent & Verdict \\"
    assert "documentclass" not in text and r"\begin{document}" not in text
    rows = body[body.index(r"\midrule") + 1 : body.index(r"\bottomrule")]
    assert len(rows) == 3 and all(row.endswith(r" \\") and row.count(" & ") == 4 for row in rows)
    assert rows[1].startswith(r"test\_\allowbreak{}plugin\allowbreak{}[garnet\_\allowbreak{}10] & ")  # the label
    assert r"\mbox{limit $-0.42$}" in rows[1] and r"\mbox{limit ${+}2.30$}" in rows[1]
    assert "tests/test" not in "\n".join(rows)  # the long id is not in the table ...
    assert f"%   test_plugin[garnet_10]: {PASS_ID}" in text  # ... but kept in a comment
    assert not re.search(r"(?<!\\)_", "\n".join(body).replace("$", ""))  # every underscore escaped


def test_latex_escape_covers_the_special_characters() -> None:
    assert latex_escape(r"a_b#c%d&e$f{g}h~i^j\k") == (
        r"a\_b\#c\%d\&e\$f\{g\}h\textasciitilde{}i\textasciicircum{}j\textbackslash{}k"
    )


def hand_made(test_id: str = "t::a_b", label: str | None = None, mdp: str = "ring-S8", status: str = "fail",
              expected: str = "pass") -> dict[str, Any]:
    record = {
        "test_id": test_id, "target": "q_pi", "mdp": {"name": mdp}, "status": status,
        "fired": ["rate", "floor"] if status == "fail" else [], "claim": {"n": -0.5, "horizon": None},
        "expected": {"status": expected, "strict": expected == "fail", "reason": ""},
        "fits": [Fit("n", exponent=-0.004, se=0.02, low=-0.0611, high=0.0349, low_level=0.9875, high_level=0.8,
                     claimed=-0.5, tolerance=0.1, detectable=-0.1, verdict="violated").to_dict()],
    }
    if label is not None:
        record["label"] = label
    return record


def test_index_rows_of_a_hand_made_record() -> None:
    md_row = index_markdown([("t-a_b-00000000", hand_made())]).splitlines()[-1]
    assert md_row == (
        "| a_b | `t::a_b` | q_pi | ring-S8 | fails: n-exponent +0.00 [-0.06 at 98.75%, +0.03 at 80%], "
        "tested limit -0.4 (claim -0.5 + 0.1), would catch -0.10 or above (95%) | "
        "not claimed | n^-0.5 | fail (rate, floor) | "
        "[figure](t-a_b-00000000/figure.png) · [pdf](t-a_b-00000000/figure.pdf) · [data](t-a_b-00000000/check.json) |"
    )
    tex_row = index_latex([("t-a_b-00000000", hand_made())]).splitlines()[-4]
    assert tex_row == (
        r"a\_\allowbreak{}b & ring-\allowbreak{}S8 & ${+}0.00$ \mbox{[$-0.06$,}\allowbreak\hspace{0.17em}\mbox{${+}0.03$]}\newline "
        r"\mbox{limit $-0.40$} & fail (rate, floor) \\"
    )


def test_strict_xfail_reads_as_an_expected_failure() -> None:
    entries = [("a", hand_made("t::x", expected="fail")), ("b", hand_made("t::y", status="pass", expected="fail"))]
    assert "| expected failure (rate, floor) |" in index_markdown(entries)
    assert "| pass, but expected to fail |" in index_markdown(entries)
    assert r"& expected failure (rate, floor) \\" in index_latex(entries)


def test_levels_go_into_the_cells_when_rows_differ_in_them() -> None:
    other = hand_made("t::z")
    other["fits"][0]["low_level"] = 0.995
    text = index_latex([("a", hand_made()), ("b", other)])
    assert r"\mbox{at 98.75\%/}\allowbreak\mbox{80\%}" in text and r"\mbox{at 99.5\%/}\allowbreak\mbox{80\%}" in text
    assert "bounds at the levels given" in text


def test_columns_can_be_chosen_and_a_page_wide_table_asked_for() -> None:
    text = index_latex([("a", hand_made(label="plug-in"))], columns=["check", "claim", "verdict"], span="page")
    assert r"\begin{table*}[tbp]" in text and r"Check & Claim & Verdict \\" in text
    assert r"plug-\allowbreak{}in & $n^{-0.5}$ & fail (rate, floor) \\" in text
    with pytest.raises(ValueError, match="index columns 'seconds' unknown; choose from check, test"):
        index_latex([("a", hand_made())], columns=["check", "seconds"])
    with pytest.raises(ValueError, match="index span 'wide' must be one of 'column', 'page', 'long'"):
        index_latex([("a", hand_made())], span="wide")


def test_many_rows_are_split_into_floats_that_each_fit_a_page() -> None:
    entries = [(f"f{i}", hand_made(f"tests/t.py::test_rate_{i:02d}[garnet-S20-A4-b5]", mdp="garnet-S20-A4-b5"))
               for i in range(84)]
    floats = _floats(index_latex(entries))
    assert len(floats) >= 3
    assert sum(len(body[body.index(r"\midrule") + 1 : body.index(r"\bottomrule")]) for body in floats) == 84
    assert all(len(body[body.index(r"\midrule") + 1 : body.index(r"\bottomrule")]) <= ROWS_PER_FLOAT for body in floats)
    assert floats[1][1] == rf"\caption{{Rate checks, continued (2 of {len(floats)}).}}"
    assert sum(r"\label{" in line for body in floats for line in body) == 1
    assert floats[0][floats[0].index(r"\midrule") + 1].startswith(r"test\_\allowbreak{}rate\_\allowbreak{}00 & ")


@NEEDS_PDFLATEX
@pytest.mark.parametrize("rows", [0, 13, 84])
def test_index_compiles_in_a_two_column_paper_without_overfull_boxes(session: Path, tmp_path: Path, rows: int) -> None:
    """The real session's index (rows=0), or hand-made ones with long ids and names, in \\documentclass[twocolumn]."""
    if rows:
        statuses = ("pass", "fail", "inconclusive", "error")
        entries = [(f"f{i}", hand_made(f"tests/lab/test_planning_estimators.py::TestValueIteration::"
                                      f"test_value_iteration_rate_{i}[garnet-S20-A4-b5]", mdp="garnet-S20-A4-b5",
                                      status=statuses[i % 4], expected="fail" if i % 5 == 0 else "pass"))
                   for i in range(rows)]
        text = index_latex(entries)
    else:
        text = (session / "index.tex").read_text(encoding="utf-8")
    assert_paper_fits(tmp_path, text)


@NEEDS_PDFLATEX
def test_a_longtable_breaks_84_rows_across_pages_of_a_one_column_document(tmp_path: Path) -> None:
    entries = [(f"f{i}", hand_made(f"tests/t.py::test_rate_{i:02d}[garnet-S20-A4-b5]", mdp="garnet-S20-A4-b5"))
               for i in range(84)]
    text = index_latex(entries, span="long")
    assert text.count(r"\begin{longtable}") == 1 and r"\endhead" in text and "{booktabs,array,longtable}" in text
    assert_paper_fits(tmp_path, text, documentclass="article")


def test_markdown_escapes_raw_html_in_names() -> None:
    """Names are text, not markup (OWASP: escape untrusted data placed in HTML; CommonMark passes raw HTML)."""
    text = index_markdown([("a", hand_made(mdp="<img src=x onerror=alert(1)>", label="<b>&"))])
    assert "<img" not in text and "<b>" not in text
    assert "&lt;img src=x onerror=alert(1)&gt;" in text and "| &lt;b&gt;&amp; |" in text


def test_markdown_escapes_the_cell_separator(tmp_path: Path, passing: CheckResult) -> None:
    write_check(passing, tmp_path, "tests/t.py::test_x[a|b]", figures=False)
    write_index(tmp_path)
    row = next(line for line in (tmp_path / "index.md").read_text(encoding="utf-8").splitlines() if "test_x" in line)
    assert "`tests/t.py::test_x[a\\|b]`" in row
    assert len(re.split(r"(?<!\\)\|", row)) == 11  # 9 cells between 10 separators


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
    folder = shutil.copytree(session / check_folder_name(ERROR_ID), tmp_path / "one" / check_folder_name(ERROR_ID),
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


def test_cli_redraws_at_column_width_with_chosen_columns(copy: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """``--figure-width column`` gives figures at most 3.5 in wide (issue 13's bar); --columns reaches index.tex."""
    from matplotlib.image import imread

    assert main(["report", str(copy), "--figure-width", "column", "--columns", "check,claim,verdict",
                 "--table-span", "page"]) == 0
    for png in copy.rglob("figure.png"):
        assert imread(png).shape[1] / 200 <= 3.5  # pixels over the report's 200 dpi
    tex = (copy / "index.tex").read_text(encoding="utf-8")
    assert r"\begin{table*}[tbp]" in tex and r"Check & Claim & Verdict \\" in tex
    assert main(["report", str(copy), "--columns", "check,time"]) == 2
    assert "rlrates report: error: index columns 'time' unknown" in capsys.readouterr().err


def test_cli_draws_in_a_users_style_sheet(copy: Path, tmp_path: Path) -> None:
    """A style sheet given with --style sets the figure size (matplotlib's style-sheet format)."""
    from matplotlib.image import imread

    sheet = tmp_path / "paper.mplstyle"
    sheet.write_text("figure.figsize: 5.0, 3.0\nfont.family: serif\n", encoding="utf-8")
    assert main(["report", str(copy), "--style", str(sheet)]) == 0
    shapes = {imread(png).shape[:2] for png in copy.rglob("figure.png")}
    assert shapes == {(600, 1000)}  # 3 x 5 in at 200 dpi


def test_a_coverage_claim_gets_its_own_exponent_column_in_both_indexes(tmp_path) -> None:
    """A logged-data check with a coverage claim shows its C-exponent and its regime (common practice: one
    column per claimed factor); checks without one keep the former columns."""
    import rlrates
    from rlrates.reference_logged import logged_plugin_q_pi
    from rlrates.report.checks import write_check
    from rlrates.report.index import write_index

    mdp = rlrates.garnet(states=6, actions=2, branching=2, seed=1)
    result = rlrates.check(logged_plugin_q_pi, mdp, rlrates.Claim(n=-0.5, coverage=0.5), data="transitions",
                           n_grid=(480, 960, 1920, 3840), replicates=8)
    write_check(result, tmp_path, "test_x.py::test_cov", figures=False)
    write_index(tmp_path)
    markdown = (tmp_path / "index.md").read_text()
    assert "| C-exponent |" in markdown and "q_pi (transitions)" in markdown and "C^0.5" in markdown
    assert r"$C$-exponent" in (tmp_path / "index.tex").read_text()
