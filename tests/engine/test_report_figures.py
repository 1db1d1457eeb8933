"""Tests of the report figures: drawn from the check's record and table, never refitted.

Real checks come from tests/engine/report_checks.py and conftest.py; the hand-made cases are power laws
(error = 3 n^-1/2 H^3/2, two equal replicates per cell), whose means are exact.
"""

from __future__ import annotations

import os
import shutil
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest
from matplotlib.colors import to_hex
from matplotlib.lines import Line2D
from matplotlib.text import Text
from report_checks import FAIL_ID, PASS_ID

import rlrates
from rlrates import CheckResult, RatesWarning, reference
from rlrates.report import check_folder_name, figure_pool, read_check, rebuild, write_check
from rlrates.report.figure_data import NOT_DECIDED, cell_points, discount_slopes, horizon_points
from rlrates.report.figures import build_figure
from rlrates.result import Fit

PRE_ASYMPTOTIC = "pre-asymptotic (n < 8 H)"


def power_law_table() -> pd.DataFrame:
    n = np.repeat([64, 128, 256, 512], 2)
    return pd.concat([
        pd.DataFrame({"gamma": g, "H": 1 / (1 - g), "n": n, "replicate": np.tile([0, 1], 4),
                      "error": 3.0 * n ** -0.5 * (1 / (1 - g)) ** 1.5, "seconds": 0.0})
        for g in (0.5, 0.9)
    ], ignore_index=True)


def mark(gamma: float, n: int, fitted: bool = True, left_out: str = "", usable: bool = True) -> dict[str, Any]:
    mean = 3.0 * n ** -0.5 * (1 / (1 - gamma)) ** 1.5
    return {"gamma": gamma, "n": n, "replicates": 2, "mean": mean, "usable": usable, "zero": False,
            "fitted": fitted, "left_out": left_out}


def power_law_record(slopes: tuple[float, float] = (-0.25, -0.75)) -> dict[str, Any]:
    """A record whose n-slopes deliberately differ from the data's -0.5, and whose (0.9, 64) cell was left out."""
    cells = [mark(g, n) for g in (0.5, 0.9) for n in (64, 128, 256, 512)]
    cells[4] = mark(0.9, 64, fitted=False, left_out=PRE_ASYMPTOTIC, usable=False)
    fit = Fit("n", exponent=-0.5, se=0.01, low=-0.52, high=-0.48, low_level=0.99, high_level=0.95, claimed=-0.5,
              tolerance=0.15, detectable=-0.3, verdict="ok")
    return {
        "status": "pass", "target": "q_pi", "norm": "sup", "claim": {"n": -0.5, "horizon": None},
        "fits": [fit.to_dict()], "failure": None, "cells": cells,
        "slopes": [{"gamma": 0.5, "state": "fitted", "slope": slopes[0]}, {"gamma": 0.9, "state": "fitted", "slope": slopes[1]}],
    }


def open_points(figure: Any) -> set[tuple[float, float]]:
    """The (n, mean) of the open markers of panel (a)."""
    return {(float(x), float(y)) for line in figure.axes[0].get_lines()
            if line.get_linestyle() == "None" and to_hex(line.get_markerfacecolor()) == "#ffffff"
            for x, y in zip(line.get_xdata(), line.get_ydata())}


def legend_texts(figure: Any) -> list[str]:
    (legend,) = figure.legends
    return [t.get_text() for t in legend.get_texts()]


# --------------------------------------------------------------------------- the cells a figure shows


def test_cells_take_their_means_from_the_table_and_their_marks_from_the_record() -> None:
    record = power_law_record()
    record["cells"] = record["cells"][:-1]  # (0.9, 512) is not in the record: no verdict covers it
    cells = cell_points(power_law_table(), record)
    np.testing.assert_allclose(cells["mean"], 3.0 * cells["n"] ** -0.5 * cells["H"] ** 1.5, rtol=1e-15)
    assert (cells["se"] == 0).all() and (cells["replicates"] == 2).all()
    by_cell = cells.set_index(["gamma", "n"])
    assert by_cell.loc[(0.9, 64), "left_out"] == PRE_ASYMPTOTIC and not by_cell.loc[(0.9, 64), "fitted"]
    assert by_cell.loc[(0.9, 512), "left_out"] == NOT_DECIDED and not by_cell.loc[(0.9, 512), "fitted"]
    assert int(cells["fitted"].sum()) == 6
    assert discount_slopes(record) == {0.5: -0.25, 0.9: -0.75}
    record["slopes"][1] = {"gamma": 0.9, "state": "too few asymptotic points", "slope": None}
    assert discount_slopes(record) == {0.5: -0.25, 0.9: None}


def test_horizon_cells_are_those_of_the_checks_h_fit() -> None:
    record = power_law_record()
    for cell in record["cells"]:
        if cell["n"] == 512 and cell["gamma"] == 0.9:
            cell["usable"] = False  # saturated, say: the H-fit moves to n = 256
    at, fitted = horizon_points(cell_points(power_law_table(), record))
    assert fitted and at["n"].unique().tolist() == [256] and at["gamma"].tolist() == [0.5, 0.9]
    for cell in record["cells"]:
        cell["usable"] = cell["gamma"] == 0.5  # no n is usable at both discounts: the largest common n, open
    at, fitted = horizon_points(cell_points(power_law_table(), record))
    assert not fitted and at["n"].unique().tolist() == [512]
    table = power_law_table()
    at, fitted = horizon_points(cell_points(table[~((table["gamma"] == 0.9) & (table["n"] == 512))], record))
    assert not fitted and at["n"].unique().tolist() == [256]  # the largest n every discount reached


def test_legend_slopes_and_open_markers_follow_the_record() -> None:
    """The record's slopes (-0.25, -0.75) are shown, not the data's -0.5; the left-out cell is drawn open."""
    figure = build_figure(power_law_table(), power_law_record())
    assert figure is not None
    labels = legend_texts(figure)
    assert "$\\gamma$=0.5, H=2: n-slope \u22120.25" in labels and "$\\gamma$=0.9, H=10: n-slope \u22120.75" in labels
    assert f"(a) open: {PRE_ASYMPTOTIC}" in labels
    ((n, mean),) = open_points(figure)
    assert n == 64 and mean == pytest.approx(3.0 * 64 ** -0.5 * 10 ** 1.5, rel=1e-12)


# --------------------------------------------------------------------------- figures of real checks


@pytest.fixture(scope="module")
def saved_failing(tmp_path_factory: pytest.TempPathFactory, failing: CheckResult) -> Path:
    return write_check(failing, tmp_path_factory.mktemp("report"), FAIL_ID)


@pytest.mark.parametrize(("width", "size"), [("page", (7.0, 3.1)), ("column", (3.4, 4.4)), (None, (7.0, 3.1))])
def test_figure_is_readable(saved_failing: Path, width: str | None, size: tuple[float, float]) -> None:
    """8 pt text at print size (common practice for figures in a paper), nothing overlapping or cut off."""
    saved = read_check(saved_failing)
    figure = build_figure(saved.errors, saved.record, width)
    assert figure is not None
    figure.canvas.draw()
    renderer = figure.canvas.get_renderer()  # type: ignore[attr-defined]
    assert tuple(figure.get_size_inches()) == pytest.approx(size)
    texts = [t for t in figure.findobj(Text) if isinstance(t, Text) and t.get_text() and t.get_visible()]
    assert len(texts) > 20 and min(float(t.get_fontsize()) for t in texts) >= 8
    (legend,) = figure.legends
    labels = legend_texts(figure)
    slopes = [(entry["gamma"], entry["slope"]) for entry in saved.record["slopes"]]
    assert len(slopes) == 3
    for gamma, slope in slopes:
        assert any(f"={gamma:g}," in label and f"{abs(slope):.2f}" in label for label in labels)
    assert any("claimed $n^{-0.5}$" in label for label in labels)
    assert any("claimed $H^{2}$" in label for label in labels)
    (h_fit,) = [fit for fit in saved.record["fits"] if fit["factor"] == "horizon"]
    assert "(b) fitted H-exponent " + f"{h_fit['exponent']:+.2f}".replace("-", "\u2212") in labels
    discounts = [h for h in legend.legend_handles if isinstance(h, Line2D) and h.get_marker() not in ("None", "")
                 and h.get_linestyle() != "None"]
    assert len(discounts) == len({h.get_color() for h in discounts}) == len({h.get_marker() for h in discounts}) == 3
    boxes = [ax.get_tightbbox(renderer) for ax in figure.axes] + [legend.get_window_extent(renderer)]
    for i, first in enumerate(boxes):
        for second in boxes[i + 1:]:
            assert first is not None and second is not None and not first.overlaps(second), "panels and legend overlap"
    assert all(box is not None and box.x0 >= -1 and box.x1 <= figure.bbox.width + 1 for box in boxes), "cut off"


def test_left_out_cells_of_a_real_check_are_drawn_open(garnet: rlrates.TabularMDP, tmp_path: Path) -> None:
    """A grid that starts below 8 H: the check leaves those cells out, and the figure draws exactly them open."""
    with pytest.warns(RatesWarning, match="pre-asymptotic"):
        result = rlrates.check(reference.plugin_q_pi, garnet, rlrates.Claim(n=-0.5, horizon=2.0), seed=3,
                               n_grid=(32, 64, 128, 256, 512, 1024), context=PASS_ID)
    saved = read_check(write_check(result, tmp_path, PASS_ID, figures=False))
    left_out = {(float(c["n"]), c["mean"]) for c in saved.record["cells"] if not c["fitted"]}
    assert {c["left_out"] for c in saved.record["cells"] if not c["fitted"]} >= {PRE_ASYMPTOTIC}
    figure = build_figure(saved.errors, saved.record)
    assert open_points(figure) == left_out
    assert f"(a) open: {PRE_ASYMPTOTIC}" in legend_texts(figure)


def test_write_check_draws_from_memory_the_same_bytes_as_rebuild(monkeypatch: pytest.MonkeyPatch, tmp_path: Path,
                                                                 passing: CheckResult) -> None:
    """write_check does not read back the files it wrote; rebuilding from them gives the very same figures."""
    def no_reading(*args: Any) -> None:
        raise AssertionError("write_check read a saved file back")

    from rlrates.report import checks

    for name in ("read_check", "read_record", "read_errors"):
        monkeypatch.setattr(checks, name, no_reading)
    folder = write_check(passing, tmp_path / "first", PASS_ID)
    monkeypatch.undo()
    drawn = {name: (folder / name).read_bytes() for name in ("figure.png", "figure.pdf")}
    copy = Path(shutil.copytree(folder.parent, tmp_path / "second"))
    for name in drawn:
        (copy / check_folder_name(PASS_ID) / name).unlink()
    rebuild(copy)
    assert {name: (copy / check_folder_name(PASS_ID) / name).read_bytes() for name in drawn} == drawn


def test_titles_state_the_tested_limit_and_the_levels(saved_failing: Path) -> None:
    saved = read_check(saved_failing)
    figure = build_figure(saved.errors, saved.record, "column")
    assert figure is not None
    (n_fit,) = [Fit.from_dict(f) for f in saved.record["fits"] if f["factor"] == "n"]
    title = figure.axes[0].get_title(loc="left")
    minus = "\u2212"
    assert f"tested limit {n_fit.limit:+.2f} = claim {n_fit.claimed:+g} + {n_fit.tolerance:g}".replace("-", minus) in title
    assert f"bounds at {100 * n_fit.low_level:.4g}% / {100 * n_fit.high_level:.4g}%" in title


def test_a_users_font_size_and_figure_size_win(saved_failing: Path) -> None:
    """A style that sets font.size and figure.figsize (as a style sheet or matplotlibrc would) is honoured."""
    import matplotlib

    saved = read_check(saved_failing)
    with matplotlib.rc_context({"font.size": 11.0, "font.family": "serif", "figure.figsize": (6.0, 4.0)}):
        figure = build_figure(saved.errors, saved.record)
    assert figure is not None
    assert tuple(figure.get_size_inches()) == pytest.approx((6.0, 4.0))
    title = figure.axes[0].title if figure.axes[0].get_title() else figure.axes[0]._left_title  # noqa: SLF001
    assert figure.axes[0]._left_title.get_fontsize() >= 11.0  # noqa: SLF001  ("large" relative to 11 pt)
    assert figure.axes[0]._left_title.get_fontfamily() == ["serif"]  # noqa: SLF001
    assert title is not None


@pytest.mark.parametrize("bad", ["wide", "0.5", "nan", "30"])
def test_bad_figure_width_is_refused_by_name(bad: str) -> None:
    from rlrates.report.figures import figure_width

    with pytest.raises(ValueError, match=f"figure width '{bad}' must be"):
        figure_width(bad)


def test_an_exact_check_draws_no_line_through_rounding_noise() -> None:
    """Cells whose error vanished (zero) carry rounding noise of 1e-16: no points, no fitted or claimed line."""
    table = power_law_table()
    table["error"] = 1e-16 * (1 + table["replicate"])
    record = power_law_record()
    record["cells"] = [dict(cell, zero=True, usable=True, fitted=False, left_out="zero error") for cell in record["cells"]]
    record["fits"] = [Fit("n", exponent=float("nan"), se=float("nan"), low=float("nan"), high=float("nan"),
                          low_level=0.99, high_level=0.95, claimed=-0.5, tolerance=0.15, detectable=float("nan"),
                          verdict="exact").to_dict()]
    figure = build_figure(table, record)
    assert figure is not None
    assert all(len(line.get_xdata()) == 0 for ax in figure.axes for line in ax.get_lines())
    assert "every mean error is zero: exact here" in [t.get_text() for ax in figure.axes for t in ax.texts]
    labels = legend_texts(figure)
    assert "$\\gamma$=0.5, H=2: no point drawn (zero error)" in labels
    assert not any("claimed" in label or "slope" in label for label in labels)


def test_no_slopes_in_the_legend_when_the_n_exponent_is_not_measurable() -> None:
    record = power_law_record()
    record["fits"] = [Fit("n", exponent=float("nan"), se=float("nan"), low=float("nan"), high=float("nan"),
                          low_level=0.99, high_level=0.95, claimed=-0.5, tolerance=0.15, detectable=float("nan"),
                          verdict="unclear").to_dict()]
    figure = build_figure(power_law_table(), record)
    assert figure is not None
    assert figure.axes[0].get_title(loc="left").startswith("(a) n-exponent not measurable")
    labels = legend_texts(figure)
    assert "$\\gamma$=0.5, H=2" in labels and "$\\gamma$=0.9, H=10" in labels
    assert not any("n-slope" in label for label in labels)


def test_every_power_of_two_of_a_long_grid_is_labelled() -> None:
    n = np.repeat(2 ** np.arange(6, 14), 2)
    table = pd.DataFrame({"gamma": 0.5, "H": 2.0, "n": n, "replicate": np.tile([0, 1], 8),
                          "error": 3.0 * n ** -0.5, "seconds": 0.0})
    record = power_law_record()
    record["cells"] = [mark(0.5, int(v)) for v in 2 ** np.arange(6, 14)]
    record["slopes"] = record["slopes"][:1]
    figure = build_figure(table, record, "column")
    assert figure is not None
    figure.canvas.draw()
    labels = [t.get_text() for t in figure.axes[0].get_xticklabels()]
    assert labels == [f"$2^{{{k}}}$" for k in range(6, 14)]


def test_y_ticks_thin_out_on_the_short_axes_of_a_column_figure(saved_failing: Path) -> None:
    """Stacked panels at column width are short: at most four labelled y ticks each (about 0.3 in apart)."""
    saved = read_check(saved_failing)
    for width, most in (("column", 4), ("page", 5)):
        figure = build_figure(saved.errors, saved.record, width)
        assert figure is not None
        figure.canvas.draw()
        for ax in figure.axes:
            low, high = ax.get_ylim()
            shown = [t for t in ax.get_yticklabels() if t.get_text() and low <= t.get_position()[1] <= high]
            assert 2 <= len(shown) <= most, (width, [t.get_text() for t in shown])


def test_a_coverage_check_draws_error_against_c_and_rebuilds_from_its_files(tmp_path) -> None:
    """errors.csv keeps the behaviour level and C, so the report command redraws the C panel from the files
    alone (common practice: the figure shows the factor the claim bounds)."""
    import rlrates
    from rlrates.reference_logged import logged_plugin_q_pi
    from rlrates.report.checks import read_check, write_check
    from rlrates.report.figure_data import coverage_points

    mdp = rlrates.garnet(states=6, actions=2, branching=2, seed=1)
    result = rlrates.check(logged_plugin_q_pi, mdp, rlrates.Claim(n=-0.5, coverage=0.5), data="transitions",
                           n_grid=(480, 960, 1920, 3840), replicates=8)
    folder = write_check(result, tmp_path, "test_x.py::test_cov", figures=False)
    saved = read_check(folder)
    table, record = saved.errors, saved.record
    assert {"behaviour", "C"} <= set(table.columns) and record["data_regime"] == "transitions"
    points = coverage_points(table)
    assert len(points) == 4 and points["C"].is_monotonic_increasing
    assert (points["n"] == points["n"].iloc[0]).all()


# --------------------------------------------------------------------------- figures drawn after the checks ran


@pytest.fixture()
def tables_without_figures(tmp_path: Path, passing: CheckResult, failing: CheckResult) -> list[Path]:
    """Two check folders as a session leaves them before its end: tables and records, no figures yet."""
    return [write_check(result, tmp_path / "late", test_id, figures=False)
            for result, test_id in ((passing, PASS_ID), (failing, FAIL_ID))]


def _figure_bytes(folders: list[Path]) -> dict[tuple[str, str], bytes]:
    return {(folder.name, name): (folder / name).read_bytes() for folder in folders for name in ("figure.png", "figure.pdf")}


@pytest.mark.parametrize("processes", [1, 2])
def test_figures_drawn_late_are_the_bytes_rebuild_draws(tables_without_figures: list[Path], tmp_path: Path,
                                                        processes: int) -> None:
    """In this process or over a pool, the late figures are those `python -m rlrates report` draws (common practice)."""
    from rlrates.report.figure_pool import draw_saved

    copy = Path(shutil.copytree(tables_without_figures[0].parent, tmp_path / "copy"))
    outcomes = draw_saved(tables_without_figures, processes=processes)
    assert [o.folder for o in outcomes] == tables_without_figures and all(o.drawn for o in outcomes)
    assert {p.name for o in outcomes for p in o.written} == {"figure.png", "figure.pdf"}
    rebuild(copy)
    assert _figure_bytes(tables_without_figures) == _figure_bytes([copy / f.name for f in tables_without_figures])


def test_the_pool_never_has_more_processes_than_figures_or_cpus() -> None:
    """Common practice: one process per usable CPU at most; one figure or one CPU is drawn in this process."""
    from rlrates.report.figure_pool import pool_size, usable_cpus

    assert pool_size(1) == 1 and pool_size(0) == 1
    assert pool_size(1000) == usable_cpus()
    assert pool_size(1000, processes=1) == 1
    assert pool_size(3, processes=1000) == min(3, usable_cpus())


def test_a_figure_that_cannot_be_drawn_says_why_and_the_others_are_drawn(tables_without_figures: list[Path],
                                                                         tmp_path: Path) -> None:
    from rlrates.report.figure_pool import draw_saved

    gone = tmp_path / "late" / "gone-00000000"
    outcomes = draw_saved([gone, *tables_without_figures], processes=2)
    assert not outcomes[0].drawn and "gone-00000000" in outcomes[0].problem and "missing" in outcomes[0].problem
    assert all(o.drawn for o in outcomes[1:])


def test_a_full_disk_while_drawing_is_a_reason_not_an_exception(tables_without_figures: list[Path],
                                                                monkeypatch: pytest.MonkeyPatch) -> None:
    """ENOSPC injected into the file moves (common practice for testing full disks without a tmpfs)."""
    import errno

    from rlrates.report.figure_pool import draw_saved

    def no_space(source: str, target: str) -> None:
        raise OSError(errno.ENOSPC, "No space left on device", target)

    monkeypatch.setattr(os, "replace", no_space)
    (outcome,) = draw_saved(tables_without_figures[:1])
    assert outcome.problem == "No space left on device" and outcome.written == ()
    assert not (tables_without_figures[0] / "figure.png").exists()


_PARENT = os.getpid()
_DRAW_ONE = figure_pool._draw_one


def _dies_in_a_worker(folder: Path, width: Any) -> Any:
    """Draws in the test's process; ends any pool worker at once, as a killed worker would."""
    if os.getpid() != _PARENT:
        os._exit(7)
    return _DRAW_ONE(folder, width)


def test_a_pool_worker_that_dies_loses_no_figure(tables_without_figures: list[Path],
                                                 monkeypatch: pytest.MonkeyPatch) -> None:
    """A worker killed mid-pool (os._exit in the child only): the figures it did not finish are drawn here."""
    import multiprocessing

    if "fork" not in multiprocessing.get_all_start_methods() or figure_pool.usable_cpus() < 2:
        pytest.skip("needs forked pool workers (the patched function must reach the child) and two CPUs")
    monkeypatch.setattr(figure_pool, "_draw_one", _dies_in_a_worker)
    monkeypatch.setattr(figure_pool, "_context", lambda: multiprocessing.get_context("fork"))
    outcomes = figure_pool.draw_saved(tables_without_figures, processes=2)
    assert all(o.drawn for o in outcomes)
    assert all((folder / "figure.png").is_file() for folder in tables_without_figures)


def test_workers_started_afresh_draw_the_same_bytes_with_the_users_style(tables_without_figures: list[Path],
                                                                        tmp_path: Path,
                                                                        monkeypatch: pytest.MonkeyPatch) -> None:
    """A process running threads does not fork: spawned workers get the parent's style and draw what it draws."""
    import multiprocessing

    import matplotlib

    copy = Path(shutil.copytree(tables_without_figures[0].parent, tmp_path / "copy"))
    monkeypatch.setitem(matplotlib.rcParams, "font.size", 6.5)  # a user's style, set after the import
    monkeypatch.setattr(figure_pool, "_context", lambda: multiprocessing.get_context("spawn"))
    outcomes = figure_pool.draw_saved(tables_without_figures, processes=2)
    assert all(o.drawn for o in outcomes)
    figure_pool.draw_saved([copy / f.name for f in tables_without_figures], processes=1)  # here, with the same style
    assert _figure_bytes(tables_without_figures) == _figure_bytes([copy / f.name for f in tables_without_figures])
