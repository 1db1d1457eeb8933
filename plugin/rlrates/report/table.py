"""``errors.csv``: a check's tidy error table, written repr-exact and validated when read back.

One row per (gamma, n, replicate) with the columns
:data:`rlrates.vocabulary.ERROR_COLUMNS`, sorted by gamma, n and replicate; a
logged-data check adds :data:`rlrates.vocabulary.LOGGED_COLUMNS` (the behaviour
level and its concentrability C) and sorts by gamma, behaviour, n and replicate.
Floats are written with 17 significant digits, so reading the file back gives
the very same numbers. Pure: no pytest import.
"""

from __future__ import annotations

import io
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..vocabulary import ERROR_COLUMNS, LOGGED_COLUMNS
from .files import ReportError, read_text, text_digest

__all__ = ["errors_table", "csv_text", "read_errors", "MAX_ERROR"]

_INTEGER_COLUMNS = ("n", "replicate", "behaviour")

#: Largest error a table may hold: its square (in a variance) stays a finite float64.
MAX_ERROR = 1e150


def errors_table(table: pd.DataFrame) -> pd.DataFrame:
    """The columns of ``errors.csv`` from a check's table, sorted by gamma, n and replicate."""
    missing = [c for c in ERROR_COLUMNS if c not in table.columns]
    if missing:
        raise ValueError(f"the check's table lacks column(s) {', '.join(missing)}; expected {', '.join(ERROR_COLUMNS)}")
    if all(c in table.columns for c in LOGGED_COLUMNS):
        columns = [*ERROR_COLUMNS, *LOGGED_COLUMNS]
        return table.loc[:, columns].sort_values(["gamma", "behaviour", "n", "replicate"], ignore_index=True)
    return table.loc[:, list(ERROR_COLUMNS)].sort_values(["gamma", "n", "replicate"], ignore_index=True)


def csv_text(table: pd.DataFrame) -> str:
    """The text of ``errors.csv``: repr-exact floats, ``\\n`` line ends, no index."""
    return str(table.to_csv(index=False, float_format="%.17g", lineterminator="\n"))


def read_errors(path: Path, record_path: Path, expected_sha256: str) -> pd.DataFrame:
    """Read and validate ``errors.csv``: every column present, every value a finite number, the digest unchanged."""
    text = read_text(path)
    try:
        frame = pd.read_csv(io.StringIO(text), dtype=str, keep_default_na=False)
    except (pd.errors.ParserError, pd.errors.EmptyDataError) as exc:
        raise ReportError(f"{path}: not a readable CSV table ({str(exc).strip()})") from None
    missing = [c for c in ERROR_COLUMNS if c not in frame.columns]
    if missing:
        raise ReportError(
            f"{path}: missing column(s) {', '.join(missing)}; expected {', '.join(ERROR_COLUMNS)}, "
            f"found {', '.join(map(str, frame.columns)) or 'none'}"
        )
    logged = [c for c in LOGGED_COLUMNS if c in frame.columns]
    if logged and len(logged) != len(LOGGED_COLUMNS):
        raise ReportError(f"{path}: a logged-data table has both columns {' and '.join(LOGGED_COLUMNS)}, found only "
                          f"{logged[0]!r}")
    table = pd.DataFrame(index=frame.index)
    for column in (*ERROR_COLUMNS, *logged):
        table[column] = _numbers(path, frame, column)
    _check_ranges(path, frame, table)
    if text_digest(text) != expected_sha256:
        raise ReportError(
            f"{path}: contents differ from the sha256 recorded in {record_path} (edited after the run?); "
            "rerun the check to regenerate both"
        )
    return table


def _numbers(path: Path, frame: pd.DataFrame, column: str) -> pd.Series:
    """One column as finite numbers (integers for n and replicate), or a ReportError naming the first bad line."""
    values = pd.to_numeric(frame[column], errors="coerce")
    integer = column in _INTEGER_COLUMNS
    bad = values.isna().to_numpy() | ~np.isfinite(values.to_numpy(float))
    if integer:
        bad |= values.fillna(0).to_numpy(float) % 1 != 0
    if bad.any():
        row = int(np.argmax(bad))
        raise ReportError(f"{path}: line {row + 2}, column {column!r}: {frame[column].iloc[row]!r} is not a finite number"
                          + (" (an integer)" if integer else ""))
    return values.astype(np.int64 if integer else float)


def _check_ranges(path: Path, frame: pd.DataFrame, table: pd.DataFrame) -> None:
    """Every value in its range, and H = 1 / (1 - gamma); a ReportError names the first bad line and what is valid."""
    gamma = table["gamma"].to_numpy(float)
    inside = (gamma > 0) & (gamma < 1)
    horizon = np.divide(1.0, 1.0 - gamma, out=np.full_like(gamma, np.nan), where=inside)
    rules: list[tuple[str, Any, str]] = [
        ("gamma", ~inside, "a discount lies in (0, 1)"),
        ("H", ~(np.abs(table["H"].to_numpy(float) - horizon) <= 1e-9 * horizon),
         "H is the effective horizon 1 / (1 - gamma) of the row's gamma"),
        ("n", table["n"].to_numpy() < 1, "n is a whole number of samples >= 1"),
        ("replicate", table["replicate"].to_numpy() < 0, "a replicate number is >= 0"),
        ("error", ~((table["error"] >= 0) & (table["error"] <= MAX_ERROR)).to_numpy(),
         f"an error is a number from 0 to {MAX_ERROR:g}"),
        ("seconds", table["seconds"].to_numpy(float) < 0, "a time in seconds is >= 0"),
    ]
    if "behaviour" in table.columns:
        rules += [
            ("behaviour", table["behaviour"].to_numpy() < 0, "a behaviour level is >= 0"),
            ("C", ~(table["C"].to_numpy(float) >= 1.0 - 1e-9), "a concentrability coefficient is >= 1"),
        ]
    for column, bad, valid in rules:
        if bad.any():
            row = int(np.argmax(bad))
            raise ReportError(f"{path}: line {row + 2}, column {column!r}: {frame[column].iloc[row]!r} is out of range; "
                              f"{valid}")
