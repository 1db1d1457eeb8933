"""Axes and legend of the report figures: log axes labelled with plain numbers, and one shared legend.

* :func:`finish_log_axes`: log-log axes spanning at least a factor 2.5, x ticks at
  the data's own values, y ticks at round values (1, 1-2-5, ... ladders);
* :func:`add_legend`: one legend below both panels, discounts first, with as many
  columns as fit the figure's width;
* :func:`empty_panel`: a note in place of data.

Takes matplotlib objects and the ``matplotlib.ticker`` module as arguments; imports
no matplotlib itself.
"""

from __future__ import annotations

import math
from types import ModuleType
from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:  # pragma: no cover
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

__all__ = ["NOTE_COLOUR", "STACK_BELOW", "log_ticks", "finish_log_axes", "add_legend", "empty_panel"]

#: The colour of notes and reference markers.
NOTE_COLOUR = "#555555"

_MANTISSAS = ((1.0,), (1.0, 2.0, 5.0), (1.0, 2.0, 3.0, 5.0), (1.0, 1.5, 2.0, 3.0, 4.0, 5.0, 6.0, 8.0))
_MINIMUM_SPAN = 2.5
#: Figures narrower than this (inches) stack their two panels instead of setting them side by side.
STACK_BELOW = 5.0


def _tick_text(value: float) -> str:
    return str(int(value)) if float(value).is_integer() else f"{value:.3g}"


def _powers_of_two(values: np.ndarray) -> bool:
    exponents = np.log2(values)
    return bool(np.all(values > 0) and np.allclose(exponents, np.round(exponents)))


def _label_ticks(axis: Any, values: np.ndarray, ticker: ModuleType, most: int = 6) -> None:
    """Ticks at the data's own values, labelled as plain numbers.

    When crowded, powers of two are all labelled in the short form $2^{k}$; other values
    are labelled every other one.
    """
    values = np.unique(values)
    if len(values) > most and _powers_of_two(values):
        labels = [f"$2^{{{int(round(math.log2(v)))}}}$" for v in values]
    else:
        step = math.ceil(len(values) / most)
        labels = [_tick_text(v) if i % step == 0 else "" for i, v in enumerate(values)]
    axis.set_major_locator(ticker.FixedLocator(values))
    axis.set_major_formatter(ticker.FixedFormatter(labels))
    axis.set_minor_locator(ticker.NullLocator())


def log_ticks(low: float, high: float, most: int = 7) -> np.ndarray:
    """Tick values in [low, high]: the sparsest of the 1 / 1-2-5 / ... ladders that gives at least three.

    The finest ladder steps by at most 1.5, so a range of a factor 2.5 (the least
    span :func:`finish_log_axes` gives an axis) always holds two ticks or more.
    """
    decades = np.arange(math.floor(math.log10(low)), math.ceil(math.log10(high)) + 1)
    ticks = np.array([])
    for mantissas in _MANTISSAS:
        values = np.outer(10.0 ** decades, mantissas).ravel()
        ticks = values[(values >= low * (1 - 1e-9)) & (values <= high * (1 + 1e-9))]
        if len(ticks) >= 3:
            break
    return ticks if len(ticks) <= most else ticks[:: math.ceil(len(ticks) / most)]


def _label_log_values(ax: "Axes", ticker: ModuleType) -> None:
    """Plain-number labels on the log y axis, at round values that fit its range."""
    low, high = ax.get_ylim()
    # about one labelled tick per 0.3 in of axes height: an axes is about 55% of its row of the
    # figure, and a narrow figure has two rows (its panels are stacked)
    figure = ax.figure
    width, height = figure.bbox.width / figure.dpi, figure.bbox.height / figure.dpi  # inches
    rows = 2 if width < STACK_BELOW else 1
    most = max(3, min(7, int(0.55 * height / rows / 0.3)))
    ax.yaxis.set_major_locator(ticker.FixedLocator(log_ticks(low, high, most)))
    ax.yaxis.set_major_formatter(ticker.FuncFormatter(lambda v, _: f"{v:g}"))
    ax.yaxis.set_minor_locator(ticker.LogLocator(base=10.0, subs=tuple(range(1, 10))))
    ax.yaxis.set_minor_formatter(ticker.NullFormatter())


def _widen_log_limits(ax: "Axes", which: str, values: np.ndarray) -> None:
    """Make a log axis span at least a factor 2.5 around the data (one point, or nearly equal values)."""
    low, high = float(values.min()), float(values.max())
    if high / low >= _MINIMUM_SPAN:
        return
    centre = math.sqrt(low * high)
    limits = (centre / math.sqrt(_MINIMUM_SPAN), centre * math.sqrt(_MINIMUM_SPAN))
    (ax.set_xlim if which == "x" else ax.set_ylim)(*limits)


def finish_log_axes(ax: "Axes", x: np.ndarray, y: np.ndarray, ticker: ModuleType, x_base: float = 10.0) -> None:
    """Log scales on both axes, wide enough for ``x`` and ``y``, ticks at the x values and round y values."""
    _widen_log_limits(ax, "x", x)
    _widen_log_limits(ax, "y", y)
    ax.set_xscale("log", base=x_base)
    ax.set_yscale("log")
    _label_ticks(ax.xaxis, x, ticker)
    _label_log_values(ax, ticker)


def add_legend(figure: "Figure", discounts: list[Any], lines: list[Any], blank: Any) -> None:
    """One legend below both panels: a row block of discounts, then the reference lines; as many columns as fit."""
    renderer = figure.canvas.get_renderer()  # type: ignore[attr-defined]
    width = (figure.get_figwidth() - 0.1) * figure.dpi
    for columns in (4, 3, 2, 1):
        handles = _row_major(_pad(discounts, columns, blank) + lines, columns)
        legend = figure.legend(handles=handles, loc="outside lower center", ncols=columns, frameon=False,
                               handlelength=2.2, columnspacing=1.5, borderaxespad=0.2)
        if columns == 1 or legend.get_window_extent(renderer).width <= width:
            return
        legend.remove()


def _pad(handles: list[Any], columns: int, blank: Any) -> list[Any]:
    """``handles`` padded with blanks to whole legend rows."""
    return handles + [blank] * (-len(handles) % columns)


def _row_major(handles: list[Any], columns: int) -> list[Any]:
    """Reorder so that a legend, which fills column by column, reads row by row."""
    rows = math.ceil(len(handles) / columns)
    return [handles[r * columns + c] for c in range(columns) for r in range(rows) if r * columns + c < len(handles)]


def empty_panel(ax: "Axes", text: str) -> None:
    """A centred note instead of data, and no ticks."""
    ax.text(0.5, 0.5, text, transform=ax.transAxes, ha="center", va="center", color=NOTE_COLOUR)
    ax.set_xticks([])
    ax.set_yticks([])
