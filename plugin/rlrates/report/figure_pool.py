"""The figures of many saved checks, drawn after the checks ran: over a small process pool, or in this process.

A test never waits for its figure. The pytest layer writes each check's table and
record with ``write_check(..., figures=False)`` and, once the session's tests are
done, hands the folders to :func:`draw_saved`, which reads every folder back and
draws from the saved files exactly as :func:`~rlrates.report.checks.rebuild` does,
so the figures are byte for byte those a rebuild gives. The pool has at most one
process per usable CPU and never more processes than figures; with one CPU or one
figure everything is drawn in this process. A figure that cannot be drawn (a full
disk, a folder that went away, a record matplotlib chokes on) comes back as a
:class:`DrawnFigure` that says why, never as an exception, so the caller can turn it
into a warning. Pure: no pytest import; matplotlib only through
:mod:`rlrates.report.figures`.
"""

from __future__ import annotations

import os
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

__all__ = ["DrawnFigure", "usable_cpus", "pool_size", "draw_saved"]


@dataclass(frozen=True)
class DrawnFigure:
    """What happened to the figures of one check folder: the files written, or why there are none."""

    folder: Path
    written: tuple[Path, ...] = ()
    problem: str = ""

    @property
    def drawn(self) -> bool:
        return not self.problem


def usable_cpus() -> int:
    """The CPUs this process may run on (its affinity mask where the platform has one), at least 1."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):  # pragma: no cover - macOS and Windows have no affinity mask
        return max(1, os.cpu_count() or 1)


def pool_size(figures: int, processes: int | None = None) -> int:
    """How many processes draw ``figures`` figures: at most ``processes`` (default: the usable CPUs), at most one each.

    1 means "draw in this process" (no pool).
    """
    limit = usable_cpus() if processes is None else max(1, int(processes))
    return max(1, min(int(figures), limit, usable_cpus()))


def _problem(exc: BaseException) -> str:
    return str(getattr(exc, "strerror", None) or exc) or type(exc).__name__


def _draw_one(folder: Path, width: str | float | None) -> DrawnFigure:
    """Read one saved check and draw its figures; any failure becomes the reason it was not drawn."""
    from .checks import read_check
    from .figures import draw_figures

    try:
        saved = read_check(folder)
        return DrawnFigure(folder, tuple(draw_figures(folder, saved.errors, saved.record, width)))
    except Exception as exc:  # noqa: BLE001 - a figure never ends a session; the caller warns with the reason
        return DrawnFigure(folder, problem=_problem(exc))


def _use_style(params: dict[str, Any]) -> None:
    """Pool initializer: the parent's matplotlib settings, so a started (not forked) worker draws the same bytes."""
    from .figures import load_matplotlib

    matplotlib = load_matplotlib()
    if matplotlib is not None and params:
        matplotlib.rcParams.update(params)


def _style_params(context: Any) -> dict[str, Any]:
    """The parent's rc settings for workers that do not inherit them (forked workers do); the backend stays theirs."""
    if context.get_start_method() == "fork":
        return {}
    from .figures import load_matplotlib

    matplotlib = load_matplotlib()
    if matplotlib is None:
        return {}
    return {key: value for key, value in matplotlib.rcParams.items() if key != "backend"}


def _context() -> Any:
    """Fork when it is safe (one thread: the children start with matplotlib already imported), else a fresh start.

    Forking a process that runs threads can deadlock a child (and Python 3.12 warns about
    it), so then the workers start afresh (forkserver, else spawn) and get the style by
    their initializer.
    """
    import multiprocessing
    import threading

    methods = multiprocessing.get_all_start_methods()
    if "fork" in methods and threading.active_count() == 1:
        return multiprocessing.get_context("fork")
    return multiprocessing.get_context("forkserver" if "forkserver" in methods else "spawn")


def draw_saved(folders: Iterable[Path | str], width: str | float | None = None, *,
               processes: int | None = None) -> list[DrawnFigure]:
    """Draw the figures of every saved check folder in ``folders``, in order; one :class:`DrawnFigure` each.

    ``width`` is the figure width (see :func:`rlrates.report.figures.figure_width`);
    ``processes`` caps the pool (default: the usable CPUs, see :func:`pool_size`).
    A pool that breaks (a worker killed) does not lose figures: those it did not
    finish are drawn in this process.
    """
    from .figures import figure_width

    figure_width(width)  # a bad width is refused here, not once per worker
    todo = [Path(folder) for folder in folders]
    size = pool_size(len(todo), processes)
    if size <= 1:
        return [_draw_one(folder, width) for folder in todo]
    return _draw_in_pool(todo, width, size)


def _draw_in_pool(todo: Sequence[Path], width: str | float | None, size: int) -> list[DrawnFigure]:
    from concurrent.futures import BrokenExecutor, ProcessPoolExecutor

    context = _context()
    done: dict[int, DrawnFigure] = {}
    try:
        with ProcessPoolExecutor(max_workers=size, mp_context=context, initializer=_use_style,
                                 initargs=(_style_params(context),)) as pool:
            futures = {index: pool.submit(_draw_one, folder, width) for index, folder in enumerate(todo)}
            for index, future in futures.items():
                done[index] = future.result()
    except (BrokenExecutor, OSError):  # a worker died, or no process could be started: draw the rest here
        pass
    return [done[index] if index in done else _draw_one(folder, width) for index, folder in enumerate(todo)]
