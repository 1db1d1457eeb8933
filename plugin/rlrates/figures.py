"""Appendix figures of one check, drawn from its saved ``errors.csv`` and ``check.json`` alone.

Two panels, sized for the full text width of a two-column paper (7 x 2.8 in):

* (a) mean error against n on log-log axes, one line per discount, each with its
  own colour and marker shape (Okabe-Ito palette, safe for colour-blind readers),
  error bars of two standard errors of the mean over replicates, open markers for
  cells below ``min_n_per_horizon`` H (left out of the check's fits), and a dashed
  line of the claimed n-exponent through the geometric mean of the data;
* (b) mean error at the largest n that every discount reached, against
  H = 1 / (1 - gamma) on log-log axes, with the least-squares line of the plotted
  points and a dashed line of the claimed H-exponent.

One legend sits outside both panels, so it never covers data; it carries each
discount's n-slope (least squares of log mean error on log n over the filled
markers). Panel titles give the check's own fitted exponents with their bounds.

Figures are built with :class:`matplotlib.figure.Figure` and the Agg canvas,
never through ``pyplot``: no global backend switch, no figure registry to leak.
matplotlib is optional and imported only through :func:`load_matplotlib`.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from types import ModuleType
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

if TYPE_CHECKING:  # pragma: no cover
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

__all__ = ["load_matplotlib", "cell_means", "n_slopes", "horizon_cells", "build_figure", "FIGURE_SIZE"]

#: Width and height in inches: the full text width of a two-column paper.
FIGURE_SIZE = (7.0, 2.8)

# Okabe-Ito, most distinct first; yellow last (weak on white).
_COLOURS = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#000000", "#F0E442")
_MARKERS = ("o", "s", "^", "D", "v", "P", "X", "*")
_REFERENCE_COLOUR = "#555555"
_REFERENCE_LINE: dict[str, Any] = {"linestyle": (0, (4, 2)), "color": "#808080", "linewidth": 1.4, "zorder": 1}
_FIT_LINE: dict[str, Any] = {"linestyle": "-", "color": "#303030", "linewidth": 0.9, "zorder": 2}

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


def cell_means(errors: pd.DataFrame) -> pd.DataFrame:
    """Per (gamma, n): H, replicates, mean error and standard error of the mean."""
    grouped = errors.groupby(["gamma", "n"], sort=True)
    cells = grouped["error"].agg(replicates="count", mean="mean", sd="std").reset_index()
    cells["H"] = grouped["H"].first().to_numpy()
    cells["se"] = (cells["sd"].fillna(0.0) / np.sqrt(cells["replicates"])).to_numpy()
    return cells


def _log_slopes(cells: pd.DataFrame, x: str) -> pd.Series:
    """Least-squares slope of log(mean) on log(x) per gamma (NaN when fewer than two distinct x)."""
    lx = pd.Series(np.log(cells[x].to_numpy(float)), index=cells.index)
    ly = pd.Series(np.log(cells["mean"].to_numpy(float)), index=cells.index)
    by = cells["gamma"]
    dx = lx - lx.groupby(by).transform("mean")
    dy = ly - ly.groupby(by).transform("mean")
    num = (dx * dy).groupby(by).sum()
    den = (dx * dx).groupby(by).sum()
    slopes: pd.Series = (num / den).where(den > 1e-12)
    return slopes


def n_slopes(cells: pd.DataFrame, min_n_per_horizon: float) -> pd.Series:
    """Each discount's n-slope over its fitted cells (n >= ``min_n_per_horizon`` H, mean > 0)."""
    fitted = cells[(cells["n"] >= min_n_per_horizon * cells["H"]) & (cells["mean"] > 0)]
    slopes = _log_slopes(fitted, "n") if len(fitted) else pd.Series(dtype=float)
    return slopes.reindex(sorted(cells["gamma"].unique()))


def horizon_cells(cells: pd.DataFrame) -> pd.DataFrame:
    """The cells at the largest n that every discount reached (empty if there is none)."""
    if not len(cells):
        return cells
    reached = cells.groupby("n")["gamma"].nunique()
    common = reached[reached == cells["gamma"].nunique()].index
    if not len(common):
        return cells.iloc[:0]
    chosen: pd.DataFrame = cells[cells["n"] == common.max()].sort_values("gamma")
    return chosen


def _through_geometric_mean(x: np.ndarray, y: np.ndarray, slope: float) -> tuple[np.ndarray, np.ndarray]:
    """A power law of the given slope through the geometric mean of (x, y), spanning x."""
    lx, ly = np.log(x), np.log(y)
    ends = np.array([lx.min(), lx.max()])
    return np.exp(ends), np.exp(ly.mean() + slope * (ends - lx.mean()))


def _signed(value: float) -> str:
    """``+0.52`` / ``−0.47``: a sign always, and a typographic minus."""
    text = f"{value:+.2f}"
    return "+0.00" if text == "-0.00" else text.replace("-", "\u2212")


def _exponent_text(fits: list[Mapping[str, Any]], factor: str) -> str | None:
    for fit in fits:
        if fit.get("factor") != factor:
            continue
        exponent, low, high = fit.get("exponent"), fit.get("low"), fit.get("high")
        if exponent is None or low is None or high is None:
            return f"not measurable, {fit.get('verdict')}"
        return f"{_signed(exponent)} [{_signed(low)}, {_signed(high)}], {fit.get('verdict')}"
    return None


def _power(symbol: str, exponent: float) -> str:
    return f"${symbol}^{{{exponent:g}}}$"


def _tick_text(value: float) -> str:
    return str(int(value)) if float(value).is_integer() else f"{value:.3g}"


def _error_bars(cells: pd.DataFrame) -> np.ndarray:
    """Two standard errors below and above each mean, the lower one clipped to stay positive on log axes."""
    mean = cells["mean"].to_numpy(float)
    half = 2.0 * cells["se"].to_numpy(float)
    return np.vstack([np.minimum(half, 0.9 * mean), half])


def _label_ticks(axis: Any, values: np.ndarray, ticker: ModuleType, most: int = 6) -> None:
    """Ticks at the data's own values, labelled as plain numbers (every other one when crowded)."""
    values = np.unique(values)
    step = math.ceil(len(values) / most)
    labels = [_tick_text(v) if i % step == 0 else "" for i, v in enumerate(values)]
    axis.set_major_locator(ticker.FixedLocator(values))
    axis.set_major_formatter(ticker.FixedFormatter(labels))
    axis.set_minor_locator(ticker.NullLocator())


_MANTISSAS = ((1.0,), (1.0, 2.0, 5.0), (1.0, 2.0, 3.0, 5.0), (1.0, 1.5, 2.0, 3.0, 4.0, 5.0, 6.0, 8.0))


def _log_ticks(low: float, high: float) -> np.ndarray:
    """Tick values in [low, high]: the sparsest of the 1 / 1-2-5 / ... ladders that gives at least three.

    The finest ladder steps by at most 1.5, so a range of a factor 2.5 (see
    :func:`_widen_log_limits`) always holds two ticks or more.
    """
    decades = np.arange(math.floor(math.log10(low)), math.ceil(math.log10(high)) + 1)
    ticks = np.array([])
    for mantissas in _MANTISSAS:
        values = np.outer(10.0 ** decades, mantissas).ravel()
        ticks = values[(values >= low * (1 - 1e-9)) & (values <= high * (1 + 1e-9))]
        if len(ticks) >= 3:
            break
    return ticks if len(ticks) <= 7 else ticks[:: math.ceil(len(ticks) / 7)]


def _label_log_values(ax: "Axes", ticker: ModuleType) -> None:
    """Plain-number labels on the log y axis, at round values that fit its range."""
    low, high = ax.get_ylim()
    ax.yaxis.set_major_locator(ticker.FixedLocator(_log_ticks(low, high)))
    ax.yaxis.set_major_formatter(ticker.FuncFormatter(lambda v, _: f"{v:g}"))
    ax.yaxis.set_minor_locator(ticker.LogLocator(base=10.0, subs=tuple(range(1, 10))))
    ax.yaxis.set_minor_formatter(ticker.NullFormatter())


def _add_legend(figure: "Figure", discounts: list[Any], lines: list[Any], blank: Any) -> None:
    """One legend below both panels: a row block of discounts, then the reference lines; as many columns as fit."""
    renderer = figure.canvas.get_renderer()  # type: ignore[attr-defined]
    for columns in (4, 3, 2, 1):
        handles = _row_major(_pad(discounts, columns, blank) + lines, columns)
        legend = figure.legend(handles=handles, loc="outside lower center", ncols=columns, frameon=False,
                               handlelength=2.2, columnspacing=1.5, borderaxespad=0.2)
        if columns == 1 or legend.get_window_extent(renderer).width <= (FIGURE_SIZE[0] - 0.1) * figure.dpi:
            return
        legend.remove()


def _pad(handles: list[Any], columns: int, blank: Any) -> list[Any]:
    """``handles`` padded with blanks to whole legend rows."""
    return handles + [blank] * (-len(handles) % columns)


def _row_major(handles: list[Any], columns: int) -> list[Any]:
    """Reorder so that a legend, which fills column by column, reads row by row."""
    rows = math.ceil(len(handles) / columns)
    return [handles[r * columns + c] for c in range(columns) for r in range(rows) if r * columns + c < len(handles)]


def _empty(ax: "Axes", text: str) -> None:
    ax.text(0.5, 0.5, text, transform=ax.transAxes, ha="center", va="center", color=_REFERENCE_COLOUR)
    ax.set_xticks([])
    ax.set_yticks([])


def _no_data_text(cells: pd.DataFrame) -> str:
    return "every mean error is zero: exact here" if len(cells) else "no finished replicates"


def _title(record: Mapping[str, Any], factor: str, label: str) -> str:
    """Panel title: the check's fitted exponent with its bounds and verdict, or why there is none."""
    claimed = record["claim"].get("n" if factor == "n" else "horizon") is not None
    if record["status"] == "error" and claimed:
        failure = record.get("failure") or {}
        where = f" at n={failure['n']}" if "n" in failure else ""
        return f"not fitted: estimator failed{where}"
    text = _exponent_text(record["fits"], factor)
    if text is None:
        return f"no {'n' if factor == 'n' else 'horizon'} claim"
    return f"{label}-exponent {text}"


def _widen_log_limits(ax: "Axes", which: str, values: np.ndarray, factor: float = 2.5) -> None:
    """Make a log axis span at least ``factor`` around the data (one point, or nearly equal values)."""
    low, high = float(values.min()), float(values.max())
    if high / low >= factor:
        return
    centre = math.sqrt(low * high)
    limits = (centre / math.sqrt(factor), centre * math.sqrt(factor))
    (ax.set_xlim if which == "x" else ax.set_ylim)(*limits)


def _panel_n(ax: "Axes", cells: pd.DataFrame, record: Mapping[str, Any], style: dict[float, tuple[str, str]],
             ticker: ModuleType, line: Any) -> list[Any]:
    """Panel (a): mean error against n per discount; returns its legend handles (discounts first)."""
    claim, min_n = record["claim"], float(record["profile"]["min_n_per_horizon"])
    positive = cells[cells["mean"] > 0]
    slopes = n_slopes(cells, min_n)
    handles: list[Any] = []
    any_open = False
    for gamma, (colour, marker) in style.items():
        rows = positive[positive["gamma"] == gamma]
        slope = slopes.get(gamma, math.nan)
        summary = f"n-slope {_signed(slope)}" if math.isfinite(slope) else "no n-slope"
        handles.append(line([], [], color=colour, marker=marker,
                            label=f"$\\gamma$={gamma:g}, H={1.0 / (1.0 - gamma):.3g}: {summary}"))
        if not len(rows):
            continue
        ax.errorbar(rows["n"], rows["mean"], yerr=_error_bars(rows), color=colour, elinewidth=0.7, capsize=0, zorder=2)
        early = (rows["n"] < min_n * rows["H"]).to_numpy()
        any_open = any_open or bool(early.any())
        ax.plot(rows["n"][~early], rows["mean"][~early], linestyle="none", marker=marker, color=colour, zorder=3)
        ax.plot(rows["n"][early], rows["mean"][early], linestyle="none", marker=marker, color=colour,
                markerfacecolor="white", zorder=3)
    ax.set_title("(a) " + _title(record, "n", "n"), loc="left")
    ax.set_xlabel("samples per state-action pair, n")
    if not len(positive):
        _empty(ax, _no_data_text(cells))
        return handles
    n_values, means = positive["n"].to_numpy(float), positive["mean"].to_numpy(float)
    shown = [means]
    if len(np.unique(n_values)) >= 2:
        slope = -0.5 if claim.get("n") is None else float(claim["n"])
        x, y = _through_geometric_mean(n_values, means, slope)
        ax.plot(x, y, **_REFERENCE_LINE)
        shown.append(y)
        word = "claimed" if claim.get("n") is not None else "reference"
        handles.append(line([], [], **_REFERENCE_LINE, label=f"(a) {word} {_power('n', slope)}"))
    if any_open:
        handles.append(line([], [], linestyle="none", marker="o", color=_REFERENCE_COLOUR, markerfacecolor="white",
                            label=f"(a) open: n < {min_n:g}H, not fitted"))
    _widen_log_limits(ax, "x", n_values)
    _widen_log_limits(ax, "y", np.concatenate(shown))
    ax.set_xscale("log", base=2)
    ax.set_yscale("log")
    _label_ticks(ax.xaxis, n_values, ticker)
    _label_log_values(ax, ticker)
    return handles


def _panel_horizon(ax: "Axes", cells: pd.DataFrame, record: Mapping[str, Any], style: dict[float, tuple[str, str]],
                   ticker: ModuleType, line: Any) -> list[Any]:
    """Panel (b): mean error at the largest common n against H; returns its legend handles."""
    claim = record["claim"]
    positive = cells[cells["mean"] > 0]
    at = horizon_cells(positive)
    ax.set_title("(b) " + _title(record, "horizon", "H"), loc="left")
    ax.set_xlabel("effective horizon H = 1/(1$-\\gamma$)")
    handles: list[Any] = []
    if not len(at):
        _empty(ax, _no_data_text(cells) if not len(positive) else "no n reached by every discount")
        return handles
    ax.set_ylabel(f"error at n={int(at['n'].iloc[0])}")
    h, m = at["H"].to_numpy(float), at["mean"].to_numpy(float)
    bars = _error_bars(at)
    for i, gamma in enumerate(at["gamma"].to_numpy(float)):
        colour, marker = style[gamma]
        ax.errorbar(h[i : i + 1], m[i : i + 1], yerr=bars[:, i : i + 1], color=colour, marker=marker,
                    linestyle="none", elinewidth=0.7, capsize=0, zorder=3)
    shown = [m - bars[0], m + bars[1]]
    if len(at) >= 2:
        fitted = float(np.polyfit(np.log(h), np.log(m), 1)[0])
        x, y = _through_geometric_mean(h, m, fitted)
        ax.plot(x, y, **_FIT_LINE)
        handles.append(line([], [], **_FIT_LINE, label=f"(b) least-squares slope {_signed(fitted)}"))
        if claim.get("horizon") is not None:
            x, y = _through_geometric_mean(h, m, float(claim["horizon"]))
            ax.plot(x, y, **_REFERENCE_LINE)
            shown.append(y)
            handles.append(line([], [], **_REFERENCE_LINE, label=f"(b) claimed {_power('H', float(claim['horizon']))}"))
    else:
        ax.text(0.03, 0.03, "one discount: no H-slope", transform=ax.transAxes, color=_REFERENCE_COLOUR)
    _widen_log_limits(ax, "x", h)
    _widen_log_limits(ax, "y", np.concatenate(shown))
    ax.set_xscale("log")
    ax.set_yscale("log")
    _label_ticks(ax.xaxis, h, ticker)
    _label_log_values(ax, ticker)
    return handles


def build_figure(errors: pd.DataFrame, record: Mapping[str, Any]) -> "Figure | None":
    """The two-panel figure of one check, or ``None`` when matplotlib is missing.

    ``errors`` is the tidy table of ``errors.csv``; ``record`` the parsed
    ``check.json`` (keys used: ``claim``, ``fits``, ``target``, ``norm``,
    ``profile.min_n_per_horizon``).
    """
    matplotlib = load_matplotlib()
    if matplotlib is None:
        return None
    from matplotlib import ticker
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.lines import Line2D

    cells = cell_means(errors)
    gammas = sorted(cells["gamma"].unique())
    style = {g: (_COLOURS[i % len(_COLOURS)], _MARKERS[i % len(_MARKERS)]) for i, g in enumerate(gammas)}
    y_label = f"{_NORM_WORDS.get(str(record['norm']), str(record['norm']))} {_ERROR_LABELS.get(str(record['target']), 'error')}"
    with matplotlib.rc_context(_STYLE):
        figure = Figure(figsize=FIGURE_SIZE, layout="constrained")
        FigureCanvasAgg(figure)
        left, right = figure.subplots(1, 2)
        discounts = _panel_n(left, cells, record, style, ticker, Line2D)
        lines = discounts[len(style):] + _panel_horizon(right, cells, record, style, ticker, Line2D)
        left.set_ylabel(y_label)
        _add_legend(figure, discounts[: len(style)], lines, Line2D([], [], linestyle="none", label=" "))
    return figure
