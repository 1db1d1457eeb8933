"""The files of a report directory: their names, atomic writes, and reading text back.

Every file is written to a temporary file in its own folder and moved into place
with :func:`os.replace`, so a reader never sees half a file. Reading a file back
turns every way it can be missing or unreadable into a :class:`ReportError` that
names the file. Pure: no pytest import.

Ownership: every folder the plugin writes into keeps a list of the files it
wrote there (:data:`OWN_FILES`, one name a line), recorded before each file is
moved into place. A file that is not on its folder's list is someone else's: it
is never overwritten (:class:`ForeignFiles`), never removed, and a report
directory that holds one is not cleared (:func:`foreign_entries`,
:func:`clear_own`). Symbolic links are never followed.
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
    "OWN_FILES", "LOCK_FILE", "ForeignFiles", "owned_names", "foreign_entries", "clear_own", "remove_own",
]

#: The tidy error table of one check.
ERRORS_FILE = "errors.csv"
#: The verdict, fits and provenance of one check.
RECORD_FILE = "check.json"
#: The figure of one check, as a bitmap and as a vector file.
FIGURE_FILES = ("figure.png", "figure.pdf")
#: The session index, as Markdown and as a LaTeX tabular.
INDEX_FILES = ("index.md", "index.tex")
#: In every folder the plugin writes into: the names of the files it wrote there, one a line.
OWN_FILES = ".rlrates-files"
#: At the top of a report directory while a session writes into it: ``pid token`` (see :mod:`.lock`).
LOCK_FILE = ".rlrates-lock"
#: Names in a report directory's top level that belong to the plugin by name (its list and the session lock).
_OWN_NAMES = (OWN_FILES, LOCK_FILE)


class ReportError(ValueError):
    """A report folder cannot be read: a file is missing, corrupt or edited by hand."""


class ReportWarning(UserWarning):
    """Part of a report was skipped (for example figures, without matplotlib)."""


class ForeignFiles(ReportError):
    """Files the plugin did not write stand where it would write or clear; ``paths`` names them."""

    def __init__(self, paths: list[Path], doing: str) -> None:
        self.paths = sorted(paths)
        shown = ", ".join(str(path) for path in self.paths[:10])
        more = f" and {len(self.paths) - 10} more" if len(self.paths) > 10 else ""
        super().__init__(
            f"not written by rlrates, so left alone: {shown}{more}; {doing}. Move them away or choose "
            "another (empty or rlrates-only) report directory"
        )


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
    _refuse_foreign_target(path)
    descriptor, temporary = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    os.close(descriptor)
    try:
        save(temporary)
        os.chmod(temporary, 0o644)  # mkstemp makes it private; a report is meant to be read
        _record_owned(path.parent, path.name)  # before the move: a file in place is always on the list
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
    """Every check folder (one holding ``check.json``) under ``directory``, in path order; symlinks are not followed."""
    root = Path(directory)
    if not root.is_dir():
        raise ReportError(f"{root}: not a directory")
    found = []
    for folder, _, names in os.walk(root, followlinks=False):
        if RECORD_FILE in names and not os.path.islink(os.path.join(folder, RECORD_FILE)):
            found.append(Path(folder))
    return sorted(found)


# --------------------------------------------------------------------------- ownership


def owned_names(folder: Path) -> set[str]:
    """The names of the files the plugin wrote in ``folder`` (empty when it wrote none there)."""
    listing = folder / OWN_FILES
    if listing.is_symlink() or not listing.is_file():
        return set()
    try:
        return {line for line in listing.read_text(encoding="utf-8").splitlines() if line}
    except (OSError, UnicodeDecodeError):
        return set()


def _record_owned(folder: Path, name: str) -> None:
    owned = owned_names(folder)
    if name in owned:
        return
    descriptor, temporary = tempfile.mkstemp(prefix=f"{OWN_FILES}.", suffix=".tmp", dir=folder)
    try:
        with os.fdopen(descriptor, "w", encoding="utf-8", newline="\n") as stream:
            stream.write("".join(f"{entry}\n" for entry in sorted(owned | {name})))
        os.chmod(temporary, 0o644)
        os.replace(temporary, folder / OWN_FILES)
    except BaseException:
        with suppress(FileNotFoundError):
            os.unlink(temporary)
        raise


def _refuse_foreign_target(path: Path) -> None:
    """Refuse to write into a symlinked folder, over a symlink, or over a file the plugin did not write."""
    if path.parent.is_symlink():
        raise ForeignFiles([path.parent], f"refusing to write {path.name} through a symbolic link")
    if path.is_symlink() or (path.exists() and path.name not in owned_names(path.parent)):
        raise ForeignFiles([path], f"refusing to overwrite {path.name}")


def _is_own_file(entry: os.DirEntry[str], owned: set[str]) -> bool:
    return entry.name in owned and entry.is_file(follow_symlinks=False)


def foreign_entries(directory: Path) -> list[Path]:
    """What in a report directory the plugin did not write: top-level files and folders, or files inside its folders.

    A folder is the plugin's when it holds an :data:`OWN_FILES` list; a file is the
    plugin's when its folder's list names it and it is a regular file (a symbolic
    link never is). Only the top level and the plugin's own folders are looked into.
    """
    owned = owned_names(directory)
    foreign: list[Path] = []
    with os.scandir(directory) as entries:
        for entry in entries:
            if entry.name in _OWN_NAMES and entry.is_file(follow_symlinks=False):
                continue
            if entry.is_dir(follow_symlinks=False) and (Path(entry.path) / OWN_FILES).is_file():
                foreign.extend(_foreign_in_folder(Path(entry.path)))
            elif not _is_own_file(entry, owned):
                foreign.append(Path(entry.path))
    return sorted(foreign)


def _foreign_in_folder(folder: Path) -> list[Path]:
    owned = owned_names(folder)
    with os.scandir(folder) as entries:
        return [Path(entry.path) for entry in entries
                if not (entry.name == OWN_FILES and entry.is_file(follow_symlinks=False)) and not _is_own_file(entry, owned)]


def clear_own(directory: Path) -> list[Path]:
    """Remove what the plugin wrote in ``directory`` (its check folders and index files); return what was removed.

    Refuses with :class:`ForeignFiles`, before removing anything, when the
    directory holds anything the plugin did not write.
    """
    foreign = foreign_entries(directory)
    if foreign:
        raise ForeignFiles(foreign, f"the report directory {directory} is not cleared")
    removed: list[Path] = []
    with os.scandir(directory) as entries:
        folders = [Path(entry.path) for entry in entries if entry.is_dir(follow_symlinks=False)]
    for folder in sorted(folders):
        removed.extend(_remove_listed(folder))
        os.rmdir(folder)
    removed.extend(_remove_listed(directory))
    return removed


def remove_own(path: Path) -> bool:
    """Remove ``path`` if the plugin wrote it (on its folder's list, a regular file); return whether it did."""
    if path.is_symlink() or not path.is_file() or path.name not in owned_names(path.parent):
        return False
    path.unlink()
    return True


def _remove_listed(folder: Path) -> list[Path]:
    """Remove the regular files on ``folder``'s list, then the list itself."""
    removed = []
    for name in sorted(owned_names(folder)):
        path = folder / name
        if path.is_file() and not path.is_symlink():
            path.unlink()
            removed.append(path)
    with suppress(FileNotFoundError):
        (folder / OWN_FILES).unlink()
    return removed
