"""The figure of one check: two panels (see :mod:`rlrates.report.panels`), saved as PNG and PDF.

Sized for the full text width of a two-column paper ("page": 7 x 3.1 in, the
panels side by side) or for one column ("column": 3.4 in wide, the panels one
above the other), or any width in inches, with fonts of 8 pt at that print size
and one legend outside the panels so it never covers data. A user's matplotlib
style (a style sheet or matplotlibrc that sets fonts or the figure size) wins
over these defaults: only settings still at matplotlib's defaults are changed. Every discount has its own
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

from .axes import STACK_BELOW, add_legend
from .figure_data import cell_points
from .files import FIGURE_FILES, remove_own, write_atomic
from .panels import Style, panel_coverage, panel_horizon, panel_n

if TYPE_CHECKING:  # pragma: no cover
    from matplotlib.figure import Figure

__all__ = [
    "FIGURE_SIZE", "FIGURE_WIDTHS", "FIGURES_SKIPPED", "figure_width", "load_matplotlib", "figures_available",
    "build_figure", "draw_figures",
]

#: Width and height in inches of a "page" figure: the full text width of a two-column paper.
FIGURE_SIZE = (7.0, 3.1)
#: The named widths in inches: the text width of a two-column paper, and one of its columns.
FIGURE_WIDTHS = {"page": 7.0, "column": 3.4}

#: The one line said when figures are skipped for want of matplotlib.
FIGURES_SKIPPED = "figures skipped: install pytest-rlrates[plot] (matplotlib) to get them"

# Okabe-Ito, most distinct first; yellow last (weak on white).
_COLOURS = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#000000", "#F0E442")
_MARKERS = ("o", "s", "^", "D", "v", "P", "X", "*")
_PNG_DPI = 200
_METADATA = {"png": {"Software": None}, "pdf": {"CreationDate": None, "Producer": None, "Creator": None}}

_STYLE: dict[str, Any] = {
    "font.size": 8,
    "axes.titlesize": 8,
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
    "value": "absolute error of $J(\\pi)$",
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


def figure_width(width: str | float | None) -> float | None:
    """Inches for ``width`` ("column", "page", a number of inches as text or number; ``None``: not chosen).

    Raises ``ValueError`` naming the value for anything else or a width outside 1 to 20 inches.
    """
    if width is None:
        return None
    if isinstance(width, str) and width.strip().lower() in FIGURE_WIDTHS:
        return FIGURE_WIDTHS[width.strip().lower()]
    try:
        inches = float(width)
    except (TypeError, ValueError):
        raise ValueError(
            f"figure width {width!r} must be 'column', 'page' or a number of inches"
        ) from None
    if not 1.0 <= inches <= 20.0:
        raise ValueError(f"figure width {width!r} must be between 1 and 20 inches")
    return inches


_FONT_SIZES = ("font.size", "axes.titlesize", "axes.labelsize", "xtick.labelsize", "ytick.labelsize",
               "legend.fontsize", "legend.title_fontsize")


def _style(matplotlib: ModuleType) -> dict[str, Any]:
    """The report's rc settings, minus those the user has set (differs from matplotlib's default).

    A user who sets any font size keeps all of matplotlib's font sizes (they scale with ``font.size``).
    """
    current, default = matplotlib.rcParams, matplotlib.rcParamsDefault
    user_sizes = any(current[key] != default[key] for key in _FONT_SIZES)
    return {key: value for key, value in _STYLE.items()
            if current[key] == default[key] and not (user_sizes and key in _FONT_SIZES)}


def _size(matplotlib: ModuleType, width: float | None) -> tuple[float, float]:
    """The figure size: the width chosen, else the user's figure.figsize, else the page size."""
    if width is None:
        user = tuple(matplotlib.rcParams["figure.figsize"])
        if user != tuple(matplotlib.rcParamsDefault["figure.figsize"]):
            return float(user[0]), float(user[1])
        width = FIGURE_SIZE[0]
    return (width, FIGURE_SIZE[1]) if width >= STACK_BELOW else (width, 2.2 * width / FIGURE_WIDTHS["column"] * 2.0)


def _y_label(record: Mapping[str, Any]) -> str:
    norm, target = str(record["norm"]), str(record["target"])
    if target == "value":  # one number: no norm over pairs
        return _ERROR_LABELS[target]
    return f"{_NORM_WORDS.get(norm, norm)} {_ERROR_LABELS.get(target, 'error')}"


def build_figure(table: pd.DataFrame, record: Mapping[str, Any], width: str | float | None = None) -> "Figure | None":
    """The two-panel figure of one check, or ``None`` when matplotlib is missing.

    ``table`` is the tidy error table (the rows of ``errors.csv``); ``record`` the
    check's record (keys used: ``claim``, ``fits``, ``slopes``, ``cells``,
    ``status``, ``failure``, ``target``, ``norm``). ``width``: see :func:`figure_width`.
    """
    inches = figure_width(width)
    matplotlib = load_matplotlib()
    if matplotlib is None:
        return None
    from matplotlib import ticker
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.lines import Line2D

    logged = "behaviour" in table.columns
    cells = cell_points(table[table["behaviour"] == 0] if logged else table, record)
    coverage = logged and record["claim"].get("coverage") is not None and record["claim"].get("horizon") is None
    gammas = sorted(float(g) for g in cells["gamma"].unique())
    style: Style = {g: (_COLOURS[i % len(_COLOURS)], _MARKERS[i % len(_MARKERS)]) for i, g in enumerate(gammas)}
    with matplotlib.rc_context(_style(matplotlib)):
        size = _size(matplotlib, inches)
        figure = Figure(figsize=size, layout="constrained")
        FigureCanvasAgg(figure)
        left, right = figure.subplots(*((1, 2) if size[0] >= STACK_BELOW else (2, 1)))
        discounts = panel_n(left, cells, record, style, ticker, Line2D)
        right_panel = (panel_coverage(right, table, record, ticker, Line2D) if coverage
                       else panel_horizon(right, cells, record, style, ticker, Line2D))
        lines = discounts[len(style):] + right_panel
        left.set_ylabel(_y_label(record))
        add_legend(figure, discounts[: len(style)], lines, Line2D([], [], linestyle="none", label=" "))
    return figure


def draw_figures(folder: Path, table: pd.DataFrame, record: Mapping[str, Any],
                 width: str | float | None = None) -> list[Path]:
    """Write the figure files of one check into ``folder``; ``[]`` (and stale figures removed) without matplotlib."""
    figure = build_figure(table, record, width)
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
