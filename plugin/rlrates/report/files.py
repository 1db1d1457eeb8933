"""The files of a report directory: their names, atomic writes, and reading text back.

Every file is written to a temporary file in its own folder and moved into place
with :func:`os.replace`, so a reader never sees half a file. Reading a file back
turns every way it can be missing or unreadable into a :class:`ReportError` that
names the file. Pure: no pytest import.
"""

from __future__ import annotations

import hashlib
import os
import re
import tempfile
from collections.abc import Callable
from contextlib import suppress
from pathlib import Path

__all__ = [
    "ERRORS_FILE", "RECORD_FILE", "FIGURE_FILES", "INDEX_FILES", "ReportError", "ReportWarning",
    "folder_name", "write_atomic", "write_text", "read_text", "text_digest", "find_checks",
]

#: The tidy error table of one check.
ERRORS_FILE = "errors.csv"
#: The verdict, fits and provenance of one check.
RECORD_FILE = "check.json"
#: The figure of one check, as a bitmap and as a vector file.
FIGURE_FILES = ("figure.png", "figure.pdf")
#: The session index, as Markdown and as a LaTeX tabular.
INDEX_FILES = ("index.md", "index.tex")


class ReportError(ValueError):
    """A report folder cannot be read: a file is missing, corrupt or edited by hand."""


class ReportWarning(UserWarning):
    """Part of a report was skipped (for example figures, without matplotlib)."""


def folder_name(test_id: str) -> str:
    """A safe folder name for a test id: a readable slug (up to 60 characters) and 8 hex digits of its hash."""
    if not isinstance(test_id, str):
        raise TypeError(f"`test_id` must be a string, got {type(test_id).__name__}")
    slug = re.sub(r"[^A-Za-z0-9._=+-]+", "-", test_id).strip("-.")[:60].rstrip("-.") or "check"
    digest = hashlib.blake2b(test_id.encode("utf-8"), digest_size=4).hexdigest()
    return f"{slug}-{digest}"


def write_atomic(path: Path, save: Callable[[str], object]) -> Path:
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


def write_text(path: Path, text: str) -> Path:
    """Write UTF-8 text with ``\\n`` line ends, atomically."""
    def save(temporary: str) -> None:
        with open(temporary, "w", encoding="utf-8", newline="\n") as stream:
            stream.write(text)

    return write_atomic(path, save)


def read_text(path: Path) -> str:
    """A report file's text, or a :class:`ReportError` naming the file and what is wrong with it."""
    try:
        return path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ReportError(f"{path}: missing (every check folder needs {path.name})") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise ReportError(f"{path}: cannot be read: {exc}") from None


def text_digest(text: str) -> str:
    """The sha256 of ``text`` as UTF-8 with ``\\n`` line ends (what ``check.json`` records of ``errors.csv``)."""
    return hashlib.sha256(text.replace("\r\n", "\n").encode("utf-8")).hexdigest()


def find_checks(directory: Path | str) -> list[Path]:
    """Every check folder (one holding ``check.json``) under ``directory``, in path order."""
    root = Path(directory)
    if not root.is_dir():
        raise ReportError(f"{root}: not a directory")
    return sorted(path.parent for path in root.rglob(RECORD_FILE))
