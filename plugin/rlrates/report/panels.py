"""The two panels of a check's figure.

* (a) mean error against n on log-log axes, one line per discount, error bars of
  two standard errors of the mean over replicates, filled markers for the cells
  the check's n-fits used and open markers for the cells it left out, and a
  dashed line of the claimed n-exponent through the geometric mean of the data;
  each discount's legend entry carries the check's own n-slope;
* (b) mean error against H = 1 / (1 - gamma) at the n where the check fitted its
  H-exponent (filled), with a line of that fitted exponent and a dashed line of
  the claimed one; without such an n, at the largest n every discount reached
  (open), with the least-squares line of the plotted points; for a coverage claim
  without an H-claim (logged data), mean error against the concentrability C of
  each behaviour at one n, with lines of the fitted and the claimed C-exponents.
  Panel (a) of a logged check shows behaviour level 0, the behaviour the n-claim
  is tested on.

Titles give the check's fitted exponents with their bounds and verdicts. Each
panel function draws on the axes it is given and returns its legend handles.
"""

from __future__ import annotations

from collections.abc import Mapping
from types import ModuleType
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from ..fit_words import percent
from ..vocabulary import Factor
from .axes import NOTE_COLOUR, empty_panel, finish_log_axes
from .figure_data import coverage_points, discount_slopes, horizon_points
from .schema import record_fit

if TYPE_CHECKING:  # pragma: no cover
    from matplotlib.axes import Axes

__all__ = ["Style", "panel_n", "panel_horizon", "panel_coverage"]

#: Colour and marker shape per discount.
Style = dict[float, tuple[str, str]]

_REFERENCE_LINE: dict[str, Any] = {"linestyle": (0, (4, 2)), "color": "#808080", "linewidth": 1.4, "zorder": 1}
_FIT_LINE: dict[str, Any] = {"linestyle": "-", "color": "#303030", "linewidth": 0.9, "zorder": 2}
_OPEN_MARKER: dict[str, Any] = {"linestyle": "none", "marker": "o", "color": NOTE_COLOUR, "markerfacecolor": "white"}


def _through_geometric_mean(x: np.ndarray, y: np.ndarray, slope: float) -> tuple[np.ndarray, np.ndarray]:
    """A power law of the given slope through the geometric mean of (x, y), spanning x."""
    lx, ly = np.log(x), np.log(y)
    ends = np.array([lx.min(), lx.max()])
    return np.exp(ends), np.exp(ly.mean() + slope * (ends - lx.mean()))


def _signed(value: float) -> str:
    """``+0.52`` / ``−0.47``: a sign always, and a typographic minus."""
    text = f"{value:+.2f}"
    return "+0.00" if text == "-0.00" else text.replace("-", "\u2212")


def _power(symbol: str, exponent: float) -> str:
    return f"${symbol}^{{{exponent:g}}}$"


def _error_bars(cells: pd.DataFrame) -> np.ndarray:
    """Two standard errors below and above each mean, the lower one clipped to stay positive on log axes."""
    mean = cells["mean"].to_numpy(float)
    half = 2.0 * cells["se"].to_numpy(float)
    return np.vstack([np.minimum(half, 0.9 * mean), half])


def _no_data_text(cells: pd.DataFrame) -> str:
    return "every mean error is zero: exact here" if len(cells) else "no finished replicates"


def _title(record: Mapping[str, Any], factor: Factor, label: str) -> str:
    """Panel title: the check's fitted exponent with its bounds and verdict, or why there is none."""
    if record["status"] == "error" and record["claim"].get(factor) is not None:
        failure = record.get("failure") or {}
        where = f" at n={failure['n']}" if "n" in failure else ""
        return f"not fitted: estimator failed{where}"
    fit = record_fit(record, factor)
    if fit is None:
        return f"no {factor} claim"
    claimed = f"{fit.claimed:+g}".replace("-", "\u2212")
    limit = f"tested limit {_signed(fit.limit)} = claim {claimed} + {fit.tolerance:g}"
    if not fit.measured:
        return f"{label}-exponent not measurable: {fit.verdict}\n{limit}"
    levels = f"bounds at {percent(fit.low_level)} / {percent(fit.high_level)}"
    return (f"{label}-exponent {_signed(fit.exponent)} [{_signed(fit.low)}, {_signed(fit.high)}]\n"
            f"{levels}\n{limit}: {fit.verdict}")


def _open_label(rows: pd.DataFrame) -> str:
    """The legend text of open markers: the one reason the cells were left out, or the short forms of several."""
    reasons = list(dict.fromkeys(rows["left_out"].astype(str)))
    if len(reasons) == 1:
        return f"(a) open: {reasons[0]}"
    return "(a) open: left out of the fits (" + ", ".join(dict.fromkeys(r.split(" (")[0] for r in reasons)) + ")"


def _discount_handle(gamma: float, style: Style, slope: float | None, line: Any, *, drawn: bool = True,
                     slopes_shown: bool = True) -> Any:
    """A discount's legend entry: its own n-slope, unless the n-exponent was not measured or nothing is drawn."""
    colour, marker = style[gamma]
    name = f"$\\gamma$={gamma:g}, H={1.0 / (1.0 - gamma):.3g}"
    if not drawn:
        summary = ": no point drawn (zero error)"
    elif not slopes_shown:
        summary = ""
    else:
        summary = ": no n-slope" if slope is None else f": n-slope {_signed(slope)}"
    return line([], [], color=colour, marker=marker, label=name + summary)


def _exact(record: Mapping[str, Any], factor: Factor) -> bool:
    """Whether the check found the error of ``factor`` exactly zero (a fit with verdict "exact")."""
    fit = record_fit(record, factor)
    return fit is not None and fit.verdict == "exact"


def _slopes_shown(record: Mapping[str, Any]) -> bool:
    """Per-discount slopes belong in the legend only when the n-exponent was measured (or not claimed)."""
    fit = record_fit(record, "n")
    return fit is None or fit.measured


def panel_n(ax: "Axes", cells: pd.DataFrame, record: Mapping[str, Any], style: Style, ticker: ModuleType,
            line: Any) -> list[Any]:
    """Panel (a): mean error against n per discount; returns its legend handles (discounts first)."""
    claim = record["claim"]
    positive = cells[(cells["mean"] > 0) & ~cells["zero"]]  # a zero cell's mean is rounding noise: not drawn
    slopes = discount_slopes(record)
    drawn = set(positive["gamma"].astype(float))
    handles = [_discount_handle(gamma, style, slopes.get(gamma), line, drawn=gamma in drawn,
                                slopes_shown=_slopes_shown(record)) for gamma in style]
    for gamma, (colour, marker) in style.items():
        rows = positive[positive["gamma"] == gamma]
        if not len(rows):
            continue
        ax.errorbar(rows["n"], rows["mean"], yerr=_error_bars(rows), color=colour, elinewidth=0.7, capsize=0, zorder=2)
        fitted = rows["fitted"].to_numpy(bool)
        ax.plot(rows["n"][fitted], rows["mean"][fitted], linestyle="none", marker=marker, color=colour, zorder=3)
        ax.plot(rows["n"][~fitted], rows["mean"][~fitted], linestyle="none", marker=marker, color=colour,
                markerfacecolor="white", zorder=3)
    ax.set_title("(a) " + _title(record, "n", "n"), loc="left")
    logged = record.get("data_regime", "generative") != "generative"
    ax.set_xlabel("logged transitions, n" if logged else "samples per state-action pair, n")
    if not len(positive):
        empty_panel(ax, _no_data_text(cells))
        return handles
    n_values, means = positive["n"].to_numpy(float), positive["mean"].to_numpy(float)
    shown = [means]
    if len(np.unique(n_values)) >= 2 and not _exact(record, "n"):
        slope = -0.5 if claim.get("n") is None else float(claim["n"])
        x, y = _through_geometric_mean(n_values, means, slope)
        ax.plot(x, y, **_REFERENCE_LINE)
        shown.append(y)
        word = "claimed" if claim.get("n") is not None else "reference"
        handles.append(line([], [], **_REFERENCE_LINE, label=f"(a) {word} {_power('n', slope)}"))
    left_out = positive[~positive["fitted"]]
    if len(left_out):
        handles.append(line([], [], **_OPEN_MARKER, label=_open_label(left_out)))
    finish_log_axes(ax, n_values, np.concatenate(shown), ticker, x_base=2)
    return handles


def _horizon_line(record: Mapping[str, Any], h: np.ndarray, m: np.ndarray, fitted: bool) -> tuple[float, str]:
    """The slope of panel (b)'s solid line and its legend text: the check's H-exponent, else least squares."""
    fit = record_fit(record, "horizon")
    if fitted and fit is not None and fit.measured:
        return fit.exponent, f"(b) fitted H-exponent {_signed(fit.exponent)}"
    slope = float(np.polyfit(np.log(h), np.log(m), 1)[0])
    return slope, f"(b) least-squares slope {_signed(slope)}"


def panel_horizon(ax: "Axes", cells: pd.DataFrame, record: Mapping[str, Any], style: Style, ticker: ModuleType,
                  line: Any) -> list[Any]:
    """Panel (b): mean error against H at the n of the check's H-fit; returns its legend handles."""
    claim = record["claim"]
    finished = cells
    cells = cells[~cells["zero"]]  # a zero cell's mean is rounding noise: not drawn, no line through it
    positive = cells[cells["mean"] > 0]
    at, fitted = horizon_points(cells)
    ax.set_title("(b) " + _title(record, "horizon", "H"), loc="left")
    ax.set_xlabel("effective horizon H = 1/(1$-\\gamma$)")
    handles: list[Any] = []
    if not len(at):
        empty_panel(ax, _no_data_text(finished) if not len(positive) else "no n reached by every discount")
        return handles
    ax.set_ylabel(f"error at n={int(at['n'].iloc[0])}")
    h, m = at["H"].to_numpy(float), at["mean"].to_numpy(float)
    bars = _error_bars(at)
    face: dict[str, Any] = {} if fitted else {"markerfacecolor": "white"}
    for i, gamma in enumerate(at["gamma"].to_numpy(float)):
        colour, marker = style[gamma]
        ax.errorbar(h[i : i + 1], m[i : i + 1], yerr=bars[:, i : i + 1], color=colour, marker=marker,
                    linestyle="none", elinewidth=0.7, capsize=0, zorder=3, **face)
    shown = [m - bars[0], m + bars[1]]
    if len(at) >= 2:
        slope, text = _horizon_line(record, h, m, fitted)
        x, y = _through_geometric_mean(h, m, slope)
        ax.plot(x, y, **_FIT_LINE)
        handles.append(line([], [], **_FIT_LINE, label=text))
        if claim.get("horizon") is not None:
            x, y = _through_geometric_mean(h, m, float(claim["horizon"]))
            ax.plot(x, y, **_REFERENCE_LINE)
            shown.append(y)
            handles.append(line([], [], **_REFERENCE_LINE, label=f"(b) claimed {_power('H', float(claim['horizon']))}"))
    else:
        ax.text(0.03, 0.03, "one discount: no H-slope", transform=ax.transAxes, color=NOTE_COLOUR)
    if not fitted:
        handles.append(line([], [], **_OPEN_MARKER, label="(b) open: not in an H-fit"))
    finish_log_axes(ax, h, np.concatenate(shown), ticker)
    return handles


def panel_coverage(ax: "Axes", table: pd.DataFrame, record: Mapping[str, Any], ticker: ModuleType,
                   line: Any) -> list[Any]:
    """Panel (b) of a coverage claim: mean error against the concentrability C of each behaviour, at one n."""
    claim = record["claim"]
    ax.set_title("(b) " + _title(record, "coverage", "C"), loc="left")
    ax.set_xlabel("concentrability C of the data")
    at = coverage_points(table)
    handles: list[Any] = []
    if len(at) < 2:
        empty_panel(ax, "no n with a non-zero error at every behaviour")
        return handles
    ax.set_ylabel(f"error at n={int(at['n'].iloc[0])}")
    c, m = at["C"].to_numpy(float), at["mean"].to_numpy(float)
    bars = _error_bars(at)
    ax.errorbar(c, m, yerr=bars, color="#303030", marker="s", linestyle="none", elinewidth=0.7, capsize=0, zorder=3)
    shown = [m - bars[0], m + bars[1]]
    fit = record_fit(record, "coverage")
    if fit is not None and fit.measured:
        x, y = _through_geometric_mean(c, m, fit.exponent)
        ax.plot(x, y, **_FIT_LINE)
        handles.append(line([], [], **_FIT_LINE, label=f"(b) fitted C-exponent {_signed(fit.exponent)}"))
    if claim.get("coverage") is not None:
        x, y = _through_geometric_mean(c, m, float(claim["coverage"]))
        ax.plot(x, y, **_REFERENCE_LINE)
        shown.append(y)
        handles.append(line([], [], **_REFERENCE_LINE, label=f"(b) claimed {_power('C', float(claim['coverage']))}"))
    finish_log_axes(ax, c, np.concatenate(shown), ticker)
    return handles
