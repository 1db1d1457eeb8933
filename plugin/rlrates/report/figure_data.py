"""What a check's figure shows, as tables: the plotted cells and which of them the check's fits used.

The means and their standard errors come from the error table; whether a cell
entered the fits, and why not, comes from the record's ``cells`` (the check's own
marks), and the per-discount n-slopes from its ``slopes``. Nothing is refitted
here, so a figure cannot disagree with its verdict. Pure: pandas only, no
matplotlib.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np
import pandas as pd

__all__ = ["NOT_DECIDED", "cell_points", "discount_slopes", "horizon_points", "coverage_points"]

#: Why a cell of the table is not among the record's cells: no decision covered it.
NOT_DECIDED = "no verdict (the check stopped)"

_MARKS: tuple[tuple[str, Any], ...] = (("usable", False), ("zero", False), ("fitted", False), ("left_out", NOT_DECIDED))


def cell_points(table: pd.DataFrame, record: Mapping[str, Any]) -> pd.DataFrame:
    """Per (gamma, n) of ``table``: H, replicates, mean, se (of the mean), and the record's marks.

    The marks are ``usable``, ``zero``, ``fitted`` and ``left_out`` of the record's
    ``cells``; a cell the record does not list is not fitted, with the reason
    :data:`NOT_DECIDED`.
    """
    grouped = table.groupby(["gamma", "n"], sort=True)
    cells = grouped["error"].agg(replicates="count", mean="mean", sd="std").reset_index()
    cells["H"] = grouped["H"].first().to_numpy()
    cells["se"] = (cells["sd"].fillna(0.0) / np.sqrt(cells["replicates"])).to_numpy()
    marks = {(float(cell["gamma"]), int(cell["n"])): cell for cell in record["cells"]}
    found = [marks.get((float(g), int(n))) for g, n in zip(cells["gamma"], cells["n"])]
    for key, default in _MARKS:
        cells[key] = [default if mark is None else mark[key] for mark in found]
    for key in ("usable", "zero", "fitted"):
        cells[key] = cells[key].astype(bool)
    return cells


def discount_slopes(record: Mapping[str, Any]) -> dict[float, float | None]:
    """The check's n-slope per discount (``None`` for a discount it did not fit)."""
    slopes: dict[float, float | None] = {}
    for entry in record["slopes"]:
        slope = entry.get("slope")
        fitted = entry.get("state") == "fitted" and slope is not None
        slopes[float(entry["gamma"])] = float(slope) if fitted else None
    return slopes


def _largest_common_n(cells: pd.DataFrame, discounts: int, across: str = "gamma") -> pd.DataFrame:
    """The cells at the largest n that ``discounts`` values of ``across`` (discounts, or behaviour levels)
    reached, sorted by ``across`` (empty if there is none)."""
    if not len(cells):
        return cells
    reached = cells.groupby("n")[across].nunique()
    common = reached[reached == discounts].index
    if not len(common):
        return cells.iloc[:0]
    chosen: pd.DataFrame = cells[cells["n"] == common.max()].sort_values(across)
    return chosen


def coverage_points(table: pd.DataFrame) -> pd.DataFrame:
    """Per behaviour level at the largest n where every level has a positive mean error (the first discount):
    C, replicates, mean and the standard error of the mean."""
    first = table[table["gamma"] == table["gamma"].min()]
    grouped = first.groupby(["n", "behaviour"], sort=True)
    cells = grouped["error"].agg(replicates="count", mean="mean", sd="std").reset_index()
    cells["C"] = grouped["C"].first().to_numpy()
    cells["se"] = cells["sd"].fillna(0.0) / np.sqrt(cells["replicates"])
    chosen = _largest_common_n(cells[cells["mean"] > 0], cells["behaviour"].nunique(), "behaviour")
    return chosen.sort_values("C")


def horizon_points(cells: pd.DataFrame) -> tuple[pd.DataFrame, bool]:
    """The cells of the H panel, and whether they are the ones the check's H-exponent is fitted from.

    The check fits the H-exponent at the largest n where every discount has a
    usable, non-zero cell; those cells are returned with ``True``. Without such an
    n, the cells at the largest n every discount reached with a positive mean,
    with ``False`` (empty when there is none either).
    """
    discounts = cells["gamma"].nunique()
    fitted = _largest_common_n(cells[cells["usable"] & ~cells["zero"] & (cells["mean"] > 0)], discounts)
    if len(fitted):
        return fitted, True
    positive = cells[cells["mean"] > 0]
    return _largest_common_n(positive, positive["gamma"].nunique()), False
