"""The figure of one check: two panels (see :mod:`rlrates.report.panels`), saved as PNG and PDF.

Sized for the full text width of a two-column paper (7 x 2.8 in), with one
legend outside both panels so it never covers data. Every discount has its own
colour and marker shape (Okabe-Ito palette, safe for colour-blind readers).

A figure is a pure function of a check's error table and its record (the
``check.json`` content): :func:`draw_figures` takes them in memory when a check
is written and from the saved files when a report is rebuilt, and gives the same
bytes both times. Figures are built with :class:`matplotlib.figure.Figure` and
the Agg canvas, never through ``pyplot``: no global backend switch, no figure
registry to leak. matplotlib is optional and imported only through
:func:`load_matplotlib`.
"""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path
from types import ModuleType
from typing import TYPE_CHECKING, Any

import pandas as pd

from .axes import add_legend
from .figure_data import cell_points
from .files import FIGURE_FILES, remove_own, write_atomic
from .panels import Style, panel_horizon, panel_n

if TYPE_CHECKING:  # pragma: no cover
    from matplotlib.figure import Figure

__all__ = ["FIGURE_SIZE", "FIGURES_SKIPPED", "load_matplotlib", "figures_available", "build_figure", "draw_figures"]

#: Width and height in inches: the full text width of a two-column paper.
FIGURE_SIZE = (7.0, 2.8)
#: The one line said when figures are skipped for want of matplotlib.
FIGURES_SKIPPED = "figures skipped: install pytest-rlrates[plot] (matplotlib) to get them"

# Okabe-Ito, most distinct first; yellow last (weak on white).
_COLOURS = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#000000", "#F0E442")
_MARKERS = ("o", "s", "^", "D", "v", "P", "X", "*")
_PNG_DPI = 200
_METADATA = {"png": {"Software": None}, "pdf": {"CreationDate": None, "Producer": None, "Creator": None}}

_STYLE: dict[str, Any] = {
    "font.size": 8,
    "axes.titlesize": 8.5,
    "axes.labelsize": 8.5,
    "xtick.labelsize": 8,
    "ytick.labelsize": 8,
    "legend.fontsize": 8,
    "legend.title_fontsize": 8,
    "axes.linewidth": 0.7,
    "lines.linewidth": 1.2,
    "lines.markersize": 4.5,
    "pdf.fonttype": 42,  # TrueType in PDFs, as most publishers ask
    "axes.spines.top": False,
    "axes.spines.right": False,
}

_ERROR_LABELS = {
    "q_pi": "error of $Q^\\pi$",
    "q_star": "error of $Q^*$",
    "policy": "suboptimality",
    "model": "$L_1$ error of the model",
}
_NORM_WORDS = {"sup": "sup-norm", "mean": "mean"}


def load_matplotlib() -> ModuleType | None:
    """matplotlib if it can be imported, else ``None`` (the one place that imports it)."""
    try:
        import matplotlib
        import matplotlib.backends.backend_agg  # noqa: F401
        import matplotlib.figure  # noqa: F401
    except ImportError:
        return None
    return matplotlib


def figures_available() -> bool:
    """Whether figures can be drawn (matplotlib importable)."""
    return load_matplotlib() is not None


def _y_label(record: Mapping[str, Any]) -> str:
    norm, target = str(record["norm"]), str(record["target"])
    return f"{_NORM_WORDS.get(norm, norm)} {_ERROR_LABELS.get(target, 'error')}"


def build_figure(table: pd.DataFrame, record: Mapping[str, Any]) -> "Figure | None":
    """The two-panel figure of one check, or ``None`` when matplotlib is missing.

    ``table`` is the tidy error table (the rows of ``errors.csv``); ``record`` the
    check's record (keys used: ``claim``, ``fits``, ``slopes``, ``cells``,
    ``status``, ``failure``, ``target``, ``norm``).
    """
    matplotlib = load_matplotlib()
    if matplotlib is None:
        return None
    from matplotlib import ticker
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.lines import Line2D

    cells = cell_points(table, record)
    gammas = sorted(float(g) for g in cells["gamma"].unique())
    style: Style = {g: (_COLOURS[i % len(_COLOURS)], _MARKERS[i % len(_MARKERS)]) for i, g in enumerate(gammas)}
    with matplotlib.rc_context(_STYLE):
        figure = Figure(figsize=FIGURE_SIZE, layout="constrained")
        FigureCanvasAgg(figure)
        left, right = figure.subplots(1, 2)
        discounts = panel_n(left, cells, record, style, ticker, Line2D)
        lines = discounts[len(style):] + panel_horizon(right, cells, record, style, ticker, Line2D)
        left.set_ylabel(_y_label(record))
        add_legend(figure, discounts[: len(style)], lines, Line2D([], [], linestyle="none", label=" "))
    return figure


def draw_figures(folder: Path, table: pd.DataFrame, record: Mapping[str, Any]) -> list[Path]:
    """Write the figure files of one check into ``folder``; ``[]`` (and stale figures removed) without matplotlib."""
    figure = build_figure(table, record)
    if figure is None:
        for name in FIGURE_FILES:
            remove_own(folder / name)  # a stale figure of an earlier run, never someone else's file
        return []
    written = []
    for name in FIGURE_FILES:
        kind = name.rsplit(".", 1)[1]

        def save(temporary: str, kind: str = kind) -> None:
            figure.savefig(temporary, format=kind, dpi=_PNG_DPI, metadata=_METADATA[kind])

        written.append(write_atomic(folder / name, save))
    return written
