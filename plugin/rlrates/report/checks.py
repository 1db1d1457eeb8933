"""Check folders: one check written to its folder, read back, and a whole report rebuilt from the saved files.

:func:`write_check` writes ``errors.csv`` and ``check.json``, then draws the
figures from the same table and record it has just written (in memory, not read
back). :func:`read_check` reads and validates a folder; :func:`rebuild` redraws
every figure and the index from the saved files alone, without rerunning
anything, and gives the same bytes as the first time. Pure: no pytest import.
"""

from __future__ import annotations

import dataclasses
import warnings
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

import pandas as pd

from .figures import FIGURES_SKIPPED, draw_figures, figures_available
from .figures import figure_width as figure_inches
from .files import (ERRORS_FILE, FIGURE_FILES, INDEX_FILES, RECORD_FILE, ReportError, ReportWarning, find_checks, folder_name,
                    text_digest, write_text)
from .index import index_entries, index_latex, write_index_files
from .schema import check_record, default_label, read_record, record_text
from .table import csv_text, errors_table, read_errors

if TYPE_CHECKING:  # pragma: no cover
    from ..result import CheckResult

__all__ = ["SavedCheck", "check_folder_name", "write_check", "read_check", "rebuild"]


@dataclasses.dataclass(frozen=True)
class SavedCheck:
    """One check as read back from its folder."""

    folder: Path
    record: dict[str, Any]
    errors: pd.DataFrame

    @property
    def test_id(self) -> str:
        return str(self.record["test_id"])


def _skip_warning() -> None:
    warnings.warn(FIGURES_SKIPPED, ReportWarning, stacklevel=3)


def check_folder_name(test_id: str, label: str | None = None) -> str:
    """The folder of one check: a slug of its short label and 8 hex digits of the hash of its full id.

    Checks whose ids differ only at the end (the MDP of a parametrised test) get
    folders a reader tells apart at a glance, and two checks with the same label
    still get different folders.
    """
    readable = folder_name(default_label(test_id) if label is None else label).rsplit("-", 1)[0]
    return f"{readable}-{folder_name(test_id).rsplit('-', 1)[1]}"


def write_check(
    result: "CheckResult",
    directory: Path | str,
    test_id: str,
    extra: Mapping[str, Any] | None = None,
    *,
    figures: bool = True,
    expected: Mapping[str, Any] | None = None,
    figure_width: str | float | None = None,
) -> Path:
    """Write one check's folder under ``directory``; return the folder.

    Writes ``errors.csv`` and ``check.json`` (also for a check that errored: the
    rows finished before the failure and the failure itself), then the figures
    from the same table and record. Without matplotlib the figures are skipped
    with one :class:`ReportWarning`; ``figures=False`` skips them silently (draw
    them later with :func:`rebuild`). ``extra`` is stored under the ``extra`` key;
    ``expected`` says the test is marked xfail (see :func:`rlrates.report.schema.check_record`).
    ``figure_width`` is "column", "page" or a width in inches (default "page").
    """
    folder = Path(directory) / check_folder_name(test_id, result.run.label or None)
    folder.mkdir(parents=True, exist_ok=True)
    table = errors_table(result.table)
    csv = csv_text(table)
    record = check_record(result, test_id, text_digest(csv), len(table), extra, expected)
    write_text(folder / ERRORS_FILE, csv)
    write_text(folder / RECORD_FILE, record_text(record))
    if figures and not draw_figures(folder, table, record, width=figure_width):
        _skip_warning()
    return folder


def read_check(folder: Path | str) -> SavedCheck:
    """Read and validate one check folder; :class:`ReportError` names the file and the problem."""
    folder = Path(folder)
    record_path = folder / RECORD_FILE
    record = read_record(record_path)
    errors = read_errors(folder / ERRORS_FILE, record_path, record["data"]["sha256"])
    return SavedCheck(folder, record, errors)


def _refuse_directories(targets: Sequence[Path]) -> None:
    """A :class:`ReportError` naming the first file to be written that is a directory (nothing is written then)."""
    for path in targets:
        if path.is_dir() and not path.is_symlink():
            raise ReportError(f"{path} is a directory, where the report writes its {path.name}; "
                              "move it away (rlrates never removes a directory it did not write)")


def rebuild(directory: Path | str, *, figure_width: str | float | None = None,
            columns: Sequence[str] | None = None, span: str = "column") -> list[Path]:
    """Redraw every check's figures and the index from the saved CSV and JSON; return the files written.

    Every folder is read and validated before anything is written. Without
    matplotlib only the index is written, with one :class:`ReportWarning`.
    ``figure_width`` (see :func:`rlrates.report.figures.figure_width`), ``columns``
    and ``span`` (see :func:`rlrates.report.index.index_latex`) are checked first.
    """
    figure_inches(figure_width)  # bad options are refused before anything is read or written
    index_latex([], columns, span)
    root = Path(directory)
    folders = find_checks(root)
    if not folders:
        raise ReportError(f"{root}: no check folders ({RECORD_FILE}) found to rebuild")
    saved = [read_check(folder) for folder in folders]
    _refuse_directories([root / name for name in INDEX_FILES] + [f / name for f in folders for name in FIGURE_FILES])
    written: list[Path] = []
    if figures_available():
        for check in saved:
            written.extend(draw_figures(check.folder, check.errors, check.record, figure_width))
    else:
        _skip_warning()
    written.extend(write_index_files(root, index_entries(root, ((s.folder, s.record) for s in saved)), columns, span))
    return written
