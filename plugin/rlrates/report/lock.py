"""The session lock of a report directory: one session at a time writes into it.

:func:`lock_report_dir` creates ``.rlrates-lock`` with ``O_CREAT | O_EXCL`` and
writes the owner's pid into it. A lock held by a live process is refused with
:class:`ReportLocked`, naming that pid; a lock left by a process that no longer
runs (or by an earlier session of this same process) is taken over.
:meth:`ReportLock.release` removes the file only while it is still ours. Pure:
no pytest import.
"""

from __future__ import annotations

import os
import secrets
import time
from contextlib import suppress
from dataclasses import dataclass
from pathlib import Path

from .files import LOCK_FILE, ReportError

__all__ = ["LOCK_FILE", "ReportLock", "ReportLocked", "lock_report_dir"]


class ReportLocked(ReportError):
    """Another live session holds the report directory's lock; ``pid`` is its process id."""

    def __init__(self, directory: Path, pid: int | None) -> None:
        self.pid = pid
        holder = f"pid {pid}" if pid is not None else "its lock is being written"
        super().__init__(
            f"{directory}: in use by another rlrates session ({holder}, lock file {directory / LOCK_FILE}); "
            "wait for it to finish or give this session another report directory"
        )


@dataclass
class ReportLock:
    """A held lock; :meth:`release` gives it up."""

    path: Path
    content: str

    def release(self) -> None:
        """Remove the lock file if it is still this session's."""
        with suppress(OSError):
            if self.path.read_text(encoding="ascii") == self.content:
                self.path.unlink()


def _holder(path: Path) -> int | None:
    """The pid written in a lock file, or ``None`` when it is unreadable or half written."""
    try:
        first = path.read_text(encoding="ascii").split()[0]
        return int(first)
    except (OSError, UnicodeDecodeError, IndexError, ValueError):
        return None


def _alive(pid: int) -> bool:
    if pid <= 0:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:  # a live process of another user
        return True
    return True


def lock_report_dir(directory: Path) -> ReportLock:
    """Take the lock of ``directory`` (which must exist); :class:`ReportLocked` when a live session holds it."""
    path = directory / LOCK_FILE
    content = f"{os.getpid()} {secrets.token_hex(8)}\n"
    for _ in range(3):
        try:
            descriptor = os.open(path, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o644)
        except FileExistsError:
            pid = _holder(path)
            if pid is not None and pid != os.getpid() and _alive(pid):
                raise ReportLocked(directory, pid) from None
            if pid is None and _young(path):
                raise ReportLocked(directory, None) from None  # being written this instant
            with suppress(FileNotFoundError):
                path.unlink()  # stale: its session is gone
            continue
        with os.fdopen(descriptor, "w", encoding="ascii") as stream:
            stream.write(content)
        return ReportLock(path, content)
    raise ReportError(f"{path}: could not take the report directory's lock (it keeps changing)")


def _young(path: Path) -> bool:
    with suppress(OSError):
        return time.time() - path.stat().st_mtime < 2.0
    return False
