"""Checks and report folders for the report tests (test_report_files.py, test_report_index.py,
test_report_figures.py): real ci-budget runs.

Also the paper test of ``index.tex`` (:func:`assert_paper_fits`, used by the example
project's test too). Each check runs on a 10-state Garnet MDP in well under a second; the fixtures that
run them (garnet, passing, failing, erroring, session, copy, tables_only) are in
conftest.py, module-scoped, so every test module computes them once.
"""

from __future__ import annotations

import json
import re
import shutil
import subprocess
from pathlib import Path
from typing import Any

import numpy as np
import pytest

import rlrates
from rlrates import reference

PASS_ID = "tests/test_rates.py::test_plugin[garnet_10]"
FAIL_ID = "tests/test_rates.py::test_stale_buffer[garnet_10]"
ERROR_ID = "tests/test_rates.py::test_flaky[garnet_10]"
CLAIM = rlrates.Claim(n=-0.5, horizon=2.0)


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


def load(folder: Path) -> dict[str, Any]:
    """A folder's check.json, parsed without validation."""
    record: dict[str, Any] = json.loads((folder / "check.json").read_text(encoding="utf-8"))
    return record


def truncate_json(folder: Path) -> None:
    """Cut a folder's check.json short (invalid JSON)."""
    path = folder / "check.json"
    path.write_text(path.read_text(encoding="utf-8")[:200], encoding="utf-8")


PAPER = r"""\documentclass[OPTIONS]{article}
\usepackage{booktabs,longtable,graphicx,array}
\usepackage[margin=2cm]{geometry}
\begin{document}
Some text of the paper.
\input{index.tex}
\end{document}
"""


#: Skips a test where pdflatex is not installed.
NEEDS_PDFLATEX = pytest.mark.skipif(
    shutil.which("pdflatex") is None,
    reason="pdflatex is not installed (Debian: texlive-latex-base texlive-latex-recommended)")


def assert_paper_fits(folder: Path, index_tex: str, documentclass: str = "twocolumn") -> None:
    """Compile a two-column article that inputs ``index_tex`` with pdflatex: it must build, with no
    overfull box wider than 20 pt and no float too large for a page (issue 13's bar). Pass
    ``documentclass="article"`` for a one-column article."""
    (folder / "index.tex").write_text(index_tex, encoding="utf-8")
    options = "" if documentclass == "article" else documentclass
    (folder / "paper.tex").write_text(PAPER.replace("[OPTIONS]", f"[{options}]" if options else ""), encoding="utf-8")
    done = subprocess.run(["pdflatex", "-interaction=nonstopmode", "-halt-on-error", "paper.tex"], cwd=folder,
                          capture_output=True, text=True, timeout=120)
    log = (folder / "paper.log").read_text(encoding="latin-1")
    assert done.returncode == 0, log[-3000:]
    overfull = [float(points) for points in re.findall(r"Overfull \\hbox \((\d+(?:\.\d+)?)pt too wide\)", log)]
    assert max(overfull, default=0.0) <= 20.0, f"overfull boxes: {overfull}"
    assert "Float too large" not in log
    assert "Output written on paper.pdf" in log
