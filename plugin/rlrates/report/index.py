"""The session index of a report directory: one row per check, as Markdown (``index.md``) and LaTeX.

The text is a pure function of the parsed ``check.json`` records (and the
folders they sit in, relative to the index). No timestamps, no machine-dependent
text and fixed float formats, so rebuilding an index from the same records gives
the same bytes. :func:`write_index` reads every record under a directory and
writes ``index.md`` and ``index.tex`` (:mod:`rlrates.report.index_tex`) next to
the check folders. Names in ``index.md`` are escaped as HTML, so a name is text,
never markup. Pure: no pytest import.
"""

from __future__ import annotations

import html
from collections.abc import Iterable, Mapping, Sequence
from pathlib import Path
from typing import Any
from urllib.parse import quote

from ..fit_words import BOUNDS_NOTE, fit_words
from ..vocabulary import Factor
from .files import FIGURE_FILES, INDEX_FILES, RECORD_FILE, find_checks, write_text
from .index_rows import CLAIM_SYMBOLS, Entry, fit_or_reason, tally, verdict_words
from .index_tex import DEFAULT_LATEX_COLUMNS, LATEX_COLUMNS, ROWS_PER_FLOAT, SPANS, index_latex, latex_escape
from .schema import read_record, record_label

__all__ = [
    "LATEX_COLUMNS", "DEFAULT_LATEX_COLUMNS", "ROWS_PER_FLOAT", "SPANS", "index_markdown", "index_latex", "latex_escape",
    "index_entries", "write_index_files", "write_index", "verdict_words",
]


# --------------------------------------------------------------------------- Markdown


def _md_cell(text: str) -> str:
    """Plain text in a table cell: HTML, Markdown's backslash and the cell separator escaped, one line."""
    return html.escape(text, quote=False).replace("\\", "\\\\").replace("|", "\\|").replace("\n", " ")


def _md_code(text: str) -> str:
    """A code span in a table cell (backslashes are literal there; only the separator is escaped)."""
    fence = "``" if "`" in text else "`"
    pad = " " if "`" in text else ""
    body = text.replace("|", "\\|").replace("\n", " ")
    return f"{fence}{pad}{body}{pad}{fence}"


def _md_claim(claim: Mapping[str, Any]) -> str:
    parts = [f"{symbol}^{claim[key]:g}" for key, symbol in CLAIM_SYMBOLS if claim.get(key) is not None]
    return " ".join(parts)


def _md_target(record: Mapping[str, Any]) -> str:
    """The target, with the data regime when the samples were logged data."""
    regime = record.get("data_regime", "generative")
    return str(record["target"]) + ("" if regime == "generative" else f" ({regime})")


def _md_exponent(record: Mapping[str, Any], factor: Factor) -> str:
    found = fit_or_reason(record, factor)
    if found is None:
        return "not claimed"
    if isinstance(found, str):
        return f"not fitted ({found})"
    return _md_cell(fit_words(found))


def index_markdown(entries: Sequence[Entry]) -> str:
    """A Markdown page: one table row per check, in the order given, with links into each folder."""
    coverage = any(record["claim"].get("coverage") is not None for _, record in entries)
    heading = ["check", "test", "target", "MDP", "n-exponent", "H-exponent", *(["C-exponent"] if coverage else []),
               "claim", "verdict", "files"]
    lines = [
        "# rlrates checks",
        "",
        f"{tally(entries)}. Each exponent cell gives the fit's verdict, the exponent and the limit tested (the "
        f"claim plus its tolerance); {BOUNDS_NOTE}. Each folder's check.json has the full provenance.",
        "",
        "| " + " | ".join(heading) + " |",
        "|" + "---|" * len(heading),
    ]
    png, pdf = FIGURE_FILES
    for folder, record in entries:
        link = quote(folder)
        files = f"[figure]({link}/{png}) · [pdf]({link}/{pdf}) · [data]({link}/{RECORD_FILE})"
        cells = [
            _md_cell(record_label(record)),
            _md_code(str(record["test_id"])),
            _md_cell(_md_target(record)),
            _md_cell(str(record["mdp"]["name"])),
            _md_exponent(record, "n"),
            _md_exponent(record, "horizon"),
            *([_md_exponent(record, "coverage")] if coverage else []),
            _md_cell(_md_claim(record["claim"])),
            _md_cell(verdict_words(record)),
            files,
        ]
        lines.append("| " + " | ".join(cells) + " |")
    return "\n".join(lines) + "\n"


# --------------------------------------------------------------------------- files


def index_entries(directory: Path, records: Iterable[tuple[Path, Mapping[str, Any]]]) -> list[Entry]:
    """(folder relative to the index, record) pairs, sorted by test id (then folder) so the index is stable."""
    entries = [(folder.relative_to(directory).as_posix(), record) for folder, record in records]
    return sorted(entries, key=lambda entry: (str(entry[1]["test_id"]), entry[0]))


def write_index_files(directory: Path, entries: Sequence[Entry], columns: Sequence[str] | None = None,
                      span: str = "column") -> list[Path]:
    """Write ``index.md`` and ``index.tex`` of ``entries`` into ``directory`` (``columns``, ``span``: see :func:`index_latex`)."""
    markdown, latex = INDEX_FILES
    tex = index_latex(entries, columns, span)  # refuses bad columns before anything is written
    return [write_text(directory / markdown, index_markdown(entries)), write_text(directory / latex, tex)]


def write_index(directory: Path | str, columns: Sequence[str] | None = None, span: str = "column") -> list[Path]:
    """Write ``index.md`` and ``index.tex`` from every ``check.json`` under ``directory``.

    Returns the files written; ``[]`` (and nothing written) when there is no check.
    """
    root = Path(directory)
    folders = find_checks(root)
    if not folders:
        return []
    entries = index_entries(root, ((f, read_record(f / RECORD_FILE)) for f in folders))
    return write_index_files(root, entries, columns, span)
