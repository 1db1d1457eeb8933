"""The session index of a report directory: one row per check, as Markdown and as a LaTeX tabular.

The text is a pure function of the parsed ``check.json`` records (and the
folders they sit in, relative to the index). No timestamps, no machine-dependent
text and fixed float formats, so rebuilding an index from the same records gives
the same bytes. :func:`write_index` reads every record under a directory and
writes ``index.md`` and ``index.tex`` next to the check folders.
"""

from __future__ import annotations

import re
from collections import Counter
from collections.abc import Iterable, Mapping, Sequence
from pathlib import Path
from typing import Any
from urllib.parse import quote

from ..vocabulary import STATUSES, Factor
from .files import FIGURE_FILES, INDEX_FILES, RECORD_FILE, find_checks, write_text
from .schema import read_record, record_fit

__all__ = ["index_markdown", "index_latex", "latex_escape", "index_entries", "write_index_files", "write_index"]

Entry = tuple[str, Mapping[str, Any]]  # (folder relative to the index, parsed check.json)

_LATEX_SPECIAL = {
    "\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#", "_": r"\_",
    "{": r"\{", "}": r"\}", "~": r"\textasciitilde{}", "^": r"\textasciicircum{}",
    "<": r"\textless{}", ">": r"\textgreater{}", "|": r"\textbar{}",
}
_LATEX_PATTERN = re.compile("|".join(re.escape(c) for c in _LATEX_SPECIAL))
_LATEX_TARGETS = {"q_pi": r"$Q^{\pi}$", "q_star": r"$Q^{*}$", "policy": "policy", "model": "model"}
_BOUNDS_NOTE = "exponent [fire-side lower bound, pass-side upper bound]"


def latex_escape(text: str) -> str:
    """``text`` with LaTeX's special characters escaped for text mode."""
    return _LATEX_PATTERN.sub(lambda match: _LATEX_SPECIAL[match.group()], text)


def _numbers(record: Mapping[str, Any], factor: Factor) -> tuple[float, float, float] | None | str:
    """(exponent, low, high); ``None`` when not claimed; a reason when claimed but not measured."""
    if record["claim"][factor] is None:
        return None
    fit = record_fit(record, factor)
    if fit is None:
        return "estimator error" if record["status"] == "error" else "no fit"
    if not fit.measured:
        return str(fit.verdict)
    return fit.exponent, fit.low, fit.high


def _verdict(record: Mapping[str, Any]) -> str:
    word = str(record["status"])
    if word == "fail" and record["fired"]:
        word += f" ({', '.join(map(str, record['fired']))})"
    return word


def _fixed(value: float) -> str:
    """``+0.52`` / ``-0.47``: two decimals and a sign; a value that rounds to zero is ``+0.00``."""
    text = f"{value:+.2f}"
    return "+0.00" if text == "-0.00" else text


def _tally(entries: Sequence[Entry]) -> str:
    counts = Counter(str(record["status"]) for _, record in entries)
    parts = [f"{counts[s]} {s}" for s in STATUSES if counts[s]]
    return f"{len(entries)} check(s): {', '.join(parts)}"


# Per dialect: not claimed, exact, not fitted (with the reason), measured (exponent, low, high).
_EXPONENT_WORDS = {
    "markdown": ("not claimed", "exact (zero error)", "not fitted ({})", "{} [{}, {}]"),
    "latex": ("---", "exact", "n/a ({})", "${}$ [${}$, ${}$]"),
}


def _exponent_cell(record: Mapping[str, Any], factor: Factor, dialect: str) -> str:
    """The exponent column of one row: the fitted exponent and its bounds, or why there is none."""
    not_claimed, exact, not_fitted, measured = _EXPONENT_WORDS[dialect]
    numbers = _numbers(record, factor)
    if numbers is None:
        return not_claimed
    if numbers == "exact":
        return exact
    if isinstance(numbers, str):
        return not_fitted.format(latex_escape(numbers) if dialect == "latex" else numbers)
    return measured.format(*map(_fixed, numbers))


# --------------------------------------------------------------------------- Markdown


def _md_cell(text: str) -> str:
    """Plain text in a table cell: Markdown's backslash and the cell separator escaped, one line."""
    return text.replace("\\", "\\\\").replace("|", "\\|").replace("\n", " ")


def _md_code(text: str) -> str:
    """A code span in a table cell (backslashes are literal there; only the separator is escaped)."""
    fence = "``" if "`" in text else "`"
    pad = " " if "`" in text else ""
    body = text.replace("|", "\\|").replace("\n", " ")
    return f"{fence}{pad}{body}{pad}{fence}"


def _md_claim(claim: Mapping[str, Any]) -> str:
    parts = [f"{symbol}^{claim[key]:g}" for key, symbol in (("n", "n"), ("horizon", "H")) if claim[key] is not None]
    return " ".join(parts)


def index_markdown(entries: Sequence[Entry]) -> str:
    """A Markdown page: one table row per check, in the order given, with links into each folder."""
    lines = [
        "# rlrates checks",
        "",
        f"{_tally(entries)}. Exponents: {_BOUNDS_NOTE}; each folder's check.json has the levels and full provenance.",
        "",
        "| test | target | MDP | n-exponent | H-exponent | claim | verdict | files |",
        "|---|---|---|---|---|---|---|---|",
    ]
    png, pdf = FIGURE_FILES
    for folder, record in entries:
        link = quote(folder)
        files = f"[figure]({link}/{png}) · [pdf]({link}/{pdf}) · [data]({link}/{RECORD_FILE})"
        cells = [
            _md_code(str(record["test_id"])),
            _md_cell(str(record["target"])),
            _md_cell(str(record["mdp"]["name"])),
            _exponent_cell(record, "n", "markdown"),
            _exponent_cell(record, "horizon", "markdown"),
            _md_cell(_md_claim(record["claim"])),
            _md_cell(_verdict(record)),
            files,
        ]
        lines.append("| " + " | ".join(cells) + " |")
    return "\n".join(lines) + "\n"


# --------------------------------------------------------------------------- LaTeX


def _tex_claim(claim: Mapping[str, Any]) -> str:
    parts = [f"{symbol}^{{{claim[key]:g}}}" for key, symbol in (("n", "n"), ("horizon", "H")) if claim[key] is not None]
    return "$" + " ".join(parts) + "$"


def index_latex(entries: Sequence[Entry]) -> str:
    """A booktabs ``tabular`` (no preamble) to ``\\input`` inside a table environment."""
    lines = [
        f"% rlrates checks, {_tally(entries)}. Needs \\usepackage{{booktabs}}; \\input this file inside a table.",
        f"% Exponents: {_BOUNDS_NOTE}.",
        r"\begin{tabular}{@{}lllllll@{}}",
        r"\toprule",
        r"Test & Target & MDP & $n$-exponent & $H$-exponent & Claim & Verdict \\",
        r"\midrule",
    ]
    for _, record in entries:
        target = str(record["target"])
        cells = [
            r"\texttt{" + latex_escape(str(record["test_id"])) + "}",
            _LATEX_TARGETS.get(target, latex_escape(target)),
            latex_escape(str(record["mdp"]["name"])),
            _exponent_cell(record, "n", "latex"),
            _exponent_cell(record, "horizon", "latex"),
            _tex_claim(record["claim"]),
            latex_escape(_verdict(record)),
        ]
        lines.append(" & ".join(cells) + r" \\")
    lines += [r"\bottomrule", r"\end{tabular}"]
    return "\n".join(lines) + "\n"


# --------------------------------------------------------------------------- files


def index_entries(directory: Path, records: Iterable[tuple[Path, Mapping[str, Any]]]) -> list[Entry]:
    """(folder relative to the index, record) pairs, sorted by test id (then folder) so the index is stable."""
    entries = [(folder.relative_to(directory).as_posix(), record) for folder, record in records]
    return sorted(entries, key=lambda entry: (str(entry[1]["test_id"]), entry[0]))


def write_index_files(directory: Path, entries: Sequence[Entry]) -> list[Path]:
    """Write ``index.md`` and ``index.tex`` of ``entries`` into ``directory``."""
    markdown, latex = INDEX_FILES
    return [write_text(directory / markdown, index_markdown(entries)),
            write_text(directory / latex, index_latex(entries))]


def write_index(directory: Path | str) -> list[Path]:
    """Write ``index.md`` and ``index.tex`` from every ``check.json`` under ``directory``.

    Returns the files written; ``[]`` (and nothing written) when there is no check.
    """
    root = Path(directory)
    folders = find_checks(root)
    if not folders:
        return []
    return write_index_files(root, index_entries(root, ((f, read_record(f / RECORD_FILE)) for f in folders)))
