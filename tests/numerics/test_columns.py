"""The statistics path's numpy tables against pandas, the general-purpose reference for the same operations.

Cell summaries, sorting and the mean-error grid were computed with pandas before
they moved to numpy (:mod:`rlrates.columns`); pandas' groupby, sort_values and
pivot_table are the references here. The sums differ in their order of
addition (pandas compensates its sums, numpy adds pairwise), so means and
standard deviations agree to a few units in the last place, not bit for bit.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from rlrates.columns import Columns, group_rows, group_stats
from rlrates.fitting import summarise_cells
from rlrates.messages import mean_error_grid


def _table(seed: int, logged: bool = False) -> pd.DataFrame:
    """An error table as a sweep builds it: unequal replicate counts (escalation), a one-replicate cell, ties."""
    rng = np.random.default_rng(seed)
    rows = []
    for gamma in (0.5, 0.9):
        for level, coverage in (((0, 1.5), (1, 3.0)) if logged else ((0, 1.0),)):
            for n, replicates in ((64, 1), (128, 24), (256, 48), (512, 7)):
                errors = rng.lognormal(-3.0, 1.0, size=replicates)
                if n == 512:
                    errors[:3] = errors[3]  # ties: the median and the sort must not care
                for r, error in enumerate(errors):
                    row = {"gamma": gamma, "H": 1 / (1 - gamma), "n": n, "replicate": r, "error": error,
                           "seconds": 0.0}
                    if logged:
                        row.update(behaviour=level, C=coverage)
                    rows.append(row)
    order = rng.permutation(len(rows))  # the rows arrive in any order
    return pd.DataFrame([rows[i] for i in order])


@pytest.mark.parametrize("logged", [False, True])
@pytest.mark.parametrize("seed", range(5))
def test_cell_summary_agrees_with_pandas_groupby(seed: int, logged: bool) -> None:
    table = _table(seed, logged)
    keys = ["gamma", "behaviour", "C", "n"] if logged else ["gamma", "n"]
    ours = summarise_cells(Columns.of(table)).to_frame()
    reference = table.groupby(keys, sort=True)["error"].agg(
        replicates="count", mean="mean", median="median", sd="std", high="max", low="min").reset_index()
    reference["sd"] = reference["sd"].fillna(0.0)
    assert ours[keys].equals(reference[keys])
    assert (ours["replicates"].to_numpy() == reference["replicates"].to_numpy()).all()
    for column in ("median", "high", "low"):  # order statistics: exact
        assert (ours[column].to_numpy() == reference[column].to_numpy()).all(), column
    for column in ("mean", "sd"):
        np.testing.assert_allclose(ours[column], reference[column], rtol=1e-14, atol=0, err_msg=column)
    np.testing.assert_allclose(ours["log_mean"], np.log(reference["mean"]), rtol=1e-14)


def test_group_stats_of_infinite_errors_and_single_values() -> None:
    """An overflowing estimate gives an infinite error; its cell's mean is inf and its sd 0 (as pandas' fillna gave)."""
    table = Columns({"g": np.array([0, 0, 1]), "error": np.array([np.inf, 1.0, 2.0])})
    stats = group_stats(table["error"], group_rows(table, ["g"], within="error"))
    assert stats["mean"].tolist() == [np.inf, 2.0] and stats["sd"].tolist() == [0.0, 0.0]
    assert stats["median"].tolist() == [np.inf, 2.0] and stats["count"].tolist() == [2, 1]


def test_sort_and_concat_agree_with_pandas() -> None:
    table = _table(7, logged=True)
    keys = ["gamma", "behaviour", "n", "replicate"]
    ours = Columns.concat([Columns.of(table[:40]), Columns.of(table[40:])]).sort(*keys).to_frame()
    reference = table.sort_values(keys, ignore_index=True)
    pd.testing.assert_frame_equal(ours, reference, check_exact=True)


def test_rows_and_masks_pick_the_same_rows_as_pandas() -> None:
    table = _table(3)
    columns = Columns.of(table)
    mask = (table["n"] > 100).to_numpy()
    pd.testing.assert_frame_equal(columns[mask].to_frame(), table[mask].reset_index(drop=True), check_exact=True)
    assert columns.row(0) == {key: value for key, value in table.iloc[0].items()}
    with pytest.raises(KeyError, match="no column 'missing'"):
        columns["missing"]
    with pytest.raises(ValueError, match="unequal length"):
        Columns({"a": [1, 2], "b": [1]})


@pytest.mark.parametrize("logged", [False, True])
def test_mean_error_grid_holds_pandas_pivot_means(logged: bool) -> None:
    table = _table(11, logged)
    columns = ["gamma", "C"] if logged else "gamma"
    pivot = table.pivot_table(index="n", columns=columns, values="error", aggfunc="mean")
    lines = mean_error_grid(Columns.of(table))
    header, body = lines[0].split(), [line.split() for line in lines[1:]]
    assert [int(row[0]) for row in body] == list(pivot.index)
    if logged:
        assert header[1:] == [f"gamma={g:g}" if i % 2 == 0 else f"C={c:.3g}"
                              for g, c in pivot.columns for i in range(2)]
        values = [[float(v) for v in row[1:]] for row in body]
    else:
        assert header[1:] == [f"gamma={g:g}" for g in pivot.columns]
        values = [[float(v) for v in row[1:]] for row in body]
    np.testing.assert_allclose(values, pivot.to_numpy(), rtol=5e-4)  # printed to 4 significant digits


def test_the_grid_from_the_cell_summary_is_the_grid_from_the_rows() -> None:
    # the message lays out the summary's cell means (no second grouping of the rows); same text
    table = Columns.of(_table(12))
    assert mean_error_grid(summarise_cells(table)) == mean_error_grid(table)


def test_new_columns_must_have_the_tables_length() -> None:
    table = Columns({"a": np.arange(3)})
    assert table.with_columns(b=np.ones(3))["b"].tolist() == [1.0, 1.0, 1.0]
    with pytest.raises(ValueError, match="must have 3 rows"):
        table.with_columns(b=np.ones(2))


@pytest.mark.parametrize("shuffled", [False, True])
def test_the_error_table_of_cell_outcomes_is_sorted_as_pandas_sorts_it(shuffled: bool) -> None:
    # outcomes in plan order give a table sorted already (rows_to_table then skips its sort);
    # outcomes in any other order are sorted: pandas' sort_values is the reference either way
    from rlrates.sweep import CellOutcome, rows_to_table

    rng = np.random.default_rng(3)
    outcomes = [CellOutcome(gamma, n, [(r, float(rng.random()), 0.0) for r in range(start, start + 4)])
                for gamma in (0.5, 0.9) for n in (64, 128) for start in (0, 4)]
    if shuffled:
        outcomes = [outcomes[i] for i in rng.permutation(len(outcomes))]
    ours = rows_to_table(outcomes).to_frame()
    reference = ours.sort_values(["gamma", "n", "replicate"], ignore_index=True)
    pd.testing.assert_frame_equal(ours, reference, check_exact=True)
    assert len(ours) == 32
