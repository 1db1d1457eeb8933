"""Report folders: what a paper appendix needs from each check, written to disk and rebuilt from it.

Layout under a report directory::

    index.md                 one Markdown table row per check, sorted by test id
    index.tex                the same as a booktabs tabular, ready for \\input
    <slug>-<hash>/           one folder per check (readable slug of the test id + 8 hex digits)
        errors.csv           tidy raw errors: gamma, H, n, replicate, error, seconds (repr-exact floats)
        check.json           verdict, fits, fitted cells and provenance (keys: rlrates.report.schema)
        figure.png, .pdf     two panels drawn from the error table and the record alone

The modules, one concept each:

* :mod:`~rlrates.report.files`: file names, folder names, atomic writes, reading text back;
* :mod:`~rlrates.report.table`: ``errors.csv``, written repr-exact and validated when read;
* :mod:`~rlrates.report.schema`: ``check.json``, built from a result and validated when read;
* :mod:`~rlrates.report.provenance`: versions, platform, git commit, random-stream keys;
* :mod:`~rlrates.report.index`: ``index.md`` and ``index.tex``;
* :mod:`~rlrates.report.figures`, :mod:`~rlrates.report.panels`, :mod:`~rlrates.report.figure_data`,
  :mod:`~rlrates.report.axes`: the figure, its two panels, the cells they show, their axes and legend;
* :mod:`~rlrates.report.checks`: one check folder written and read back, a report rebuilt.

Figures and the index are pure functions of ``errors.csv`` and ``check.json``:
:func:`rebuild` remakes them without rerunning anything, byte for byte the same.
Pure: no pytest import; matplotlib is optional.
"""

from __future__ import annotations

from .checks import SavedCheck, check_folder_name, read_check, rebuild, write_check
from .figures import FIGURES_SKIPPED, figures_available
from .files import (
    ERRORS_FILE, FIGURE_FILES, INDEX_FILES, RECORD_FILE, ReportError, ReportWarning, find_checks, folder_name,
)
from .index import write_index
from .schema import SCHEMA

__all__ = [
    "SCHEMA", "ERRORS_FILE", "RECORD_FILE", "FIGURE_FILES", "INDEX_FILES", "FIGURES_SKIPPED",
    "ReportError", "ReportWarning", "SavedCheck",
    "folder_name", "check_folder_name", "write_check", "read_check", "find_checks", "write_index", "rebuild",
    "figures_available",
]
