"""The per-session state of the pytest layer: settings, marker reader, worker pool, built MDPs, check records.

One :class:`RatesSession` per pytest session lives in ``config.stash`` and is
registered as a plugin, so that it sees every test report, including those a
pytest-xdist controller receives from its workers: each check's record rides on
its report as the user property ``(PROPERTY_NAME, json)``, which is how the
summary works under xdist. Importing this module loads nothing but pytest and
the standard library (and the tiny vocabulary).
"""

from __future__ import annotations

import os
import warnings
from contextlib import suppress
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import pytest

from ..vocabulary import PROPERTY_NAME
from .marker import MarkerReader
from .settings import REPORT_OPTION, RatesSettings, resolve_settings

if TYPE_CHECKING:  # pragma: no cover
    from concurrent.futures import Executor

    from ..result import CheckResult
    from ..suite import SuiteMember
    from .records import CheckRecord

__all__ = ["Terminated", "RatesSession", "start_session", "end_session", "session_of", "session_or_none", "session_settings", "prepare_report_dir"]


class Terminated(KeyboardInterrupt):
    """SIGTERM, raised in the session's main process so that it stops as on Ctrl-C.

    The check in flight keeps its finished rows and writes its report, pytest
    writes its JUnit file and summary, and the worker pool is shut down rather
    than left orphaned.
    """


def _on_sigterm(owner: int) -> Any:
    """A SIGTERM handler for process ``owner``; forked pool workers that inherit it die as SIGTERM says."""
    import signal

    def handler(signum: int, frame: Any) -> None:
        signal.signal(signal.SIGTERM, signal.SIG_DFL)  # a second SIGTERM ends the process at once
        if os.getpid() != owner:
            os.kill(os.getpid(), signal.SIGTERM)
            return
        raise Terminated("SIGTERM")

    return handler


def _install_sigterm_handler() -> Any:
    """Install the handler when SIGTERM has its default action (never replace someone else's); return it."""
    import signal
    import threading

    if threading.current_thread() is not threading.main_thread():
        return None
    if signal.getsignal(signal.SIGTERM) is not signal.SIG_DFL:
        return None
    handler = _on_sigterm(os.getpid())
    signal.signal(signal.SIGTERM, handler)
    return handler


@dataclass(eq=False)  # hashed by identity: pytest puts registered plugins in sets
class RatesSession:
    """Per-session state: settings, the marker reader, collected check records, built MDPs and the worker pool.

    Registered as a plugin so that it sees every test report, including those a
    pytest-xdist controller receives from its workers.
    """

    settings: RatesSettings
    markers: MarkerReader = field(default_factory=MarkerReader)
    records: list[CheckRecord] = field(default_factory=list)
    built: dict[str, Any] = field(default_factory=dict)
    _seen: dict[str, int] = field(default_factory=dict)
    _executor: Executor | None = None
    _lock: Any = None  # the report directory's ReportLock, held by the controller
    _sigterm: Any = None  # the SIGTERM handler this session installed
    controller: bool = True  # False on a pytest-xdist worker: the controller draws the figures
    _undrawn: list[str] = field(default_factory=list)  # checks whose figures could not be drawn
    _interrupted: bool = False  # the session stopped early: figures left to `python -m rlrates report`

    def executor(self) -> Executor | None:
        """The session's process pool, created on first use when workers > 1, and rebuilt when a worker died."""
        if self.settings.workers <= 1:
            return None
        if self._executor is not None and not _usable(self._executor):
            self._executor.shutdown(wait=False, cancel_futures=True)
            self._executor = None
        if self._executor is None:
            from concurrent.futures import ProcessPoolExecutor

            self._executor = ProcessPoolExecutor(max_workers=self.settings.workers)
        return self._executor

    def build(self, member: SuiteMember) -> Any:
        """The member's MDP; a standard member is built once per session."""
        if not member.standard:
            return member.build()
        if member.name not in self.built:
            self.built[member.name] = member.build()
        return self.built[member.name]

    def write_report(self, result: CheckResult, label: str, *, expected: Any = None, figure_width: Any = None) -> None:
        """Write one check's table and record; one that cannot be written (a full disk) is a warning, not a failure.

        The figures are not drawn here but at the end of the session (:meth:`draw_figures`),
        so no test waits for them. The test keeps its verdict; the terminal summary lists
        the reports that are missing.
        """
        from ..report import ReportError, write_check

        assert self.settings.report_dir is not None
        try:
            write_check(result, self.settings.report_dir, label, figures=False, expected=expected,
                        figure_width=figure_width)
        except (OSError, ReportError) as exc:
            _warn(f"rlrates: the report of {label} was not written to {self.settings.report_dir}: "
                  f"{getattr(exc, 'strerror', None) or exc}; the test keeps its verdict")

    def _written_checks(self) -> list[tuple[str, Path, bool]]:
        """Each record's label, its check folder, and whether the folder's record was written."""
        from ..report import RECORD_FILE, check_folder_name

        directory = self.settings.report_dir
        assert directory is not None
        counts: dict[str, int] = {}
        checks = []
        for record in self.records:
            counts[record.test] = counts.get(record.test, 0) + 1
            label = record.test if counts[record.test] == 1 else f"{record.test}#{counts[record.test]}"
            own_label = record.label if record.label != record.test.rsplit("::", 1)[-1] else None
            folder = directory / check_folder_name(label, own_label)
            checks.append((label, folder, (folder / RECORD_FILE).is_file()))
        return checks

    def draw_figures(self) -> None:
        """Draw the figures of every check written this session, over a small process pool (see figure_pool).

        Runs once the tests are done, on the controller (pytest-xdist workers leave it
        to their controller). A figure that cannot be drawn is a warning naming the check
        and the reason; the check keeps its verdict.
        """
        from ..report import figures_available
        from ..report.figure_pool import draw_saved

        written = [(label, folder) for label, folder, saved in self._written_checks() if saved]
        if not written or not figures_available():
            return
        outcomes = draw_saved([folder for _, folder in written], self.settings.figure_width)
        for (label, _), outcome in zip(written, outcomes):
            if not outcome.drawn:
                self._undrawn.append(label)
                _warn(f"rlrates: the figure of {label} was not drawn in {outcome.folder}: {outcome.problem}; "
                      "the test keeps its verdict", stacklevel=2)

    def report_lines(self) -> list[str]:
        """The terminal summary's lines about the report directory: the index written, the reports missing."""
        from ..report import FIGURES_SKIPPED, figures_available, write_index

        directory = self.settings.report_dir
        assert directory is not None
        lines = []
        try:
            written = write_index(directory)
        except (OSError, ValueError) as exc:
            lines.append(f"rlrates report: index not written under {directory}: {getattr(exc, 'strerror', None) or exc}")
        else:
            if written:
                lines.append(f"rlrates report: {len(self.records)} check(s) under {directory} "
                             f"({', '.join(path.name for path in written)})")
        missing = [label for label, _, saved in self._written_checks() if not saved]
        if missing:
            lines.append(f"rlrates report: {len(missing)} report(s) missing (could not be written): {', '.join(missing)}")
        if self._undrawn:
            lines.append(f"rlrates report: {len(self._undrawn)} figure(s) missing (could not be drawn): "
                         f"{', '.join(self._undrawn)}")
        if self._interrupted and figures_available():
            lines.append(f"rlrates report: figures not drawn (the session was interrupted); draw them with "
                         f"python -m rlrates report {directory}")
        if not figures_available():
            lines.append(f"rlrates report: {FIGURES_SKIPPED}")
        return lines

    def _stop_pool(self) -> None:
        if self._executor is not None:
            self._executor.shutdown(wait=True, cancel_futures=True)
            self._executor = None

    def close(self) -> None:
        self._stop_pool()
        if self._lock is not None:
            self._lock.release()
            self._lock = None
        if self._sigterm is not None:
            import signal

            if signal.getsignal(signal.SIGTERM) is self._sigterm:
                signal.signal(signal.SIGTERM, signal.SIG_DFL)
            self._sigterm = None

    @pytest.hookimpl(tryfirst=True)
    def pytest_sessionfinish(self, session: pytest.Session, exitstatus: int) -> None:
        """The tests are done (and every pytest-xdist worker with them): draw the figures, unless interrupted."""
        if self.settings.report_dir is None or not self.controller or not self.records:
            return
        if exitstatus == pytest.ExitCode.INTERRUPTED:
            self._interrupted = True
            return
        self._stop_pool()  # no check runs any more; its threads gone, the figure pool can fork
        self.draw_figures()

    def pytest_runtest_logreport(self, report: pytest.TestReport) -> None:
        texts = [value for name, value in report.user_properties if name == PROPERTY_NAME]
        already = self._seen.get(report.nodeid, 0)
        if len(texts) <= already:
            return
        from .records import CheckRecord

        for text in texts[already:]:
            try:
                self.records.append(CheckRecord.from_json(str(text)))
            except (ValueError, TypeError):
                continue  # someone else's property of the same name: not ours to summarise
        self._seen[report.nodeid] = max(already, len(texts))


_SESSION = pytest.StashKey[RatesSession]()


def _warn(text: str, stacklevel: int = 5) -> None:
    """A report problem as a ReportWarning, even under ``-W error``: the verdict is the test's, not the disk's.

    The default ``stacklevel`` points at the test's check call (through write_report and the runner).
    """
    from ..report import ReportWarning

    with suppress(ReportWarning):
        warnings.warn(text, ReportWarning, stacklevel=stacklevel)


def _usable(executor: Executor) -> bool:
    """Whether ``executor`` still takes work: a pool whose worker died refuses every submit with BrokenExecutor."""
    from concurrent.futures import BrokenExecutor

    try:
        executor.submit(os.getpid)
    except (BrokenExecutor, RuntimeError):  # RuntimeError: shut down
        return False
    return True


def prepare_report_dir(directory: Path, controller: bool) -> Any:
    """Make sure the report directory is writable; on the controller, lock it and clear earlier sessions' checks.

    Returns the controller's lock (``None`` on a pytest-xdist worker). Only what
    the plugin wrote is removed; a directory holding anything else, or locked
    by another live session, is a usage error naming the files or the pid.
    """
    try:
        directory.mkdir(parents=True, exist_ok=True)
        probe = directory / f".rlrates-write-test-{os.getpid()}"
        probe.write_text("")
        probe.unlink()
    except OSError as exc:
        raise pytest.UsageError(
            f"{REPORT_OPTION}: cannot write to the report directory {directory}: {exc.strerror or exc}"
        ) from None
    if not controller:
        return None
    from ..report.files import ReportError, clear_own
    from ..report.lock import lock_report_dir

    try:
        lock = lock_report_dir(directory)
    except ReportError as exc:
        raise pytest.UsageError(f"{REPORT_OPTION}: {exc}") from None
    try:
        clear_own(directory)
    except (ReportError, OSError) as exc:
        lock.release()
        raise pytest.UsageError(f"{REPORT_OPTION}: {exc}") from None
    return lock


def start_session(config: pytest.Config) -> RatesSession:
    """Resolve the settings, prepare the report directory, keep the session in the stash and register it."""
    controller = not hasattr(config, "workerinput")
    session = RatesSession(resolve_settings(config), controller=controller)
    if session.settings.report_dir is not None:
        session._lock = prepare_report_dir(session.settings.report_dir, controller=controller)
    if controller:  # pytest-xdist workers are stopped by their controller
        session._sigterm = _install_sigterm_handler()
    config.stash[_SESSION] = session
    config.pluginmanager.register(session, "rlrates-session")
    return session


def end_session(config: pytest.Config) -> None:
    """Shut the worker pool down and unregister the session (if it started)."""
    session = session_or_none(config)
    if session is not None:
        session.close()
        if config.pluginmanager.is_registered(session):
            config.pluginmanager.unregister(session)


def session_of(config: pytest.Config) -> RatesSession:
    """The session kept in the stash of ``config``."""
    return config.stash[_SESSION]


def session_or_none(config: pytest.Config) -> RatesSession | None:
    """The session kept in the stash of ``config``, or ``None`` when it did not start (a usage error)."""
    return config.stash.get(_SESSION, None)


def session_settings(config: pytest.Config) -> RatesSettings:
    """The resolved rlrates settings of a pytest session (for other plugins and conftest files)."""
    return session_of(config).settings
