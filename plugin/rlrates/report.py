"""Report folders: what a paper appendix needs from each check, written to disk and rebuilt from it.

Layout under a report directory::

    index.md                 one Markdown table row per check, sorted by test id
    index.tex                the same as a booktabs tabular, ready for \\input
    <slug>-<hash>/           one folder per check (readable slug of the test id + 8 hex digits)
        errors.csv           tidy raw errors: gamma, H, n, replicate, error, seconds (repr-exact floats)
        check.json           verdict, fits and provenance (keys: see :mod:`rlrates.provenance`)
        figure.png, .pdf     two panels drawn from errors.csv and check.json alone

Every file is written to a temporary file in its own folder and moved into place
with :func:`os.replace`, so a reader never sees half a file. Figures and the
index are pure functions of ``errors.csv`` and ``check.json``: :func:`rebuild`
remakes them without rerunning anything, and the index comes out byte for byte
the same. Pure: no pytest import; matplotlib is optional.
"""

from __future__ import annotations

import dataclasses
import hashlib
import io
import json
import os
import re
import tempfile
import warnings
from collections.abc import Callable, Iterable, Mapping
from contextlib import suppress
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from .figures import build_figure, load_matplotlib
from .provenance import ERROR_COLUMNS, ERRORS_FILE, FIT_KEYS, SCHEMA, check_record
from .report_index import index_latex, index_markdown

if TYPE_CHECKING:  # pragma: no cover
    from .rate_check import CheckResult

__all__ = [
    "SCHEMA", "ERRORS_FILE", "RECORD_FILE", "FIGURE_FILES", "INDEX_FILES", "FIGURES_SKIPPED",
    "ReportError", "ReportWarning", "SavedCheck",
    "folder_name", "write_check", "read_check", "find_checks", "write_index", "rebuild", "figures_available",
]

RECORD_FILE = "check.json"
FIGURE_FILES = ("figure.png", "figure.pdf")
INDEX_FILES = ("index.md", "index.tex")
FIGURES_SKIPPED = "figures skipped: install pytest-rlrates[plot] (matplotlib) to get them"

_STATUSES = ("pass", "fail", "inconclusive", "error")  # mirrors rlrates.rate_check.STATUSES
_REQUIRED: tuple[tuple[str, type | tuple[type, ...]], ...] = (
    ("schema", str), ("test_id", str), ("status", str), ("target", str), ("norm", str),
    ("claim", dict), ("claim.n", (int, float, type(None))), ("claim.horizon", (int, float, type(None))),
    ("fits", list), ("fired", list), ("mdp", dict), ("mdp.name", str), ("profile", dict),
    ("profile.name", str), ("profile.min_n_per_horizon", (int, float)), ("seed", int),
    ("data", dict), ("data.sha256", str),
)
_PNG_DPI = 200


class ReportError(ValueError):
    """A report folder cannot be read: a file is missing, corrupt or edited by hand."""


class ReportWarning(UserWarning):
    """Part of a report was skipped (for example figures, without matplotlib)."""


@dataclasses.dataclass(frozen=True)
class SavedCheck:
    """One check as read back from its folder."""

    folder: Path
    record: dict[str, Any]
    errors: pd.DataFrame

    @property
    def test_id(self) -> str:
        return str(self.record["test_id"])


# --------------------------------------------------------------------------- file writing


def _write_atomic(path: Path, save: Callable[[str], object]) -> Path:
    """Write ``path`` by ``save(temporary_path)`` in the same folder, then :func:`os.replace` it into place.

    A reader sees the old file or the new one, never half of one; on any error
    the temporary file is removed and the old file is left as it was.
    """
    descriptor, temporary = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    os.close(descriptor)
    try:
        save(temporary)
        os.chmod(temporary, 0o644)  # mkstemp makes it private; a report is meant to be read
        os.replace(temporary, path)
    except BaseException:
        with suppress(FileNotFoundError):
            os.unlink(temporary)
        raise
    return path


def _write_text(path: Path, text: str) -> Path:
    """Write UTF-8 text with ``\\n`` line ends, atomically."""
    def save(temporary: str) -> None:
        with open(temporary, "w", encoding="utf-8", newline="\n") as stream:
            stream.write(text)

    return _write_atomic(path, save)


def folder_name(test_id: str) -> str:
    """A safe folder name for a test id: a readable slug (up to 60 characters) and 8 hex digits of its hash."""
    if not isinstance(test_id, str):
        raise TypeError(f"`test_id` must be a string, got {type(test_id).__name__}")
    slug = re.sub(r"[^A-Za-z0-9._=+-]+", "-", test_id).strip("-.")[:60].rstrip("-.") or "check"
    digest = hashlib.blake2b(test_id.encode("utf-8"), digest_size=4).hexdigest()
    return f"{slug}-{digest}"


def _errors_table(result: "CheckResult") -> pd.DataFrame:
    missing = [c for c in ERROR_COLUMNS if c not in result.table.columns]
    if missing:
        raise ValueError(f"the check's table lacks column(s) {', '.join(missing)}; expected {', '.join(ERROR_COLUMNS)}")
    return result.table.loc[:, list(ERROR_COLUMNS)].sort_values(["gamma", "n", "replicate"], ignore_index=True)


def _csv_text(table: pd.DataFrame) -> str:
    return str(table.to_csv(index=False, float_format="%.17g", lineterminator="\n"))


def _digest(text: str) -> str:
    return hashlib.sha256(text.replace("\r\n", "\n").encode("utf-8")).hexdigest()


def figures_available() -> bool:
    """Whether figures can be drawn (matplotlib importable)."""
    return load_matplotlib() is not None


def _draw_figures(saved: SavedCheck) -> list[Path]:
    """Draw the figure files of one saved check; ``[]`` (and stale figures removed) without matplotlib."""
    figure = build_figure(saved.errors, saved.record)
    if figure is None:
        for name in FIGURE_FILES:
            with suppress(FileNotFoundError):
                (saved.folder / name).unlink()
        return []
    written = []
    metadata = {"png": {"Software": None}, "pdf": {"CreationDate": None, "Producer": None, "Creator": None}}
    for name in FIGURE_FILES:
        kind = name.rsplit(".", 1)[1]

        def save(temporary: str, kind: str = kind) -> None:
            figure.savefig(temporary, format=kind, dpi=_PNG_DPI, metadata=metadata[kind])

        written.append(_write_atomic(saved.folder / name, save))
    return written


def _skip_warning() -> None:
    warnings.warn(FIGURES_SKIPPED, ReportWarning, stacklevel=3)


def write_check(
    result: "CheckResult",
    directory: Path | str,
    test_id: str,
    extra: Mapping[str, Any] | None = None,
    *,
    figures: bool = True,
) -> Path:
    """Write one check's folder under ``directory``; return the folder.

    Writes ``errors.csv`` and ``check.json`` (also for a check that errored: the
    rows finished before the failure and the failure itself), then the figures
    from those two files. Without matplotlib the figures are skipped with one
    :class:`ReportWarning`; ``figures=False`` skips them silently (draw them
    later with :func:`rebuild`). ``extra`` is stored under the ``extra`` key.
    """
    folder = Path(directory) / folder_name(test_id)
    folder.mkdir(parents=True, exist_ok=True)
    table = _errors_table(result)
    csv_text = _csv_text(table)
    record = check_record(result, test_id, _digest(csv_text), len(table), extra)
    json_text = json.dumps(record, indent=2, allow_nan=False, ensure_ascii=False) + "\n"
    _write_text(folder / ERRORS_FILE, csv_text)
    _write_text(folder / RECORD_FILE, json_text)
    if figures:
        drawn = _draw_figures(read_check(folder))
        if not drawn:
            _skip_warning()
    return folder


# --------------------------------------------------------------------------- reading back


def _lookup(record: Mapping[str, Any], dotted: str) -> tuple[bool, Any]:
    value: Any = record
    for part in dotted.split("."):
        if not isinstance(value, Mapping) or part not in value:
            return False, None
        value = value[part]
    return True, value


def _read_saved_text(path: Path) -> str:
    """A report file's text, or a ReportError naming the file and what is wrong with it."""
    try:
        return path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ReportError(f"{path}: missing (every check folder needs {path.name})") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise ReportError(f"{path}: cannot be read: {exc}") from None


def _read_record(path: Path) -> dict[str, Any]:
    text = _read_saved_text(path)
    try:
        record = json.loads(text)
    except json.JSONDecodeError as exc:
        raise ReportError(f"{path}: not valid JSON (line {exc.lineno}, column {exc.colno}: {exc.msg})") from None
    if not isinstance(record, dict):
        raise ReportError(f"{path}: expected a JSON object at the top level, found {type(record).__name__}")
    for key, kinds in _REQUIRED:
        found, value = _lookup(record, key)
        if not found:
            raise ReportError(f"{path}: missing key {key!r}")
        if not isinstance(value, kinds) or (kinds is int and isinstance(value, bool)):
            raise ReportError(f"{path}: key {key!r} has the wrong type ({type(value).__name__}: {value!r})")
    if record["schema"] != SCHEMA:
        raise ReportError(f"{path}: schema {record['schema']!r} is not {SCHEMA!r}; rewrite it with this version of rlrates")
    if record["status"] not in _STATUSES:
        raise ReportError(f"{path}: status {record['status']!r} is not one of {', '.join(_STATUSES)}")
    for i, fit in enumerate(record["fits"]):
        if not isinstance(fit, dict):
            raise ReportError(f"{path}: fits[{i}] must be an object, found {type(fit).__name__}")
        for key in FIT_KEYS:
            if key not in fit:
                raise ReportError(f"{path}: missing key 'fits[{i}].{key}'")
        for key in ("exponent", "low", "high", "claimed"):
            if fit[key] is not None and (isinstance(fit[key], bool) or not isinstance(fit[key], (int, float))):
                raise ReportError(f"{path}: fits[{i}].{key} must be a number or null, found {fit[key]!r}")
    return record


def _read_errors(path: Path, record_path: Path, expected_sha256: str) -> pd.DataFrame:
    text = _read_saved_text(path)
    try:
        frame = pd.read_csv(io.StringIO(text), dtype=str, keep_default_na=False)
    except (pd.errors.ParserError, pd.errors.EmptyDataError) as exc:
        raise ReportError(f"{path}: not a readable CSV table ({str(exc).strip()})") from None
    missing = [c for c in ERROR_COLUMNS if c not in frame.columns]
    if missing:
        raise ReportError(
            f"{path}: missing column(s) {', '.join(missing)}; expected {', '.join(ERROR_COLUMNS)}, "
            f"found {', '.join(map(str, frame.columns)) or 'none'}"
        )
    table = pd.DataFrame(index=frame.index)
    for column in ERROR_COLUMNS:
        values = pd.to_numeric(frame[column], errors="coerce")
        bad = values.isna().to_numpy() | ~np.isfinite(values.to_numpy(float))
        if column in ("n", "replicate"):
            bad |= values.fillna(0).to_numpy(float) % 1 != 0
        if bad.any():
            row = int(np.argmax(bad))
            raise ReportError(f"{path}: line {row + 2}, column {column!r}: {frame[column].iloc[row]!r} is not a finite number"
                              + (" (an integer)" if column in ("n", "replicate") else ""))
        table[column] = values.astype(np.int64 if column in ("n", "replicate") else float)
    if _digest(text) != expected_sha256:
        raise ReportError(
            f"{path}: contents differ from the sha256 recorded in {record_path} (edited after the run?); "
            "rerun the check to regenerate both"
        )
    return table


def read_check(folder: Path | str) -> SavedCheck:
    """Read and validate one check folder; :class:`ReportError` names the file and the problem."""
    folder = Path(folder)
    record_path = folder / RECORD_FILE
    record = _read_record(record_path)
    errors = _read_errors(folder / ERRORS_FILE, record_path, record["data"]["sha256"])
    return SavedCheck(folder, record, errors)


def find_checks(directory: Path | str) -> list[Path]:
    """Every check folder (one holding ``check.json``) under ``directory``, in path order."""
    root = Path(directory)
    if not root.is_dir():
        raise ReportError(f"{root}: not a directory")
    return sorted(path.parent for path in root.rglob(RECORD_FILE))


def _index_entries(directory: Path, records: Iterable[tuple[Path, dict[str, Any]]]) -> list[tuple[str, dict[str, Any]]]:
    """(folder relative to the index, record) pairs, sorted by test id (then folder) so the index is stable."""
    entries = [(folder.relative_to(directory).as_posix(), record) for folder, record in records]
    return sorted(entries, key=lambda entry: (str(entry[1]["test_id"]), entry[0]))


def _write_index_files(directory: Path, entries: list[tuple[str, dict[str, Any]]]) -> list[Path]:
    return [_write_text(directory / "index.md", index_markdown(entries)),
            _write_text(directory / "index.tex", index_latex(entries))]


def write_index(directory: Path | str) -> list[Path]:
    """Write ``index.md`` and ``index.tex`` from every ``check.json`` under ``directory``.

    Returns the files written; ``[]`` (and nothing written) when there is no check.
    """
    root = Path(directory)
    folders = find_checks(root)
    if not folders:
        return []
    return _write_index_files(root, _index_entries(root, ((f, _read_record(f / RECORD_FILE)) for f in folders)))


def rebuild(directory: Path | str) -> list[Path]:
    """Redraw every check's figures and the index from the saved CSV and JSON; return the files written.

    Every folder is read and validated before anything is written. Without
    matplotlib only the index is written, with one :class:`ReportWarning`.
    """
    root = Path(directory)
    folders = find_checks(root)
    if not folders:
        raise ReportError(f"{root}: no check folders ({RECORD_FILE}) found to rebuild")
    saved = [read_check(folder) for folder in folders]
    written: list[Path] = []
    if figures_available():
        for check in saved:
            written.extend(_draw_figures(check))
    else:
        _skip_warning()
    written.extend(_write_index_files(root, _index_entries(root, ((s.folder, s.record) for s in saved))))
    return written
